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

from dashboard import figures, ids
from dashboard.data import DataSource, as_json, current
from dashboard.pages._parts import card, fmt, graph, missing, page_head

dash.register_page(__name__, path="/solar", name="Solar", title="drawdown - solar", order=3)


def layout(**_kwargs: Any) -> html.Div:
    return html.Div([
        page_head("Solar", "What the array delivered against what a clear sky would have given, where you were."),
        html.Div(id=ids.SOLAR_TRIGGER, style={"display": "none"}),
        html.Div(id=ids.SOLAR_SUMMARY),
        graph(ids.SOLAR_DAILY_GRAPH),
        graph(ids.SOLAR_POWER_GRAPH),
        html.H2("Diagnostics"),
        html.Div(id=ids.SOLAR_DIAGNOSTICS),
    ])


def pick_range(source: DataSource, stored: dict | None) -> tuple[str, str] | None:
    """The shared range when the trip page set one, else the default fortnight."""
    if stored and stored.get("start") and stored.get("end"):
        return stored["start"], stored["end"]
    return source.default_range()


def _value_text(v: Any) -> str:
    if isinstance(v, float):
        return fmt(v, "", 2)
    if isinstance(v, dict):
        return "; ".join(f"{k.replace('_', ' ')} {_value_text(x)}" for k, x in v.items())
    if isinstance(v, list):
        return ", ".join(_value_text(x) for x in v)
    return str(v)


def _diagnostic_items(diag: dict[str, Any]) -> list[Any]:
    """The solar analysis's diagnostics as a readable list: findings first, then the figures behind them."""
    items: list[Any] = []
    for key, value in diag.items():
        label = key.replace("_", " ")
        if isinstance(value, dict):
            items.append(html.Li([html.Strong(label), html.Ul([html.Li(f"{k.replace('_', ' ')}: {_value_text(v)}")
                                                               for k, v in value.items()])]))
        elif isinstance(value, list) and all(isinstance(v, str) for v in value):
            items.extend(html.Li(v) for v in value)
        else:
            items.append(html.Li([html.Strong(f"{label}: "), _value_text(value)]))
    return items


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
    diag_view = html.Ul(_diagnostic_items(diag), className="quality") if diag else html.P("No findings.")
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
