"""A self-contained HTML report an owner can send to an installer (works offline).

One file: plotly.js is embedded inline (no CDN), the figures are drawn from the
report object (``analysis.report.Report``): state of charge over time with the
full-charge resyncs, the daily ledger by source, capacity anchor pairs and
internal resistance per day, the solar days when available, and the data-quality
notes. Text is escaped; no script other than plotly's and the figure calls.
"""

from __future__ import annotations

import html
from pathlib import Path
from typing import Any

import plotly.graph_objects as go
import plotly.io as pio
from plotly.offline import get_plotlyjs

from analysis.system import System

_SOURCE_COLOURS = {"solar": "#e0a100", "alternator": "#3a6ea5", "shore": "#5a9e4b", "other": "#8c8c8c"}


def _fig_html(fig: go.Figure) -> str:
    return pio.to_html(fig, include_plotlyjs=False, full_html=False, config={"displaylogo": False})


def _soc_figure(j: dict) -> go.Figure | None:
    s = j.get("soc_series")
    if not s:
        return None
    fig = go.Figure(go.Scatter(x=s["t"], y=s["soc_pct"], mode="lines", name="state of charge [%]",
                               line={"color": "#2b6f77", "width": 1.6}))
    resyncs = j.get("resyncs") or []
    if resyncs:
        fig.add_trace(go.Scatter(x=resyncs, y=[100.0] * len(resyncs), mode="markers", name="full-charge resync",
                                 marker={"symbol": "triangle-down", "size": 9, "color": "#b5452b"}))
    anchors = j.get("ocv_anchors") or []
    if anchors:
        fig.add_trace(go.Scatter(x=[a["t"] for a in anchors], y=[a["soc_pct"] for a in anchors], mode="markers",
                                 name="voltage anchor (capacity only)", marker={"size": 6, "color": "#7a5195"}))
    fig.update_layout(title="State of charge (re-run over the whole history; times in UTC)",
                      yaxis={"title": "SoC [%]", "range": [0, 105]}, height=360, margin={"t": 50, "b": 40})
    return fig


def _ledger_figure(j: dict) -> go.Figure:
    days = j["days"]
    x = [d["date"] for d in days]
    fig = go.Figure()
    for s, colour in _SOURCE_COLOURS.items():
        fig.add_trace(go.Bar(x=x, y=[d["charged_Ah"][s] for d in days], name=f"charged: {s}",
                             marker_color=colour))
    fig.add_trace(go.Bar(x=x, y=[-(d["consumed_Ah"] or 0) for d in days], name="consumed", marker_color="#444"))
    fig.update_layout(barmode="relative", title="Daily ledger by source [Ah] (local days; consumed below zero)",
                      yaxis={"title": "Ah per day"}, height=360, margin={"t": 50, "b": 40})
    return fig


def _capacity_figure(j: dict) -> go.Figure | None:
    b = j["battery"]
    pairs = b.get("anchor_pairs") or []
    ir = b.get("internal_resistance_days") or []
    if not pairs and not ir:
        return None
    fig = go.Figure()
    if pairs:
        fig.add_trace(go.Scatter(x=[p["end"] for p in pairs], y=[p["capacity_Ah"] for p in pairs], mode="markers",
                                 name="capacity from one anchor pair [Ah]", marker={"size": 8, "color": "#2b6f77"}))
        fig.add_hline(y=b["rated_Ah"], line_dash="dot", annotation_text="rated")
        if b.get("usable_Ah") is not None:
            fig.add_hline(y=b["usable_Ah"], line_color="#b5452b", annotation_text="usable (WLS)")
    if ir:
        fig.add_trace(go.Scatter(x=[r["date"] for r in ir], y=[1000 * r["ohm"] for r in ir], mode="lines+markers",
                                 name="internal resistance [mOhm]", yaxis="y2", line={"color": "#7a5195"}))
    fig.update_layout(title="Capacity and internal resistance", height=340, margin={"t": 50, "b": 40},
                      yaxis={"title": "Ah"}, yaxis2={"title": "mOhm", "overlaying": "y", "side": "right"})
    return fig


def _solar_figure(j: dict) -> go.Figure | None:
    s = j.get("solar") or {}
    days = [d for d in s.get("days") or [] if d.get("measured_Wh") is not None]
    if not days:
        return None
    fig = go.Figure([go.Bar(x=[d["date"] for d in days], y=[d["measured_Wh"] for d in days], name="measured [Wh]",
                            marker_color="#e0a100"),
                     go.Bar(x=[d["date"] for d in days], y=[d.get("expected_Wh") for d in days],
                            name="expected for the site and sky [Wh]", marker_color="#c9c9c9")])
    fig.update_layout(barmode="group", title="Solar yield per day", height=320, margin={"t": 50, "b": 40})
    return fig


def _table(j: dict) -> str:
    head = ("<tr><th>date</th><th>complete</th><th>consumed Ah</th><th>consumed Wh</th><th>solar Ah</th>"
            "<th>alternator Ah</th><th>shore Ah</th><th>other Ah</th><th>SoC min %</th><th>SoC end %</th></tr>")
    rows = []

    def f(x: Any, nd: int = 1) -> str:
        return "-" if x is None else f"{x:.{nd}f}"

    for d in j["days"]:
        c = d["charged_Ah"]
        rows.append(f"<tr><td>{html.escape(d['date'])}</td><td>{'yes' if d['complete'] else 'no'}</td>"
                    f"<td>{f(d['consumed_Ah'])}</td><td>{f(d['consumed_Wh'], 0)}</td><td>{f(c['solar'])}</td>"
                    f"<td>{f(c['alternator'])}</td><td>{f(c['shore'])}</td><td>{f(c['other'])}</td>"
                    f"<td>{f(d['soc_min_pct'])}</td><td>{f(d['soc_end_pct'])}</td></tr>")
    return f"<table>{head}{''.join(rows)}</table>"


def render_html(report: Any, *, system: System | None = None) -> str:
    """The whole report as one HTML document (plotly.js inline, no network needed)."""
    from dashboard.commands.report import describe

    j = report.to_json()
    figs = [f for f in (_soc_figure(j), _ledger_figure(j), _capacity_figure(j), _solar_figure(j)) if f is not None]
    summary = html.escape("\n".join(describe(j)))
    dq = j["data_quality"]
    notes = "".join(f"<li>{html.escape(str(n))}</li>" for n in dq.get("notes", []))
    gaps = "".join(f"<li>{html.escape(g['start'])} to {html.escape(g['end'])} ({g['seconds']:.0f} s): "
                   "energy unknown</li>" for g in dq["gaps"][:50])
    title = "drawdown report"
    if system is not None:
        b = system.battery
        title += f" - {b.nominal_voltage_V:g} V {b.chemistry} bank, {b.rated_capacity_Ah:g} Ah"
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        f"<title>{html.escape(title)}</title>"
        "<style>body{font-family:system-ui,sans-serif;margin:2em;max-width:1100px;color:#222}"
        "table{border-collapse:collapse;font-size:0.9em}td,th{border:1px solid #ccc;padding:3px 8px;"
        "text-align:right}pre{background:#f6f6f6;padding:1em;overflow-x:auto;font-size:0.85em}</style>"
        f"<script type='text/javascript'>{get_plotlyjs()}</script></head><body>"
        f"<h1>{html.escape(title)}</h1>"
        f"<p>Period {html.escape(j['period']['start'])} to {html.escape(j['period']['end'])}, "
        f"{j['period']['days']} local days ({html.escape(str(j['period'].get('timezone', '')))}).</p>"
        + "".join(_fig_html(f) for f in figs)
        + "<h2>Daily ledger</h2>" + _table(j)
        + "<h2>Data quality</h2>"
        f"<p>{dq['rows_stored']} rows stored, {dq['rows_rejected']} rejected at import, {len(dq['gaps'])} gap(s).</p>"
        + (f"<ul>{gaps}</ul>" if gaps else "") + (f"<ul>{notes}</ul>" if notes else "")
        + f"<h2>Summary</h2><pre>{summary}</pre>"
        "<p><small>Made by drawdown from logged readings. Values that cannot be estimated are shown "
        "as '-' with the reason. Have electrical changes checked by a qualified installer.</small></p>"
        "</body></html>")


def write_html(report: Any, path: Path, *, system: System | None = None) -> Path:
    """Write :func:`render_html` to ``path`` (folders created); returns the path."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render_html(report, system=system), encoding="utf-8")
    return path
