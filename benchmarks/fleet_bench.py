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

``--year`` instead measures the memory bound: one vehicle, a year at 1 Hz (~160 M readings on
five channels), reported on one worker of 4 GB. The vehicle is analysed in parts of whole months
(analysis/fleet.py ``task_readings_for`` the worker's memory limit); the figures are the worker's peak RSS, the tasks, the
time, and the memory one whole-vehicle task would need, projected from the same worker's
measured bytes per reading (it is not run: it would not fit).

Usage::

    python benchmarks/fleet_bench.py --vehicles 20 --days 10      # quick
    python benchmarks/fleet_bench.py                               # the issue's size (long)
    python benchmarks/fleet_bench.py --year                        # a vehicle-year at 1 Hz, 4 GB worker
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


def year_on_one_worker(fleet_dir: Path, memory_limit: str = "4GB") -> dict:
    """Ingest the one-vehicle year and report it on one worker of ``memory_limit``."""
    from dask.distributed import Client, LocalCluster

    from drawdown.analysis.fleet import fleet_report
    from drawdown.collector import fleet_dataset

    out: dict = {"memory_limit": memory_limit}
    with tempfile.TemporaryDirectory(prefix="drawdown-fleet-year-") as tmp:
        dataset = str(Path(tmp) / "dataset")
        out["ingest_s"] = _timed([*_drawdown(), "--quiet", "fleet", "ingest", str(fleet_dir), "--dataset", dataset])
        name = fleet_dataset.vehicles(dataset)[0]
        out["readings"] = sum(fleet_dataset.month_rows(dataset, name).values())
        with LocalCluster(n_workers=1, threads_per_worker=1, memory_limit=memory_limit, processes=True,
                          dashboard_address=None) as cluster, Client(cluster) as client:
            base = min(client.run(_peak_rss_MB).values())
            t0 = time.perf_counter()
            rep = fleet_report(dataset, scheduler=cluster.scheduler_address)
            out["report_s"] = time.perf_counter() - t0
            out["peak_rss_MB"] = max(client.run(_peak_rss_MB).values())
            out["worker_start_rss_MB"] = base
        f = rep["fleet"][0]
        out["tasks"] = rep["tasks"]
        out["task_readings"] = rep["task_readings"]
        out["parts"] = len(f["parts"])
        out["largest_part_readings"] = max((p["readings"] for p in f["parts"]), default=out["readings"])
        out["error"] = f.get("error")
        out["flags"] = f.get("flags")
        per_reading = (out["peak_rss_MB"] - base) / max(out["largest_part_readings"], 1)
        out["projected_whole_vehicle_task_MB"] = base + per_reading * out["readings"]
    return out


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
    p.add_argument("--year", action="store_true", help="one vehicle, 365 days at 1 Hz, on one 4 GB worker")
    args = p.parse_args(argv)
    if args.year:
        return main_year(args)
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


def main_year(args: argparse.Namespace) -> int:
    fleet_dir = args.data_dir / "fleet_1x365d_1s"
    out: dict = {"cpu_count": os.cpu_count(), "vehicles": 1, "days": 365, "interval_s": 1.0}
    if not (fleet_dir / "fleet.json").exists():
        out["simulate_s"] = _timed([*_drawdown(), "--quiet", "simulate", "--fleet", "1", "--days", "365",
                                    "--interval", "1", "--seed", "2", "--out", str(fleet_dir)])
    out.update(year_on_one_worker(fleet_dir))
    if args.json:
        print(json.dumps(out, indent=2))
        return 0
    print(f"a vehicle-year at 1 Hz: {out['readings']:,} readings, one worker of {out['memory_limit']}")
    if "simulate_s" in out:
        print(f"  simulate            {out['simulate_s']:8.1f} s")
    print(f"  ingest              {out['ingest_s']:8.1f} s")
    print(f"  report              {out['report_s']:8.1f} s   {out['tasks']} tasks ({out['parts']} parts of whole "
          f"months, largest {out['largest_part_readings']:,} readings; budget {out['task_readings']:,})"
          + (f"   error: {out['error']}" if out["error"] else ""))
    print(f"  worker peak RSS     {out['peak_rss_MB']:8.0f} MB  (started at {out['worker_start_rss_MB']:.0f} MB)")
    print(f"  one whole-vehicle task would need ~{out['projected_whole_vehicle_task_MB'] / 1024:.1f} GB "
          "(projected from this run's bytes per reading; not run)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
