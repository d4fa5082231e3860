"""Fleet: one row a vehicle, most urgent first; a click opens that vehicle's own pages.

Only with ``drawdown serve --dataset DIR``: the table is :func:`analysis.fleet.fleet_report`'s
(run in the background by :class:`dashboard.fleet_source.FleetSource`; until it is done the page
says how many vehicles are analysed and polls). Sorting is a link per column header
(``/fleet?sort=health&order=asc``), and on a phone, where each row is a card, a row of the same
links above the cards. A vehicle's name links to ``/fleet/open?vehicle=NAME``.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, NamedTuple, cast
from urllib.parse import parse_qs, quote

import dash
from dash import Input, Output, State, callback, dcc, html

from drawdown.dashboard import ids, labels
from drawdown.dashboard.pages._parts import fmt, notice, page_head

dash.register_page(__name__, path="/fleet", name="Fleet", title="drawdown - fleet", order=6)

#: How often the page asks how far the report is while it runs [ms].
POLL_MS = 1000


class Column(NamedTuple):
    """A sortable column: its query name, header, the row value it sorts by and its first direction.

    (A NamedTuple, not a dataclass: Dash loads page modules without registering them in
    ``sys.modules``, which dataclasses need.)
    """

    key: str
    header: str
    value: Callable[[dict[str, Any]], Any] | None  # None: the report's own order (most urgent first)
    first: str  # "asc" or "desc": the direction a first click sorts in (the worrying end first)
    title: str = ""
    sub: str = ""  # a second header line (what the two figures of a cell are)


def _get(name: str) -> Callable[[dict[str, Any]], Any]:
    return lambda row: row.get(name)


COLUMNS: tuple[Column, ...] = (
    Column("vehicle", "Vehicle", _get("vehicle"), "asc", "The vehicle's name; open it to see its own pages"),
    Column("usable", "Usable", _get("usable_Ah"), "asc",
           "Usable capacity measured from the vehicle's discharges, with its 95 % interval"),
    Column("health", "Health", _get("state_of_health_pct"), "asc", "Usable capacity as a share of the rated capacity"),
    Column("fade", "Fade", _get("fade_pct_per_month"), "desc",
           "Capacity lost a month, in % of the rated capacity, with its 95 % interval"),
    Column("use", "Use per day", _get("daily_use_Ah_p50"), "desc",
           "Energy used per whole day: the median and the 90th percentile", "median / p90"),
    Column("solar", "Solar ratio", _get("solar_performance_ratio"), "asc",
           "Solar performance ratio: what the array gave of what the sky allowed, on clear days"),
    Column("parked", "Days parked", _get("days_parked_p50"), "asc",
           "Days from full to the reserve with the present bank and array: the median, and the days "
           "reached in 90 % of resampled spells", "median / 90 %"),
    Column("urgency", "Flags", None, "desc", "What needs a look; the table opens sorted by these, most urgent first"),
)
BY_KEY = {c.key: c for c in COLUMNS}
DEFAULT_SORT = "urgency"

#: Flags as a person reads them (analysis/fleet.py names them; docs/fleet.md#fleet-report).
FLAG_LABELS = {"capacity_low": "Capacity low", "cold_charging": "Charged below 0 °C", "fading_fast": "Fading fast",
               "use_up": "Use up", "solar_down": "Solar down", "part_failed": "Part not analysed",
               "error": "Not analysed"}
#: The vehicle page a flag's detail links to.
FLAG_PAGES = {"capacity_low": ("/health", "Battery health"), "fading_fast": ("/health", "Battery health"),
              "cold_charging": ("/health", "Battery health"), "use_up": ("/trip", "Trip review"),
              "solar_down": ("/solar", "Solar")}


def parse_sort(sort: Any, order: Any) -> tuple[str, str, str | None]:
    """(column key, 'asc'|'desc', a message for bad input or None) from the page's query."""
    problems = []
    key = DEFAULT_SORT
    if sort not in (None, ""):
        if isinstance(sort, str) and sort in BY_KEY:
            key = sort
        else:
            problems.append(f"sort={sort!r} is not a column of the fleet table (one of {', '.join(BY_KEY)})")
    direction = BY_KEY[key].first
    if order not in (None, ""):
        if order in ("asc", "desc"):
            direction = str(order)
        else:
            problems.append(f"order={order!r} is neither 'asc' nor 'desc'")
    message = None
    if problems:
        message = "; ".join(problems) + f". Sorted by {BY_KEY[key].header.lower()}, {_direction_words(direction)}."
    return key, direction, message


def _direction_words(direction: str) -> str:
    return "lowest first" if direction == "asc" else "highest first"


def sort_rows(rows: list[dict[str, Any]], key: str, direction: str) -> list[dict[str, Any]]:
    """``rows`` (the report's order: most urgent first) sorted by a column. Rows without a value
    (unknown, or a vehicle not analysed) come last in either direction, in the report's order;
    ties keep the report's order."""
    col = BY_KEY[key]
    if col.value is None:
        return list(rows) if direction == "desc" else list(reversed(rows))
    value = col.value
    known = [r for r in rows if _sortable(value(r))]
    unknown = [r for r in rows if not _sortable(value(r))]
    return sorted(known, key=lambda r: value(r), reverse=direction == "desc") + unknown


def _sortable(v: Any) -> bool:
    if isinstance(v, str):
        return True
    try:
        f = float(v)
    except (TypeError, ValueError):
        return False
    return f == f  # not NaN


def _query(key: str, direction: str) -> str:
    return f"/fleet?sort={key}&order={direction}"


def _next_direction(col: Column, key: str, direction: str) -> str:
    if col.key != key:
        return col.first
    return "asc" if direction == "desc" else "desc"


def _arrow(direction: str) -> str:
    return " ▲" if direction == "asc" else " ▼"


def _header(col: Column, key: str, direction: str) -> html.Th:
    here = col.key == key
    words: list[Any] = [col.header, html.Span(_arrow(direction) if here else "", className="sort-arrow")]
    if col.sub:
        words += [html.Br(), html.Span(col.sub, className="th-sub")]
    link = dcc.Link(words,
                    href=_query(col.key, _next_direction(col, key, direction)), className="sort-link",
                    title=f"{col.title}. Sort by this column" if col.title else "Sort by this column")
    extra = {"aria-sort": ("ascending" if direction == "asc" else "descending")} if here else {}
    return html.Th(link, className="num" if col.key not in ("vehicle", "urgency") else None,
                   **cast("dict[str, Any]", extra))


def sort_bar(key: str, direction: str) -> html.Nav:
    """The sort links as a row of buttons (shown on a phone, where the table's header is hidden)."""
    items: list[Any] = [html.Span("Sort by", className="sort-bar-label")]
    for col in COLUMNS:
        here = col.key == key
        label = {"urgency": "Flags", "use": "Use"}.get(col.key, col.header)
        items.append(dcc.Link([label, _arrow(direction) if here else ""],
                              href=_query(col.key, _next_direction(col, key, direction)),
                              className="sort-chip active" if here else "sort-chip"))
    return html.Nav(items, className="sort-bar", **cast("dict[str, Any]", {"aria-label": "Sort the fleet table"}))


# -- cells ---------------------------------------------------------------------------------------

def _cell(label: str, value: Any, note: Any = None, *, num: bool = True, key: str = "") -> html.Td:
    children: list[Any] = [html.Div(value, className="cell-value")]
    if note:
        children.append(html.Div(note, className="cell-note"))
    return html.Td(html.Div(children, className="cell"), className="num" if num else None,
                   **cast("dict[str, Any]", {"data-label": label, "data-col": key}))


def _why(text: Any, summary: str = "why unknown") -> html.Details:
    return html.Details([html.Summary(summary), html.P(labels.sentence(text))], className="why")


def _interval(ci: Any, spec: str, unit: str = "", sep: str = "–") -> str | None:
    """'95 %: 109–126 Ah' from a (lo, hi) pair; None when there is none."""
    if not ci or len(ci) != 2 or any(v is None for v in ci):
        return None
    lo, hi = (format(float(v), spec) for v in ci)
    return f"95 %: {lo}{sep}{hi}{unit}"


def _period(row: dict[str, Any]) -> list[Any]:
    """'10 whole days' and the local dates the log covers, as two lines."""
    p = row.get("period") or {}
    tz = p.get("timezone") or "UTC"
    days = labels.plural(int(row.get("complete_days") or 0), "whole day")
    try:
        start = labels.local_time(p.get("start"), tz)[:10] if p.get("start") else None
        end = labels.local_time(p.get("end"), tz)[:10] if p.get("end") else None
    except Exception:  # noqa: BLE001 - an odd period must not hide the row
        start = end = None
    return [html.Div(days), html.Div(f"{start} to {end}")] if start and end else [html.Div(days)]


def _open_href(name: str, to: str | None = None) -> str:
    return f"/fleet/open?vehicle={quote(name)}" + (f"&to={quote(to)}" if to else "")


def _vehicle_cell(row: dict[str, Any], opened: str | None) -> html.Td:
    name = str(row["vehicle"])
    link = html.A(name, href=_open_href(name), className="vehicle-link",
                  title=f"Open {name}: its trip review, battery health, solar and upgrade planner")
    notes: list[Any] = _period(row) if not row.get("error") else []
    if opened == name:
        notes.append(html.Div("open now", className="open-now"))
    return html.Td(html.Div([link, html.Div(notes, className="cell-note")] if notes else [link], className="cell"),
                   **cast("dict[str, Any]", {"data-label": "Vehicle", "data-col": "vehicle"}))


def _flags_cell(row: dict[str, Any]) -> html.Td:
    flags = list(row.get("flags") or [])
    reasons = row.get("flag_reasons") or {}
    name = str(row["vehicle"])
    if not flags:
        content: Any = html.Span("none", className="cell-note")
    else:
        items = []
        for flag in flags:
            body: list[Any] = [html.P(labels.sentence(reasons.get(flag) or "no reason given"))]
            if flag in FLAG_PAGES:
                path, page = FLAG_PAGES[flag]
                body.append(html.A(f"{name}: {page}", href=_open_href(name, path), className="flag-page"))
            items.append(html.Details([html.Summary(FLAG_LABELS.get(flag, flag.replace("_", " ")),
                                                    title=labels.sentence(reasons.get(flag) or "")), *body],
                                      className=f"flag flag-{flag}"))
        content = html.Div(items, className="flags")
    return html.Td(content, **cast("dict[str, Any]", {"data-label": "Flags", "data-col": "urgency"}))


def fleet_row(row: dict[str, Any], *, opened: str | None = None, solar_why: str | None = None,
              scrub: Callable[[str], str] = str) -> html.Tr:
    """One vehicle's row: every figure with its interval, or the reason it is unknown."""
    name = str(row["vehicle"])
    if row.get("error"):
        reason = html.Td(html.Div([html.Strong("Not analysed: "), labels.for_people(scrub(str(row["error"])))],
                                  className="cell"), colSpan=len(COLUMNS) - 1, className="row-error-reason",
                         **cast("dict[str, Any]", {"data-label": "Not analysed"}))
        return html.Tr([_vehicle_cell(row, opened), reason], className="row-error",
                       **cast("dict[str, Any]", {"data-vehicle": name}))
    usable = row.get("usable_Ah")
    if usable is None:
        usable_cell = _cell("Usable", "unknown", _why(row.get("usable_Ah_why") or "no reason given"), key="usable")
    else:
        usable_cell = _cell("Usable", fmt(usable, "Ah", 0), _interval(row.get("usable_Ah_ci95"), ".0f", " Ah"),
                            key="usable")
    rated = row.get("rated_Ah")
    health = _cell("Health", fmt(row.get("state_of_health_pct"), "%", 0),
                   f"of {rated:g} Ah rated" if rated is not None else None, key="health")
    fade = row.get("fade_pct_per_month")
    if fade is None:
        fade_cell = _cell("Fade", "unknown", _why(row.get("fade_why") or "no reason given"), key="fade")
    else:
        fade_cell = _cell("Fade", f"{fade:+.2f}\u202f%/month", _interval(row.get("fade_pct_per_month_ci95"), "+.2f", sep=" to "),
                          key="fade")
    p50, p90 = row.get("daily_use_Ah_p50"), row.get("daily_use_Ah_p90")
    w50, w90 = row.get("daily_use_Wh_p50"), row.get("daily_use_Wh_p90")
    if p50 is None:
        use_cell = _cell("Use per day, median / p90", "unknown", _why("no whole day in the log: a day's use is counted only "
                                                        "over days the log covers whole"), key="use")
    else:
        use_cell = _cell("Use per day, median / p90", f"{fmt(p50, '', 0)} / {fmt(p90, 'Ah', 0)}",
                         f"{fmt(w50, '', 0)} / {fmt(w90, 'Wh', 0)}" if w50 is not None else None, key="use")
    ratio = row.get("solar_performance_ratio")
    solar_cell = _cell("Solar ratio", fmt(ratio, "", 2), None if ratio is not None else
                       (_why(solar_why) if solar_why else "not measured"), key="solar")
    d50, d90 = row.get("days_parked_p50"), row.get("days_parked_p90")
    if d50 is None:
        parked_cell = _cell("Days parked, median / 90 %", "unknown", _why(row.get("days_parked_why") or "no reason given"),
                            key="parked")
    else:
        parked_cell = _cell("Days parked, median / 90 %", f"{fmt(d50, '', 1)} / {fmt(d90, 'days', 1)}", None, key="parked")
    return html.Tr([_vehicle_cell(row, opened), usable_cell, health, fade_cell, use_cell, solar_cell, parked_cell,
                    _flags_cell(row)], className="row-open" if opened == name else None,
                   **cast("dict[str, Any]", {"data-vehicle": name}))


def fleet_table(rows: list[dict[str, Any]], key: str, direction: str, *, opened: str | None = None,
                solar_why: dict[str, str] | None = None, scrub: Callable[[str], str] = str) -> html.Div:
    """The table (sorted) with its phone sort bar; rows as :func:`fleet_row`."""
    ordered = sort_rows(rows, key, direction)
    head = html.Thead(html.Tr([_header(c, key, direction) for c in COLUMNS]))
    body = html.Tbody([fleet_row(r, opened=opened, solar_why=(solar_why or {}).get(str(r["vehicle"])), scrub=scrub)
                       for r in ordered])
    return html.Div([sort_bar(key, direction),
                     html.Div(html.Table([head, body], className="table fleet-table"),
                              className="table-wrap as-cards", id=ids.FLEET_TABLE)])


# -- the page ------------------------------------------------------------------------------------

def _fleet_source() -> Any:
    import flask

    return flask.current_app.config.get("DRAWDOWN_FLEET") if flask.has_app_context() else None


def _opened() -> str | None:
    import flask

    fleet = _fleet_source()
    if fleet is None or not flask.has_request_context():
        return None
    view = fleet.view_for_request(flask.request)
    return view.name if view is not None else None


def _when(table: Any) -> str:
    parts = []
    if table.finished_at:
        parts.append(f"analysed {labels.local_time(table.finished_at, 'UTC')}")
    if table.seconds is not None:
        parts.append(f"in {table.seconds:,.0f} s")
    workers = table.meta.get("workers")
    if workers:
        parts.append(f"on {labels.plural(int(workers), 'worker')} ({table.meta.get('scheduler') or 'local'})")
    text = " ".join(parts)
    if table.from_cache:
        text += "; read from the cache, the dataset has not changed since"
    return text


def render_fleet(fleet: Any, sort: Any = None, order: Any = None, *, opened: str | None = None) -> tuple[Any, bool]:
    """(the page's body, done) for a :class:`FleetSource`'s status; ``done``: no need to poll."""
    key, direction, bad = parse_sort(sort, order)
    st = fleet.status()
    parts: list[Any] = []
    if bad:
        parts.append(notice(bad, kind="warn"))
    if st.running:
        shown = (f"{st.done} of {labels.plural(st.total, 'vehicle')} analysed" if st.total
                 else "listing the vehicles")
        lead = ("The dataset has changed since the table below was made; a new report is running: "
                if st.table is not None else "Analysing the fleet: ")
        parts.append(html.Div([
            html.P(lead + shown + ".", className="fleet-progress-text"),
            html.Progress(value=str(st.done), max=str(max(st.total, 1)), className="fleet-progress"),
            html.P(f"Each vehicle gets the same analysis as drawdown report, on {st.workers}; a big fleet takes "
                   "minutes. The table appears here when every vehicle is done.", className="hint"),
        ], id="fleet-progress", className="notice notice-info", **cast("dict[str, Any]", {"aria-live": "polite"})))
    if st.error:
        parts.append(notice([labels.sentence(st.error) + ".", "Reload this page to try again."], kind="error"))
    table = st.table
    if table is not None:
        n = len(table.fleet)
        errors = sum(1 for r in table.fleet if r.get("error"))
        flagged = sum(1 for r in table.fleet if (r.get("flags") or []) and not r.get("error"))
        summary = (f"{labels.plural(n, 'vehicle')}: {flagged} flagged, {errors} not analysed. "
                   f"Sorted by {BY_KEY[key].header.lower() if key != DEFAULT_SORT else 'urgency'}, "
                   f"{'most urgent first' if key == DEFAULT_SORT and direction == 'desc' else _direction_words(direction)}"
                   f"; {_when(table)}.")
        parts.append(html.P(summary, className="hint fleet-summary"))
        if st.stale and not st.running:
            parts.append(notice("The dataset has changed since this table was made. Reload the page for a new report.",
                                kind="warn"))
        if table.cache_error:
            parts.append(notice(labels.sentence(table.cache_error) + ".", kind="warn"))
        parts.append(fleet_table(table.fleet, key, direction, opened=opened, solar_why=table.solar_why,
                                 scrub=fleet.scrub))
        parts.append(html.P("Open a vehicle by its name: its Trip review, Battery health, Solar and Upgrade planner "
                            "pages then show that vehicle. A flag's detail says why it is raised.", className="hint"))
    return html.Div(parts), not st.running


def layout(sort: Any = None, order: Any = None, **_kwargs: Any) -> html.Div:
    fleet = _fleet_source()
    head = page_head("Fleet", "Every vehicle of the fleet dataset, most urgent first; open one to see its own pages.")
    if fleet is None:  # the poll's ids stay in the layout: Dash checks every page's callbacks against it
        return html.Div([head, html.Div(notice(["No fleet dataset: start the dashboard with drawdown serve "
                                                "--dataset DIR (a dataset drawdown fleet ingest wrote), or try "
                                                "drawdown demo --fleet 4.",
                                                "The other pages show the store this dashboard was started on."],
                                               kind="warn"), id=ids.FLEET_BODY),
                         dcc.Interval(id=ids.FLEET_INTERVAL, interval=POLL_MS, disabled=True)])
    fleet.ensure_report()
    body, done = render_fleet(fleet, sort, order, opened=_opened())
    return html.Div([
        head,
        html.P(f"Dataset: {fleet.dataset_name}", className="hint"),
        html.Div(body, id=ids.FLEET_BODY),
        dcc.Interval(id=ids.FLEET_INTERVAL, interval=POLL_MS, disabled=done),
    ])


def _search_args(search: str | None) -> tuple[Any, Any]:
    q = parse_qs((search or "").lstrip("?"))
    sort, order = q.get("sort"), q.get("order")
    return (sort[0] if sort else None), (order[0] if order else None)


@callback(
    Output(ids.FLEET_BODY, "children"),
    Output(ids.FLEET_INTERVAL, "disabled"),
    Input(ids.FLEET_INTERVAL, "n_intervals"),
    State(ids.URL, "search"),
    prevent_initial_call=True,
)
def poll(_n: int, search: str | None) -> tuple[Any, bool]:
    fleet = _fleet_source()
    if fleet is None:
        return dash.no_update, True
    sort, order = _search_args(search)
    return render_fleet(fleet, sort, order, opened=_opened())
