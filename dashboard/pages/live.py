"""Live view: the bank right now -- voltage, current, power, state of charge, runtime left, the last hour.

Until a live collector writes into the store this shows the newest stored
readings in a "not live" state of its own: how old they are, no all-clear. Refreshes every few seconds with
``dcc.Interval``; the work is in :meth:`dashboard.data.DataSource.live`.
"""

from __future__ import annotations

from typing import Any

import dash
import pandas as pd
from dash import Input, Output, callback, dcc, html

from drawdown.dashboard import figures, ids, labels
from drawdown.dashboard.data import DataSource, LiveSnapshot, current
from drawdown.dashboard.pages._parts import card, fmt, graph, notice, page_head

dash.register_page(__name__, path="/", name="Now", title="drawdown - now", order=0)

#: Refresh period of the live view [ms].
REFRESH_MS = 5000


def layout(**_kwargs: Any) -> html.Div:
    return html.Div([
        page_head("Now", "The bank at its newest reading: live while a collector writes, else the last known state."),
        html.Div(id=ids.LIVE_STAMP, className="stamp"),
        html.Div(id=ids.LIVE_ALARM),
        html.Div(id=ids.LIVE_TILES, className="cards"),
        html.Div(id=ids.LIVE_RUNTIME, className="cards"),
        graph(ids.LIVE_GRAPH),
        dcc.Interval(id=ids.LIVE_INTERVAL, interval=REFRESH_MS, n_intervals=0),
    ])


def _age(t: pd.Timestamp, now: Any = None) -> str:
    age = (pd.Timestamp.now(tz="UTC") if now is None else pd.Timestamp(now)) - t
    s = age.total_seconds()
    if s < 120:
        return "just now"
    if s < 7200:
        return f"{s / 60:.0f} minutes ago"
    if s < 2 * 86400:
        return f"{s / 3600:.0f} hours ago"
    return f"{s / 86400:.0f} days ago"


def _hours(h: float | None) -> str:
    if h is None:
        return "–"
    if h >= 48:
        return f"{h / 24:.1f} days"
    return f"{int(h)} h {int(round((h % 1) * 60)):02d} min"


def _days(d: float | None) -> str:
    return fmt(d, "days", 1) if d is None or d < 30 else "30+ days"


def render_live(source: DataSource, *, now: Any = None) -> tuple[Any, Any, Any, Any, Any]:
    """(stamp, alarm, tiles, runtime cards, figure) for the live view; a plain function tests call.

    ``now`` (UTC, default the clock) decides whether the newest reading is live or
    stale; stale data gets its own state: no "all clear", figures said to be as of
    the newest reading.
    """
    snap: LiveSnapshot = source.live(now=now)
    tz = source.timezone()
    if snap.t is None:
        msg = notice(list(snap.notes) or ["No readings."], kind="warn")
        return "", msg, [], [], figures.message_figure("No readings stored yet.", title="Last hour")
    when = labels.local_time(snap.t, tz, seconds=True)
    stamp: html.Span | str
    if snap.stale:
        stamp = html.Span([html.Strong("Not live. "), f"Newest reading {when}, {_age(snap.t, now)}: the figures "
                           "below are the bank as it was then, not now. Start `drawdown collect` (or import a newer "
                           "log) to see it now."], className="stale")
        alarm = notice(["Old data: alarms are only checked on live readings."]
                       + [f"At the newest reading: {a}" for a in snap.alarms], kind="warn")
    else:
        stamp = f"Live: newest reading {when}, {_age(snap.t, now)}; refreshes every {REFRESH_MS // 1000} s."
        if snap.alarms:
            alarm = notice(list(snap.alarms), kind="error")
        else:
            alarm = html.Div("No alarm: voltage and draw are in their usual range.", className="all-clear")
    charging = snap.current_A is not None and snap.current_A > 0.05
    tiles = [
        card("Voltage", fmt(snap.voltage_V, "V", 2)),
        card("Current", fmt(snap.current_A, "A", 1), "charging" if charging else "discharging"
             if snap.current_A is not None and snap.current_A < -0.05 else "at rest"),
        card("Power", fmt(snap.power_W, "W", 0)),
        card("State of charge", fmt(snap.soc_pct, "%", 0), snap.soc_source or None),
    ]
    if snap.temperature_C is not None:
        tiles.append(card("Battery temperature", fmt(snap.temperature_C, "°C", 1)))
    # Runtimes count down to the reserve, the lowest planned state of charge (1 - max_dod).
    to_reserve = f", down to the {snap.reserve_pct:.0f} % reserve" if snap.reserve_pct is not None else ""
    use = f"a typical day uses {fmt(snap.typical_day_Ah, 'Ah', 0)}" if snap.typical_day_Ah else None
    charged = (f"and charges {fmt(snap.typical_day_charged_Ah, 'Ah', 0)}"
               if snap.typical_day_charged_Ah is not None else None)
    runtime = [
        card("Runtime left at this draw", _hours(snap.runtime_at_draw_h),
             "charging: not running down" if snap.draw_A is not None and snap.draw_A >= -0.05
             else f"at {fmt(-snap.draw_A if snap.draw_A is not None else None, 'A', 1)} (5-minute mean)"
             + to_reserve),
        card("Days left with no charging", _days(snap.runtime_no_charging_days),
             " ".join(x for x in (use, "and nothing charges" if use else None) if x) + to_reserve if use else None),
        card("Days left with typical charging", _days(snap.runtime_typical_days),
             (f"{use} {charged}; if the charging of the last fortnight continues" if use and charged else None)),
        card("Charge left above the reserve", fmt(snap.remaining_Ah, "Ah", 0),
             f"reserve: {snap.reserve_pct:.0f} % state of charge (max_dod in system.toml)"
             if snap.reserve_pct is not None else None),
    ]
    if snap.notes:
        runtime.append(html.Div(notice(list(snap.notes), kind="info"), className="card-wide"))
    fig = figures.live_figure(snap.readings, low_voltage_V=snap.low_voltage_V, tz=tz,
                              title="The hour up to the newest reading" if snap.stale else None)
    return stamp, alarm, tiles, runtime, fig


@callback(
    Output(ids.LIVE_STAMP, "children"),
    Output(ids.LIVE_ALARM, "children"),
    Output(ids.LIVE_TILES, "children"),
    Output(ids.LIVE_RUNTIME, "children"),
    Output(ids.LIVE_GRAPH, "figure"),
    Input(ids.LIVE_INTERVAL, "n_intervals"),
)
def refresh(_n: int) -> tuple[Any, Any, Any, Any, Any]:
    return render_live(current())
