"""Solar: measured yield against the clear-sky expectation per day, saturated periods shaded, diagnostics.

Uses the date range picked on the trip page (the shared ``dcc.Store``), or the
last fortnight.
"""

from __future__ import annotations

from typing import Any

import dash
import numpy as np
import pandas as pd
from dash import Input, Output, State, callback, html

from drawdown.dashboard import figures, ids, labels
from drawdown.dashboard.data import DataSource, as_json, current
from drawdown.dashboard.pages._parts import card, fmt, graph, missing, page_head

dash.register_page(__name__, path="/solar", name="Solar", title="drawdown - solar", order=3)


def layout(**_kwargs: Any) -> html.Div:
    return html.Div([
        page_head("Solar", "What the array delivered against what a clear sky would have given, where you were."),
        html.Div(id=ids.SOLAR_TRIGGER, style={"display": "none"}),
        html.Div(id=ids.SOLAR_SUMMARY),
        graph(ids.SOLAR_DAILY_GRAPH),
        graph(ids.SOLAR_POWER_GRAPH),
        html.H2("What the comparison rests on, and what to check"),
        html.Div(id=ids.SOLAR_DIAGNOSTICS),
    ])


def pick_range(source: DataSource, stored: dict | None) -> tuple[str, str] | None:
    """The shared range when the trip page set one, else the default fortnight."""
    if stored and stored.get("start") and stored.get("end"):
        return stored["start"], stored["end"]
    return source.default_range()


_SOURCE_WORDS = {"solar channel": "the solar controller's own output (a 'solar' channel in the log)",
                 "battery channel": "the battery shunt's voltage",
                 "battery channel (ambient proxy)": "the battery's temperature sensor, standing in for the air"}


def _said(source: Any) -> str:
    text = str(source or "not known")
    return _SOURCE_WORDS.get(text, text)


def diagnostic_sections(diag: dict[str, Any], tz: str) -> list[tuple[str, list[str]]]:
    """The solar analysis's diagnostics as sentences for a person, in three parts.

    (what was assumed, what was found, what to check on the roof): never an internal
    key or a library's function name; the JSON keeps the machine form.
    """
    assumed: list[str] = []
    found: list[str] = []
    check: list[str] = []
    for a in diag.get("arrays") or []:
        tilt = a.get("tilt_deg") or 0
        lie = "flat" if tilt < 1 else f"tilted {tilt:.0f}° facing {a.get('azimuth_deg', 180):.0f}° (180° = south)"
        assumed.append(f"Array '{a.get('name') or 'roof'}': {a.get('peak_power_W', 0):.0f} W peak, {lie}, "
                       f"{str(a.get('controller') or '').upper()} controller (from system.toml).")
    assumed.append("Expected output: a clear sky over your position at each moment, on the array's tilt and "
                   "direction, with the panels' heating in the sun and the controller's losses.")
    assumed.append(f"Measured from {_said(diag.get('measured_from'))}; bank voltage from "
                   f"{_said(diag.get('bank_voltage_from'))}; air temperature from "
                   f"{labels.for_people(_said(diag.get('air_temperature_from')))}; compared in "
                   f"{diag.get('interval_minutes', 10)}-minute steps.")
    sat = diag.get("saturation") or {}
    if sat:
        assumed.append(f"Battery counted as full (array held back) at or above {fmt(sat.get('full_voltage_V'), 'V', 2)} "
                       f"while charging, or at float {fmt(sat.get('float_voltage_V'), 'V', 2)}.")
        n = int(sat.get("saturated_periods") or 0)
        found.append(f"The battery was full, so the controller held the array back, for "
                     f"{fmt(sat.get('saturated_hours'), 'h', 1)} in {labels.plural(n, 'period')}: those hours are "
                     "left out of the performance ratio.")
    cloud = diag.get("cloud_inclusive_ratio")
    if cloud is not None:
        found.append(f"Over the daylight hours when the battery could take charge, clouds included, the array "
                     f"gave {100 * cloud:.0f} % of the clear-sky expectation (the totals above also count the "
                     "hours it was held back).")
    best = diag.get("best_clear_hour")
    if best:
        found.append(f"Best clear hour ({labels.local_time(best.get('start'), tz)}): {fmt(best.get('measured_W'), 'W', 0)} "
                     f"measured against {fmt(best.get('expected_W'), 'W', 0)} expected, with the sun at "
                     f"{fmt(best.get('poa_Wm2'), 'W/m²', 0)} on the panels and the cells at "
                     f"{fmt(best.get('cell_temperature_C'), '°C', 0)}; that is "
                     f"{fmt(best.get('measured_at_1000Wm2_W'), 'W', 0)} at full sun (1000 W/m²) against a rating of "
                     f"{fmt(best.get('rating_after_temperature_W'), 'W', 0)} at that cell temperature.")
    elif diag.get("best_clear_hour_why"):
        found.append(f"No best clear hour: {diag['best_clear_hour_why']}.")
    ma = diag.get("morning_afternoon")
    if ma:
        found.append(f"Morning and afternoon against the clear-sky curve: {100 * (ma.get('morning_ratio') or 0):.0f} % and "
                     f"{100 * (ma.get('afternoon_ratio') or 0):.0f} % ({labels.plural(int(ma.get('days') or 0), 'smooth day')}).")
    lose = diag.get("pwm_would_lose_percent")
    if lose is not None:
        found.append(f"A PWM controller would have harvested about {lose:.0f} % less than your MPPT one here.")
    add = diag.get("mppt_would_add")
    if add:
        found.append(f"An MPPT controller would have added about {fmt(add.get('Wh_per_day'), 'Wh', 0)} per day.")
    check = [labels.for_people(f[0].upper() + f[1:]) + ("" if f.endswith(".") else ".")
             for f in diag.get("findings") or []]
    if not check:
        check = ["Nothing stands out: keep the panels clean and unshaded, and the connections tight."]
    return [("What was assumed", assumed), ("What was found", found), ("What to check on the roof", check)]


def _diagnostics_view(diag: dict[str, Any], tz: str) -> Any:
    parts: list[Any] = []
    for title, lines in diagnostic_sections(diag, tz):
        parts += [html.H3(title), html.Ul([html.Li(x) for x in lines], className="quality")]
    return html.Div(parts)


def render_solar(source: DataSource, stored: dict | None) -> tuple[Any, Any, Any, Any]:
    """(summary, daily figure, power figure, diagnostics) for the shared range."""
    rng = pick_range(source, stored)
    if rng is None:
        why = "No readings stored yet: import a log on the System setup page."
        return missing("Solar", why), figures.message_figure(why), figures.message_figure(why), ""
    sect = source.solar(*rng)
    if not sect.ok:
        m = figures.message_figure(f"Not available: {sect.why}")
        return missing("Solar", sect.why), m, m, ""
    sa = sect.value
    js = as_json(sa)
    days = js.get("days") or []
    measured = sum(float(d.get("measured_Wh") or 0) for d in days)
    expected = sum(float(d.get("expected_Wh") or 0) for d in days)
    pr = js.get("performance_ratio")
    sat = [float(d["saturated_fraction"]) for d in days if d.get("saturated_fraction") is not None]
    summary = html.Div([
        html.P(f"Days {rng[0]} to {rng[1]}.", className="hint"),
        html.Div([
            card("Measured", fmt(measured / 1000, "kWh", 1), f"{len(days)} days"),
            card("Clear-sky expectation", fmt(expected / 1000, "kWh", 1), "an upper bound: clouds lower it"),
            card("Performance ratio", fmt(pr, "", 2),
                 "clear, unsaturated daylight" if pr is not None else js.get("performance_ratio_why")),
            card("Battery full, array held back", fmt(100 * float(np.mean(sat)) if sat else None, "%", 0),
                 "of daylight (mean per day)"),
        ], className="cards"),
    ])
    tz = source.timezone()
    series = getattr(sa, "series", None)
    if isinstance(series, pd.DataFrame) and len(series) and "measured_W" in series:
        expected_col = "expected_W" if "expected_W" in series else None
        power = figures.solar_power_figure(series.index, series["measured_W"].to_numpy(dtype=float),
                                           series[expected_col].to_numpy(dtype=float) if expected_col else None,
                                           saturated=series["saturated"].to_numpy(dtype=bool)
                                           if "saturated" in series else None, tz=tz)
    else:
        power = figures.message_figure("The solar analysis has no time series to draw.", title="Solar power")
    diag = js.get("diagnostics") or {}
    diag_view = _diagnostics_view(diag, tz) if diag else html.P("No findings.")
    return summary, figures.solar_daily_figure(days), power, diag_view


@callback(
    Output(ids.SOLAR_SUMMARY, "children"),
    Output(ids.SOLAR_DAILY_GRAPH, "figure"),
    Output(ids.SOLAR_POWER_GRAPH, "figure"),
    Output(ids.SOLAR_DIAGNOSTICS, "children"),
    Input(ids.SOLAR_TRIGGER, "children"),
    State(ids.RANGE_STORE, "data"),
)
def update_solar(_trigger: Any, stored: dict | None) -> tuple[Any, Any, Any, Any]:
    return render_solar(current(), stored)
