"""Dashboard callback latency on a year of 1 Hz readings (target: p95 <= 300 ms).

Builds (or reuses) a store holding ``--scale`` x 365 days of synthetic 1 Hz
readings on a battery and a solar channel (a plausible van: a base load, a
compressor fridge cycling, evening lights, a bell-shaped solar day with daily
cloudiness), then times the dashboard's callbacks the way a user drives them:

* ``live``      -- the live view's refresh (newest hour, alarm, runtime left); its first
  call runs the fortnight's analysis (``live_cold``), later ones reuse it while
  readings are appended;
* ``overview``  -- the trip page's readings plot over the WHOLE store, thinned to
  ~2,000 points per trace (read in week-long pieces);
* ``zoom``      -- re-queries of random zoom windows (1 h, 1 day, 1 week, 1 month)
  at full resolution or thinned: each a cache miss that reads the store;
* ``trip``      -- the trip page's ledger/summary/table for a 14-day range;
* ``planner``   -- the planner with a new autonomy target each time (new sizing).

Each callback is called as the page's render function inside a request
context of a real app, and its output is serialised to JSON with plotly's
encoder (what Dash sends). The first call of a range runs the analysis
(``cold``); later calls hit the cache (``warm``). The figure that matters is the
p95 of the interactive calls (live, zoom, warm overview/trip, planner target
changes); cold analysis runs are reported beside it.

**Naive baseline** (same store, same run, same windows; ``--no-baseline`` skips it): the
figure path without our two tricks --

* no downsampling: the readings plot is built from EVERY stored battery reading of the
  range (``Store.read`` at full resolution into the same ``figures.readings_figure``),
  then JSON-encoded with plotly's encoder, which is what a browser would receive;
* no per-range cache: ``live``, ``trip`` and ``planner`` call ``clear_caches()`` before
  every call, so each one re-reads the range and re-runs the analysis.

A full-resolution plot of a year (2 x 31.5 M points) is far too slow and big to build, so a
naive plot of a range longer than ``--baseline-days`` (default 7) is MEASURED on the first
``--baseline-days`` of that range and EXTRAPOLATED linearly in the range's length (the store
is uniform 1 Hz; the slope comes from the same call and a 1-hour call, so fixed costs are not
scaled). Extrapolated calls are counted in ``baseline.extrapolated_calls`` and listed with
their measured sub-range. Each naive callback runs ``--baseline-repeats`` times (default 3;
zoom: 4 x that). ``speedup_p95`` = baseline p95 / ours p95, per callback and over the
interactive mix (live, overview, zoom, trip, planner).

Usage::

    python benchmarks/dashboard_bench.py --scale 0.05          # ~18 days, quick
    python benchmarks/dashboard_bench.py --scale 1 --store benchmarks/data/year.sqlite   # the real figure

Prints one JSON object on stdout; progress on stderr.
"""

from __future__ import annotations

import argparse
import json
import os
import sys
import tempfile
import time
from pathlib import Path
from types import SimpleNamespace

import numpy as np

os.environ.setdefault("PYBAMM_DISABLE_TELEMETRY", "true")
ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

SYSTEM_TOML = """\
[site]
latitude_deg = 61.2
longitude_deg = 7.1
timezone = "Europe/Oslo"
[battery]
chemistry = "lifepo4"
nominal_voltage_V = 12.8
rated_capacity_Ah = 200
rated_hours = 20
[[solar]]
peak_power_W = 300
tilt_deg = 0
azimuth_deg = 180
controller = "mppt"
[[charger]]
source = "alternator"
max_current_A = 30
"""

START = np.datetime64("2025-01-01T00:00:00", "us")
DAY_US = 86_400_000_000


def _day(d: int, rng: np.random.Generator) -> tuple[np.ndarray, dict[str, np.ndarray], dict[str, np.ndarray]]:
    """One synthetic day at 1 Hz: (t_us, battery values, solar values). Vectorised, no loop over samples."""
    s = np.arange(86_400, dtype=np.float64)
    t_us = (START.astype(np.int64) + d * DAY_US + (s * 1e6).astype(np.int64))
    hour = s / 3600.0
    doy = (d % 365) + 1
    # Solar: a bell between sunrise and sunset whose length follows the season (61 N), times cloudiness.
    half_day_h = 6.0 + 5.5 * np.sin(2 * np.pi * (doy - 80) / 365)
    x = (hour - 12.5) / max(half_day_h, 0.5)
    bell = np.clip(np.cos(np.pi / 2 * x), 0, None) ** 1.5 * (np.abs(x) < 1)
    cloud = rng.uniform(0.25, 1.0)
    solar_A = 18.0 * cloud * bell * (0.9 + 0.1 * rng.standard_normal(s.size).clip(-3, 3))
    solar_A = np.clip(solar_A, 0, None)
    # Loads: base 0.8 A, fridge 4 A on a 30-minute cycle at ~35 % duty, lights 1.5 A 18-23 h, kettle bursts.
    fridge = ((s % 1800) < 630) * 4.0
    lights = ((hour >= 18) & (hour < 23)) * 1.5
    kettle = ((np.abs(hour - 7.6) < 0.06) | (np.abs(hour - 15.1) < 0.05)) * 75.0
    load_A = 0.8 + fridge + lights + kettle + 0.05 * rng.standard_normal(s.size)
    net_A = solar_A - load_A
    # SoC by a clamped running sum (reflected at 100 %), then voltage from a simple LFP-like curve + IR.
    soc = 70.0 + 10 * np.sin(d / 5.0) + np.cumsum(net_A) / 3600.0 / 200.0 * 100.0
    soc = soc - np.maximum.accumulate(np.maximum(soc - 100.0, 0.0))
    soc = np.clip(soc, 5, 100)
    ocv = 12.9 + 0.45 * (soc / 100.0) ** 3 + 0.25 * (soc > 99.5)
    voltage = ocv + 0.006 * net_A + 0.004 * rng.standard_normal(s.size)
    temp = 12 + 6 * np.sin(2 * np.pi * (hour - 9) / 24) + rng.standard_normal() * 2
    battery = {"voltage_V": voltage, "current_A": net_A, "temperature_C": temp, "soc_pct": np.round(soc)}
    solar = {"voltage_V": np.where(solar_A > 0.05, voltage + 0.2, np.nan), "current_A": solar_A}
    return t_us, battery, solar


def build_store(path: Path, days: int, *, seed: int = 7) -> float:
    """Write ``days`` synthetic days into a new store at ``path``; returns seconds taken."""
    from drawdown.collector.store import Store

    t0 = time.perf_counter()
    rng = np.random.default_rng(seed)
    with Store(path) as store:
        for d in range(days):  # a loop over days, not over readings
            t_us, battery, solar = _day(d, rng)
            with store.transaction():
                store.append_arrays("battery", t_us, battery)
                store.append_arrays("solar", t_us, solar)
            if d % 30 == 29:
                print(f"  stored {d + 1}/{days} days", file=sys.stderr)
    return time.perf_counter() - t0


def _timed(fn, *args, **kw) -> float:
    import plotly.utils

    t0 = time.perf_counter()
    out = fn(*args, **kw)
    json.dumps(out, cls=plotly.utils.PlotlyJSONEncoder)  # what Dash sends to the browser
    return (time.perf_counter() - t0) * 1000.0


def _stats(ms: list[float]) -> dict[str, float]:
    a = np.asarray(ms)
    return {"n": int(a.size), "p50_ms": round(float(np.percentile(a, 50)), 1),
            "p95_ms": round(float(np.percentile(a, 95)), 1), "max_ms": round(float(a.max()), 1)}


def _naive_readings(store_path: Path, lo, hi, tz: str):
    """The readings plot from every stored battery reading of ``[lo, hi)`` (no thinning, no cache)."""
    from drawdown.collector.store import Store
    from drawdown.dashboard import figures

    with Store(store_path) as st:
        piece = st.read(lo, hi, channels=["battery"])
    series = {q: (piece["t"], piece[q].to_numpy(dtype="float64")) for q in ("voltage_V", "current_A")
              if len(piece)}
    return figures.readings_figure(series, tz=tz, title="Battery readings", full_resolution=True)


def _naive_readings_ms(store_path: Path, lo, hi, tz: str, cap, calib: dict) -> tuple[float, dict | None]:
    """Time one naive readings call; a range longer than ``cap`` is measured on its first ``cap``
    and extrapolated linearly in length from that and the 1-hour calibration call."""
    import pandas as pd

    width = hi - lo
    if width <= cap:
        return _timed(_naive_readings, store_path, lo, hi, tz), None
    ms_cap = _timed(_naive_readings, store_path, lo, lo + cap, tz)
    small_ms, small_w = calib["ms"], calib["width"]
    slope = max(0.0, (ms_cap - small_ms) / ((cap - small_w) / pd.Timedelta(days=1)))  # [ms/day]
    est = ms_cap + slope * ((width - cap) / pd.Timedelta(days=1))
    return est, {"range_days": round(width / pd.Timedelta(days=1), 2),
                 "measured_days": round(cap / pd.Timedelta(days=1), 2), "measured_ms": round(ms_cap, 1),
                 "slope_ms_per_day": round(slope, 1), "extrapolated_ms": round(est, 1)}


def run_baseline(store_path: Path, system_path: Path, *, repeats: int, seed: int, cap_days: float,
                 ours: dict) -> dict:
    """The naive figure path on the same store (see the module docstring); ``ours`` = :func:`run`'s result."""
    import pandas as pd

    from drawdown.dashboard.app import create_app
    from drawdown.dashboard.data import clear_caches, current

    rng = np.random.default_rng(seed)  # the same seed: the same zoom windows as ours
    app = create_app(SimpleNamespace(store_path=store_path, system_path=system_path))
    res: dict[str, list[float]] = {k: [] for k in ("live", "overview", "zoom", "trip", "planner")}
    extrapolated: list[dict] = []
    cap = pd.Timedelta(days=cap_days)
    with app.server.test_request_context():
        from drawdown.dashboard.pages import live, planner, trip

        clear_caches()
        src = current()
        span = src.time_span()
        tz = src.timezone()
        trip_range = src.default_range(days=14)
        lo_all, hi_all = span[0], span[1] + pd.Timedelta(microseconds=1)
        _naive_readings(store_path, lo_all, lo_all + pd.Timedelta(hours=1), tz)  # warm-up (imports)
        w_small = pd.Timedelta(hours=1)
        calib = {"ms": _timed(_naive_readings, store_path, lo_all, lo_all + w_small, tz), "width": w_small}
        for _ in range(repeats):
            ms, note = _naive_readings_ms(store_path, lo_all, hi_all, tz, cap, calib)
            res["overview"].append(ms)
            if note:
                extrapolated.append({"callback": "overview", **note})
        for _ in range(repeats):
            clear_caches()
            res["live"].append(_timed(live.render_live, src))
        widths = [pd.Timedelta(hours=1), pd.Timedelta(days=1), pd.Timedelta(days=7), pd.Timedelta(days=30)]
        total_s = (span[1] - span[0]).total_seconds()
        for i in range(repeats * 4):
            w = widths[i % 4]
            if w.total_seconds() >= total_s:
                w = pd.Timedelta(seconds=total_s / 2)
            lo = span[0] + pd.Timedelta(seconds=float(rng.uniform(0, total_s - w.total_seconds())))
            ms, note = _naive_readings_ms(store_path, lo, lo + w, tz, cap, calib)
            res["zoom"].append(ms)
            if note:
                extrapolated.append({"callback": "zoom", **note})
        stored = {"start": trip_range[0], "end": trip_range[1]}
        for _ in range(repeats):
            clear_caches()
            res["trip"].append(_timed(trip.render_trip, src, *trip_range))
        for i in range(repeats):
            clear_caches()
            res["planner"].append(_timed(planner.render_plan, src, 1.0 + 0.5 * (i + 1), 90, stored))
        clear_caches()
    interactive = [x for k in ("live", "overview", "zoom", "trip", "planner") for x in res[k]]
    cb = ours["callbacks"]
    pairs = {"live": "live", "overview": "overview_warm", "zoom": "zoom", "trip": "trip_warm", "planner": "planner"}
    speedup = {k: round(_stats(res[k])["p95_ms"] / cb[o]["p95_ms"], 1) for k, o in pairs.items()
               if res[k] and o in cb and cb[o]["p95_ms"] > 0}
    # Like for like without our cache: the naive overview against our cold (first) overview.
    if res["overview"] and cb.get("overview_cold", {}).get("p95_ms"):
        speedup["overview_vs_our_cold"] = round(_stats(res["overview"])["p95_ms"] / cb["overview_cold"]["p95_ms"], 1)
    base_p95 = float(np.percentile(interactive, 95))
    return {"what": "full-resolution readings plot (every stored point) + plotly JSON, no per-range cache "
                    "(clear_caches() before each live/trip/planner call)",
            "baseline_days_cap": cap_days, "calibration_1h_ms": round(calib["ms"], 1),
            "callbacks": {k: _stats(v) for k, v in res.items() if v},
            "interactive": _stats(interactive),
            "extrapolated_calls": len(extrapolated), "extrapolated": extrapolated,
            "speedup_p95": {**speedup, "interactive": round(base_p95 / ours["interactive"]["p95_ms"], 1)}}


def run(store_path: Path, system_path: Path, *, repeats: int, seed: int) -> dict:
    import pandas as pd

    from drawdown.dashboard.app import create_app
    from drawdown.dashboard.data import clear_caches, current

    rng = np.random.default_rng(seed)
    app = create_app(SimpleNamespace(store_path=store_path, system_path=system_path))
    results: dict[str, list[float]] = {k: [] for k in ("live_cold", "live", "overview_cold", "overview_warm", "zoom",
                                                       "trip_cold", "trip_warm", "planner_cold", "planner")}
    with app.server.test_request_context():
        from drawdown.dashboard.pages import live, planner, trip

        clear_caches()
        src = current()
        full = src.full_range()
        span = src.time_span()
        trip_range = src.default_range(days=14)
        print(f"  store {full[0]} .. {full[1]}", file=sys.stderr)

        results["overview_cold"].append(_timed(trip.render_readings, src, *full))
        for _ in range(repeats):
            results["overview_warm"].append(_timed(trip.render_readings, src, *full))
        results["live_cold"].append(_timed(live.render_live, src))  # runs the fortnight's analysis
        for _ in range(repeats):
            results["live"].append(_timed(live.render_live, src))
        tz = src.timezone()
        widths = [pd.Timedelta(hours=1), pd.Timedelta(days=1), pd.Timedelta(days=7), pd.Timedelta(days=30)]
        total_s = (span[1] - span[0]).total_seconds()
        for i in range(repeats * 4):
            w = widths[i % 4]
            if w.total_seconds() >= total_s:
                w = pd.Timedelta(seconds=total_s / 2)
            lo = span[0] + pd.Timedelta(seconds=float(rng.uniform(0, total_s - w.total_seconds())))
            hi = lo + w
            fmt = "%Y-%m-%d %H:%M:%S"
            zoom = {"xaxis.range[0]": lo.tz_convert(tz).strftime(fmt), "xaxis.range[1]": hi.tz_convert(tz).strftime(fmt)}
            results["zoom"].append(_timed(trip.render_readings, src, *full, relayout=zoom))
        results["trip_cold"].append(_timed(trip.render_trip, src, *trip_range))
        for _ in range(repeats):
            results["trip_warm"].append(_timed(trip.render_trip, src, *trip_range))
        stored = {"start": trip_range[0], "end": trip_range[1]}
        results["planner_cold"].append(_timed(planner.render_plan, src, 2.0, 90, stored))
        for i in range(repeats):
            results["planner"].append(_timed(planner.render_plan, src, 1.0 + 0.5 * (i + 1), 90, stored))
    interactive = (results["live"] + results["overview_warm"] + results["zoom"] + results["trip_warm"]
                   + results["planner"])
    return {"callbacks": {k: _stats(v) for k, v in results.items() if v},
            "interactive": _stats(interactive),
            "target_p95_ms": 300.0,
            "meets_target": bool(np.percentile(interactive, 95) <= 300.0)}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--scale", type=float, default=1.0, help="fraction of a year of 1 Hz data (default 1 = 365 days)")
    p.add_argument("--store", type=Path, default=None,
                   help="store to build or reuse (default: a temporary file, deleted afterwards)")
    p.add_argument("--repeats", type=int, default=10, help="calls per interactive callback (default 10)")
    p.add_argument("--seed", type=int, default=7)
    p.add_argument("--no-baseline", action="store_true", help="skip the naive (no thinning, no cache) baseline")
    p.add_argument("--baseline-repeats", type=int, default=3, help="calls per naive callback (default 3)")
    p.add_argument("--baseline-days", type=float, default=7.0,
                   help="longest range a naive plot is built on; longer ones are extrapolated (default 7)")
    args = p.parse_args(argv)
    days = max(2, int(round(365 * args.scale)))
    tmp = None
    if args.store is None:
        tmp = tempfile.TemporaryDirectory(prefix="drawdown-bench-")
        store_path = Path(tmp.name) / "readings.sqlite"
    else:
        store_path = args.store
    system_path = store_path.parent / "system.toml"
    build_s = None
    try:
        if not store_path.exists():
            print(f"building {days} days of 1 Hz readings in {store_path} ...", file=sys.stderr)
            build_s = build_store(store_path, days, seed=args.seed)
        system_path.write_text(SYSTEM_TOML, encoding="utf-8")
        out = run(store_path, system_path, repeats=args.repeats, seed=args.seed)
        if not args.no_baseline:
            print("naive baseline ...", file=sys.stderr)
            out["baseline"] = run_baseline(store_path, system_path, repeats=max(1, args.baseline_repeats),
                                           seed=args.seed, cap_days=args.baseline_days, ours=out)
            out["speedup_p95_interactive"] = out["baseline"]["speedup_p95"]["interactive"]
        from drawdown.collector.store import Store

        with Store(store_path) as st:
            rows = sum(c["rows"] for c in st.channel_summary().values())
        out = {"days": days, "readings": rows, "store_MB": round(store_path.stat().st_size / 1e6, 1),
               "build_s": None if build_s is None else round(build_s, 1), **out}
        json.dump(out, sys.stdout, indent=2)
        sys.stdout.write("\n")
    finally:
        if tmp is not None:
            tmp.cleanup()
    return 0


if __name__ == "__main__":
    sys.exit(main())
