"""A self-contained HTML report an owner can send to an installer (works offline).

One file, drawn with the SAME figure functions as the Dash pages
(:mod:`dashboard.figures`, fed through the same adapters in
:mod:`dashboard.data`), so the report and the dashboard look alike and there is
one implementation of every plot:

* state of charge over time with the full-charge resyncs (trip page),
* the daily energy ledger by source (trip page),
* usable capacity, internal resistance and the Peukert fit (health page),
* solar per day and, when a :class:`analysis.solar.SolarAnalysis` is given,
  solar power against the clear-sky expectation (solar page),
* the daily table, the data-quality notes, the text summary and the
  dashboard footer's safety caution.

plotly.js is embedded inline exactly once (no CDN, no network URL); every piece
of text from the report is HTML-escaped; the only scripts are plotly's and the
figure calls plotly writes.
"""

from __future__ import annotations

import html
from pathlib import Path
from typing import Any

import pandas as pd
import plotly.graph_objects as go
import plotly.io as pio
from plotly.offline import get_plotlyjs

from drawdown.analysis.system import System
from drawdown.dashboard import figures, labels
from drawdown.dashboard.data import _health_of, _report_days, _soc_of, _to_json, soc_band_of

#: The dashboard footer's caution (dashboard/app.py ``_shell``), repeated word for word at the foot of the report.
SAFETY_CAUTION = ("Figures come from your own logs; advice on cables, fuses and chargers must be checked against "
                  "local electrical codes by a qualified installer.")

#: Plotly options for the embedded figures: resize with the window; no plotly logo link and no
#: "Share chart..." button in the mode bar (plotly.js 4 shows it by default; it uploads to a web service).
_PLOT_CONFIG: dict[str, Any] = {"displaylogo": False, "showSendToCloud": False, "responsive": True}

_P = figures.PALETTE
_CSS = (
    # A scroll bar from the start: plotly sizes each plot to its box once, before the page grows long.
    "html{overflow-y:scroll}"
    f"body{{font:15px/1.45 system-ui,-apple-system,'Segoe UI',Roboto,sans-serif;margin:0;background:#f4f1ea;"
    f"color:{_P['ink']}}}"
    "main{max-width:1100px;margin:0 auto;padding:1.2em 1.2em 2em}"
    f"header{{background:{_P['soc']};color:#fff;padding:0.8em 1.2em}}header h1{{margin:0;font-size:1.4em}}"
    "header p{margin:0.2em 0 0;opacity:0.85;font-size:0.9em}"
    "h2{font-size:1.1em;margin:1.6em 0 0.5em}"
    f".fig{{background:{_P['paper']};border:1px solid #e0dbd0;border-radius:8px;margin:0.8em 0;padding:4px}}"
    # The chart toolbar sits top right beside the title; on a phone, in a strip above the chart, never over it.
    "@media (max-width:700px){.fig{padding-top:28px}.fig .modebar-container{top:-24px!important}}"
    # A wide table scrolls inside its box: the first column stays pinned, a shadow on the right edge and
    # (on a phone) a line above it say there is more to the right.
    f".wide{{overflow-x:auto;background:linear-gradient(to left,{_P['paper']} 40%,rgba(255,253,249,0)) "
    "100% 0/3em 100% no-repeat local,radial-gradient(farthest-side at 100% 50%,rgba(60,50,30,.28),"
    "rgba(60,50,30,0)) 100% 0/1em 100% no-repeat scroll}"
    ".wide table{background:none}"
    f".wide td:first-child,.wide th:first-child{{position:sticky;left:0;background:{_P['paper']};"
    "white-space:nowrap}.wide th:first-child{background:#ece8df}"
    ".wide .runs td:first-child{white-space:normal;min-width:7em}"
    ".scroll-hint{display:none;font-size:0.85em;color:" + _P["muted"] + ";margin:0.2em 0}"
    "@media (max-width:700px){.scroll-hint{display:block}}"
    f"table{{border-collapse:collapse;font-size:0.88em;background:{_P['paper']}}}"
    "td,th{border:1px solid #e0dbd0;padding:3px 8px;text-align:right}th{background:#ece8df}"
    "td:first-child,th:first-child{text-align:left}"
    f"pre{{background:{_P['paper']};border:1px solid #e0dbd0;padding:1em;overflow-x:auto;font-size:0.82em}}"
    ".cards{display:grid;grid-template-columns:repeat(auto-fit,minmax(200px,1fr));gap:0.6em}"
    f".card{{background:{_P['paper']};border:1px solid #e0dbd0;border-radius:8px;padding:0.6em 0.8em}}"
    f".card .label{{font-size:0.8em;color:{_P['muted']};text-transform:uppercase}}"
    ".card .value{font-size:1.5em;font-weight:650}"
    f".card .note{{font-size:0.85em;color:{_P['muted']}}}"
    f"footer{{color:{_P['muted']};font-size:0.85em;border-top:1px solid #e0dbd0;margin-top:2em;padding-top:0.8em}}"
)


# -- the figures, from the dashboard's own functions -------------------------------------------

def _soc_series(report: Any, j: dict) -> tuple[pd.Series | None, list[pd.Timestamp]]:
    """The full-resolution SoC series and resyncs (``Report.soc``), else the JSON's thinned copy."""
    soc, resync = _soc_of(report)
    if soc is None and j.get("soc_series"):
        s = j["soc_series"]
        soc = pd.Series(s["soc_pct"], index=pd.to_datetime(s["t"], utc=True), dtype="float64")
    return soc, resync


def _solar_power(solar: Any, tz: str) -> go.Figure | None:
    """The solar page's power plot from a SolarAnalysis (None when it has no time series)."""
    series = getattr(solar, "series", None)
    if not isinstance(series, pd.DataFrame) or not len(series) or "measured_W" not in series:
        return None
    return figures.solar_power_figure(
        series.index, series["measured_W"].to_numpy(dtype=float),
        series["expected_W"].to_numpy(dtype=float) if "expected_W" in series else None,
        saturated=series["saturated"].to_numpy(dtype=bool) if "saturated" in series else None, tz=tz)


def report_figures(report: Any, *, system: System | None = None, solar: Any = None
                   ) -> dict[str, list[go.Figure]]:
    """The report's figures by section, each built by the dashboard's function for that plot.

    Parameters
    ----------
    report
        An ``analysis.report.Report`` (or anything with ``to_json()`` giving the
        docs/contracts.md#report keys).
    system
        The system description: gives the timezone of the time axes and the
        rated capacity/hours for the health plots. Without it the times are UTC
        and the Peukert plot is left out.
    solar
        An ``analysis.solar.SolarAnalysis`` of the same readings: adds the solar
        power plot (measured vs clear-sky, battery-full periods shaded).

    Returns
    -------
    dict
        ``{"trip": [...], "health": [...], "solar": [...]}`` in page order;
        the trip and health lists always hold figures (a message figure says
        why when a value cannot be estimated), the solar list is empty when the
        report has no solar days.
    """
    j = _to_json(report)
    tz = system.site.timezone if system is not None else "UTC"
    soc, resync = _soc_series(report, j)
    trip = [figures.soc_figure(soc, resync_times=resync, tz=tz, band=soc_band_of(report)),
            figures.ledger_figure(_report_days(report))]

    b = j.get("battery") or {}
    health: list[go.Figure] = []
    if system is not None:
        h = _health_of(report, system)
        ci = b.get("usable_Ah_ci95")
        health.append(figures.capacity_figure(h.capacity_points, rated_Ah=h.rated_Ah,
                                              overall_Ah=b.get("usable_Ah"), overall_ci95=ci, tz=h.tz))
        health.append(figures.resistance_figure(h.resistance_points, overall_ohm=b.get("internal_resistance_ohm")))
        pts = h.peukert_points
        health.append(figures.peukert_figure([p[0] for p in pts], [p[1] for p in pts], k=b.get("peukert_k"),
                                             capacity_Ah=h.rated_Ah, rated_hours=h.rated_hours))
    else:
        pairs = b.get("anchor_pairs") or []
        cap = pd.DataFrame({"t": pd.to_datetime([p["end"] for p in pairs], utc=True),
                            "usable_Ah": [p.get("capacity_Ah") for p in pairs]})
        health.append(figures.capacity_figure(cap, rated_Ah=float(b.get("rated_Ah") or 0.0),
                                              overall_Ah=b.get("usable_Ah"), overall_ci95=b.get("usable_Ah_ci95")))
        ir = b.get("internal_resistance_days") or []
        res = pd.DataFrame({"t": pd.to_datetime([r["date"] for r in ir]),
                            "resistance_ohm": [float(r["ohm"]) for r in ir]})
        health.append(figures.resistance_figure(res, overall_ohm=b.get("internal_resistance_ohm")))

    sol: list[go.Figure] = []
    days = [d for d in (j.get("solar") or {}).get("days") or [] if d.get("measured_Wh") is not None]
    if days:
        sol.append(figures.solar_daily_figure(days))
    power = _solar_power(solar, tz) if solar is not None else None
    if power is not None:
        sol.append(power)
    return {"trip": trip, "health": health, "solar": sol}


def _fig_html(fig: go.Figure) -> str:
    # include_plotlyjs=False: the one inline copy is in <head>; to_html adds no CDN link then.
    body = pio.to_html(fig, include_plotlyjs=False, full_html=False, config=_PLOT_CONFIG,
                       default_width="100%")
    return f"<div class='fig'>{body}</div>"


# -- text parts --------------------------------------------------------------------------------

#: Shown above a wide table on a phone (CSS), where its right-hand columns are off screen.
_SCROLL_HINT = "<p class='scroll-hint'>Swipe the table sideways for more columns &rarr;</p>"


def _f(x: Any, nd: int = 1) -> str:
    return "-" if x is None else f"{x:.{nd}f}"


def _table(j: dict) -> str:
    ranged = any(d.get("consumed_Ah_pi95") for d in j["days"])
    # As on the command line: 'load not seen' only when one shunt hides the load while a source charges.
    inferred = j.get("data_quality", {}).get("mode") == "single-shunt"
    extra_head = (("<th>used, 95 % range [Ah]</th>" if ranged else "")
                  + ("<th>load not seen [h]</th>" if ranged and inferred else ""))
    head = ("<tr><th>date</th><th>whole day</th><th>used [Ah]</th>" + extra_head + "<th>used [Wh]</th>"
            "<th>solar [Ah]</th><th>alternator [Ah]</th><th>shore [Ah]</th><th>other [Ah]</th>"
            "<th>lowest SoC [%]</th><th>SoC at midnight [%]</th></tr>")
    rows = []
    for d in j["days"]:  # a loop over days, not readings
        c = d["charged_Ah"]
        extra = ""
        if ranged:
            lo_hi = d.get("consumed_Ah_pi95")
            extra = (f"<td>{f'{lo_hi[0]:.0f}-{lo_hi[1]:.0f}' if lo_hi else '-'}</td>"
                     + (f"<td>{_f(d.get('hidden_load_h'))}</td>" if inferred else ""))
        rows.append(f"<tr><td>{html.escape(str(d['date']))}</td><td>{'yes' if d['complete'] else 'partial'}</td>"
                    f"<td>{_f(d['consumed_Ah'])}</td>{extra}<td>{_f(d['consumed_Wh'], 0)}</td>"
                    f"<td>{_f(c['solar'])}</td><td>{_f(c['alternator'])}</td><td>{_f(c['shore'])}</td>"
                    f"<td>{_f(c['other'])}</td><td>{_f(d['soc_min_pct'], 0)}</td><td>{_f(d['soc_end_pct'], 0)}</td></tr>")
    unseen = [d for d in j["days"] if d.get("hidden_load_note")]
    note = ""
    if unseen:
        worst = max(unseen, key=lambda d: d.get("hidden_load_h") or 0)
        note = (f"<p class='note'>On {len(unseen)} of {len(j['days'])} days the load was not seen for more than "
                f"an hour: {html.escape(worst['hidden_load_note'].split(': ', 1)[-1])}.</p>")
    # The wrapper scrolls a wide table sideways on a phone instead of widening the whole page.
    return f"{note}{_SCROLL_HINT}<div class='wide'><table>{head}{''.join(rows)}</table></div>"


def _quality(j: dict, tz: str = "UTC") -> str:
    dq = j["data_quality"]
    e = html.escape
    items = [(f"{int(dq['rows_stored']):,} rows stored, {int(dq['rows_rejected']):,} rejected at import, "
              f"{labels.plural(len(dq['gaps']), 'gap')}; "
              f"{labels.plural(int(dq.get('complete_days', 0)), 'whole day')}.")]
    if dq["gaps"]:
        total_h = sum(float(g.get("seconds") or 0) for g in dq["gaps"]) / 3600
        items.append(f"{labels.plural(len(dq['gaps']), 'gap')} in the log, {total_h:.1f} h in all: nothing is "
                     "integrated across a gap, so those days are marked partial.")
        longest = sorted(dq["gaps"], key=lambda g: -float(g.get("seconds") or 0))[:20]
        items += [f"gap on {e(str(g.get('channel', '?')))} from {e(labels.local_time(g['start'], tz))} to "
                  f"{e(labels.local_time(g['end'], tz))} ({float(g['seconds']):.0f} s): energy unknown"
                  for g in longest]
    items += [e(labels.sentence(n)) for n in dq.get("notes", [])]
    return "<ul>" + "".join(f"<li>{i}</li>" for i in items) + "</ul>"


def _period_text(period: dict, tz: str) -> str:
    """'Period 2026-04-06 00:00 to 2026-04-19 23:59 (Europe/Oslo), 14 local days; ...' in local time."""
    try:
        a, b = (labels.local_time(pd.Timestamp(period[k]), tz) for k in ("start", "end"))
    except (KeyError, TypeError, ValueError):
        a, b, tz = str(period.get("start")), str(period.get("end")), "UTC"
    return (f"Period {a} to {b} ({tz}), {int(period.get('days') or 0)} local days; "
            "plot times are local.")


def _headline(report: Any, j: dict, sizing: dict | None) -> str:
    """The figures an installer looks for first: use per day, usable capacity and health, solar, what to upgrade."""
    e = html.escape
    days = [d for d in j["days"] if d.get("complete") and d.get("consumed_Ah") is not None]
    use = sorted(abs(d["consumed_Ah"]) for d in days)
    use_wh = sorted(abs(d["consumed_Wh"]) for d in days if d.get("consumed_Wh") is not None)
    med = (lambda v: v[len(v) // 2] if len(v) % 2 else (v[len(v) // 2 - 1] + v[len(v) // 2]) / 2)
    b = j["battery"]
    s = j.get("solar") or {}
    cards = [("Use per whole day", f"{med(use):.0f} Ah" if use else "-",
              f"median of {len(use)} days; {med(use_wh):.0f} Wh" if use_wh else b.get("usable_Ah_why") or ""),
             ("Usable capacity", f"{b['usable_Ah']:.0f} Ah" if b.get("usable_Ah") is not None else "-",
              (f"95 % interval {b['usable_Ah_ci95'][0]:.0f}-{b['usable_Ah_ci95'][1]:.0f} Ah; state of health "
               f"{b['state_of_health_pct']:.0f} % of {b['rated_Ah']:g} Ah") if b.get("usable_Ah") is not None
              else f"not known: {b.get('usable_Ah_why')}"),
             ("Solar performance ratio", f"{s['performance_ratio']:.2f}" if s.get("performance_ratio") is not None
              else "-", "measured / clear-sky expectation" if s.get("performance_ratio") is not None
              else str(s.get("performance_ratio_why") or "")),
             ]
    if sizing is not None:
        bat, arr = sizing["battery"], sizing["solar"]
        cards.append(("What to upgrade", f"{bat['capacity_Ah']:.0f} Ah, "
                      + (f"{arr['array_W']:.0f} W" if arr.get("array_W") is not None else "no array size"),
                      f"for {sizing['autonomy']['target_days']:g} days parked in "
                      f"{sizing['autonomy']['percentile']:g} % of spells; details below"))
    out = "<div class='cards'>" + "".join(
        f"<div class='card'><div class='label'>{e(a)}</div><div class='value'>{e(v)}</div>"
        f"<div class='note'>{e(labels.for_people(n))}</div></div>" for a, v, n in cards) + "</div>"
    if sizing is not None and sizing.get("verdict"):
        out += "<ul class='verdict'>" + "".join(f"<li>{e(labels.sentence(v))}</li>" for v in sizing["verdict"]) + "</ul>"
    return out


def _sizing_part(sizing: dict) -> str:
    """Sizes and the cable table (each size with its own voltage drop), with assumptions and cautions."""
    e = html.escape
    bat, arr, dc, inv = sizing["battery"], sizing["solar"], sizing["dc_dc_charger"], sizing["inverter"]
    items = [f"Battery {bat['capacity_Ah']:.0f} Ah {labels.chemistry(bat['chemistry'])} (you have "
             f"{bat['present_Ah']:.0f} Ah)",
             (f"Solar array {arr['array_W']:.0f} W (you have {arr['present_W']:.0f} W)" if arr.get("array_W") is not None
              else f"Solar array: no size ({arr.get('array_W_why')})"),
             (f"DC-DC charger {dc['current_A']:.0f} A" if dc.get("current_A") is not None
              else f"DC-DC charger: none ({dc.get('current_A_why')})"),
             (f"Inverter {inv['continuous_W']:.0f} W continuous, {inv['surge_W']:.0f} W surge"
              if inv.get("continuous_W") is not None else f"Inverter: none ({inv.get('continuous_W_why')})")]
    rows = labels.run_rows(sizing.get("runs") or [])
    head = "".join(f"<th>{e(h)}</th>" for _k, h in labels.RUN_COLUMNS)
    body = "".join("<tr>" + "".join(f"<td>{e(str(r[k]))}</td>" for k, _h in labels.RUN_COLUMNS) + "</tr>" for r in rows)
    a = sizing["assumptions"]
    assumptions = (f"Assumptions: conductor {a['conductor_temperature_C']:g} °C, {a['insulation_rating_C']} °C insulation, "
                   f"not bundled; one-way run lengths {labels.run_lengths(a['run_lengths_one_way_m'])}; "
                   f"{a['simulation']}.")
    return ("<ul>" + "".join(f"<li>{e(labels.for_people(i))}</li>" for i in items) + "</ul>"
            + f"{_SCROLL_HINT}<div class='wide'><table class='runs'><tr>{head}</tr>{body}</table></div>"
            + f"<p>{e(assumptions)}</p><ul class='cautions'>"
            + "".join(f"<li>{e(labels.for_people(c))}</li>" for c in sizing.get("cautions") or []) + "</ul>")


def render_html(report: Any, *, system: System | None = None, solar: Any = None, sizing: Any = None) -> str:
    """The whole report as one HTML document (plotly.js inline once, no network needed).

    Parameters
    ----------
    report
        An ``analysis.report.Report``.
    system
        The system description (title, timezone of the time axes, rated figures
        for the health plots); optional.
    solar
        An ``analysis.solar.SolarAnalysis`` of the same readings for the solar
        power plot; optional (the per-day solar plot comes from the report).
    sizing
        An ``analysis.sizing.SizingResult`` (``drawdown size``'s answer): its
        headline and cable table open the report; optional.

    Returns
    -------
    str
        A complete HTML5 document.
    """
    from drawdown.cli.commands.report import describe

    j = _to_json(report)
    sz = sizing.to_json() if sizing is not None else None
    figs = report_figures(report, system=system, solar=solar)
    e = html.escape
    title = "drawdown report"
    if system is not None:
        b = system.battery
        title += f" - {b.nominal_voltage_V:g} V {labels.chemistry(b.chemistry)} bank, {b.rated_capacity_Ah:g} Ah"
    p = j["period"]
    tz = system.site.timezone if system is not None else str(p.get("timezone") or "UTC")
    s = j.get("solar") or {}
    if figs["solar"]:
        solar_part = "".join(_fig_html(f) for f in figs["solar"])
    else:
        why = s.get("performance_ratio_why") or "no solar days in this range"
        solar_part = f"<p>No solar plot: {e(str(why))}.</p>"
    return (
        "<!DOCTYPE html><html lang='en'><head><meta charset='utf-8'>"
        "<meta name='viewport' content='width=device-width, initial-scale=1'>"
        f"<title>{e(title)}</title><style>{_CSS}</style>"
        f"<script type='text/javascript'>{get_plotlyjs()}</script></head><body>"
        f"<header><h1>{e(title)}</h1><p>{e(_period_text(p, tz))}</p></header><main>"
        "<h2>At a glance</h2>" + _headline(report, j, sz)
        + ("<h2>What to upgrade, with cables and fuses</h2>" + _sizing_part(sz) if sz is not None else "")
        + "<h2>State of charge and daily ledger</h2>" + "".join(_fig_html(f) for f in figs["trip"])
        + "<h2>Battery health</h2>" + "".join(_fig_html(f) for f in figs["health"])
        + "<h2>Solar</h2>" + solar_part
        + "<h2>Daily ledger</h2>" + _table(j)
        + "<h2>Data quality</h2>" + _quality(j, tz)
        + f"<h2>Summary</h2><pre>{e(chr(10).join(describe(j)))}</pre>"
        f"<footer><p>{e(SAFETY_CAUTION)}</p><p>Made by drawdown from logged readings. Values that cannot be "
        "estimated are shown as '-' with the reason.</p></footer>"
        "</main></body></html>")


def write_html(report: Any, path: Path, *, system: System | None = None, solar: Any = None,
               sizing: Any = None) -> Path:
    """Write :func:`render_html` to ``path`` (folders created); returns the path."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(render_html(report, system=system, solar=solar, sizing=sizing), encoding="utf-8")
    return path
