"""Battery health: usable capacity with its interval, internal resistance over time, the Peukert fit.

Looks at the newest ``HEALTH_DAYS`` (120) days in the store, not just the
picked trip: capacity estimates need long discharges between known states of
charge, which a short trip may not have.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import Input, Output, callback, html

from drawdown.dashboard import figures, ids, labels
from drawdown.dashboard.data import HEALTH_DAYS, DataSource, current
from drawdown.dashboard.pages._parts import card, fmt, graph, missing, page_head

dash.register_page(__name__, path="/health", name="Battery health", title="drawdown - battery health", order=2)


def layout(**_kwargs: Any) -> html.Div:
    return html.Div([
        page_head("Battery health", "How much the bank really delivers, measured from your own discharges."),
        html.Div(id=ids.HEALTH_TRIGGER, style={"display": "none"}),
        html.Div(id=ids.HEALTH_SUMMARY),
        graph(ids.HEALTH_CAPACITY_GRAPH),
        graph(ids.HEALTH_RESISTANCE_GRAPH),
        graph(ids.HEALTH_PEUKERT_GRAPH),
    ])


def _why(battery: dict, key: str) -> str | None:
    why = battery.get(f"{key}_why")
    return labels.for_people(why) if why else None


def render_health(source: DataSource) -> tuple[Any, Any, Any, Any]:
    """(summary, capacity figure, resistance figure, Peukert figure) over the newest stored history."""
    full = source.health_range()
    if full is None:
        why = "No readings stored yet: import a log on the System setup page."
        return missing("Battery health", why), *(figures.message_figure(why),) * 3
    sect = source.health(*full)
    if not sect.ok:
        m = figures.message_figure(f"Not available: {sect.why}")
        return missing("Battery health", sect.why), m, m, m
    h = sect.value
    assert h is not None  # ok
    b = h.battery
    ci = b.get("usable_Ah_ci95")
    ci_text = f"95 % interval {ci[0]:.0f}–{ci[1]:.0f} Ah" if ci and None not in ci else _why(b, "usable_Ah_ci95")
    k = b.get("peukert_k")
    r = b.get("internal_resistance_ohm")
    trend = h.resistance_trend_ohm_per_30d
    cards = html.Div([
        card("Usable capacity", fmt(b.get("usable_Ah"), "Ah", 0), ci_text or _why(b, "usable_Ah")),
        card("State of health", fmt(b.get("state_of_health_pct"), "%", 0),
             f"of the rated {h.rated_Ah:g} Ah" if b.get("state_of_health_pct") is not None
             else _why(b, "state_of_health_pct")),
        card("Peukert exponent", fmt(k, "", 3), h.peukert_source or _why(b, "peukert_k")),
        card("Internal resistance", fmt(r * 1e3 if r is not None else None, "mΩ", 1),
             (f"trend {trend * 1e3:+.2f} mΩ per 30 days" if trend is not None else None) or _why(b, "internal_resistance_ohm")),
    ], className="cards")
    n = len(h.capacity_points)
    pairs = (f"{n} discharge{'s' if n != 1 else ''} between two known states of charge, each drawn with its "
             "95 % interval." if n else "No discharge between two known states of charge yet.")
    fit = ("The Peukert exponent is fitted from your discharges." if h.peukert_points else
           f"The Peukert exponent is the {h.peukert_source or 'default'} value: no two discharges at different "
           "rates qualified for a fit, so the Peukert plot shows no measured points.")
    summary = html.Div([html.P(f"From the stored history {full[0]} to {full[1]} (at most the newest "
                               f"{HEALTH_DAYS} days). {pairs} {fit}", className="hint"), cards])
    cap_fig = figures.capacity_figure(h.capacity_points, rated_Ah=h.rated_Ah, overall_Ah=b.get("usable_Ah"),
                                      overall_ci95=ci, tz=h.tz)
    res_fig = figures.resistance_figure(h.resistance_points, overall_ohm=r)
    pts = h.peukert_points
    pk_fig = figures.peukert_figure([p[0] for p in pts], [p[1] for p in pts], k=k,
                                    capacity_Ah=h.rated_Ah, rated_hours=h.rated_hours)
    return summary, cap_fig, res_fig, pk_fig


@callback(
    Output(ids.HEALTH_SUMMARY, "children"),
    Output(ids.HEALTH_CAPACITY_GRAPH, "figure"),
    Output(ids.HEALTH_RESISTANCE_GRAPH, "figure"),
    Output(ids.HEALTH_PEUKERT_GRAPH, "figure"),
    Input(ids.HEALTH_TRIGGER, "children"),
)
def update_health(_trigger: Any) -> tuple[Any, Any, Any, Any]:
    return render_health(current())
