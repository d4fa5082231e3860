"""``drawdown fleet report --dataset DIR [--scheduler ADDRESS] [--workers N] [--vehicle NAME]...
[--task-readings N] [--json]``
and ``drawdown fleet sql "SELECT ..." --dataset DIR [--json]`` (the analysis half of ``drawdown fleet``).

``report`` runs the per-vehicle analysis of ``drawdown report`` as Dask tasks (analysis/fleet.py)
and prints the fleet table, most urgent first; ``--json`` gives the fleet object (docs/fleet.md).
``sql`` runs DuckDB over the dataset's Parquet files: the view ``readings`` has the export's
columns plus ``vehicle`` and ``month`` (the partition keys).
"""

from __future__ import annotations

import argparse
import sys
from typing import Any

from drawdown.cli.context import Context, UsageError, print_json


def add_report_arguments(s: argparse.ArgumentParser) -> None:
    s.add_argument("--dataset", required=True, metavar="DIR", help="the fleet dataset (a folder or an fsspec URL)")
    s.add_argument("--scheduler", metavar="ADDRESS",
                   help="a running dask.distributed scheduler (tcp://host:8786); default: a local cluster")
    s.add_argument("--workers", type=int, default=2, metavar="N", help="local cluster worker processes (default 2)")
    s.add_argument("--memory-limit", default="4GB", metavar="SIZE", help="per local worker (default 4GB)")
    s.add_argument("--vehicle", action="append", metavar="NAME", help="only these vehicles (repeatable)")
    s.add_argument("--task-readings", type=int, default=None, metavar="N",
                   help="readings one task may analyse; a longer vehicle is analysed in parts of whole months "
                        "(default: from the smallest worker's memory limit, ~15,000,000 for 4 GB; "
                        "docs/fleet.md#memory)")
    s.add_argument("--json", action="store_true")


def add_sql_arguments(s: argparse.ArgumentParser) -> None:
    s.add_argument("query", metavar="SQL", help="a query over the view 'readings' (and 'vehicles')")
    s.add_argument("--dataset", required=True, metavar="DIR")
    s.add_argument("--json", action="store_true", help="rows as a JSON list of objects")


def _fmt(v: Any, spec: str, unit: str = "") -> str:
    return "-" if v is None else f"{v:{spec}}{unit}"


def fleet_table(fleet: list[dict[str, Any]]) -> str:
    """The fleet table as text, one vehicle a line, most urgent first."""
    head = f"{'vehicle':<12} {'usable Ah':>10} {'health':>7} {'fade %/mo':>10} {'use p50/p90 Ah':>15} " \
           f"{'solar PR':>8} {'parked p50/p90 d':>17}  flags"
    lines = [head]
    for f in fleet:
        if f.get("error"):
            lines.append(f"{f['vehicle']:<12} {'':>10} {'':>7} {'':>10} {'':>15} {'':>8} {'':>17}  "
                         f"error: {f['error']}")
            continue
        use = f"{_fmt(f.get('daily_use_Ah_p50'), '.1f')}/{_fmt(f.get('daily_use_Ah_p90'), '.1f')}"
        parked = f"{_fmt(f.get('days_parked_p50'), '.1f')}/{_fmt(f.get('days_parked_p90'), '.1f')}"
        fade = f.get("fade_pct_per_month")
        lines.append(f"{f['vehicle']:<12} {_fmt(f.get('usable_Ah'), '.0f'):>10} "
                     f"{_fmt(f.get('state_of_health_pct'), '.0f', ' %'):>7} {_fmt(fade, '+.2f'):>10} {use:>15} "
                     f"{_fmt(f.get('solar_performance_ratio'), '.2f'):>8} {parked:>17}  "
                     f"{', '.join(f.get('flags') or []) or '-'}")
    return "\n".join(lines)


def run_report(args: Any, ctx: Context) -> int:
    from drawdown.analysis.fleet import fleet_report
    from drawdown.cli.progress import bar
    from drawdown.collector import fleet_dataset

    names = fleet_dataset.vehicles(args.dataset)
    if not names:
        raise UsageError(f"--dataset {args.dataset}: no vehicles there; ingest some first "
                         "('drawdown fleet ingest SRC --dataset DIR')")
    if args.vehicle:
        unknown = sorted(set(args.vehicle) - set(names))
        if unknown:
            raise UsageError(f"--vehicle {', '.join(unknown)}: not in {args.dataset} (it holds {', '.join(names)})")
        names = [n for n in names if n in set(args.vehicle)]
    if args.workers < 1:
        raise UsageError(f"--workers must be at least 1, got {args.workers}")
    task_readings = args.task_readings
    if task_readings is not None and task_readings < 1000:
        raise UsageError(f"--task-readings must be at least 1000, got {args.task_readings}")
    with bar(total=len(names), desc="vehicles", unit="vehicle") as b:
        def step(done: int, total: int) -> None:
            b.update(done - b.n)

        out = fleet_report(args.dataset, names, scheduler=args.scheduler, n_workers=args.workers,
                           memory_limit=args.memory_limit, max_readings=task_readings, progress=step)
    if args.json:
        print_json(out)
        return 0
    print(f"fleet {args.dataset}: {out['vehicles']} vehicles on {out['workers']} workers "
          f"({out['scheduler']}); most urgent first")
    print(fleet_table(out["fleet"]))
    return 0


def run_sql(args: Any, ctx: Context) -> int:
    from drawdown.analysis.fleet import fleet_sql

    try:
        frame = fleet_sql(args.dataset, args.query)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    if args.json:
        import json

        print(json.dumps(frame.to_dict(orient="records"), default=str, indent=1))
        return 0
    sys.stdout.write(frame.to_string(index=False) + "\n")
    return 0
