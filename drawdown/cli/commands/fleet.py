"""``drawdown fleet SUBCOMMAND ...`` -- many vehicles in one Parquet dataset (docs/fleet.md).

* ``drawdown fleet ingest SRC... --dataset DIR [--vehicle NAME] [--json]`` -- take vehicles' stores
  (``*.sqlite``), Parquet readings exports, or folders of vehicles into the dataset ``DIR`` (a folder
  or an fsspec URL): ``DIR/vehicle=<name>/month=YYYY-MM/part-<hash>.parquet``, the vehicle's
  ``system.toml`` beside its partitions, and ``DIR/_fleet.json``, the record of what was ingested.
  The same file twice adds nothing; overlapping exports hold each reading once (newest wins).
  A source that cannot be ingested is reported with the reason and never stops the others; exit 2
  only when nothing could be ingested.

Each subcommand is an entry of :data:`SUBCOMMANDS`: ``(name, help, add_arguments, run)``. The fleet
report (``report``) and SQL over the dataset (``sql``) are added there (docs/fleet.md#fleet-report,
docs/fleet.md#sql). Heavy parts (pyarrow, fsspec) load inside the subcommand's run; a missing
fsspec raises ModuleNotFoundError, which the command line turns into the ``fleet`` extra's
install line (drawdown.cli.EXTRA_OF).
"""

from __future__ import annotations

import argparse
import sys
from collections.abc import Callable
from typing import Any

from drawdown.cli.commands import fleet_report
from drawdown.cli.context import Context, UsageError, print_json, warn

NAME = "fleet"
HELP = "many vehicles: ingest their stores or exports into one Parquet dataset"


# --------------------------------------------------------------------------------------------
# ingest
# --------------------------------------------------------------------------------------------

def _ingest_arguments(s: argparse.ArgumentParser) -> None:
    s.add_argument("sources", nargs="+", metavar="SRC",
                   help="a vehicle's store (*.sqlite), a Parquet readings export, or a folder of vehicles "
                        "(fleet.json, or subfolders each with system.toml and readings.parquet/readings.sqlite)")
    s.add_argument("--dataset", required=True, metavar="DIR", help="the dataset: a folder or an fsspec URL")
    s.add_argument("--vehicle", metavar="NAME",
                   help="the vehicle's name (one SRC); default: the manifest, else the file's folder or name")
    s.add_argument("--json", action="store_true", help="print one JSON object")


def _line(r: Any) -> str:
    if r.error is not None:
        return f"{r.source}: not ingested: {r.error.removeprefix(r.source + ': ')}"
    months = ", ".join(r.months) or "-"
    if r.already_ingested:
        return (f"{r.vehicle}: {r.source}: already ingested (same sha256), nothing added "
                f"({r.rows:,} readings, months {months})")
    text = (f"{r.vehicle}: {r.source}: {r.rows_added:,} readings added, {r.rows_already_held:,} already held")
    if r.rows_replaced:
        text += f", {r.rows_replaced:,} replaced by this source's values"
    return text + f" (months {months})"


def _run_ingest(args: Any, ctx: Context) -> int:
    import fsspec  # noqa: F401 - a missing fleet extra surfaces here, before anything is read

    from drawdown.collector.fleet_dataset import FleetInputError, check_vehicle_name, ingest

    if args.vehicle is not None:
        if len(args.sources) > 1:
            raise UsageError(f"--vehicle {args.vehicle}: names the vehicle of one store or export; "
                             f"{len(args.sources)} SRC were given (a folder of vehicles names its own)")
        try:
            check_vehicle_name(args.vehicle)
        except FleetInputError as exc:
            raise UsageError(f"--vehicle: {exc}") from None
    try:
        result = ingest(args.sources, args.dataset, vehicle=args.vehicle)
    except FleetInputError as exc:
        raise UsageError(f"--dataset {exc}") from None
    for r in result.sources:
        if r.system == "changed":
            warn(f"drawdown fleet ingest: {r.vehicle}: the system description changed; the dataset now keeps "
                 f"the one from {r.system_source}")
        elif r.system is None and r.error is None and not r.already_ingested:
            warn(f"drawdown fleet ingest: {r.vehicle}: no system.toml beside {r.source}; the dataset keeps "
                 "the vehicle's readings without one (the fleet report needs it)")
    if args.json:
        print_json(result.to_json())
    else:
        for r in result.sources:
            if r.error is None:
                print(_line(r))
            else:
                print(f"drawdown fleet ingest: {_line(r)}", file=sys.stderr)
        print(f"{result.ingested} of {len(result.sources)} sources ingested into {result.dataset}, "
              f"{result.rows_added:,} readings added" + (f"; {result.failed} not ingested (above)"
                                                         if result.failed else ""))
    return 0 if result.ingested else 2


# --------------------------------------------------------------------------------------------
# the subcommands
# --------------------------------------------------------------------------------------------

#: ``(name, help, add_arguments, run)`` of each subcommand, in the order ``--help`` lists them.
#: ``report`` (the fleet report) and ``sql`` join this list in their own modules' entries.
SUBCOMMANDS: list[tuple[str, str, Callable[[argparse.ArgumentParser], None], Callable[[Any, Context], int]]] = [
    ("ingest", "take vehicles' stores or Parquet readings exports into the fleet dataset", _ingest_arguments,
     _run_ingest),
    ("report", "every vehicle's report as Dask tasks: the fleet table, most urgent first",
     fleet_report.add_report_arguments, fleet_report.run_report),
    ("sql", "SQL (DuckDB) over the dataset's readings", fleet_report.add_sql_arguments, fleet_report.run_sql),
]


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's subcommands and their options."""
    sub = s.add_subparsers(dest="fleet_command", metavar="SUBCOMMAND")
    sub.required = True
    for name, help_text, add, run_sub in SUBCOMMANDS:
        p = sub.add_parser(name, help=help_text)
        add(p)
        p.set_defaults(fleet_run=run_sub)


def run(args: Any, ctx: Context) -> int:
    run_sub = getattr(args, "fleet_run", None)
    if run_sub is None:
        raise UsageError("name a subcommand: " + ", ".join(n for n, *_ in SUBCOMMANDS))
    return int(run_sub(args, ctx) or 0)
