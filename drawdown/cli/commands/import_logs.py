"""``drawdown import FILE... [--tz ZONE] [--channel NAME] [--map COLUMN=QUANTITY]... [--invert CHANNEL] [--json]``

Ingest log files and print a data-quality summary per file. Exit 0 when every file was usable
(also when it was already imported), 2 when any file was unusable (nothing of that file is
stored; the other files are still imported and say so).
"""

from __future__ import annotations

import argparse
import errno
import sqlite3
from pathlib import Path
from typing import TYPE_CHECKING, Any
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from drawdown.collector.columns import ColumnSpec, normalise_channel, parse_map_option

if TYPE_CHECKING:
    from drawdown.collector.csv_file import ImportResult
from drawdown.cli.progress import ByteBar
from drawdown.cli.context import Context, UsageError, print_json, warn
from drawdown.dashboard.labels import local_time, plural

NAME = "import"
HELP = "ingest log files; prints a data-quality summary"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("files", nargs="+", metavar="FILE")
    s.add_argument("--tz", metavar="ZONE", help="timezone of local timestamps (default: the system's)")
    s.add_argument("--channel", metavar="NAME", help="channel name for a file whose columns carry none")
    s.add_argument("--map", action="append", default=[], metavar="COLUMN=QUANTITY",
                   help="force a column's meaning, e.g. 'Amps=current_A' or 'I_sol=solar.current_mA'")
    s.add_argument("--invert", action="append", default=[], metavar="CHANNEL",
                   help="flip the sign of a channel's current")
    s.add_argument("--json", action="store_true")


#: Files smaller than this import too fast for a bar to help [bytes].
PROGRESS_MIN_BYTES = 16 << 20


def _column_map(options: list[str]) -> dict[str, ColumnSpec]:
    out: dict[str, ColumnSpec] = {}
    for text in options:
        try:
            name, spec = parse_map_option(text)
        except ValueError as exc:
            raise UsageError(str(exc)) from None
        out[name] = spec
    return out


def _unusable_entry(path: str, message: str) -> dict[str, Any]:
    return {"path": path, "usable": False, "error": message, "rows_stored": 0, "rows_rejected": 0,
            "rejected_by_reason": {}, "already_imported": False, "channels": [], "sign_inverted": [],
            "sample_interval_s": None, "gaps": [], "quarantine": None, "rows_already_held": 0, "rows_added": 0}


def _human(r: ImportResult, tz: str | None = None) -> str:
    """The summary a person reads: times in the site's zone (``tz``, else UTC) with the zone named."""
    shown_tz = tz or "UTC"
    lines = [f"{r.path}"]
    if r.already_imported:
        lines.append("  already imported (same content, sha256 match): nothing added")
        return "\n".join(lines)
    lines.append(f"  data lines {r.data_lines}: stored {r.rows_stored}, rejected {r.rows_rejected}"
                 + (f" (of which duplicates {r.duplicates})" if r.duplicates else ""))
    if r.rows_already_held:
        lines.append(f"  {r.rows_already_held} of the stored lines were already held (the same channel, time "
                     f"and values, from an earlier import): not written again; {r.rows_added} added"
                     + (" - nothing new" if r.rows_added == 0 else ""))
    for why, n in r.rejected_by_reason.items():
        lines.append(f"    {why:<24} {n}")
    extras = [plural(n, what) for n, what in ((r.header_lines, "header line"), (r.blank_lines, "blank line"),
                                              (r.preamble_lines, "preamble line")) if n]
    if extras:
        lines.append("  not data: " + ", ".join(extras))
    if r.out_of_order_rows:
        lines.append(f"  {plural(r.out_of_order_rows, 'row')} {'was' if r.out_of_order_rows == 1 else 'were'} "
                     "out of time order (sorted)")
    lines.append(f"  channels: {', '.join(r.channels) or '(none)'}")
    if (r.encoding or "").startswith("utf-16") or r.line_ends == "cr":
        lines.append(f"  read as {(r.encoding or 'text').upper().replace('-LE', ' LE').replace('-BE', ' BE')}"
                     + (", lines ended by CR alone" if r.line_ends == "cr" else ""))
    lines.append("  columns: " + ", ".join(f"{k} -> {v}" for k, v in r.columns.items()))
    if r.columns_ignored:
        lines.append("  ignored: " + ", ".join(r.columns_ignored))
    if r.time_span:
        read_as = ("each time carried its UTC offset" if str(r.timezone_used).startswith("UTC (")
                   else f"times in the file read as {r.timezone_used}")
        lines.append(f"  time span: {local_time(r.time_span['start'], shown_tz, seconds=True)} .. "
                     f"{local_time(r.time_span['end'], shown_tz, seconds=True)} ({shown_tz}; {read_as})")
    if r.sample_interval_s is not None:
        lines.append(f"  sample interval: {r.sample_interval_s:g} s (median)")
    if r.gaps_total:
        lines.append(f"  gaps longer than 5 sample intervals: {r.gaps_total}")
        for g in r.gaps[:5]:
            lines.append(f"    {local_time(g.start, shown_tz, seconds=True)} .. "
                         f"{local_time(g.end, shown_tz, seconds=True)} ({g.seconds:g} s)")
        if r.gaps_total > 5:
            lines.append(f"    ... and {r.gaps_total - 5} more (see --json)")
    for ch, why in r.sign_evidence.items():
        flag = "INVERTED" if ch in r.sign_inverted else "kept"
        lines.append(f"  sign of {ch}: {flag} - {why}")
    if r.quarantine:
        lines.append(f"  rejected lines with line number and reason: {r.quarantine}")
    return "\n".join(lines)


def run(args: Any, ctx: Context) -> int:
    from drawdown.collector.csv_file import NothingStored, UnusableInput
    from drawdown.collector.importing import import_log
    from drawdown.collector.store import _is_full, _is_read_only, describe_store_error

    column_map = _column_map(args.map)
    channel = None
    if args.channel:
        try:
            channel = normalise_channel(args.channel)
        except ValueError as exc:
            raise UsageError(f"--channel: {exc}") from None
    invert = set()
    for name in args.invert:
        try:
            invert.add(normalise_channel(name))
        except ValueError as exc:
            raise UsageError(f"--invert: {exc}") from None
    tz = args.tz
    nominal = None
    if ctx.has_system():
        system = ctx.load_system()
        tz = tz or system.site.timezone
        nominal = system.battery.nominal_voltage_V
    if tz is not None:
        try:
            ZoneInfo(tz)
        except (ZoneInfoNotFoundError, ValueError):
            raise UsageError(f"--tz {tz!r}: unknown IANA timezone (e.g. 'Europe/Oslo', 'America/Denver', 'UTC')") from None

    store = ctx.open_store()
    results: list[dict[str, Any]] = []
    unusable = 0
    try:
        for name in args.files:
            path = Path(name)
            try:
                size = path.stat().st_size
            except OSError:
                size = 0
            bar = ByteBar(path.name, size, min_bytes=PROGRESS_MIN_BYTES)
            try:
                r = import_log(path, store, tz=tz, channel=channel, column_map=column_map,
                                                 invert=invert, nominal_voltage_V=nominal, progress=bar)
            except sqlite3.OperationalError as exc:
                bar.close()
                if not (_is_full(exc) or _is_read_only(exc)):
                    raise
                # Not the file's fault and not a bug: say so in plain words (nothing of it was stored).
                raise UsageError(describe_store_error(store.path, exc, doing=f"store {path}")) from None
            except OSError as exc:
                bar.close()
                beside_store = str(exc.filename or "").startswith(str(store.path.parent.resolve()))
                if exc.errno == errno.ENOSPC or beside_store:  # the quarantine or scratch copy
                    raise UsageError(describe_store_error(store.path, exc, doing=f"store {path}")) from None
                raise UsageError(f"{path}: cannot read the file ({exc.strerror or exc})") from None
            except UnusableInput as exc:
                bar.close()
                unusable += 1
                if isinstance(exc, NothingStored):  # every line rejected: say why, line by line aside
                    results.append({**exc.result.to_json(), "usable": False, "error": str(exc)})
                else:
                    results.append(_unusable_entry(str(path), str(exc)))
                if not args.json:
                    print(f"{path}\n  UNUSABLE, nothing stored: {exc}")
                    if isinstance(exc, NothingStored):
                        for why, n in exc.result.rejected_by_reason.items():
                            print(f"    {why:<24} {n}")
                        if exc.result.quarantine:
                            print(f"  rejected lines with line number and reason: {exc.result.quarantine}")
                else:
                    warn(f"drawdown import: {exc}")
                continue
            bar.close()
            entry = {**r.to_json(), "usable": True}
            results.append(entry)
            if r.timezone_assumed:
                warn(f"drawdown import: {path}: times carry no UTC offset and neither --tz nor a system.toml "
                     "timezone was given: they were read as UTC. Re-import with --tz ZONE if that is wrong.")
            for ch in sorted(invert - set(r.channels)):
                if not r.already_imported:
                    warn(f"drawdown import: {path}: --invert {ch}: no such channel in this file")
            if not args.json:
                print(_human(r, tz))
    finally:
        store.close()
    if args.json:
        print_json({"files": results})
    elif unusable:
        ok = len(results) - unusable
        print(f"{unusable} of {len(results)} files unusable (nothing stored from them); "
              f"{plural(ok, 'usable file')} imported.")
    return 2 if unusable else 0
