"""Benchmark: importing battery logs, whole process, ours against a naive pandas + SQLite baseline.

Every figure is a whole process, timed from outside the way a user runs it (interpreter start,
imports, parse, write, exit): ``drawdown --quiet --store S import FILE`` against a script that
does what a careful first attempt does -- ``pandas.read_csv`` (default engine),
``pandas.to_datetime`` and ``DataFrame.to_sql`` into a SQLite file. Both run in the same run on
the same file; peak RSS is each process's own (``wait4``).

Workloads (written under benchmarks/data/, which git ignores):

W1  one week at 2 s, three current channels + bank voltage + temperature, ISO 8601 times with
    offset (302,400 lines, ~15 MB). Target: ours <= 0.34 x the baseline's time (>= 3x faster).
W2  one year at 1 Hz, same columns (31.5 M lines, ~1.5 GB at --scale 1). Targets: import
    <= 20 s and peak RSS <= 2 GB; reading one month back as a DataFrame <= 0.5 s; exporting the
    store's readings to Parquet (``drawdown export readings``) <= 10 s. Time targets scale with
    --scale.
CLI ``drawdown --help``: <= 0.25 s (median of 5).

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


def generate(path: Path, days: float, seed: int = 1, step_s: int = 1) -> Path:
    """Write ``days`` of readings every ``step_s`` seconds to ``path`` (reused when already there)."""
    import pyarrow as pa
    import pyarrow.csv as pcsv

    stamp = path.with_suffix(".done")
    want = f"{days:.6f} {seed} {step_s}"
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
            if step_s > 1:
                tb = tb.take(pa.array(np.arange(0, tb.num_rows, step_s)))
            buf = io.BytesIO()
            pcsv.write_csv(tb, buf, pcsv.WriteOptions(include_header=(d == 0), quoting_style="none"))
            f.write(buf.getvalue())
    stamp.write_text(want)
    return path


# -- whole processes ------------------------------------------------------------------------------

BASELINE = """
import sqlite3, sys
import pandas as pd
df = pd.read_csv(sys.argv[1])
df["time"] = pd.to_datetime(df["time"])
with sqlite3.connect(sys.argv[2]) as con:
    df.to_sql("readings", con, if_exists="replace", index=False, chunksize=100_000)
print(len(df))
"""

READ_MONTH = """
import json, sys, time
import pandas as pd
from drawdown.collector.store import Store
with Store(sys.argv[1], read_only=True) as st:
    start, last = st.time_span()
    end = min(start + pd.Timedelta(days=30), last + pd.Timedelta(seconds=1))
    t1 = time.perf_counter()
    frame = st.read(start, end)
    print(json.dumps({"seconds": time.perf_counter() - t1, "rows": len(frame),
                      "days": (end - start).total_seconds() / 86400}))
"""


def _drawdown() -> list[str]:
    exe = Path(sys.executable).with_name("drawdown")
    return [str(exe)] if exe.exists() else [sys.executable, "-m", "drawdown"]


def run_process(argv: list[str], out: Path) -> dict:
    """Run ``argv`` to completion with stdout to ``out``; its wall time [s] and peak RSS [MB] (wait4)."""
    env = {k: v for k, v in os.environ.items() if k != "PYTHONDONTWRITEBYTECODE"}  # as installed: .pyc used
    with open(out, "wb") as f, open(out.with_suffix(".err"), "wb") as e:
        t0 = time.perf_counter()
        proc = subprocess.Popen(argv, stdout=f, stderr=e, env=env)
        _, status, usage = os.wait4(proc.pid, 0)
        wall = time.perf_counter() - t0
        proc.returncode = os.waitstatus_to_exitcode(status)
    if proc.returncode != 0:
        raise RuntimeError(f"{' '.join(argv)} failed ({proc.returncode}):\n{out.with_suffix('.err').read_text()[-2000:]}")
    return {"seconds": wall, "peak_rss_MB": usage.ru_maxrss / 1024}


def ours_import(csv_path: Path, store: Path, tmp: Path) -> dict:
    for f in (store, Path(f"{store}-wal"), Path(f"{store}-shm")):
        f.unlink(missing_ok=True)
    out = tmp / "ours.json"
    res = run_process([*_drawdown(), "--quiet", "--store", str(store), "import", "--json", str(csv_path)], out)
    r = json.loads(out.read_text())["files"][0]
    return {**res, "rows": int(r["rows_stored"]), "rejected": int(r["rows_rejected"])}


def baseline_import(csv_path: Path, db: Path, tmp: Path) -> dict:
    db.unlink(missing_ok=True)
    out = tmp / "baseline.txt"
    res = run_process([sys.executable, "-c", BASELINE, str(csv_path), str(db)], out)
    return {**res, "rows": int(out.read_text().split()[-1])}


def bench(name: str, csv_path: Path, tmp: Path, *, baseline: bool, repeat: int = 1) -> dict:
    """Ours and the baseline on one file; with ``repeat`` > 1 each is run that often, the median kept."""
    size_MB = csv_path.stat().st_size / 1e6

    def median_of(fn, *a) -> dict:
        runs = sorted((fn(*a) for _ in range(repeat)), key=lambda r: r["seconds"])
        return runs[len(runs) // 2]

    ours = median_of(ours_import, csv_path, tmp / f"{name[:2]}.sqlite", tmp)
    res = {"workload": name, "file": str(csv_path), "file_MB": round(size_MB, 1), "lines": ours["rows"],
           "ours": {**ours, "rows_per_s": ours["rows"] / ours["seconds"], "MB_per_s": size_MB / ours["seconds"]}}
    if baseline:
        base = median_of(baseline_import, csv_path, tmp / f"{name[:2]}-baseline.sqlite", tmp)
        res["baseline"] = {**base, "rows_per_s": base["rows"] / base["seconds"], "MB_per_s": size_MB / base["seconds"]}
        res["ratio"] = ours["seconds"] / base["seconds"]
        res["speedup"] = base["seconds"] / ours["seconds"]
    return res


def help_seconds(tmp: Path, n: int = 5) -> float:
    runs = sorted(run_process([*_drawdown(), "--help"], tmp / "help.txt")["seconds"] for _ in range(n + 1))
    return runs[1:][n // 2]  # the first run may compile .pyc files: not counted


def read_month(store: Path, tmp: Path) -> dict:
    out = tmp / "read.json"
    res = run_process([sys.executable, "-c", READ_MONTH, str(store)], out)
    return {**json.loads(out.read_text()), "process_seconds": res["seconds"]}


def export_parquet(store: Path, tmp: Path) -> dict:
    dest = tmp / "readings.parquet"
    res = run_process([*_drawdown(), "--quiet", "--store", str(store), "export", "readings", "--format", "parquet",
                       "--out", str(dest), "--json"], tmp / "export.json")
    import pyarrow.parquet as pq

    return {**res, "rows": pq.ParquetFile(dest).metadata.num_rows, "file_MB": dest.stat().st_size / 1e6}


def _print(res: dict) -> None:
    o = res["ours"]
    print(f"{res['workload']}: {res['file_MB']:.1f} MB, {res['lines']:,} lines (whole processes)")
    print(f"  ours     {o['seconds']:7.2f} s  {o['rows_per_s']:12,.0f} rows/s  {o['MB_per_s']:7.1f} MB/s"
          f"  peak RSS {o['peak_rss_MB']:7.0f} MB")
    if "baseline" in res:
        b = res["baseline"]
        print(f"  baseline {b['seconds']:7.2f} s  {b['rows_per_s']:12,.0f} rows/s  {b['MB_per_s']:7.1f} MB/s"
              f"  peak RSS {b['peak_rss_MB']:7.0f} MB")
        print(f"  ratio ours/baseline {res['ratio']:.2f} ({res['speedup']:.1f}x faster)")
    for key, label in (("read_month", "read back"), ("export", "export readings to Parquet")):
        if key in res:
            r = res[key]
            what = f"{r['days']:.1f} days, {r['rows']:,} rows" if key == "read_month" else f"{r['rows']:,} rows"
            print(f"  {label} ({what}): {r['seconds']:.2f} s")
    for k, v in res.get("targets", {}).items():
        print(f"  target {k}: {v}")


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    p.add_argument("--scale", type=float, default=1.0, help="fraction of W2's year to generate (default 1)")
    p.add_argument("--data-dir", type=Path, default=HERE / "data")
    p.add_argument("--no-baseline", action="store_true", help="skip the pandas + to_sql baseline")
    p.add_argument("--only", choices=["w1", "w2", "help"], default=None)
    p.add_argument("--repeat", type=int, default=3, help="runs of each W1 import; the median is kept (default 3)")
    p.add_argument("--json", action="store_true", help="print the figures as one JSON object")
    args = p.parse_args(argv)
    if args.scale <= 0 or args.scale > 1:
        p.error("--scale must be in (0, 1]")
    results: list[dict] = []
    with tempfile.TemporaryDirectory(prefix="drawdown-bench-") as tmpd:
        tmp = Path(tmpd)
        if args.only in (None, "help"):
            results.append({"workload": "drawdown --help", "seconds": help_seconds(tmp), "targets": {"seconds_max": 0.25}})
        if args.only in (None, "w1"):
            w1 = generate(args.data_dir / "w1_week_2s.csv", 7.0, step_s=2)
            results.append(bench("W1 (1 week, 2 s, 3 channels)", w1, tmp, baseline=not args.no_baseline,
                                 repeat=max(1, args.repeat)))
            results[-1]["targets"] = {"ratio_max": 0.34}
        if args.only in (None, "w2"):
            days = 365.0 * args.scale
            w2 = generate(args.data_dir / f"w2_year_1hz_scale{args.scale:g}.csv", days, seed=2)
            res = bench(f"W2 ({days:.1f} days, 1 Hz, 3 channels; scale {args.scale:g})", w2, tmp,
                        baseline=not args.no_baseline)
            store = tmp / "W2.sqlite"
            res["read_month"] = read_month(store, tmp)
            res["export"] = export_parquet(store, tmp)
            res["targets"] = {"seconds_max": round(20.0 * args.scale, 3), "peak_rss_MB_max": 2048,
                              "read_month_seconds_max": 0.5, "export_seconds_max": round(10.0 * args.scale, 3)}
            results.append(res)
    if args.json:
        print(json.dumps({"cpu_count": os.cpu_count(), "results": results}, indent=2))
    else:
        for r in results:
            if "ours" in r:
                _print(r)
            else:
                print(f"{r['workload']}: {r['seconds']:.3f} s (target <= {r['targets']['seconds_max']} s)")
    return 0


if __name__ == "__main__":
    sys.exit(main())
