"""Benchmark: a fleet on Dask -- simulate, ingest, report on 1 and 2 workers, against a plain loop.

Workload (the fleets issue): 200 invented vehicles x 30 days at 10 s (~52 M readings over three
channels), written by ``drawdown simulate --fleet`` under benchmarks/data/ (git-ignored). Figures:

* ingest time (``drawdown fleet ingest`` of the simulator's folder into a Parquet dataset);
* report time with a LocalCluster of 1 and of 2 single-threaded worker processes, and the
  scaling ratio (2 workers / 1 worker; 0.5 would be perfect on two cores);
* peak RSS per worker (each worker's ``ru_maxrss`` after the run);
* the baseline: the same per-vehicle analysis run one vehicle after another in this process
  (what a shell loop over ``drawdown report`` would do, without the process start-ups), on the
  first ``--baseline-vehicles`` vehicles, scaled to the fleet.

Usage::

    python benchmarks/fleet_bench.py --vehicles 20 --days 10      # quick
    python benchmarks/fleet_bench.py                               # the issue's size (long)
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent


def _drawdown() -> list[str]:
    exe = Path(sys.executable).with_name("drawdown")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "drawdown"]


def _timed(argv: list[str]) -> float:
    t0 = time.perf_counter()
    subprocess.run(argv, check=True, stdout=subprocess.DEVNULL)
    return time.perf_counter() - t0


def _peak_rss_MB() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024


def report_on(dataset: str, workers: int) -> dict:
    from dask.distributed import Client, LocalCluster

    from drawdown.analysis.fleet import analyse_vehicle
    from drawdown.collector import fleet_dataset

    names = fleet_dataset.vehicles(dataset)
    with LocalCluster(n_workers=workers, threads_per_worker=1, memory_limit="4GB", processes=True,
                      dashboard_address=None) as cluster, Client(cluster) as client:
        t0 = time.perf_counter()
        futures = client.map(analyse_vehicle, [dataset] * len(names), names, pure=False, retries=1)
        rows = client.gather(futures)
        seconds = time.perf_counter() - t0
        rss = client.run(_peak_rss_MB)
    errors = [r["vehicle"] for r in rows if r["figures"].get("error")]
    return {"workers": workers, "seconds": seconds, "vehicles": len(names), "errors": errors,
            "peak_rss_MB_per_worker": sorted(rss.values())}


def baseline(dataset: str, n: int) -> dict:
    from drawdown.analysis.fleet import analyse_vehicle
    from drawdown.collector import fleet_dataset

    names = fleet_dataset.vehicles(dataset)[:n]
    t0 = time.perf_counter()
    for name in names:
        analyse_vehicle(dataset, name)
    seconds = time.perf_counter() - t0
    return {"vehicles": len(names), "seconds": seconds, "seconds_per_vehicle": seconds / max(len(names), 1)}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--vehicles", type=int, default=200)
    p.add_argument("--days", type=int, default=30)
    p.add_argument("--interval", type=float, default=10.0)
    p.add_argument("--baseline-vehicles", type=int, default=5)
    p.add_argument("--data-dir", type=Path, default=HERE / "data")
    p.add_argument("--json", action="store_true")
    args = p.parse_args(argv)
    fleet_dir = args.data_dir / f"fleet_{args.vehicles}x{args.days}d_{args.interval:g}s"
    out: dict = {"cpu_count": os.cpu_count(), "vehicles": args.vehicles, "days": args.days,
                 "interval_s": args.interval}
    if not (fleet_dir / "fleet.json").exists():
        out["simulate_s"] = _timed([*_drawdown(), "--quiet", "simulate", "--fleet", str(args.vehicles), "--days",
                                    str(args.days), "--interval", f"{args.interval:g}", "--out", str(fleet_dir)])
    with tempfile.TemporaryDirectory(prefix="drawdown-fleet-bench-") as tmp:
        dataset = str(Path(tmp) / "dataset")
        out["ingest_s"] = _timed([*_drawdown(), "--quiet", "fleet", "ingest", str(fleet_dir), "--dataset", dataset])
        import pyarrow.parquet as pq

        from drawdown.collector import fleet_dataset

        out["readings"] = sum(pq.ParquetFile(f).metadata.num_rows for f in Path(dataset).rglob("*.parquet"))
        out["dataset_MB"] = sum(f.stat().st_size for f in Path(dataset).rglob("*.parquet")) / 1e6
        out["report_1_worker"] = report_on(dataset, 1)
        out["report_2_workers"] = report_on(dataset, 2)
        out["scaling_ratio"] = out["report_2_workers"]["seconds"] / out["report_1_worker"]["seconds"]
        base = baseline(dataset, min(args.baseline_vehicles, len(fleet_dataset.vehicles(dataset))))
        base["projected_fleet_s"] = base["seconds_per_vehicle"] * args.vehicles
        out["baseline_loop"] = base
        out["ratio_2_workers_to_loop"] = out["report_2_workers"]["seconds"] / base["projected_fleet_s"]
    if args.json:
        print(json.dumps(out, indent=2))
        return 0
    print(f"fleet: {args.vehicles} vehicles x {args.days} days at {args.interval:g} s "
          f"({out['readings']:,} readings, {out['dataset_MB']:.0f} MB of Parquet)")
    if "simulate_s" in out:
        print(f"  simulate            {out['simulate_s']:8.1f} s")
    print(f"  ingest              {out['ingest_s']:8.1f} s")
    for key in ("report_1_worker", "report_2_workers"):
        r = out[key]
        print(f"  report, {r['workers']} worker{'s' if r['workers'] > 1 else ' '}   {r['seconds']:8.1f} s   "
              f"peak RSS per worker {', '.join(f'{m:.0f}' for m in r['peak_rss_MB_per_worker'])} MB"
              + (f"   errors: {', '.join(r['errors'])}" if r["errors"] else ""))
    print(f"  scaling ratio (2 workers / 1 worker): {out['scaling_ratio']:.2f}")
    b = out["baseline_loop"]
    print(f"  baseline loop: {b['seconds_per_vehicle']:.2f} s a vehicle -> {b['projected_fleet_s']:.1f} s for the "
          f"fleet; 2 workers take {out['ratio_2_workers_to_loop']:.2f} of that")
    return 0


if __name__ == "__main__":
    sys.exit(main())
