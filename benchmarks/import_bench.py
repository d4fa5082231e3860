"""Benchmark: importing battery logs, ours against a naive pandas + SQLite baseline, in one run.

Workloads (written under benchmarks/data/, which git ignores):

W1  one week at 1 Hz, three channels (battery, solar, alternator), multi-channel CSV with ISO
    8601 timestamps with offset (~45 MB). Target: import <= 3 s.
W2  one year at 1 Hz, same columns (~1.5 GB at --scale 1). Targets: import <= 60 s with peak
    RSS <= 2 GB; >= 3x the baseline's rows/s; reading one month back as a DataFrame <= 0.5 s.

The baseline is what a careful first attempt looks like: ``pandas.read_csv`` (default engine),
``pandas.to_datetime`` and ``DataFrame.to_sql`` into a SQLite file. Each import runs in its own
subprocess so that its peak RSS (``ru_maxrss``) is its own.

Usage::

    python benchmarks/import_bench.py --scale 0.02          # quick check (W2 = ~7 days)
    python benchmarks/import_bench.py                       # full scale (minutes; a quiet machine)
    python benchmarks/import_bench.py --scale 0.05 --json   # figures as one JSON object
"""

from __future__ import annotations

import argparse
import io
import json
import os
import resource
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np

HERE = Path(__file__).resolve().parent
ROOT = HERE.parent
START_US = 1_704_067_200_000_000  # 2024-01-01T00:00:00Z
DAY = 86_400


def _day_table(day: int, rng: np.random.Generator):
    """One day at 1 Hz of an invented van: fridge cycling, evening lights, solar by day, a drive."""
    import pyarrow as pa
    import pyarrow.compute as pc

    s = np.arange(DAY)
    hour = s / 3600.0
    sun = np.clip(np.sin((hour - 6.0) / 12.0 * np.pi), 0, None)
    solar = np.round(sun * (14.0 + rng.normal(0, 0.3, DAY)) * (rng.random() * 0.5 + 0.5), 2).clip(0)
    fridge = np.where((s // 900) % 2 == 0, -4.2, -0.1)
    lights = np.where((hour > 19) & (hour < 23), -3.0, 0.0)
    drive = (hour > 10 + day % 3) & (hour < 11.5 + day % 3)
    alternator = np.round(np.where(drive, 25.0 + rng.normal(0, 0.5, DAY), 0.0), 2)
    battery = np.round(solar + alternator + fridge + lights + rng.normal(0, 0.05, DAY), 2)
    voltage = np.round(12.9 + 0.012 * battery + 0.3 * sun + rng.normal(0, 0.005, DAY), 3)
    temp = np.round(15 + 6 * sun + rng.normal(0, 0.1, DAY), 1)
    t = pa.array(START_US + (day * DAY + s) * 1_000_000, pa.timestamp("us", "UTC")).cast(pa.timestamp("s", "UTC"))
    iso = pc.binary_join_element_wise(pc.strftime(t, format="%Y-%m-%dT%H:%M:%S"), "+00:00", "")
    return pa.table({"time": iso, "battery_voltage_V": voltage, "battery_current_A": battery,
                     "solar_current_A": solar, "alternator_current_A": alternator,
                     "battery_temperature_C": temp})


def generate(path: Path, days: float, seed: int = 1) -> Path:
    """Write ``days`` of 1 Hz readings to ``path`` (reused when already there at the same size)."""
    import pyarrow.csv as pcsv

    stamp = path.with_suffix(".done")
    want = f"{days:.6f} {seed}"
    if path.exists() and stamp.exists() and stamp.read_text() == want:
        return path
    path.parent.mkdir(parents=True, exist_ok=True)
    rng = np.random.default_rng(seed)
    whole, frac = int(days), days - int(days)
    with open(path, "wb") as f:
        for d in range(whole + (1 if frac > 0 else 0)):
            tb = _day_table(d, rng)
            if d == whole:
                tb = tb.slice(0, int(frac * DAY))
            buf = io.BytesIO()
            pcsv.write_csv(tb, buf, pcsv.WriteOptions(include_header=(d == 0), quoting_style="none"))
            f.write(buf.getvalue())
    stamp.write_text(want)
    return path


# -- workers (run in subprocesses) --------------------------------------------------------------

def worker_ours(csv_path: str, store_path: str, read_month: bool) -> dict:
    sys.path.insert(0, str(ROOT))
    from drawdown.collector.csv_file import import_file
    from drawdown.collector.store import Store

    t0 = time.perf_counter()
    with Store(store_path) as st:
        r = import_file(Path(csv_path), st)
        elapsed = time.perf_counter() - t0
        out = {"seconds": elapsed, "rows": r.rows_stored, "rejected": r.rows_rejected,
               "peak_rss_import_MB": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}
        if read_month:
            span = st.time_span()
            start = span[0]
            import pandas as pd

            end = min(start + pd.Timedelta(days=30), span[1] + pd.Timedelta(seconds=1))
            t1 = time.perf_counter()
            frame = st.read(start, end)
            out["read_month_seconds"] = time.perf_counter() - t1
            out["read_month_rows"] = len(frame)
            out["read_month_days"] = (end - start).total_seconds() / 86400
    out["peak_rss_MB"] = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    return out


def worker_baseline(csv_path: str, db_path: str) -> dict:
    import sqlite3

    import pandas as pd

    t0 = time.perf_counter()
    df = pd.read_csv(csv_path)
    df["time"] = pd.to_datetime(df["time"])
    with sqlite3.connect(db_path) as con:
        df.to_sql("readings", con, if_exists="replace", index=False, chunksize=100_000)
    elapsed = time.perf_counter() - t0
    return {"seconds": elapsed, "rows": len(df),
            "peak_rss_MB": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}


def _run_worker(kind: str, *argv: str) -> dict:
    cmd = [sys.executable, str(Path(__file__).resolve()), "--worker", kind, *argv]
    proc = subprocess.run(cmd, capture_output=True, text=True, check=False)
    if proc.returncode != 0:
        raise RuntimeError(f"{kind} worker failed:\n{proc.stderr}")
    return json.loads(proc.stdout.strip().splitlines()[-1])


def bench(name: str, csv_path: Path, tmp: Path, *, baseline: bool, read_month: bool) -> dict:
    size_MB = csv_path.stat().st_size / 1e6
    ours = _run_worker("ours", str(csv_path), str(tmp / f"{name}.sqlite"), "1" if read_month else "0")
    res = {"workload": name, "file": str(csv_path), "file_MB": round(size_MB, 1), "lines": ours["rows"],
           "ours": {**ours, "rows_per_s": ours["rows"] / ours["seconds"], "MB_per_s": size_MB / ours["seconds"]}}
    if baseline:
        base = _run_worker("baseline", str(csv_path), str(tmp / f"{name}-baseline.sqlite"))
        res["baseline"] = {**base, "rows_per_s": base["rows"] / base["seconds"], "MB_per_s": size_MB / base["seconds"]}
        res["speedup"] = res["ours"]["rows_per_s"] / res["baseline"]["rows_per_s"]
    return res


def _print(res: dict) -> None:
    o = res["ours"]
    print(f"{res['workload']}: {res['file_MB']:.1f} MB, {res['lines']:,} lines")
    print(f"  ours     {o['seconds']:7.2f} s  {o['rows_per_s']:12,.0f} rows/s  {o['MB_per_s']:7.1f} MB/s"
          f"  peak RSS {o['peak_rss_import_MB']:7.0f} MB (import), {o['peak_rss_MB']:7.0f} MB (with read-back)")
    if "baseline" in res:
        b = res["baseline"]
        print(f"  baseline {b['seconds']:7.2f} s  {b['rows_per_s']:12,.0f} rows/s  {b['MB_per_s']:7.1f} MB/s"
              f"  peak RSS {b['peak_rss_MB']:7.0f} MB")
        print(f"  speed-up {res['speedup']:.1f}x (target >= 3x)")
    if "read_month_seconds" in o:
        print(f"  read {o['read_month_days']:.1f} days back ({o['read_month_rows']:,} rows): "
              f"{o['read_month_seconds']:.3f} s (target <= 0.5 s for 30 days)")


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--scale", type=float, default=1.0, help="fraction of W2's year to generate (default 1)")
    p.add_argument("--data-dir", type=Path, default=HERE / "data")
    p.add_argument("--no-baseline", action="store_true", help="skip the pandas + to_sql baseline")
    p.add_argument("--only", choices=["w1", "w2"], default=None)
    p.add_argument("--json", action="store_true", help="print the figures as one JSON object")
    p.add_argument("--worker", nargs="+", help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.worker:
        kind, *rest = args.worker
        out = worker_ours(rest[0], rest[1], rest[2] == "1") if kind == "ours" else worker_baseline(rest[0], rest[1])
        print(json.dumps(out))
        return 0
    if args.scale <= 0 or args.scale > 1:
        p.error("--scale must be in (0, 1]")
    results = []
    with tempfile.TemporaryDirectory(prefix="drawdown-bench-") as tmpd:
        tmp = Path(tmpd)
        if args.only in (None, "w1"):
            w1 = generate(args.data_dir / "w1_week_1hz.csv", 7.0)
            results.append(bench("W1 (1 week, 1 Hz, 3 channels)", w1, tmp, baseline=not args.no_baseline,
                                 read_month=False))
            results[-1]["targets"] = {"seconds_max": 3.0, "speedup_min": 3.0}
        if args.only in (None, "w2"):
            days = 365.0 * args.scale
            w2 = generate(args.data_dir / f"w2_year_1hz_scale{args.scale:g}.csv", days, seed=2)
            results.append(bench(f"W2 ({days:.1f} days, 1 Hz, 3 channels; scale {args.scale:g})", w2, tmp,
                                 baseline=not args.no_baseline, read_month=True))
            results[-1]["targets"] = {"seconds_max": 60.0 * args.scale, "peak_rss_MB_max": 2048,
                                      "speedup_min": 3.0, "read_month_seconds_max": 0.5}
    if args.json:
        print(json.dumps({"cpu_count": os.cpu_count(), "results": results}, indent=2))
    else:
        for r in results:
            _print(r)
    return 0


if __name__ == "__main__":
    sys.exit(main())
