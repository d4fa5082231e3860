"""``drawdown simulate --scenario NAME --days N --out FILE [--interval S] [--single-shunt] [--seed N] [--json]``

Write a simulated log of a bundled scenario (an invented system of our own), its
truth beside it (``<FILE without .csv>.truth.json``) and the scenario's
``system.toml`` in FILE's folder (unless one is already there: it is never
overwritten, and the command says so).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path
from typing import Any

from drawdown.cli.context import Context, UsageError, print_json
from drawdown.cli.progress import stages


NAME = "simulate"
HELP = "write a simulated log with its truth beside it"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("--scenario", required=True, metavar="NAME")
    s.add_argument("--days", type=int, required=True, metavar="N")
    s.add_argument("--out", required=True, metavar="FILE")
    s.add_argument("--interval", type=float, default=None, metavar="S", help="sample interval [s]")
    s.add_argument("--single-shunt", action="store_true", help="log only the battery shunt")
    s.add_argument("--seed", type=int, default=None)
    s.add_argument("--json", action="store_true")


def _write_system(folder: Path, text: str) -> tuple[Path, bool]:
    """Write system.toml into ``folder`` unless one exists; returns (path, written)."""
    path = folder / "system.toml"
    if path.exists():
        return path, False
    path.write_text(text, encoding="utf-8")
    return path, True


def run(args: Any, ctx: Context) -> int:
    from drawdown.collector.simulated import UnknownScenarioError, load_scenario, simulate, write_log

    try:
        scenario = load_scenario(args.scenario)
    except UnknownScenarioError as exc:
        raise UsageError(str(exc)) from None
    if args.days < 1:
        raise UsageError(f"--days must be at least 1, got {args.days}")
    if args.interval is not None and not (0 < args.interval <= 3600):
        raise UsageError(f"--interval must be between 0 and 3600 s, got {args.interval}")
    out = Path(args.out)
    if out.is_dir():
        raise UsageError(f"--out {out} is a folder; give a file name such as {out / (scenario.name + '.csv')}")

    t0 = time.perf_counter()
    with stages("simulating", ["simulating", "writing the log"]) as step:
        step("simulating")
        sim = simulate(scenario, days=args.days, seed=args.seed)
        step("writing the log")
        truth_path = write_log(sim, out, interval_s=args.interval, single_shunt=args.single_shunt)
    system_path, written = _write_system(out.parent if str(out.parent) else Path("."), scenario.system_text)
    seconds = time.perf_counter() - t0

    print(f"truth: {truth_path}", file=sys.stderr)
    if written:
        print(f"system description: {system_path}", file=sys.stderr)
    else:
        print(f"system description: {system_path} already exists, left as it is "
              f"(the scenario's own is collector/scenarios/{scenario.name}.toml)", file=sys.stderr)
    interval = args.interval or scenario.params.scenario.interval_s
    rows = int(round((sim.day_start_s[-1]) / interval))
    if getattr(args, "json", False):
        print_json({"out": str(out), "truth": str(truth_path), "system": str(system_path),
                    "system_written": written, "scenario": scenario.name, "days": sim.days,
                    "start": sim.truth["start"], "interval_s": interval, "rows": rows, "seed": sim.seed,
                    "single_shunt": bool(args.single_shunt), "seconds": round(seconds, 3),
                    "true_usable_Ah": sim.truth["battery"]["usable_Ah"],
                    "rated_Ah": sim.truth["battery"]["rated_Ah"], "solar_derate": sim.truth["solar"]["derate"]})
        return 0
    print(f"{out}: scenario {scenario.name}, {sim.days} days from {sim.truth['start']}, "
          f"every {interval:g} s ({rows} rows{', battery shunt only' if args.single_shunt else ''}), "
          f"seed {sim.seed}, {seconds:.1f} s")
    print(f"{truth_path}: what really happened (true usable capacity {sim.truth['battery']['usable_Ah']:.1f} Ah "
          f"of {sim.truth['battery']['rated_Ah']:g} Ah rated, solar derate {sim.truth['solar']['derate']:g})")
    print(f"{system_path}: the system description{'' if written else ' (existing, not overwritten)'}")
    return 0
