"""``drawdown simulate --scenario NAME --days N --out FILE [--interval S] [--single-shunt] [--seed N] [--json]``
``drawdown simulate --fleet N --days D --out DIR [--interval S] [--seed SEED] [--json]``

Write a simulated log of a bundled scenario (an invented system of our own), its
truth beside it (``<FILE without .csv>.truth.json``) and the scenario's
``system.toml`` in FILE's folder (unless one is already there: it is never
overwritten, and the command says so).

With ``--fleet N``: write N invented rental camper vans into the folder DIR (``fleet.json``,
and per vehicle ``system.toml``, ``readings.parquet`` as a readings export, ``truth.json``);
see :mod:`collector.sim_fleet` for the layout, the fleet and what the truth holds.
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
    s.add_argument("--scenario", metavar="NAME", help="a bundled scenario (required without --fleet)")
    s.add_argument("--fleet", type=int, default=None, metavar="N",
                   help="write N invented vehicles into the folder --out instead of one scenario's log")
    s.add_argument("--days", type=int, required=True, metavar="N")
    s.add_argument("--out", required=True, metavar="FILE", help="the log file (with --fleet: the folder DIR)")
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
    if getattr(args, "fleet", None) is not None:
        return _run_fleet(args)
    if not args.scenario:
        raise UsageError("--scenario NAME is required (or --fleet N for a fleet of invented vehicles)")
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


def _run_fleet(args: Any) -> int:
    from drawdown.cli.progress import bar
    from drawdown.collector.sim_fleet import DEFAULT_INTERVAL_S, DEFAULT_SEED, write_fleet

    if args.scenario:
        raise UsageError("--fleet writes invented vehicles of its own; leave out --scenario")
    if args.single_shunt:
        raise UsageError("--single-shunt: a fleet is written multi-channel (battery, solar, chargers, load); "
                         "leave it out with --fleet")
    if args.fleet < 1:
        raise UsageError(f"--fleet must be at least 1 vehicle, got {args.fleet}")
    if args.days < 1:
        raise UsageError(f"--days must be at least 1, got {args.days}")
    if args.interval is not None and not (0 < args.interval <= 3600):
        raise UsageError(f"--interval must be between 0 and 3600 s, got {args.interval}")
    out = Path(args.out)
    if out.exists() and not out.is_dir():
        raise UsageError(f"--out {out} is a file; with --fleet give a folder (created when missing), "
                         f"e.g. --out {out.with_suffix('')}-fleet")
    if out.parent != out and out.parent.exists() and not out.parent.is_dir():
        raise UsageError(f"--out {out}: {out.parent} is not a folder")
    seed = DEFAULT_SEED if args.seed is None else int(args.seed)
    interval = float(args.interval or DEFAULT_INTERVAL_S)

    t0 = time.perf_counter()
    try:
        with bar(args.fleet, "simulating vehicles", unit="vehicle") as b:
            manifest = write_fleet(out, args.fleet, args.days, seed=seed, interval_s=interval,
                                   progress=lambda _r: b.update(1))
    except OSError as exc:
        raise UsageError(f"--out {out}: cannot write the fleet there ({exc.strerror or exc})") from None
    seconds = time.perf_counter() - t0
    names = [v["name"] for v in manifest["vehicles"]]
    if getattr(args, "json", False):
        print_json({**manifest, "out": str(out), "manifest": str(out / "fleet.json"), "seconds": round(seconds, 3)})
        return 0
    print(f"{out}: {len(names)} vehicles ({names[0]}{' ... ' + names[-1] if len(names) > 1 else ''}), "
          f"{args.days} days from {manifest['start_date']}, every {interval:g} s, seed {seed}: "
          f"{manifest['rows']:,} readings in {seconds:.1f} s")
    print(f"{out / 'fleet.json'}: the manifest; each vehicle folder holds system.toml, readings.parquet "
          "(a readings export) and truth.json (what really happened)")
    return 0
