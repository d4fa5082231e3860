"""``drawdown collect``: live collection from a serial line, Bluetooth LE or MQTT into the store.

Runs until SIGTERM/SIGINT (or ``--duration``), flushing the last batch before
it exits. Progress and warnings go to stderr; at the end one summary line goes
to stdout. Exit 0 after a clean stop, 2 for bad options or a source this
computer cannot use (e.g. no Bluetooth stack).
"""

from __future__ import annotations

import argparse
import logging
import signal
import sys
import threading
from typing import Any

from drawdown.cli.context import Context, UsageError, print_json


NAME = "collect"
HELP = "live collection into the store"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    g = s.add_mutually_exclusive_group(required=True)
    g.add_argument("--serial", metavar="PORT")
    g.add_argument("--ble", metavar="ADDRESS")
    g.add_argument("--mqtt", metavar="URL")
    s.add_argument("--baud", type=int, default=9600)
    s.add_argument("--format", choices=["csv", "keyvalue", "jsonl", "nmea"], default=None,
                   help="line format (default: detected from the first lines)")
    s.add_argument("--channel", default="battery", help="channel name for readings that carry none")
    s.add_argument("--topic", action="append", default=[], help="MQTT topic filter (default '#')")
    s.add_argument("--columns", default=None,
                   help="fixed column order for headerless csv lines, e.g. 'voltage_V,current_A'")
    s.add_argument("--duration", type=float, default=None, help="stop after this many seconds")
    s.add_argument("--line-ending", choices=["any", "lf", "crlf", "cr"], default="any",
                   help="serial line terminator (default: any of CR, LF, CR LF)")
    s.add_argument("--keep-full-days", type=float, default=None, metavar="N",
                   help="keep N days at full resolution; older live readings become 1-minute summaries")
    s.add_argument("--json", action="store_true", help="print the collection summary as one JSON object")


def build_source(args: Any, ctx: Context, clock: Any) -> Any:
    """The source the options ask for; UsageError naming the bad option."""
    from drawdown.collector.columns import normalise_channel
    from drawdown.collector.lines import AutoParser, make_parser, parse_columns_option

    try:
        channel = normalise_channel(args.channel)
    except ValueError as exc:
        raise UsageError(f"--channel: {exc}") from None
    if args.serial:
        from drawdown.collector.serial_port import SerialSource

        columns = None
        if args.columns:
            try:
                columns = parse_columns_option(args.columns)
            except ValueError as exc:
                raise UsageError(str(exc)) from None
        if args.format:
            parser = make_parser(args.format, channel=channel, columns=columns)
        else:
            parser = AutoParser(channel=channel, columns=columns,
                                on_detect=lambda fmt: logging.getLogger("drawdown.collect").warning(
                                    "line format detected: %s (force it with --format)", fmt))
        if args.baud <= 0:
            raise UsageError(f"--baud {args.baud}: expected a positive baud rate such as 9600 or 115200")
        return SerialSource(args.serial, parser, baud=args.baud, clock=clock,
                            line_ending=_line_ending(getattr(args, "line_ending", None)))
    if args.mqtt:
        from drawdown.collector.mqtt import MqttSource

        try:
            return MqttSource(args.mqtt, topics=args.topic or ["#"], channel=channel, clock=clock)
        except ValueError as exc:
            raise UsageError(str(exc)) from None
    from drawdown.collector.ble import BleSource
    from drawdown.collector.gatt import GattError, layouts_from_system

    layouts = {}
    if ctx.has_system():
        try:
            layouts = layouts_from_system(ctx.load_system().ble)
        except GattError as exc:
            raise UsageError(f"{ctx.system_path}: [ble] {exc}") from None
    return BleSource(args.ble, channel=channel, layouts=layouts, clock=clock)


def _line_ending(name: str | None) -> bytes | None:
    return {None: None, "any": None, "lf": b"\n", "crlf": b"\r\n", "cr": b"\r"}[name]


def run(args: Any, ctx: Context) -> int:
    from drawdown.collector.clock import HostClock
    from drawdown.collector.collect import run_collector
    from drawdown.collector.source import SourceUnavailable
    from drawdown.collector.writer import BatchWriter

    logging.basicConfig(level=logging.WARNING, stream=sys.stderr, format="drawdown collect: %(message)s")
    if args.duration is not None and args.duration <= 0:
        raise UsageError(f"--duration {args.duration}: expected a positive number of seconds")
    keep_days = getattr(args, "keep_full_days", None)
    if keep_days is not None and keep_days <= 0:
        raise UsageError(f"--keep-full-days {keep_days}: expected a positive number of days")
    clock = HostClock()
    source = build_source(args, ctx, clock)
    store = ctx.open_store(synchronous="FULL", timeout_s=5.0)
    writer = BatchWriter(store, source_name=source.name, clock=clock)
    stop = threading.Event()

    def on_signal(signum: int, _frame: Any) -> None:
        stop.set()

    old = {s: signal.signal(s, on_signal) for s in (signal.SIGTERM, signal.SIGINT)}
    what = args.serial or args.mqtt or args.ble
    print(f"drawdown collect: collecting from {source.name} {what} into {store.path}", file=sys.stderr, flush=True)
    try:
        result = run_collector(source, writer, stop=stop, duration_s=args.duration,
                               keep_full_s=None if keep_days is None else keep_days * 86_400.0)
    except SourceUnavailable as exc:
        raise UsageError(str(exc)) from None
    finally:
        for s, h in old.items():
            signal.signal(s, h)
        store.close()
    st = result.stats
    if getattr(args, "json", False):
        print_json({"source": source.name, "address": what, "store": str(store.path),
                    "rows_written": st.rows_written, "rows_rejected": st.rows_rejected,
                    "quarantine": str(writer.quarantine_path) if st.rows_rejected else None,
                    "channels": sorted(st.channels), "seconds": round(result.seconds, 3), "gaps": st.gaps,
                    "rows_dropped": st.rows_dropped, "clock_jumps": st.clock_jumps})
        return 0
    rejected = f"{st.rows_rejected} lines rejected"
    if st.rows_rejected:
        rejected += f" (see {writer.quarantine_path})"
    print(f"collected {st.rows_written} readings on {', '.join(sorted(st.channels)) or 'no channel'}"
          f" in {result.seconds:.0f} s; {rejected}; {st.gaps} gaps; {st.rows_dropped} dropped;"
          f" {st.clock_jumps} clock jumps")
    return 0
