"""Plotly figures for the dashboard and the HTML report: pure functions, no I/O.

Every function here takes plain arrays, Series, DataFrames or JSON-like dicts
and returns a :class:`plotly.graph_objects.Figure`; none reads the store or
calls analysis, so tests (and ``dashboard/html_report.py``) call them without a
browser or a server.

Big series are thinned for the screen with :func:`downsample` (MinMaxLTTB from
``tsdownsample``: per bucket it keeps the extreme points and then picks the
visually significant one, so a one-second spike in a year of 1 Hz data stays
visible). The dashboard re-queries the zoomed range at full resolution through
its ``relayoutData`` callbacks; the figures themselves stay static.

Colours are this project's own: a warm paper background, brick red for what
the loads took, ochre for solar, slate blue for the alternator, sage for shore
power.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import pandas as pd
import plotly.graph_objects as go
from plotly.subplots import make_subplots

#: Points per trace sent to the browser (about one per horizontal pixel of a laptop plot).
SCREEN_POINTS = 2000

PALETTE: dict[str, str] = {
    "ink": "#22303a",
    "muted": "#6b7680",
    "grid": "#e4e0d8",
    "paper": "#fffdf9",
    "consumed": "#b5523b",   # brick
    "solar": "#d49a12",      # ochre
    "alternator": "#4a6a8c",  # slate blue
    "shore": "#5b8a5e",      # sage
    "other": "#8d8273",      # taupe
    "soc": "#2d5a6b",        # deep teal
    "voltage": "#2d5a6b",
    "current": "#7a4a8c",    # plum
    "expected": "#9aa5ad",
    "alarm": "#c0392b",
    "band": "rgba(45, 90, 107, 0.15)",
    "saturated": "rgba(212, 154, 18, 0.16)",
}

SOURCE_COLOURS: dict[str, str] = {k: PALETTE[k] for k in ("solar", "alternator", "shore", "other")}


# -- downsampling ---------------------------------------------------------------

def _as_ns(t: Any) -> np.ndarray:
    """Timestamps (DatetimeIndex, Series, datetime64 array) as int64 nanoseconds UTC."""
    idx = pd.DatetimeIndex(t)
    if idx.tz is not None:
        idx = idx.tz_convert("UTC").tz_localize(None)
    return idx.as_unit("ns").asi8


def downsample(t: Any, y: Any, n_out: int = SCREEN_POINTS, *, gap_factor: float = 10.0
               ) -> tuple[pd.DatetimeIndex, np.ndarray]:
    """Thin a time series to about ``n_out`` points for plotting, keeping peaks and gaps.

    Parameters
    ----------
    t
        Sorted timestamps (tz-aware or naive UTC).
    y
        Values, same length as ``t``; NaN values are dropped before thinning.
    n_out
        Target number of points (MinMaxLTTB needs an even number >= 4; rounded up).
    gap_factor
        A step longer than ``gap_factor`` times the median sampling step is a gap
        in the log: a NaN is inserted there so the line is broken, not bridged.

    Returns
    -------
    (times, values)
        ``times`` as a UTC DatetimeIndex; ``values`` float64 with NaN at gaps.
        When the series has no more than ``n_out`` points it is returned whole
        (full resolution).

    Notes
    -----
    MinMaxLTTB (Van Der Donckt et al., "MinMaxLTTB: Leveraging MinMax-Preselection
    to Scale LTTB", IEEE VIS 2023) preselects min and max per bucket and then
    runs Largest-Triangle-Three-Buckets on them; implemented by ``tsdownsample``.
    """
    t_ns = _as_ns(t)
    y_arr = np.asarray(y, dtype="float64")
    if t_ns.shape != y_arr.shape:
        raise ValueError(f"downsample: t has {t_ns.size} points but y has {y_arr.size}")
    ok = np.isfinite(y_arr)
    if not ok.all():
        t_ns, y_arr = t_ns[ok], y_arr[ok]
    n_out = max(4, int(n_out) + (int(n_out) % 2))
    if t_ns.size > n_out:
        from tsdownsample import MinMaxLTTBDownsampler

        keep = MinMaxLTTBDownsampler().downsample(t_ns, y_arr, n_out=n_out)
        t_sel, y_sel = t_ns[keep], y_arr[keep]
    else:
        t_sel, y_sel = t_ns, y_arr
    if t_ns.size > 2:
        step = np.diff(t_ns)
        median = float(np.median(step))
        gap_at = np.flatnonzero(step > gap_factor * max(median, 1.0))
        if gap_at.size:
            # One NaN just after the last sample before each gap breaks the line.
            gap_t = t_ns[gap_at] + 1
            t_sel = np.concatenate([t_sel, gap_t])
            y_sel = np.concatenate([y_sel, np.full(gap_t.size, np.nan)])
            order = np.argsort(t_sel, kind="stable")
            t_sel, y_sel = t_sel[order], y_sel[order]
    return pd.DatetimeIndex(t_sel.view("datetime64[ns]")).tz_localize("UTC"), y_sel


# -- common look ------------------------------------------------------------------

#: A chart subtitle longer than this is broken into lines: plotly does not wrap, and on a 390 px phone
#: a longer line runs off the chart's right edge.
SUBTITLE_CHARS = 62


#: Characters per line of a chart's "nothing to show" message (fits 390 px at 13 px).
MESSAGE_CHARS: int = 44


def _wrap(text: str, width: int = SUBTITLE_CHARS) -> str:
    """A subtitle broken at spaces into lines of at most ``width`` characters (plotly's '<br>')."""
    import textwrap

    return "<br>".join(textwrap.wrap(str(text), width)) if len(str(text)) > width else str(text)


def _base_layout(fig: go.Figure, *, title: str | None = None, height: int = 340,
                 legend_below: bool = True, subtitle: str | None = None) -> go.Figure:
    head: dict[str, Any] | None = None
    if title:
        # At the top of the chart's box (plotly centres it in the top margin otherwise, leaving a band above).
        head = {"text": title, "x": 0.0, "xanchor": "left", "font": {"size": 15},
                "y": 1.0, "yref": "container", "yanchor": "top", "pad": {"t": 10, "l": 14}}
        if subtitle:
            head["subtitle"] = {"text": _wrap(subtitle), "font": {"size": 11, "color": PALETTE["muted"]}}
    fig.update_layout(
        title=head,
        height=height,
        margin={"l": 52, "r": 12, "t": (80 + 14 * _wrap(subtitle).count("<br>") if subtitle else 44) if title else 16,
                "b": 64 if legend_below else 36},
        paper_bgcolor=PALETTE["paper"],
        plot_bgcolor=PALETTE["paper"],
        font={"family": "system-ui, -apple-system, 'Segoe UI', Roboto, sans-serif", "size": 12,
              "color": PALETTE["ink"]},
        # Below the plot: on a phone a top legend runs into the title and the subplot titles.
        legend=({"orientation": "h", "yanchor": "top", "y": -0.14, "x": 0.0, "xanchor": "left",
                 "bgcolor": "rgba(0,0,0,0)"} if legend_below else
                {"orientation": "h", "yanchor": "bottom", "y": 1.0, "x": 1.0, "xanchor": "right",
                 "bgcolor": "rgba(0,0,0,0)"}),
        hovermode="x unified",
        uirevision="keep",  # keep the user's zoom when a callback refreshes the data
    )
    fig.update_xaxes(gridcolor=PALETTE["grid"], zeroline=False, linecolor=PALETTE["grid"])
    fig.update_yaxes(gridcolor=PALETTE["grid"], zerolinecolor=PALETTE["muted"], linecolor=PALETTE["grid"])
    return fig


def message_figure(message: str, *, title: str | None = None, height: int = 220) -> go.Figure:
    """An empty plot that says why there is nothing to show (e.g. 'not available yet')."""
    fig = go.Figure()
    # Broken into short lines: one long line is cut at both ends on a phone.
    fig.add_annotation(text=_wrap(message, MESSAGE_CHARS), x=0.5, y=0.5, xref="paper", yref="paper", showarrow=False,
                       font={"size": 13, "color": PALETTE["muted"]})
    fig.update_xaxes(visible=False)
    fig.update_yaxes(visible=False)
    return _base_layout(fig, title=title, height=height)


def _line(t: Any, y: Any, *, name: str, colour: str, n_out: int = SCREEN_POINTS, width: float = 1.6,
          **kw: Any) -> go.Scattergl | go.Scatter:
    ts, ys = downsample(t, y, n_out)
    return go.Scatter(x=ts, y=ys, name=name, mode="lines", line={"color": colour, "width": width},
                      connectgaps=False, **kw)


# -- live view ----------------------------------------------------------------------

def live_figure(readings: pd.DataFrame, *, low_voltage_V: float | None = None,
                tz: str = "UTC", n_out: int = SCREEN_POINTS, title: str | None = None) -> go.Figure:
    """The last hour: battery voltage on top, current of every channel below.

    Parameters
    ----------
    readings
        Canonical long frame (t, channel, voltage_V, current_A, ...).
    low_voltage_V
        Draws the low-voltage alarm level on the voltage plot when given [V].
    tz
        Timezone the time axis is shown in (IANA name).
    """
    if readings.empty:
        return message_figure("No readings stored yet.", title="Last hour")
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08,
                        row_heights=[0.45, 0.55], subplot_titles=("Battery voltage [V]", "Current [A]"))
    t_local = pd.DatetimeIndex(readings["t"]).tz_convert(tz)
    chan = readings["channel"].astype(str).to_numpy()
    bat = chan == "battery"
    if bat.any():
        fig.add_trace(_line(t_local[bat].tz_localize(None), readings["voltage_V"].to_numpy()[bat],
                            name="voltage", colour=PALETTE["voltage"], n_out=n_out,
                            showlegend=False), row=1, col=1)
    if low_voltage_V is not None:
        fig.add_hline(y=low_voltage_V, line={"color": PALETTE["alarm"], "dash": "dot", "width": 1},
                      annotation_text=f"low {low_voltage_V:.1f} V", annotation_position="bottom left",
                      row=1, col=1)
    for name in pd.unique(chan):
        mask = chan == name
        cur = readings["current_A"].to_numpy()[mask]
        # A source that delivered nothing this hour (the alternator while parked) is left out.
        if not np.isfinite(cur).any() or (name != "battery" and np.nanmax(np.abs(cur)) < 0.05):
            continue
        colour = PALETTE["current"] if name == "battery" else SOURCE_COLOURS.get(name, PALETTE["other"])
        fig.add_trace(_line(t_local[mask].tz_localize(None), cur, name=str(name), colour=colour,
                            n_out=n_out), row=2, col=1)
    fig.add_hline(y=0, line={"color": PALETTE["muted"], "width": 0.8}, row=2, col=1)
    _base_layout(fig, height=440 + (30 if title else 0), title=title)
    if title:
        fig.update_xaxes(title_text=f"local time ({tz})", row=2, col=1)
    fig.update_annotations(font_size=12)
    return fig


# -- trip review -----------------------------------------------------------------------

def ledger_figure(days: pd.DataFrame) -> go.Figure:
    """Daily energy ledger: charge by source stacked up, consumption down [Ah].

    Parameters
    ----------
    days
        One row per local day with columns ``date``, ``consumed_Ah`` and
        ``charged_<source>_Ah`` for solar/alternator/shore/other (missing
        sources count as zero), optionally ``complete`` (bool).
    """
    if days is None or len(days) == 0:
        return message_figure("No complete days in this range.", title="Daily energy ledger")
    fig = go.Figure()
    dates = pd.to_datetime(days["date"]).dt.strftime("%Y-%m-%d")
    for source, colour in SOURCE_COLOURS.items():
        col = f"charged_{source}_Ah"
        if col in days and np.nansum(days[col].to_numpy(dtype=float)) > 0:
            fig.add_trace(go.Bar(x=dates, y=days[col], name=f"{source}", marker_color=colour,
                                 hovertemplate="%{y:.1f} Ah"))
    consumed = -np.abs(days["consumed_Ah"].to_numpy(dtype=float))
    fig.add_trace(go.Bar(x=dates, y=consumed, name="consumed", marker_color=PALETTE["consumed"],
                         hovertemplate="%{y:.1f} Ah"))
    if "complete" in days:
        partial = ~days["complete"].astype(bool).to_numpy()
        if partial.any():
            fig.add_trace(go.Scatter(x=dates[partial], y=np.zeros(int(partial.sum())), mode="markers",
                                     name="partial day", marker={"symbol": "x", "color": PALETTE["muted"]},
                                     hovertemplate="partial day"))
    fig.update_layout(barmode="relative", bargap=0.25)
    fig.update_yaxes(title_text="Ah per day (charge up, use down)")
    # A date axis with short labels: no rotated labels on a phone, ticks thinned by plotly on long ranges.
    fig.update_xaxes(type="date", tickformat="%d %b", hoverformat="%a %d %b %Y",
                     dtick=86_400_000 if len(days) <= 10 else None)  # one label per day [ms]
    return _base_layout(fig, title="Daily energy ledger")


def soc_figure(soc: pd.Series | None, *, resync_times: Sequence[Any] = (), tz: str = "UTC",
               device_soc: pd.Series | None = None, n_out: int = SCREEN_POINTS,
               band: pd.DataFrame | None = None) -> go.Figure:
    """State of charge over time with the detected full charges marked (SoC set to 100 % there).

    Parameters
    ----------
    soc
        Estimated state of charge [%] indexed by UTC time.
    resync_times
        Times at which the estimate was reset to 100 % (full charge detected).
    device_soc
        The monitor's own figure [%], drawn thin for comparison when given.
    band
        ``lo``/``hi`` columns [%] indexed by UTC time: the estimate's 95 % band, shaded.
    """
    if (soc is None or soc.empty) and (device_soc is None or device_soc.empty):
        return message_figure("No state-of-charge estimate for this range.", title="State of charge")
    fig = go.Figure()
    if device_soc is not None and not device_soc.empty:
        fig.add_trace(_line(pd.DatetimeIndex(device_soc.index).tz_convert(tz).tz_localize(None),
                            device_soc.to_numpy(), name="monitor's own figure", colour=PALETTE["expected"],
                            width=1.0, n_out=n_out))
    if band is not None and not band.empty:
        bx = pd.DatetimeIndex(band.index).tz_convert(tz).tz_localize(None)
        fig.add_trace(go.Scatter(x=bx, y=band["hi"].to_numpy(), mode="lines", line={"width": 0},
                                 hoverinfo="skip", showlegend=False, name="95 % band (upper)"))
        fig.add_trace(go.Scatter(x=bx, y=band["lo"].to_numpy(), mode="lines", line={"width": 0}, fill="tonexty",
                                 fillcolor="rgba(90, 110, 140, 0.18)", name="95 % band"))
    if soc is not None and not soc.empty:
        fig.add_trace(_line(pd.DatetimeIndex(soc.index).tz_convert(tz).tz_localize(None), soc.to_numpy(),
                            name="estimated", colour=PALETTE["soc"], n_out=n_out))
        if len(resync_times):
            rt = pd.DatetimeIndex(pd.to_datetime(list(resync_times), utc=True))
            fig.add_trace(go.Scatter(x=rt.tz_convert(tz).tz_localize(None), y=np.full(len(rt), 100.0),
                                     mode="markers", name="full charge (SoC set to 100 %)",
                                     marker={"symbol": "triangle-down", "size": 9, "color": PALETTE["solar"]}))
    fig.update_yaxes(title_text="state of charge [%]", range=[0, 105])
    return _base_layout(fig, title="State of charge")


def readings_figure(series: Mapping[str, tuple[Any, Any]], *, tz: str = "UTC", title: str = "Readings",
                    full_resolution: bool = False) -> go.Figure:
    """Battery voltage and current as stored, already thinned by the caller.

    Parameters
    ----------
    series
        ``{"voltage_V": (t, y), "current_A": (t, y)}`` (either may be missing).
    full_resolution
        Says in the title whether every stored reading is drawn.
    """
    if not series:
        return message_figure("No readings in this range.", title=title)
    fig = make_subplots(rows=2, cols=1, shared_xaxes=True, vertical_spacing=0.08,
                        subplot_titles=("Battery voltage [V]", "Battery current [A]"))
    for row, (key, colour) in enumerate((("voltage_V", PALETTE["voltage"]), ("current_A", PALETTE["current"])),
                                        start=1):
        if key in series:
            t, y = series[key]
            fig.add_trace(go.Scatter(x=pd.DatetimeIndex(t).tz_convert(tz).tz_localize(None), y=y, mode="lines",
                                     name=key.split("_")[0], line={"color": colour, "width": 1.2},
                                     connectgaps=False, showlegend=False), row=row, col=1)
    note = "every stored reading" if full_resolution else f"thinned to ~{SCREEN_POINTS} points; zoom for detail"
    _base_layout(fig, title=title, subtitle=note, height=440)
    fig.update_annotations(font_size=12)
    return fig


# -- battery health ---------------------------------------------------------------------

def capacity_figure(estimates: pd.DataFrame | None, *, rated_Ah: float, overall_Ah: float | None = None,
                    overall_ci95: Sequence[float] | None = None, tz: str | None = None) -> go.Figure:
    """Usable capacity per discharge with its 95 % interval, the combined estimate and the rating [Ah].

    Parameters
    ----------
    estimates
        Rows with ``t`` (end of the discharge; or ``date``), ``usable_Ah`` and optionally
        ``lo_Ah``/``hi_Ah`` (its 95 % interval), ``start``, ``delta_soc_pct``, ``mean_discharge_A``.
    rated_Ah
        The bank's rated capacity, drawn as a reference line [Ah].
    overall_Ah, overall_ci95
        The combined estimate and interval, drawn as a line and a band when given.
    tz
        The site's zone: times are shown in it (and named in the axis title).

    Notes
    -----
    The reference lines are legend entries, not labels on the plot, so a label never
    sits on a point; the time axis spans at least a week, with dates as ticks.
    """
    has_points = estimates is not None and len(estimates) > 0
    if not has_points and (overall_Ah is None or not np.isfinite(overall_Ah)):
        return message_figure("No capacity estimate yet: it needs a discharge of at least 40 % between two "
                              "known states of charge (a full charge or a rested voltage).",
                              title="Usable capacity")
    fig = go.Figure()
    x = None
    if has_points:
        assert estimates is not None  # has_points
        x = pd.DatetimeIndex(pd.to_datetime(estimates["t"] if "t" in estimates else estimates["date"]))
        if x.tz is not None:
            x = x.tz_convert(tz or "UTC").tz_localize(None)
        err = None
        if "lo_Ah" in estimates and "hi_Ah" in estimates and estimates["lo_Ah"].notna().any():
            err = {"type": "data", "symmetric": False,
                   "array": (estimates["hi_Ah"] - estimates["usable_Ah"]).to_numpy(dtype=float),
                   "arrayminus": (estimates["usable_Ah"] - estimates["lo_Ah"]).to_numpy(dtype=float),
                   "color": PALETTE["soc"]}
        hover = []
        for r in estimates.itertuples(index=False):  # a loop over discharges (a handful)
            lo, hi = getattr(r, "lo_Ah", None), getattr(r, "hi_Ah", None)
            parts = [f"{r.usable_Ah:.0f} Ah"]
            if lo is not None and hi is not None and np.isfinite(lo):
                parts.append(f"95 % interval {lo:.0f}–{hi:.0f} Ah")
            if getattr(r, "delta_soc_pct", None) is not None:
                parts.append(f"over {r.delta_soc_pct:.0f} % of SoC")
            if getattr(r, "mean_discharge_A", None) is not None:
                parts.append(f"at {r.mean_discharge_A:.1f} A mean discharge")
            hover.append("<br>".join(parts))
        fig.add_trace(go.Scatter(x=x, y=estimates["usable_Ah"], mode="markers", name="one discharge (95 % interval)",
                                 error_y=err, marker={"color": PALETTE["soc"], "size": 9}, text=hover,
                                 hovertemplate="%{x|%d %b %Y %H:%M}<br>%{text}<extra></extra>"))
    lo_x, hi_x = (x.min(), x.max()) if x is not None and len(x) else (None, None)
    if lo_x is None:
        lo_x = hi_x = pd.Timestamp.now(tz=tz or "UTC").tz_localize(None).normalize()
    mid = lo_x + (hi_x - lo_x) / 2
    half = max((hi_x - lo_x) / 2 + pd.Timedelta(days=1), pd.Timedelta(days=3.5))
    span = [mid - half, mid + half]
    if overall_Ah is not None and np.isfinite(overall_Ah):
        if overall_ci95 is not None and len(overall_ci95) == 2 and None not in overall_ci95:
            fig.add_trace(go.Scatter(x=[span[0], span[1], span[1], span[0]],
                                     y=[overall_ci95[0], overall_ci95[0], overall_ci95[1], overall_ci95[1]],
                                     fill="toself", fillcolor=PALETTE["band"], line={"width": 0}, mode="lines",
                                     name="its 95 % interval", hoverinfo="skip"))
        fig.add_trace(go.Scatter(x=span, y=[overall_Ah] * 2, mode="lines", line={"color": PALETTE["soc"], "width": 2},
                                 name=f"estimate {overall_Ah:.0f} Ah", hoverinfo="skip"))
    fig.add_trace(go.Scatter(x=span, y=[rated_Ah] * 2, mode="lines",
                             line={"color": PALETTE["muted"], "dash": "dash", "width": 1},
                             name=f"rated {rated_Ah:.0f} Ah", hoverinfo="skip"))
    fig.update_yaxes(title_text="usable capacity [Ah]", rangemode="tozero")
    fig.update_xaxes(type="date", range=span, tickformat="%d %b", hoverformat="%d %b %Y %H:%M",
                     title_text=f"end of the discharge ({tz})" if tz else None)
    fig.update_layout(hovermode="closest")
    fig = _base_layout(fig, title="Usable capacity")
    if tz:
        fig.update_layout(legend_y=-0.24, margin_b=84)
    return fig


def resistance_figure(points: pd.DataFrame | None, *, overall_ohm: float | None = None) -> go.Figure:
    """Internal resistance estimates over time [mOhm]; rows with ``t`` and ``resistance_ohm``."""
    if (points is None or len(points) == 0) and overall_ohm is None:
        return message_figure("No internal-resistance estimate: it needs sudden current steps "
                              "in the log.", title="Internal resistance")
    fig = go.Figure()
    if points is not None and len(points):
        fig.add_trace(go.Scatter(x=pd.to_datetime(points["t"]), y=points["resistance_ohm"].to_numpy() * 1e3,
                                 mode="markers+lines", name="estimate",
                                 marker={"color": PALETTE["current"], "size": 6},
                                 line={"color": PALETTE["current"], "width": 1}))
    if overall_ohm is not None and np.isfinite(overall_ohm):
        fig.add_hline(y=overall_ohm * 1e3, line={"color": PALETTE["current"], "dash": "dot"},
                      annotation_text=f"{overall_ohm * 1e3:.1f} mΩ", annotation_position="top left")
    fig.update_yaxes(title_text="internal resistance [mΩ]", rangemode="tozero")
    return _base_layout(fig, title="Internal resistance")


def _log_ticks(values: Any) -> dict[str, Any]:
    """Tick values and labels at 1-2-5 steps covering ``values`` (a log axis)."""
    v = np.asarray(values, dtype=float)
    v = v[np.isfinite(v) & (v > 0)]
    if not v.size:
        return {}
    lo, hi = np.floor(np.log10(v.min())), np.ceil(np.log10(v.max()))
    ticks = [m * 10.0 ** e for e in np.arange(lo, hi + 1) for m in (1, 2, 5)]
    ticks = [t for t in ticks if v.min() / 1.01 <= t <= v.max() * 1.01]
    return {"tickvals": ticks, "ticktext": [f"{t:g}" for t in ticks], "minor": {"showgrid": False}}


def peukert_figure(current_A: Sequence[float] | None, hours: Sequence[float] | None, *, k: float | None,
                   capacity_Ah: float, rated_hours: float) -> go.Figure:
    """Runtime against discharge current on log-log axes with the Peukert line.

    Peukert's law in rated form: t = H (C_H / (I H))^k [h] (Peukert 1897).

    Parameters
    ----------
    current_A, hours
        Measured discharge currents [A] and runtimes [h] (may be empty).
    k
        Peukert exponent (fitted or the chemistry default).
    capacity_Ah, rated_hours
        C_H and H of the rated discharge.
    """
    fig = go.Figure()
    i_rated = capacity_Ah / rated_hours
    if k is None or not np.isfinite(k):
        return message_figure("No Peukert exponent available.", title="Peukert fit")
    i = np.geomspace(i_rated / 4, i_rated * 20, 60)
    t = rated_hours * (capacity_Ah / (i * rated_hours)) ** k
    fig.add_trace(go.Scatter(x=i, y=t, mode="lines", name=f"k = {k:.3f}", line={"color": PALETTE["soc"]}))
    ideal = capacity_Ah / i
    fig.add_trace(go.Scatter(x=i, y=ideal, mode="lines", name="k = 1 (no rate loss)",
                             line={"color": PALETTE["expected"], "dash": "dash"}))
    if current_A is not None and hours is not None and len(current_A):
        fig.add_trace(go.Scatter(x=list(current_A), y=list(hours), mode="markers", name="your discharges (fit)",
                                 marker={"color": PALETTE["consumed"], "size": 8}))
    # Labelled ticks at 1-2-5 steps only: plotly's own log ticks label every digit and collide on a phone.
    fig.update_xaxes(type="log", title_text="discharge current [A]", **_log_ticks(i))
    fig.update_yaxes(type="log", title_text="runtime to empty [h]", **_log_ticks(np.concatenate([t, ideal])))
    fig.update_layout(hovermode="closest")
    fitted = current_A is not None and len(current_A) > 0
    fig = _base_layout(fig, title="Peukert fit", subtitle=None if fitted else (
        "no fit: a default exponent; no two discharges at different rates"))
    # This plot has an x-axis title: move the legend clear of it.
    fig.update_layout(legend_y=-0.24, margin_b=84)
    return fig


# -- solar ---------------------------------------------------------------------------------

def solar_daily_figure(days: Sequence[Mapping[str, Any]]) -> go.Figure:
    """Measured against expected clear-sky solar energy per day [Wh]."""
    if not days:
        return message_figure("No solar days in this range.", title="Solar per day")
    df = pd.DataFrame(list(days))
    dates = pd.to_datetime(df["date"]).dt.strftime("%Y-%m-%d")
    fig = go.Figure()
    fig.add_trace(go.Bar(x=dates, y=df.get("expected_Wh"), name="expected, clear sky",
                         marker_color=PALETTE["expected"], opacity=0.55, hovertemplate="%{y:.0f} Wh"))
    sat = df["saturated_fraction"].fillna(0).to_numpy(dtype=float) if "saturated_fraction" in df else None
    fig.add_trace(go.Bar(x=dates, y=df.get("measured_Wh"), name="measured", marker_color=PALETTE["solar"],
                         customdata=sat, hovertemplate="%{y:.0f} Wh" + (
                             "<br>battery full %{customdata:.0%} of daylight" if sat is not None else "")))
    fig.update_layout(barmode="overlay", bargap=0.3)
    fig.update_xaxes(type="date", tickformat="%d %b", hoverformat="%a %d %b %Y",
                     dtick=86_400_000 if len(df) <= 10 else None)  # one label per day [ms]
    fig.update_yaxes(title_text="Wh per day")
    return _base_layout(fig, title="Solar per day: measured vs clear-sky expectation")


def _periods(mask: np.ndarray) -> list[tuple[int, int]]:
    """Start/stop index pairs of the runs of True in a boolean array."""
    m = np.concatenate([[False], np.asarray(mask, dtype=bool), [False]])
    edges = np.flatnonzero(np.diff(m.astype(np.int8)))
    return list(zip(edges[0::2], edges[1::2] - 1))


def solar_power_figure(t: Any, measured_W: Any, expected_W: Any | None = None, *,
                       saturated: Any | None = None, tz: str = "UTC", max_shaded: int = 200,
                       n_out: int = SCREEN_POINTS) -> go.Figure:
    """Solar power over time against the clear-sky expectation, saturated periods shaded.

    Parameters
    ----------
    t
        UTC timestamps.
    measured_W, expected_W
        Measured and expected power [W].
    saturated
        Boolean per timestamp: the battery was full so the controller held the
        array back (the shortfall there is not the array's fault).
    max_shaded
        At most this many shaded periods are drawn (the longest), to keep the
        figure light.
    """
    idx = pd.DatetimeIndex(t)
    if len(idx) == 0:
        return message_figure("No solar readings in this range.", title="Solar power")
    local = idx.tz_convert(tz).tz_localize(None)
    fig = go.Figure()
    if expected_W is not None:
        fig.add_trace(_line(local, expected_W, name="expected, clear sky", colour=PALETTE["expected"],
                            n_out=n_out, width=1.2))
    fig.add_trace(_line(local, measured_W, name="measured", colour=PALETTE["solar"], n_out=n_out))
    if saturated is not None:
        runs = _periods(np.asarray(saturated, dtype=bool))
        runs.sort(key=lambda r: r[1] - r[0], reverse=True)
        for lo, hi in runs[:max_shaded]:
            fig.add_vrect(x0=local[lo], x1=local[hi], fillcolor=PALETTE["saturated"], line_width=0, layer="below")
        if runs:
            fig.add_trace(go.Scatter(x=[None], y=[None], mode="markers", name="battery full (held back)",
                                     marker={"symbol": "square", "size": 12, "color": PALETTE["saturated"]}))
    fig.update_yaxes(title_text="power [W]", rangemode="tozero")
    return _base_layout(fig, title="Solar power")


# -- upgrade planner ---------------------------------------------------------------------

def autonomy_figure(present: Mapping[str, Any] | None, proposed: Mapping[str, Any] | None, *,
                    percentile: float = 90.0, horizon_days: float | None = None,
                    no_charge: bool = False) -> go.Figure:
    """Days parked from full to the reserve, at the median spell and at the design percentile: present vs proposed.

    Parameters
    ----------
    present, proposed
        Autonomy dicts with ``days_p50`` and ``days_p<percentile>`` [days].
    percentile
        The design percentile the planner was asked for (the second bar group).
    horizon_days
        The simulation's horizon: a bar at it reads "at least".
    no_charge
        True when the days count no charge at all (sizing without logs); else the
        days count the array's solar, with no driving or hook-up.
    """
    fig = go.Figure()
    rows = [("present", present, PALETTE["expected"]), ("proposed", proposed, PALETTE["soc"])]
    key = f"days_p{percentile:g}"
    drawn = False

    def label(v: float | None) -> str:
        if v is None:
            return "–"
        return f"≥ {horizon_days:g} d" if horizon_days is not None and v >= horizon_days else f"{v:.1f} d"

    for name, values, colour in rows:
        if not values:
            continue
        y = [values.get("days_p50"), values.get(key, values.get("days_p90") if percentile == 90 else None)]
        if all(v is None for v in y):
            continue
        drawn = True
        fig.add_trace(go.Bar(x=["median spell", f"{percentile:g} % of spells"], y=y, name=name, marker_color=colour,
                             text=[label(v) for v in y], textposition="outside", cliponaxis=False))
    if not drawn:
        return message_figure("No autonomy figures.", title="Days parked")
    fig.update_layout(barmode="group")
    fig.update_yaxes(title_text="days, full to reserve", rangemode="tozero")
    sub = ("no charge at all (no logs)" if no_charge
           else "with the array's solar on the logged days; no driving or hook-up")
    return _base_layout(fig, title="Days parked before the reserve", subtitle=sub, height=320)


# -- zoom ------------------------------------------------------------------------------------

def relayout_x_range(relayout: Mapping[str, Any] | None, *, tz: str = "UTC"
                     ) -> tuple[pd.Timestamp, pd.Timestamp] | str | None:
    """The time window a ``relayoutData`` event zoomed to, as UTC timestamps.

    Returns ``(start, end)`` for a zoom or pan, ``"reset"`` for a double-click
    (autorange), None for events that do not change the time axis (legend
    clicks, y-only zoom). Axis values are the naive local times the figures
    draw in ``tz``.
    """
    if not relayout:
        return None
    for axis in ("xaxis", "xaxis2"):
        lo = relayout.get(f"{axis}.range[0]")
        hi = relayout.get(f"{axis}.range[1]")
        if lo is None and isinstance(relayout.get(f"{axis}.range"), (list, tuple)):
            lo, hi = relayout[f"{axis}.range"][:2]
        if lo is not None and hi is not None:
            try:
                a, b = pd.Timestamp(lo), pd.Timestamp(hi)
            except (ValueError, TypeError):
                return None
            if a.tzinfo is None:
                a, b = a.tz_localize(tz, ambiguous="NaT", nonexistent="shift_forward"), \
                    b.tz_localize(tz, ambiguous="NaT", nonexistent="shift_forward")
            if a is pd.NaT or b is pd.NaT or pd.isna(a) or pd.isna(b):
                return None
            a, b = a.tz_convert("UTC"), b.tz_convert("UTC")
            return (a, b) if a < b else (b, a)
        if relayout.get(f"{axis}.autorange"):
            return "reset"
    return None
