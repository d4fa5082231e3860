"""Small layout pieces shared by the pages (not a page: Dash skips files starting with ``_``)."""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping, Sequence
from typing import Any, cast

from dash import dcc, html

#: dcc.Graph options: fit the container (phones), keep the toolbar small, no plotly logo.
GRAPH_CONFIG: dcc.Graph.Config = {"responsive": True, "displaylogo": False, "showSendToCloud": False,
                                   "modeBarButtonsToRemove": ["select2d", "lasso2d", "autoScale2d"]}


def fmt(value: Any, unit: str = "", digits: int = 1) -> str:
    """A number for people: fixed digits, the unit after a thin space, an en dash when unknown."""
    if value is None:
        return "–"
    try:
        f = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(f):
        return "–"
    text = f"{f:,.{digits}f}"
    return f"{text}\u202f{unit}" if unit else text


def graph(id_: str, figure: Any = None, *, height: int | None = None) -> dcc.Graph:
    style = {"width": "100%"}
    if height:
        style["height"] = f"{height}px"
    return dcc.Graph(id=id_, figure=figure or {}, config=GRAPH_CONFIG, style=style, className="graph")


def card(label: str, value: str, note: str | None = None, *, kind: str = "") -> html.Div:
    children: list[Any] = [html.Div(label, className="card-label"), html.Div(value, className="card-value")]
    if note:
        children.append(html.Div(note, className="card-note"))
    return html.Div(children, className=f"card {kind}".strip())


def notice(text: str | Sequence[str], *, kind: str = "info") -> html.Div:
    """A boxed message: kind 'info', 'warn' (cautions, missing pieces) or 'error'."""
    lines = [text] if isinstance(text, str) else list(text)
    return html.Div([html.P(line) for line in lines if line], className=f"notice notice-{kind}")


def missing(section: str, why: str | None) -> html.Div:
    return notice(f"{section}: {why or 'not available yet.'}", kind="warn")


def table(rows: Iterable[Mapping[str, Any]], columns: Sequence[tuple[str, str]], *,
          id_: str | None = None, numeric: Iterable[str] = ()) -> html.Div:
    """A plain HTML table; on a phone (<= 600 px) each row is shown as a card with every column labelled.

    Parameters
    ----------
    rows
        Mappings from column key to the text/number to show.
    columns
        (key, header) pairs in display order.
    numeric
        Keys right-aligned (numbers line up).
    """
    num = set(numeric)
    head = html.Thead(html.Tr([html.Th(h, className="num" if k in num else None) for k, h in columns]))
    # Each cell carries its column's header: on a phone every row becomes a card of "header: value" lines
    # (drawdown.css), so no column is cut off and the page never scrolls sideways.
    body = html.Tbody([html.Tr([html.Td(r.get(k, ""), className="num" if k in num else None,
                                        **cast("dict[str, Any]", {"data-label": h}))
                                for k, h in columns]) for r in rows])
    kw: dict[str, Any] = {"id": id_} if id_ else {}
    return html.Div(html.Table([head, body], className="table"), className="table-wrap as-cards", **kw)


def page_head(title: str, lead: str) -> html.Div:
    return html.Div([html.H1(title), html.P(lead, className="lead")], className="page-head")
