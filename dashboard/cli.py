"""The ``drawdown`` command line (DESIGN.md: a contract).

``drawdown [--store PATH] [--system PATH] COMMAND ...``

Each command lives in ``dashboard/commands/<name>.py`` as ``run(args, ctx) -> int``.
stdout belongs to the command's result (one JSON object with ``--json``);
progress, warnings and errors go to stderr. Exit codes: 0 success, 1 internal
error, 2 bad input or usage.
"""

from __future__ import annotations

import argparse
import importlib
import sys
import traceback

from dashboard.context import Context, UsageError


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="drawdown",
        description="Battery-bank logs in; energy ledger, battery health, solar yield and sizing advice out.",
    )
    p.add_argument("--store", metavar="PATH", help="reading store (default: a file in the user data folder)")
    p.add_argument("--system", metavar="PATH", help="system description (default: system.toml beside the store)")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True

    s = sub.add_parser("demo", help="simulate the bundled scenario, import, analyse, serve the dashboard")
    s.add_argument("--no-serve", action="store_true", help="print the summary and stop")
    s.add_argument("--scenario", default=None, help="bundled scenario name (default: the first)")
    s.add_argument("--days", type=int, default=None, help="days to simulate (default: the scenario's)")
    s.add_argument("--host", default="127.0.0.1")
    s.add_argument("--port", type=int, default=8050)
    s.add_argument("--json", action="store_true", help="print the summary as one JSON object")

    s = sub.add_parser("import", help="ingest log files; prints a data-quality summary")
    s.add_argument("files", nargs="+", metavar="FILE")
    s.add_argument("--tz", metavar="ZONE", help="timezone of local timestamps (default: the system's)")
    s.add_argument("--channel", metavar="NAME", help="channel name for a file whose columns carry none")
    s.add_argument("--map", action="append", default=[], metavar="COLUMN=QUANTITY",
                   help="force a column's meaning, e.g. 'Amps=current_A' or 'I_sol=solar.current_mA'")
    s.add_argument("--invert", action="append", default=[], metavar="CHANNEL",
                   help="flip the sign of a channel's current")
    s.add_argument("--json", action="store_true")

    s = sub.add_parser("status", help="what the store holds")
    s.add_argument("--json", action="store_true")

    s = sub.add_parser("report", help="the analysis of what is stored")
    s.add_argument("--from", dest="date_from", metavar="DATE")
    s.add_argument("--to", dest="date_to", metavar="DATE")
    s.add_argument("--json", action="store_true")
    s.add_argument("--html", metavar="FILE", help="also write a self-contained HTML report")

    s = sub.add_parser("size", help="right-sizing recommendation")
    s.add_argument("--autonomy-days", type=float, default=None, metavar="N",
                   help="days parked without charging before the bank reaches its reserve, the lowest "
                        "planned state of charge (1 - max_dod) (default 3)")
    s.add_argument("--percentile", type=float, default=90.0, help="design-day percentile (default 90)")
    s.add_argument("--json", action="store_true")

    s = sub.add_parser("wire", help="size one cable run: cross-section, voltage drop, fuse")
    s.add_argument("--current", type=float, required=True, metavar="A", help="continuous current [A]")
    s.add_argument("--length", type=float, required=True, metavar="M", help="one-way run [m]")
    s.add_argument("--voltage", type=float, required=True, metavar="V", help="nominal system voltage [V]")
    s.add_argument("--max-drop", type=float, default=3.0, metavar="PCT", help="voltage-drop limit [%%] (default 3)")
    s.add_argument("--insulation", type=int, default=105, choices=[60, 75, 90, 105, 125],
                   help="insulation temperature rating [degC] (default 105)")
    s.add_argument("--ambient", type=float, default=30.0, metavar="C", help="conductor temperature assumed [degC]")
    s.add_argument("--bundled", type=int, default=1, metavar="N", help="current-carrying conductors bundled together")
    s.add_argument("--engine-space", action="store_true", help="run passes through an engine space")
    s.add_argument("--json", action="store_true")

    s = sub.add_parser("collect", help="live collection into the store")
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

    s = sub.add_parser("serve", help="the dashboard")
    s.add_argument("--host", default="127.0.0.1")
    s.add_argument("--port", type=int, default=8050)
    s.add_argument("--token", default=None, help="access token (required off loopback; generated if absent)")
    s.add_argument("--json", action="store_true", help="print the address as one JSON object once listening")

    s = sub.add_parser("simulate", help="write a simulated log with its truth beside it")
    s.add_argument("--scenario", required=True, metavar="NAME")
    s.add_argument("--days", type=int, required=True, metavar="N")
    s.add_argument("--out", required=True, metavar="FILE")
    s.add_argument("--interval", type=float, default=None, metavar="S", help="sample interval [s]")
    s.add_argument("--single-shunt", action="store_true", help="log only the battery shunt")
    s.add_argument("--seed", type=int, default=None)
    s.add_argument("--json", action="store_true")
    p.set_defaults(subcommands=sub.choices)  # name -> subparser, for errors in the subcommand's own usage
    return p


#: Commands that write the system description at --system when it is missing.
_WRITES_SYSTEM = {"demo", "serve"}


def _parse(parser: argparse.ArgumentParser, argv: list[str] | None) -> argparse.Namespace:
    """Parse; an unknown option after the command is reported with that command's usage."""
    args, extras = parser.parse_known_args(argv)
    if extras:
        sub = args.subcommands.get(args.command) if getattr(args, "command", None) else None
        (sub or parser).error(f"unrecognized arguments: {' '.join(extras)}")
    return args


def _missing_system(args: argparse.Namespace, ctx: Context) -> str | None:
    """The message for an explicitly named --system file that does not exist, else None."""
    if not getattr(args, "system", None) or ctx.system_path.is_file():
        return None
    if ctx.system_path.is_dir():
        return f"--system {ctx.system_path}: is a folder; give the system.toml file itself"
    if args.command in _WRITES_SYSTEM:
        return None  # demo writes it there; serve's System setup page can
    return (f"--system {ctx.system_path}: no such file. Check the path, or leave --system out to use "
            f"{ctx.store_path.parent / 'system.toml'} (beside the store)")


def main(argv: list[str] | None = None) -> int:
    parser = _parser()
    args = _parse(parser, argv)
    ctx = Context.from_args(args)
    missing = _missing_system(args, ctx)
    if missing:
        print(f"drawdown {args.command}: {missing}", file=sys.stderr)
        return 2
    try:
        module = importlib.import_module(f"dashboard.commands.{args.command}")
        return int(module.run(args, ctx) or 0)
    except UsageError as exc:
        print(f"drawdown {args.command}: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception:  # noqa: BLE001 - the last line of defence: say it is our fault
        traceback.print_exc()
        print(f"drawdown {args.command}: internal error (please report it with the trace above)", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
