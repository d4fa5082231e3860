"""Trip review: pick a date range; the daily energy ledger, state of charge, readings, days, data quality.

The picked range is written to the app's shared ``dcc.Store`` so the battery
health, solar and planner pages look at the same days.

Zooming the state-of-charge or readings plot re-queries the zoomed window at
full resolution (``relayoutData`` callbacks); the overview is thinned to about
2,000 points per trace.
"""

from __future__ import annotations

from typing import Any

import dash
import pandas as pd
from dash import Input, Output, callback, dcc, html, no_update

from drawdown.analysis.report import HIDDEN_NOTE_H, hidden_load_note
from drawdown.dashboard import figures, ids, labels
from drawdown.dashboard.data import DataSource, current
from drawdown.dashboard.pages._parts import card, fmt, graph, missing, page_head, table

dash.register_page(__name__, path="/trip", name="Trip review", title="drawdown - trip review", order=1)


def layout(**_kwargs: Any) -> html.Div:
    source = current()
    full = source.full_range()
    default = source.default_range()
    picker = dcc.DatePickerRange(
        id=ids.TRIP_RANGE, display_format="YYYY-MM-DD", first_day_of_week=1,
        min_date_allowed=full[0] if full else None, max_date_allowed=full[1] if full else None,
        start_date=default[0] if default else None, end_date=default[1] if default else None,
        minimum_nights=0, clearable=False, number_of_months_shown=1)
    return html.Div([
        page_head("Trip review", "What the loads used and where the charge came from, day by day."),
        html.Div([html.Label("Days", htmlFor=ids.TRIP_RANGE, className="field-label"), picker,
                  html.Span(f"stored: {full[0]} to {full[1]}" if full else "nothing stored yet",
                            className="hint")], className="controls"),
        html.Div(id=ids.TRIP_SUMMARY),
        graph(ids.TRIP_LEDGER_GRAPH),
        graph(ids.TRIP_SOC_GRAPH),
        graph(ids.TRIP_READINGS_GRAPH),
        html.H2("Days"),
        html.Div(id=ids.TRIP_DAYS_TABLE),
        html.H2("Data quality"),
        html.Div(id=ids.TRIP_QUALITY),
    ])


_DAY_COLUMNS = [("date", "Date"), ("consumed", "Used [Ah]"), ("consumed_Wh", "Used [Wh]"),
                ("solar", "Solar [Ah]"), ("alternator", "Alternator [Ah]"), ("shore", "Shore [Ah]"),
                ("other", "Other [Ah]"), ("soc_min", "Lowest SoC"), ("soc_end", "SoC at midnight"),
                ("complete", "Whole day")]


def render_trip(source: DataSource, start_date: str | None, end_date: str | None
                ) -> tuple[Any, Any, Any, Any, dict | Any]:
    """(summary cards, ledger figure, days table, data-quality notes, range store) for a range."""
    if not start_date or not end_date:
        why = "No readings stored yet: import a log on the System setup page."
        return missing("Trip review", why), figures.message_figure(why), "", "", no_update
    stored = {"start": start_date, "end": end_date}
    days = source.days(start_date, end_date)
    if not days.ok:
        m = missing("Daily ledger", days.why)
        return m, figures.message_figure(f"Daily ledger {days.why}", title="Daily energy ledger"), "", \
            _quality(source, start_date, end_date), stored
    df = days.value
    assert df is not None  # ok
    done = df[df["complete"]]
    summary = html.Div([
        _summary_card("Days in range", f"{len(df)}", f"{len(done)} whole"),
        _summary_card("Used per whole day", fmt(done["consumed_Ah"].abs().median() if len(done) else None, "Ah", 0),
                      "median"),
        _summary_card("Charged in range", fmt(df["charged_Ah"].sum(), "Ah", 0),
                      " · ".join(f"{s} {df[f'charged_{s}_Ah'].sum():.0f}" for s in ("solar", "alternator", "shore")
                                 if df[f"charged_{s}_Ah"].sum() > 0) or None),
        _summary_card("Lowest state of charge", fmt(df["soc_min_pct"].min(), "%", 0)),
    ], className="cards")
    rows = [{"date": r.date, "consumed": fmt(abs(r.consumed_Ah) if r.consumed_Ah is not None else None, "", 1),
             "consumed_Wh": fmt(abs(r.consumed_Wh) if r.consumed_Wh is not None else None, "", 0),
             "solar": fmt(r.charged_solar_Ah, "", 1), "alternator": fmt(r.charged_alternator_Ah, "", 1),
             "shore": fmt(r.charged_shore_Ah, "", 1), "other": fmt(r.charged_other_Ah, "", 1),
             "soc_min": fmt(r.soc_min_pct, "%", 0), "soc_end": fmt(r.soc_end_pct, "%", 0),
             "complete": "yes" if r.complete else "partial",
             "range": (f"{r.consumed_Ah_lo:.0f}-{r.consumed_Ah_hi:.0f}"
                       if pd.notna(r.consumed_Ah_lo) and pd.notna(r.consumed_Ah_hi) else "-"),
             "unseen": fmt(r.hidden_load_h, "", 1) if pd.notna(r.hidden_load_h) else "-"}
            for r in df.itertuples()]  # a loop over days
    columns = list(_DAY_COLUMNS)
    notes: list[Any] = []
    if df["consumed_Ah_lo"].notna().any():  # every log has a range: the shunts' own errors at least
        columns.insert(2, ("range", "Used, 95 % range [Ah]"))
    if (df["hidden_load_h"].fillna(0.0) > 0).any():  # one shunt: the load under charging is estimated
        columns.insert(3, ("unseen", "Load not seen [h]"))
        unseen = df[df["hidden_load_h"] > HIDDEN_NOTE_H]
        if len(unseen):
            notes.append(html.P(f"On {len(unseen)} of {len(df)} days the load was not seen for more than "
                                f"{HIDDEN_NOTE_H:.0f} h: "
                                + hidden_load_note(float(unseen["hidden_load_h"].max())).split(": ", 1)[-1] + ".",
                                className="note"))
    tab = table(rows, columns, numeric=[k for k, _ in columns if k not in ("date", "complete")])
    if notes:
        tab = html.Div([*notes, tab])
    return summary, figures.ledger_figure(df), tab, _quality(source, start_date, end_date), stored


def _summary_card(label: str, value: str, note: str | None = None) -> html.Div:
    return card(label, value, note)


def _gap_items(gaps: list[dict], tz: str = "UTC") -> list[Any]:
    if not gaps:
        return [html.Li("No gaps in the log.")]
    total_h = sum(float(g.get("seconds") or 0) for g in gaps) / 3600
    items: list[Any] = [html.Li(f"{labels.plural(len(gaps), 'gap')} in the log, {total_h:.1f} h in all: nothing is "
                                "integrated across a gap, so those days are marked partial.")]
    longest = sorted(gaps, key=lambda g: -float(g.get("seconds") or 0))[:5]
    items.extend(html.Li(f"gap from {labels.local_time(g.get('start'), tz)} to {labels.local_time(g.get('end'), tz)} "
                         f"({float(g.get('seconds') or 0) / 3600:.1f} h)", className="sub") for g in longest)
    return items


def _quality(source: DataSource, start_date: str, end_date: str) -> html.Ul:
    """Plain notes: rows stored and rejected, gaps, how the ledger was built, the imports behind it."""
    rep = source.report_json(start_date, end_date)
    items: list[Any] = []
    if rep.ok:
        assert rep.value is not None  # ok
        dq = rep.value.get("data_quality", {})
        items.append(html.Li(f"{dq.get('rows_stored', 0):,} readings stored, "
                             f"{dq.get('rows_rejected', 0):,} rejected lines quarantined at import."))
        items.extend(_gap_items(dq.get("gaps") or [], source.timezone()))
        for key, value in dq.items():
            if key.endswith("_why") or key in ("notes", "warnings"):
                for line in value if isinstance(value, list) else [value]:
                    items.append(html.Li(labels.sentence(line)))
    else:
        led = source.ledger(start_date, end_date)
        if led.ok:
            gaps = [{"start": getattr(g, "start", None), "end": getattr(g, "end", None),
                     "seconds": getattr(g, "seconds", None) or getattr(g, "duration_s", None)}
                    for g in getattr(led.value, "gaps", ())]
            items.extend(_gap_items(gaps, source.timezone()))
            mode = getattr(led.value, "mode", None)
            if mode:
                items.append(html.Li(f"Ledger built from {mode} readings."))
            items.extend(html.Li(str(n)) for n in getattr(led.value, "notes", ()) or ())
        else:
            items.append(html.Li(f"Data-quality figures: {led.why}"))
    imports = source.imports()
    if imports:
        rejected = sum(int(i.get("rows_rejected") or 0) for i in imports)
        items.append(html.Li(f"{labels.plural(len(imports), 'file')} imported, "
                             f"{labels.plural(rejected, 'rejected line')} in all; see System setup for the list."))
    return html.Ul(items, className="quality")


@callback(
    Output(ids.TRIP_SUMMARY, "children"),
    Output(ids.TRIP_LEDGER_GRAPH, "figure"),
    Output(ids.TRIP_DAYS_TABLE, "children"),
    Output(ids.TRIP_QUALITY, "children"),
    Output(ids.RANGE_STORE, "data"),
    Input(ids.TRIP_RANGE, "start_date"),
    Input(ids.TRIP_RANGE, "end_date"),
)
def update_trip(start_date: str | None, end_date: str | None) -> tuple[Any, Any, Any, Any, Any]:
    return render_trip(current(), start_date, end_date)


def render_soc(source: DataSource, start_date: str | None, end_date: str | None,
               relayout: dict | None = None) -> Any:
    """The state-of-charge figure; a zoomed window is redrawn from the full-resolution series."""
    if not start_date or not end_date:
        return figures.message_figure("No readings stored yet.", title="State of charge")
    soc = source.soc(start_date, end_date)
    if not soc.ok:
        return figures.message_figure(f"State of charge: {soc.why}", title="State of charge")
    assert soc.value is not None  # ok
    series, resync = soc.value
    band = source.soc_band(start_date, end_date)
    tz = source.timezone()
    window = figures.relayout_x_range(relayout, tz=tz)
    if isinstance(window, tuple):
        series = series[(series.index >= window[0]) & (series.index < window[1])]
        resync = [t for t in resync if window[0] <= t < window[1]]
        if band is not None:
            band = band[(band.index >= window[0]) & (band.index < window[1])]
    fig = figures.soc_figure(series, resync_times=resync, tz=tz, band=band)
    if isinstance(window, tuple):
        fig.update_xaxes(range=[window[0].tz_convert(tz).tz_localize(None), window[1].tz_convert(tz).tz_localize(None)])
    return fig


@callback(
    Output(ids.TRIP_SOC_GRAPH, "figure"),
    Input(ids.TRIP_RANGE, "start_date"),
    Input(ids.TRIP_RANGE, "end_date"),
    Input(ids.TRIP_SOC_GRAPH, "relayoutData"),
)
def update_soc(start_date: str | None, end_date: str | None, relayout: dict | None) -> Any:
    if dash.ctx.triggered_id == ids.TRIP_SOC_GRAPH and figures.relayout_x_range(relayout) is None:
        return no_update
    return render_soc(current(), start_date, end_date,
                      relayout if dash.ctx.triggered_id == ids.TRIP_SOC_GRAPH else None)


def render_readings(source: DataSource, start_date: str | None, end_date: str | None,
                    relayout: dict | None = None) -> Any:
    """Battery voltage and current from the store: the range thinned, a zoomed window at full resolution."""
    title = "Battery readings"
    if not start_date or not end_date:
        return figures.message_figure("No readings stored yet.", title=title)
    tz = source.timezone()
    lo, hi = source.utc_bounds(start_date, end_date)
    window = figures.relayout_x_range(relayout, tz=tz)
    if isinstance(window, tuple):
        lo, hi = window[0].isoformat(), window[1].isoformat()
    series = {}
    full = True
    for q, (t, y, is_full) in source.screen_multi("battery", ("voltage_V", "current_A"), lo, hi).items():
        if len(t):
            series[q] = (t, y)
            full &= is_full
    fig = figures.readings_figure(series, tz=tz, title=title, full_resolution=full and bool(series))
    if isinstance(window, tuple):
        fig.update_xaxes(range=[window[0].tz_convert(tz).tz_localize(None), window[1].tz_convert(tz).tz_localize(None)])
    return fig


@callback(
    Output(ids.TRIP_READINGS_GRAPH, "figure"),
    Input(ids.TRIP_RANGE, "start_date"),
    Input(ids.TRIP_RANGE, "end_date"),
    Input(ids.TRIP_READINGS_GRAPH, "relayoutData"),
)
def update_readings(start_date: str | None, end_date: str | None, relayout: dict | None) -> Any:
    if dash.ctx.triggered_id == ids.TRIP_READINGS_GRAPH and figures.relayout_x_range(relayout) is None:
        return no_update
    return render_readings(current(), start_date, end_date,
                           relayout if dash.ctx.triggered_id == ids.TRIP_READINGS_GRAPH else None)
