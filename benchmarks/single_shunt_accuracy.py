"""Single-shunt accuracy against the simulator's truth, day by day.

    .venv/bin/python benchmarks/single_shunt_accuracy.py [--seeds 0 1 2 3] [--intervals 10 60]

For each bundled scenario, seed (0 = the scenario's own seed) and sample
interval it simulates the scenario's default days, logs them as one battery
shunt would, runs the ledger and prints the daily consumed Ah and solar Ah
errors against the truth file, then the counts within the issue's targets
(consumed +-8 %, solar +-15 %). A measurement tool, not a test: the figures
go into DEVELOPERS.md and the closing notes.
"""

from __future__ import annotations

import argparse
import sys
import time
from typing import NamedTuple
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent.parent))

from drawdown.analysis.ledger import compute_ledger
from drawdown.analysis.readings import split_channels
from drawdown.collector.simulated import (
    available_scenarios,
    load_scenario,
    simulate,
    to_canonical,
)

CONSUMED_TOL = 0.08
SOLAR_TOL = 0.15
SOLAR_MIN_AH = 5.0  # a day with less true solar than this is judged in Ah, not percent


class DayScore(NamedTuple):
    """One simulated day scored against its truth."""

    scenario: str
    seed: int | None
    interval_s: float
    date: str
    consumed_err: float      # relative error of consumed Ah
    solar_err: float         # solar Ah error / max(true solar, SOLAR_MIN_AH)
    covered: bool            # the 95 % interval of consumed Ah holds the truth
    half_width: float        # that interval's half-width / true consumed Ah
    charger_err_Ah: float    # |alternator error| + |shore error| [Ah]


def run(name: str, seed: int | None, interval: float, days: int | None, verbose: bool) -> list[DayScore]:
    sc = load_scenario(name)
    sim = simulate(sc, days=days, seed=seed)
    frame = to_canonical(sim, interval_s=interval, single_shunt=True)
    led = compute_ledger(split_channels(frame), sim.scenario.system).days
    est = {d.isoformat(): row for d, row in zip(led["date"], led.to_dict("records"))}
    rows = []
    for d in sim.truth["days"]:
        e = est.get(d["date"])
        if e is None:
            continue
        c_err = e["consumed_Ah"] / d["consumed_Ah"] - 1.0
        t_sol = d["charged_Ah"]["solar"]
        s_err = (e["charged_Ah_solar"] - t_sol) / max(t_sol, SOLAR_MIN_AH)
        covered = e["consumed_Ah_pi95_lo"] <= d["consumed_Ah"] <= e["consumed_Ah_pi95_hi"]
        half = 0.5 * (e["consumed_Ah_pi95_hi"] - e["consumed_Ah_pi95_lo"]) / d["consumed_Ah"]
        other_err = sum(abs(e[f"charged_Ah_{k}"] - d["charged_Ah"][k]) for k in ("alternator", "shore"))
        rows.append(DayScore(name, seed, interval, d["date"], c_err, s_err, covered, half, other_err))
        if verbose:
            flag = ("C" if abs(c_err) > CONSUMED_TOL else " ") + ("S" if abs(s_err) > SOLAR_TOL else " ")
            print(f"  {flag} {name:12s} seed={seed or 'own':>4} {interval:>4.0f}s {d['date']}  consumed "
                  f"{d['consumed_Ah']:6.1f} Ah {100 * c_err:+6.1f} %   solar {t_sol:6.1f} Ah "
                  f"{100 * s_err:+6.1f} %")
    return rows


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seeds", type=int, nargs="+", default=[0, 1, 2, 3], help="0 = the scenario's own seed")
    ap.add_argument("--intervals", type=float, nargs="+", default=[10.0, 60.0])
    ap.add_argument("--days", type=int, default=None, help="days per run (default: the scenario's)")
    ap.add_argument("--scenarios", nargs="+", default=available_scenarios())
    ap.add_argument("-q", "--quiet", action="store_true", help="totals only")
    args = ap.parse_args(argv)
    t0 = time.perf_counter()
    rows = []
    for name in args.scenarios:
        for seed in args.seeds:
            for interval in args.intervals:
                rows += run(name, seed or None, interval, args.days, not args.quiet)
    c = np.array([r.consumed_err for r in rows])
    s = np.array([r.solar_err for r in rows])
    print(f"\n{len(rows)} days in {time.perf_counter() - t0:.0f} s")
    for name in args.scenarios:
        m = np.array([r.scenario == name for r in rows])
        own = m & np.array([r.seed is None for r in rows])
        print(f"{name:12s} consumed within 8 %: {np.sum(np.abs(c[m]) <= CONSUMED_TOL):3d}/{m.sum()} "
              f"(own seed {np.sum(np.abs(c[own]) <= CONSUMED_TOL)}/{own.sum()}), mean |err| "
              f"{100 * np.mean(np.abs(c[m])):.1f} %;  solar within 15 %: {np.sum(np.abs(s[m]) <= SOLAR_TOL):3d}"
              f"/{m.sum()} (own seed {np.sum(np.abs(s[own]) <= SOLAR_TOL)}/{own.sum()}), mean |err| "
              f"{100 * np.mean(np.abs(s[m])):.1f} %")
    cov = np.array([r.covered for r in rows])
    half = np.array([r.half_width for r in rows])
    print(f"consumed 95 % interval covers truth on {cov.sum()}/{len(cov)} days, median half-width "
          f"{100 * np.median(half):.0f} %")
    other = np.array([r.charger_err_Ah for r in rows])
    print(f"alternator + shore: mean |error| {np.mean(other):.1f} Ah per day, worst {np.max(other):.1f} Ah")
    print(f"all          consumed within 8 %: {np.sum(np.abs(c) <= CONSUMED_TOL)}/{len(c)}; "
          f"solar within 15 %: {np.sum(np.abs(s) <= SOLAR_TOL)}/{len(s)}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
