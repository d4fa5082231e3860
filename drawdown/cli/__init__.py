"""The ``drawdown`` command line (a contract: docs/contracts.md).

``drawdown [--version] [--store PATH] [--system PATH] COMMAND ...``

Each command lives in ``drawdown/cli/commands/<module>.py`` with its ``NAME``, ``HELP``,
``add_arguments(parser)`` (its options) and ``run(args, ctx) -> int``; a module imports
its heavy parts inside ``run`` so that ``drawdown --help`` and ``collect`` start fast.
stdout belongs to the command's result (one JSON object with ``--json``);
progress, warnings and errors go to stderr. Exit codes: 0 success, 1 internal
error, 2 bad input or usage.
"""

from __future__ import annotations

import argparse
import sys
import traceback

from drawdown import __version__
from drawdown.cli.commands import collect, demo, export, fleet, import_logs, report, serve, simulate, size, status, wire
from drawdown.cli import progress
from drawdown.cli.context import Context, UsageError

#: The commands in the order ``--help`` lists them.
COMMANDS = (demo, import_logs, status, report, export, size, wire, collect, serve, simulate, fleet)


def _parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="drawdown",
        description="Battery-bank logs in; energy ledger, battery health, solar yield and sizing advice out.",
    )
    p.add_argument("--version", action="version", version=f"drawdown {__version__}")
    p.add_argument("--quiet", action="store_true", help="no progress bars (they show only on a terminal anyway)")
    p.add_argument("--store", metavar="PATH", help="reading store (default: a file in the user data folder)")
    p.add_argument("--system", metavar="PATH", help="system description (default: system.toml beside the store)")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")
    sub.required = True
    for module in COMMANDS:  # each command owns its name, help line, options and run()
        s = sub.add_parser(module.NAME, help=module.HELP)
        module.add_arguments(s)
        s.set_defaults(run=module.run)
    p.set_defaults(subcommands=sub.choices)  # name -> subparser, for errors in the subcommand's own usage
    return p


#: Third-party packages of each optional part (pyproject.toml extras) -> the extra that brings them.
EXTRA_OF: dict[str, str] = {"scipy": "analysis", "statsmodels": "analysis", "pvlib": "analysis",
                            "tsdownsample": "analysis", "dash": "dashboard", "plotly": "dashboard",
                            "flask": "dashboard", "bleak": "ble", "dask": "fleet", "distributed": "fleet",
                            "duckdb": "fleet", "fsspec": "fleet"}


def missing_extra_message(command: str, exc: ModuleNotFoundError) -> str | None:
    """What to install when ``command`` needs an optional part this install lacks, else None."""
    top = (exc.name or "").split(".")[0]
    extra = EXTRA_OF.get(top)
    if extra is None:
        return None
    return (f"drawdown {command}: needs the {extra} part, which this install leaves out ({top} is not "
            f"installed). Install it with: pip install 'drawdown[{extra}]'")


#: Commands that write the system description at --system when it is missing.
_WRITES_SYSTEM = {"demo", "serve"}
#: Commands that never read --system (simulate writes its scenario's beside its log).
_READS_NO_SYSTEM = {"simulate", "wire"}


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
    if args.command in _WRITES_SYSTEM or args.command in _READS_NO_SYSTEM:
        return None  # demo and simulate write it there; serve's System setup page can; wire reads none
    return (f"--system {ctx.system_path}: no such file. Check the path, or leave --system out to use "
            f"{ctx.store_path.parent / 'system.toml'} (beside the store)")


def main(argv: list[str] | None = None) -> int:
    parser = _parser()
    args = _parse(parser, argv)
    progress.QUIET = bool(args.quiet)
    ctx = Context.from_args(args)
    missing = _missing_system(args, ctx)
    if missing:
        print(f"drawdown {args.command}: {missing}", file=sys.stderr)
        return 2
    try:
        return int(args.run(args, ctx) or 0)
    except UsageError as exc:
        print(f"drawdown {args.command}: {exc}", file=sys.stderr)
        return 2
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        return 130
    except BrokenPipeError:
        return 0
    except Exception as exc:  # noqa: BLE001 - the last line of defence: say it is our fault
        message = missing_extra_message(args.command, exc) if isinstance(exc, ModuleNotFoundError) else None
        if message is not None:  # an optional part this install leaves out: say which extra to add
            print(message, file=sys.stderr)
            return 2
        traceback.print_exc()
        print(f"drawdown {args.command}: internal error (please report it with the trace above)", file=sys.stderr)
        return 1


if __name__ == "__main__":
    sys.exit(main())
