"""Upgrade planner: targets in, right-sized battery, array, DC-DC charger and inverter out.

The recommendation comes from ``analysis.sizing.recommend`` on the days of the
shared range; it is recomputed (and cached per target) whenever a target
changes. Every recommendation shows its cable and fuse table, the days of
autonomy for the present and the proposed system, its assumptions and its
cautions.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import Input, Output, State, callback, dcc, html

from dashboard import figures, ids
from dashboard.data import DataSource, as_json, current
from dashboard.pages._parts import card, fmt, graph, missing, notice, page_head, table
from dashboard.pages.solar import pick_range

dash.register_page(__name__, path="/planner", name="Upgrade planner", title="drawdown - upgrade planner", order=4)

PERCENTILES = (50, 75, 90, 95, 99)


def layout(**_kwargs: Any) -> html.Div:
    return html.Div([
        page_head("Upgrade planner", "Set your targets; see what would cover your real use, with the cables "
                                     "and fuses it needs."),
        html.Div([
            html.Div([html.Label("Days parked without charging", htmlFor=ids.PLAN_AUTONOMY, className="field-label"),
                      dcc.Input(id=ids.PLAN_AUTONOMY, type="number", min=0.5, max=30, step=0.5, value=2,
                                debounce=True, className="number-input", inputMode="decimal")], className="field"),
            html.Div([html.Label("Cover this share of days", htmlFor=ids.PLAN_PERCENTILE, className="field-label"),
                      dcc.Dropdown(id=ids.PLAN_PERCENTILE, value=90, clearable=False, searchable=False,
                                   options=[{"label": f"{p} % of days", "value": p} for p in PERCENTILES],
                                   className="dropdown")], className="field"),
        ], className="controls"),
        html.Div(id=ids.PLAN_RESULT),
        graph(ids.PLAN_AUTONOMY_GRAPH),
        html.H2("Cables and fuses"),
        html.Div(id=ids.PLAN_RUNS_TABLE),
        html.H2("Cautions and assumptions"),
        html.Div(id=ids.PLAN_CAUTIONS),
    ])


_RUN_COLUMNS = [("name", "Run"), ("current_A", "Current [A]"), ("length_m", "One-way length [m]"),
                ("cross_section_mm2", "Cable [mm²]"), ("awg", "AWG"), ("voltage_drop_pct", "Voltage drop [%]"),
                ("fuse_A", "Fuse [A]")]


def _caution_text(c: Any) -> str:
    if isinstance(c, str):
        return c
    if isinstance(c, dict):
        return str(c.get("text") or c.get("message") or c.get("caution") or c)
    return str(c)


def _autonomy_pair(js: dict[str, Any]) -> tuple[dict | None, dict | None]:
    """(present, proposed) autonomy dicts with days_p50/days_p90, whichever way the result nests them."""
    a = js.get("autonomy") or {}
    present = (a.get("present") or js.get("autonomy_present") or (js.get("present_system") or {}).get("autonomy")
               or (js.get("present") or {}).get("autonomy"))
    proposed = a.get("proposed") or (a if "days_p50" in a else None)
    return present, proposed


def render_plan(source: DataSource, autonomy_days: float | None, percentile: float | None,
                stored: dict | None) -> tuple[Any, Any, Any, Any]:
    """(recommendation cards, autonomy figure, cable/fuse table, cautions) for the given targets."""
    if autonomy_days is None or not (0.5 <= float(autonomy_days) <= 30):
        msg = notice("Days parked: enter a number from 0.5 to 30.", kind="error")
        return msg, figures.message_figure("Waiting for a valid target."), "", ""
    rng = pick_range(source, stored)
    if rng is None:
        why = "No readings stored yet: import a log on the System setup page."
        return missing("Upgrade planner", why), figures.message_figure(why), "", ""
    sect = source.sizing(*rng, autonomy_days=float(autonomy_days), percentile=float(percentile or 90))
    if not sect.ok:
        return missing("Upgrade planner", sect.why), figures.message_figure(f"Not available: {sect.why}"), "", ""
    js = as_json(sect.value)
    bat, sol = js.get("battery") or {}, js.get("solar") or {}
    dcdc, inv = js.get("dc_dc_charger") or {}, js.get("inverter") or {}
    present_sys = js.get("present_system") or {}

    def now(value: Any, unit: str) -> str | None:
        return f"you have {fmt(value, unit, 0)}" if value is not None else None

    # The reserve: the lowest planned state of charge, which the days parked count down to.
    reserve = (f"keeps a {bat['reserve_pct']:.0f} % reserve" if bat.get("reserve_pct") is not None else None)
    design = js.get("design_load") or {}
    basis = (f"from {design.get('n_days')} logged day(s)" if design.get("n_days")
             else "from the planned loads in system.toml (no whole logged days)")
    cards = html.Div([
        html.P(f"For {fmt(autonomy_days, '', 1)} days parked, down to the reserve, on "
               f"{fmt(percentile, '', 0)} % of days, {basis}; days {rng[0]} to {rng[1]}.", className="hint"),
        html.Div([
            card("Battery", fmt(bat.get("capacity_Ah"), "Ah", 0),
                 " · ".join(x for x in (str(bat.get("chemistry") or ""),
                                        now(bat.get("present_Ah", present_sys.get("battery_Ah")), "Ah"),
                                        reserve) if x) or None),
            card("Solar array", fmt(sol.get("array_W"), "W", 0),
                 sol.get("array_W_why") or now(sol.get("present_W", present_sys.get("array_W")), "W")),
            card("DC-DC charger", fmt(dcdc.get("current_A"), "A", 0),
                 dcdc.get("current_A_why") or now(dcdc.get("present_A"), "A")),
            card("Inverter", fmt(inv.get("continuous_W"), "W", 0),
                 inv.get("continuous_W_why") or (f"surge {fmt(inv.get('surge_W'), 'W', 0)}"
                                                 if inv.get("surge_W") else "continuous")),
        ], className="cards"),
        notice([str(n) for n in js.get("notes") or []], kind="info") if js.get("notes") else "",
    ])
    present, proposed = _autonomy_pair(js)
    fig = figures.autonomy_figure(present, proposed)
    runs = js.get("runs") or []
    rows = [{"name": r.get("name"), "current_A": fmt(r.get("current_A"), "", 1), "length_m": fmt(r.get("length_m"), "", 1),
             "cross_section_mm2": fmt(r.get("cross_section_mm2"), "", 0 if (r.get("cross_section_mm2") or 0) >= 10 else 1),
             "awg": r.get("awg") or "–", "voltage_drop_pct": fmt(r.get("voltage_drop_pct"), "", 1),
             "fuse_A": fmt(r.get("fuse_A"), "", 0)} for r in runs]
    runs_view = table(rows, _RUN_COLUMNS, numeric=["current_A", "length_m", "cross_section_mm2", "voltage_drop_pct",
                                                   "fuse_A"]) if rows else html.P("No cable runs in the result.")
    cautions = [_caution_text(c) for c in js.get("cautions") or []]
    assumptions = js.get("assumptions") or {}
    a_items = [html.Li(f"{k.replace('_', ' ')}: {v}") for k, v in assumptions.items()
               if not isinstance(v, (dict, list))]
    caution_view = html.Div([notice(cautions, kind="warn") if cautions else "",
                             html.Details([html.Summary("Assumptions"), html.Ul(a_items)]) if a_items else ""])
    return cards, fig, runs_view, caution_view


@callback(
    Output(ids.PLAN_RESULT, "children"),
    Output(ids.PLAN_AUTONOMY_GRAPH, "figure"),
    Output(ids.PLAN_RUNS_TABLE, "children"),
    Output(ids.PLAN_CAUTIONS, "children"),
    Input(ids.PLAN_AUTONOMY, "value"),
    Input(ids.PLAN_PERCENTILE, "value"),
    State(ids.RANGE_STORE, "data"),
)
def update_plan(autonomy_days: float | None, percentile: float | None, stored: dict | None
                ) -> tuple[Any, Any, Any, Any]:
    return render_plan(current(), autonomy_days, percentile, stored)
