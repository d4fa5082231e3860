"""Upgrade planner: targets in, right-sized battery, array, DC-DC charger and inverter out.

The recommendation comes from :func:`analysis.answers.size_with` on every
stored day -- the same call as ``drawdown size`` -- so both give the same
battery, array, charger, inverter and cable runs; it is recomputed (and
cached per target) whenever a target changes. Every recommendation shows its cable and fuse table, the days of
autonomy for the present and the proposed system, its assumptions and its
cautions.
"""

from __future__ import annotations

from typing import Any

import dash
from dash import Input, Output, State, callback, dcc, html

from drawdown.analysis.answers import DEFAULT_AUTONOMY_DAYS, DEFAULT_PERCENTILE
from drawdown.dashboard import figures, ids, labels
from drawdown.dashboard.data import DataSource, as_json, current
from drawdown.dashboard.pages._parts import card, fmt, graph, missing, notice, page_head, table

dash.register_page(__name__, path="/planner", name="Upgrade planner", title="drawdown - upgrade planner", order=4)

PERCENTILES = (50, 75, 90, 95, 99)


def layout(**_kwargs: Any) -> html.Div:
    return html.Div([
        page_head("Upgrade planner", "Set your targets; see what would cover your real use, with the cables "
                                     "and fuses it needs."),
        html.Div([
            html.Div([html.Label("Days parked, full to reserve", htmlFor=ids.PLAN_AUTONOMY, className="field-label"),
                      dcc.Input(id=ids.PLAN_AUTONOMY, type="number", min=0.5, max=30, step=0.5, value=DEFAULT_AUTONOMY_DAYS,
                                debounce=True, className="number-input",
                                inputMode="decimal")], className="field"),  # type: ignore[arg-type]  # HTML value dash's Literal lacks
            html.Div([html.Label("Cover this share of days", htmlFor=ids.PLAN_PERCENTILE, className="field-label"),
                      dcc.Dropdown(id=ids.PLAN_PERCENTILE, value=int(DEFAULT_PERCENTILE), clearable=False, searchable=False,
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


_RUN_COLUMNS = labels.RUN_COLUMNS


def _caution_text(c: Any) -> str:
    if isinstance(c, dict):
        return str(c.get("text") or c.get("message") or c.get("caution") or "")
    return str(c)


def sizing_range(source: DataSource) -> tuple[str, str] | None:
    """Every stored day: the planner sizes from what ``drawdown size`` sizes from (the whole store)."""
    return source.full_range()


run_rows = labels.run_rows


def _pct(x: Any) -> str:
    return fmt(100 * x if x is not None else None, "%", 0)


def _assumption_items(js: dict[str, Any]) -> list[Any]:
    """The assumptions a person must check, as sentences (never a dict or a long float)."""
    a = js.get("assumptions") or {}
    items = [f"Design day {fmt(a.get('design_Wh_per_day'), 'Wh', 0)} ({fmt(a.get('design_Ah_per_day'), 'Ah', 1)}), "
             f"from {a.get('design_source')}; deepest planned discharge {_pct(a.get('max_dod'))}.",
             f"Design temperature {fmt(a.get('design_temperature_C'), '°C', 0)}: capacity factor "
             f"{fmt(a.get('temperature_factor'), '', 2)} ({a.get('temperature_factor_source')}).",
             f"Performance ratio {fmt(a.get('performance_ratio'), '', 2)} ({a.get('performance_ratio_source')}); "
             f"design month {labels.month(a.get('design_month'))}; charge efficiency "
             f"{fmt(a.get('charge_efficiency'), '', 2)}.",
             f"Cables: conductor at {fmt(a.get('conductor_temperature_C'), '°C', 0)}, "
             f"{a.get('insulation_rating_C')} °C insulation, not bundled; one-way run lengths "
             f"{labels.run_lengths(a.get('run_lengths_one_way_m') or {})}.",
             f"Inverter efficiency {_pct(a.get('inverter_efficiency'))} ({_pct(a.get('inverter_efficiency_at_cutoff'))} "
             f"at the low-voltage cut-off); DC-DC charger efficiency {_pct(a.get('dc_dc_efficiency'))} from "
             f"{fmt(a.get('dc_dc_input_V'), 'V', 1)}.",
             f"Simulation: {a.get('simulation')}.", f"Sizes from {a.get('catalogue')}."]
    cc = js.get("cross_check") or {}
    if cc.get("battery_capacity_Ah") is not None:
        items.append(f"Worksheet cross-check ({cc.get('method')}): battery {fmt(cc.get('battery_capacity_Ah'), 'Ah', 0)}, "
                     f"array {fmt(cc.get('array_W'), 'W', 0)}; " + "; ".join(cc.get("explanation") or []) + ".")
    return [html.Li(labels.sentence(i)) for i in items]


def render_plan(source: DataSource, autonomy_days: float | None, percentile: float | None,
                stored: dict | None = None) -> tuple[Any, Any, Any, Any]:
    """(recommendation cards, autonomy figure, cable/fuse table, cautions) for the given targets.

    The answer is :func:`analysis.answers.size_with` on every stored day -- the call
    ``drawdown size`` makes -- so the page and the command line agree; ``stored``
    (the trip page's range) is not used for sizing.
    """
    if autonomy_days is None or not (0.5 <= float(autonomy_days) <= 30):
        msg = notice("Days parked: enter a number from 0.5 to 30.", kind="error")
        return msg, figures.message_figure("Waiting for a valid target."), "", ""
    pct = float(percentile or 90)
    rng = sizing_range(source)
    sect = source.sizing(*(rng or (None, None)), autonomy_days=float(autonomy_days), percentile=pct)
    if not sect.ok:
        return missing("Upgrade planner", sect.why), figures.message_figure(f"Not available: {sect.why}"), "", ""
    js = as_json(sect.value)
    bat, sol = js.get("battery") or {}, js.get("solar") or {}
    dcdc, inv = js.get("dc_dc_charger") or {}, js.get("inverter") or {}

    def now(value: Any, unit: str, keep: bool = False) -> str | None:
        return (f"you have {fmt(value, unit, 0)}" + (": keep it" if keep else "")) if value is not None else None

    # The reserve: the lowest planned state of charge, which the days parked count down to.
    reserve = (f"keeps a {bat['reserve_pct']:.0f} % reserve" if bat.get("reserve_pct") is not None else None)
    design = js.get("design_load") or {}
    basis = (f"from all {design.get('n_days')} whole logged days ({rng[0]} to {rng[1]})"
             if design.get("n_days") and rng else "from the planned loads in system.toml (no whole logged days)")
    smaller = (bat.get("capacity_Ah") or 0) < (bat.get("present_Ah") or 0)
    cards = html.Div([
        html.P(f"For {fmt(autonomy_days, '', 1)} days parked, from full down to the reserve, in "
               f"{fmt(percentile, '', 0)} % of parked spells, {basis}; the same answer as the command line's drawdown size.",
               className="hint"),
        notice([labels.sentence(v) for v in js.get("verdict") or []], kind="info") if js.get("verdict") else "",
        html.Div([
            card("Battery", fmt(bat.get("capacity_Ah"), "Ah", 0),
                 " · ".join(x for x in (labels.chemistry(bat.get("chemistry")),
                                        now(bat.get("present_Ah"), "Ah", smaller), reserve) if x) or None),
            card("Solar array", fmt(sol.get("array_W"), "W", 0),
                 sol.get("array_W_why") or now(sol.get("present_W"), "W")),
            card("DC-DC charger", fmt(dcdc.get("current_A"), "A", 0),
                 dcdc.get("current_A_why") or now(dcdc.get("present_A"), "A")),
            card("Inverter", fmt(inv.get("continuous_W"), "W", 0),
                 inv.get("continuous_W_why") or (f"surge {fmt(inv.get('surge_W'), 'W', 0)}"
                                                 if inv.get("surge_W") else "continuous")),
        ], className="cards"),
        notice([labels.sentence(n) for n in js.get("notes") or []], kind="info") if js.get("notes") else "",
    ])
    au = js.get("autonomy") or {}
    fig = figures.autonomy_figure((js.get("present_system") or {}).get("autonomy"), au,
                                  percentile=au.get("percentile", pct), horizon_days=au.get("horizon_days"),
                                  no_charge=not au.get("sequences"))
    rows = run_rows(js.get("runs") or [])
    runs_view = (table(rows, _RUN_COLUMNS, numeric=["current_A", "length_m", "cross_section_mm2", "drop_mm2",
                                                    "drop_awg", "fuse_A"]) if rows
                 else html.P("No cable runs in the result."))
    cautions = [labels.sentence(_caution_text(c)) for c in js.get("cautions") or []]
    caution_view = html.Div([notice(cautions, kind="warn") if cautions else "",
                             html.Details([html.Summary("Assumptions and the worksheet cross-check"),
                                           html.Ul(_assumption_items(js))])])
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
