"""``drawdown report [--from DATE] [--to DATE] [--json] [--html FILE]``: the analysis of what is stored.

DATE is a local calendar date in the site's timezone (system.toml ``site.timezone``);
``--to`` is inclusive. ``--json`` prints the report object only; ``--html FILE`` also
writes a self-contained, offline HTML report (plotly.js inline).
"""

from __future__ import annotations

import argparse
import datetime as dt
import os
from pathlib import Path
from typing import TYPE_CHECKING, Any

from drawdown.cli.progress import stages
from drawdown.cli.context import Context, UsageError, print_json, warn
from drawdown.dashboard.labels import chemistry, for_people, local_time, plural

if TYPE_CHECKING:
    import pandas as pd


NAME = "report"
HELP = "the analysis of what is stored"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("--from", dest="date_from", metavar="DATE")
    s.add_argument("--to", dest="date_to", metavar="DATE")
    s.add_argument("--json", action="store_true")
    s.add_argument("--html", metavar="FILE", help="also write a self-contained HTML report")


def _local_bound(text: str | None, tz: str, *, end: bool, option: str) -> pd.Timestamp | None:
    if text is None:
        return None
    try:
        day = dt.date.fromisoformat(text)
    except ValueError:
        raise UsageError(f"{option} {text!r}: expected a date as YYYY-MM-DD (local, site timezone {tz})") from None
    if end:
        day = day + dt.timedelta(days=1)  # --to is inclusive: up to the next local midnight
    import pandas as pd

    return pd.Timestamp(day).tz_localize(tz, nonexistent="shift_forward", ambiguous=True).tz_convert("UTC")


def html_target(text: str) -> Path:
    """The ``--html`` file, checked before any analysis runs; UsageError when it cannot be written.

    A folder, a missing parent folder (never created behind the user's back: a typo in the
    path would silently make a tree) and a place this user cannot write are refused.
    """
    path = Path(text)
    if path.is_dir() or text.endswith(("/", os.sep)):
        raise UsageError(f"--html {text}: is a folder; give a file name, e.g. --html {path / 'report.html'}")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.exists():
        raise UsageError(f"--html {text}: the folder {parent} does not exist; create it first or choose "
                         "another place")
    if not parent.is_dir():
        raise UsageError(f"--html {text}: {parent} is not a folder")
    if not os.access(parent, os.W_OK | os.X_OK) or (path.exists() and not os.access(path, os.W_OK)):
        raise UsageError(f"--html {text}: this user may not write there; choose another place")
    return path


def _write_html_report(report: Any, path: Path, system: Any, sizing: Any = None) -> Path:
    from drawdown.dashboard.html_report import write_html

    try:
        return write_html(report, path, system=system, solar=report.solar_analysis, sizing=sizing)
    except OSError as exc:  # e.g. /proc, a read-only or full disk: the place, not our code
        raise UsageError(f"--html {path}: cannot write the report there ({exc.strerror or exc})") from None


def _html_sizing(readings: Any, system: Any) -> Any:
    """The sizing the HTML report opens with: ``drawdown size``'s answer at its default targets, or None."""
    from drawdown.analysis.answers import DEFAULT_AUTONOMY_DAYS, DEFAULT_PERCENTILE, size_answer
    from drawdown.analysis.sizing import SizingInputError

    try:
        return size_answer(readings, system, autonomy_days=DEFAULT_AUTONOMY_DAYS, percentile=DEFAULT_PERCENTILE)
    except SizingInputError as exc:
        warn(f"drawdown report: the HTML report has no sizing section ({exc})")
        return None


def date_range(args: Any, ctx: Context, tz: str) -> tuple[Any, Any]:
    """``--from``/``--to`` as UTC bounds of local days in ``tz`` (None for an open end), checked in
    order, and the store checked to exist: what ``report`` and ``export`` read readings by."""
    start = _local_bound(getattr(args, "date_from", None), tz, end=False, option="--from")
    end = _local_bound(getattr(args, "date_to", None), tz, end=True, option="--to")
    if start is not None and end is not None and end <= start:
        raise UsageError(f"--to {args.date_to} is before --from {args.date_from}")
    if not ctx.store_path.exists():
        raise UsageError(f"{ctx.store_path}: the store is empty; import a log first ('drawdown import FILE')")
    return start, end


def _no_readings_message(store_path: Path, span: Any, tz: str, args: Any) -> str:
    """Why a report has nothing to show: an empty store, or dates outside what it holds (said in local dates)."""
    if span is None:
        return f"{store_path}: no readings stored; import a log first ('drawdown import FILE')"
    first, last = (t.tz_convert(tz).date().isoformat() for t in span)
    picked = " ".join(x for x in (f"--from {args.date_from}" if getattr(args, "date_from", None) else "",
                                  f"--to {args.date_to}" if getattr(args, "date_to", None) else "") if x)
    return (f"{store_path}: no readings in the selected dates ({picked}); the store holds readings from {first} "
            f"to {last} ({tz}): pick dates inside that span")


def run(args: Any, ctx: Context) -> int:
    from drawdown.analysis.report import REPORT_STEPS, build_report

    html_path = html_target(args.html) if args.html else None
    system = ctx.load_system()
    tz = system.site.timezone
    start, end = date_range(args, ctx, tz)
    store = ctx.open_store()
    try:
        readings = store.read(start, end)
        rows_rejected = sum(int(i["rows_rejected"]) for i in store.imports())
        span = store.time_span()
    finally:
        store.close()
    if readings.empty:
        raise UsageError(_no_readings_message(ctx.store_path, span, tz, args))
    # Input was validated above; a ValueError from the analysis now is a bug (exit 1), not bad input.
    with stages("analysing", list(REPORT_STEPS)) as step:
        report = build_report(readings, system, rows_rejected=rows_rejected, progress=step)
    obj = report.to_json()
    if html_path is not None:
        path = _write_html_report(report, html_path, system, sizing=_html_sizing(readings, system))
        warn(f"wrote {path}")
    if args.json:
        print_json(obj)
        return 0
    print("\n".join(describe(obj)))
    return 0


def _f(x: Any, fmt: str = ".1f", none: str = "-") -> str:
    return none if x is None else format(x, fmt)


def _pct(share: float | None) -> str:
    return "-" if share is None else f"{100 * share:.0f}"


#: What the single-shunt 95 % range held on the report half of the independent test logs
#: (benchmarks/independent_accuracy.py --half report; docs/validation.md).
SINGLE_RANGE_HELD = "96 %"


def describe(j: dict) -> list[str]:
    """The human summary of a report object (plain text, one line per day)."""
    p, dq, b, rt = j["period"], j["data_quality"], j["battery"], j.get("runtime", {})
    tz = p.get("timezone") or "UTC"
    out = [f"period: {local_time(p['start'], tz)} to {local_time(p['end'], tz)} ({p['days']} local days, {tz})",
           (f"data quality: {dq['rows_stored']:,} rows stored, {dq['rows_rejected']:,} rejected, "
            f"{plural(len(dq['gaps']), 'gap')}; {plural(int(dq.get('complete_days', 0)), 'complete day')}; "
            f"mode: {dq.get('mode', '')}")]
    for g in dq["gaps"][:10]:
        out.append(f"  gap on {g.get('channel', '?')}: {local_time(g['start'], tz)} to {local_time(g['end'], tz)} "
                   f"({g['seconds']:.0f} s) - energy unknown")
    if len(dq["gaps"]) > 10:
        out.append(f"  ... and {len(dq['gaps']) - 10} more gaps")
    for note in dq.get("notes", []):
        out.append(f"  note: {for_people(note)}")
    out.append("")
    ranged = any(d.get("consumed_Ah_pi95") for d in j["days"])
    inferred = dq.get("mode") == "single-shunt"  # the load was estimated where a source charged
    head = (f"{'date':<10} {'full':>4} {'used Ah':>8} " + (f"{'95 % range':>11} " if ranged else "")
            + f"{'used Wh':>8} {'solar Ah':>8} {'alt Ah':>7} "
            f"{'shore Ah':>8} {'other Ah':>8} {'SoC min %':>9} {'SoC end %':>9}"
            + (f" {'unseen h':>8} {'seen %':>6}" if inferred else ""))
    out += [head, "-" * len(head)]
    for d in j["days"]:
        c = d["charged_Ah"]
        rng = ""
        if ranged:
            lo_hi = d.get("consumed_Ah_pi95")
            rng = f"{(f'{lo_hi[0]:.0f}-{lo_hi[1]:.0f}' if lo_hi else '-'):>11} "
        out.append(f"{d['date']:<10} {'yes' if d['complete'] else 'no':>4} {_f(d['consumed_Ah']):>8} {rng}"
                   f"{_f(d['consumed_Wh'], '.0f'):>8} {_f(c['solar']):>8} {_f(c['alternator']):>7} "
                   f"{_f(c['shore']):>8} {_f(c['other']):>8} {_f(d['soc_min_pct']):>9} {_f(d['soc_end_pct']):>9}"
                   + (f" {_f(d.get('hidden_load_h'), '.1f'):>8} {_pct(d.get('observed_load_share')):>6}"
                      if inferred else ""))
    if ranged and not inferred:
        out.append("(every load measured: the 95 % range is what the shunts' own zero offset and gain leave; "
                   "see the note on the zero offset above)")
    if inferred:
        out.append("(one shunt: the load is hidden while a source charges and is estimated; the 95 % range is "
                   f"where the day's use should lie - on test logs made by other means it held {SINGLE_RANGE_HELD} "
                   "of days; unseen h = hours whose load was estimated, seen % = share of the day's use measured "
                   "directly)")
        unseen = [d for d in j["days"] if d.get("hidden_load_note")]
        if unseen:
            out.append(f"On {plural(len(unseen), 'day')} the load was not seen for more than an hour: "
                       f"{unseen[0]['hidden_load_note'].split(': ', 1)[-1]}.")
    out.append("")
    out.append(f"battery ({chemistry(b.get('chemistry'))}): rated {_f(b['rated_Ah'], '.0f')} Ah")
    if b["usable_Ah"] is not None:
        lo, hi = b["usable_Ah_ci95"] or (None, None)
        out.append(f"  usable capacity {_f(b['usable_Ah'])} Ah (95 % interval {_f(lo)}-{_f(hi)} Ah), "
                   f"state of health {_f(b['state_of_health_pct'], '.0f')} %")
    else:
        out.append(f"  usable capacity: unknown - {for_people(b.get('usable_Ah_why'))}")
    out.append(f"  Peukert exponent {_f(b['peukert_k'], '.3f')} ({b.get('peukert_k_source')})"
               + (f" - {for_people(b['peukert_k_why'])}" if b.get("peukert_k_why") else ""))
    if b["internal_resistance_ohm"] is not None:
        trend = b.get("internal_resistance_trend_ohm_per_30d")
        out.append(f"  internal resistance {1000 * b['internal_resistance_ohm']:.1f} mΩ"
                   + (f", trend {1000 * trend:+.2f} mΩ per 30 days" if trend is not None else ""))
    else:
        out.append(f"  internal resistance: unknown - {for_people(b.get('internal_resistance_ohm_why'))}")
    dis = j.get("device_soc_disagreement_days") or []
    if dis:
        out.append("  the monitor's own SoC disagrees by > 5 % on: " + ", ".join(d["date"] for d in dis))
    out.append("")
    if rt:
        out.append(f"runtime left (SoC now {_f(rt.get('soc_now_pct'), '.0f')} %, {_f(rt.get('usable_left_Ah'))} Ah "
                   f"usable above the {rt.get('reserve_pct', 100 * (1 - rt.get('max_dod', 0))):.0f} % reserve, "
                   f"{rt.get('capacity_source')}):")
        if rt.get("hours_at_present_draw") is not None:
            out.append(f"  at this draw ({_f(-rt['present_draw_A'], '.2f')} A): {_f(rt['hours_at_present_draw'])} h")
        else:
            out.append(f"  at this draw: - ({rt.get('hours_at_present_draw_why')})")
        if rt.get("days_without_charging") is not None:
            out.append(f"  typical day uses {_f(rt['typical_day_consumed_Ah'])} Ah: "
                       f"{_f(rt['days_without_charging'])} days with no charging"
                       + (f", {_f(rt['days_at_typical_day'])} days with typical charging"
                          if rt.get("days_at_typical_day") is not None else ""))
        if rt.get("days_why"):
            out.append(f"  ({rt['days_why']})")
    s = j.get("solar") or {}
    if s.get("performance_ratio") is not None:
        out.append(f"solar performance ratio {s['performance_ratio']:.2f} (measured / expected for the site and sky)")
    else:
        out.append(f"solar performance ratio: - ({s.get('performance_ratio_why', 'not available')})")
    findings = (j.get("charging") or {}).get("findings") or []
    if findings:
        out.append("")
        out.append("charging:")
        out.extend(f"  {for_people(f)}" for f in findings)
    for caution in j.get("cautions") or []:
        out.append(f"CAUTION: {for_people(caution)}")
    return out
