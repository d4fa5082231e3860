"""Time analyse_solar and analyse_charging on a long 1 Hz log.

Usage::

    .venv/bin/python benchmarks/solar_bench.py --scale 0.02   # ~7 days, a quick check
    .venv/bin/python benchmarks/solar_bench.py --scale 1      # one year at 1 Hz (~2.5 GB RAM)

The log is synthetic: a battery and a solar channel at 1 Hz (plus an
alternator channel with one drive a week), solar = pvlib clear sky x 0.8 x a
slow cloud factor, interpolated from 10-minute values. Prints one JSON line
with the row count and the seconds each analysis took (to stdout: this is a
script, not library code).

**Naive baseline** (same frame, same run; ``--no-baseline`` skips it), the path a user
writes in a notebook:

* solar: pivot the long frame to one column per channel, run the SAME pvlib chain
  (``expected_clear_sky``) on EVERY log timestamp instead of 10-minute interval
  centres, then ``groupby`` local day for measured and expected Wh and take the median
  daily ratio (no saturation or weather screening);
* charging: the same pivot, ``resample("1min").mean()``, sessions as runs of the
  alternator current above 0.5 A numbered with ``(on != on.shift()).cumsum()`` and a
  ``groupby(...).agg`` per session (start, end, Ah, 90th-percentile plateau, max).

pvlib on every 1 Hz sample holds dozens of per-sample arrays (~0.7 GB peak for a week), so it runs on
the first ``--baseline-days`` (default 7) of the log; OURS is timed again on exactly that
sub-range, and ``speedup_*`` = naive seconds / our seconds on the same rows (measured, not
extrapolated). ``naive_*_s_extrapolated_full`` scales the naive time linearly in rows to the
whole log (pvlib's cost is per sample), for comparison with ``analyse_*_s``.
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np
import pandas as pd

from drawdown.analysis.charging import analyse_charging
from drawdown.analysis.solar import analyse_solar, expected_clear_sky
from drawdown.analysis.system import system_from_mapping

SYSTEM = system_from_mapping({
    "site": {"latitude_deg": 61.2, "longitude_deg": 7.1, "timezone": "Europe/Oslo"},
    "battery": {"chemistry": "lifepo4", "nominal_voltage_V": 12.8, "rated_capacity_Ah": 200},
    "solar": [{"peak_power_W": 360, "tilt_deg": 0, "azimuth_deg": 180, "controller": "mppt"}],
    "charger": [{"source": "alternator", "max_current_A": 30, "alternator_rating_A": 180}],
})


def build(days: float, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    n = int(days * 86400)
    t0 = pd.Timestamp("2026-01-01", tz="UTC")
    t_s = np.arange(n, dtype=np.int64)
    coarse_s = np.arange(0, n + 600, 600)
    coarse = t0 + pd.to_timedelta(coarse_s, unit="s")
    exp = expected_clear_sky(pd.DatetimeIndex(coarse), SYSTEM)["delivered_W"].to_numpy()
    cloud = np.clip(1.0 - 0.6 * rng.random(len(coarse_s)) * (rng.random(len(coarse_s)) < 0.4), 0.1, 1.0)
    power = np.interp(t_s, coarse_s, exp * 0.8 * cloud)
    volts = 13.3 + 0.3 * (power > 200)
    solar_A = power / volts
    day = t_s // 86400
    hour = (t_s % 86400) / 3600.0
    alt_A = np.where((day % 7 == 3) & (hour > 9) & (hour < 11), 30.0, 0.0)
    t_us = (t0.value // 1000) + t_s * 1_000_000
    t = pd.DatetimeIndex(t_us.view("datetime64[us]")).tz_localize("UTC")
    nan = np.full(n, np.nan)
    frames = [
        pd.DataFrame({"t": t, "channel": "alternator", "voltage_V": nan, "current_A": alt_A,
                      "temperature_C": nan, "soc_pct": nan}),
        pd.DataFrame({"t": t, "channel": "battery", "voltage_V": volts, "current_A": solar_A + alt_A - 3.0,
                      "temperature_C": np.full(n, 12.0), "soc_pct": nan}),
        pd.DataFrame({"t": t, "channel": "solar", "voltage_V": nan, "current_A": solar_A,
                      "temperature_C": nan, "soc_pct": nan}),
    ]
    df = pd.concat(frames, ignore_index=True)
    df["channel"] = df["channel"].astype("category")
    return df


def naive_solar(df: pd.DataFrame, system=SYSTEM) -> float:
    """Median daily measured/expected energy with pvlib run on every log timestamp (the naive path)."""
    wide = df.pivot_table(index="t", columns="channel", values=["current_A", "voltage_V"], observed=True)
    solar_W = wide[("current_A", "solar")] * wide[("voltage_V", "battery")]
    expected_W = expected_clear_sky(pd.DatetimeIndex(wide.index), system)["delivered_W"]
    dt_h = wide.index.to_series().diff().dt.total_seconds().fillna(0).to_numpy() / 3600.0
    daily = pd.DataFrame({"measured_Wh": solar_W.to_numpy() * dt_h, "expected_Wh": expected_W.to_numpy() * dt_h,
                          "date": wide.index.tz_convert(system.site.timezone).date}).groupby("date").sum()
    daily = daily[daily["expected_Wh"] > 0]
    return float((daily["measured_Wh"] / daily["expected_Wh"]).median())


def naive_charging(df: pd.DataFrame) -> pd.DataFrame:
    """Alternator sessions by resample("1min").mean() + a groupby over runs (the naive path)."""
    wide = df.pivot_table(index="t", columns="channel", values=["current_A", "voltage_V"], observed=True)
    minute = wide.resample("1min").mean()
    alt = minute[("current_A", "alternator")].fillna(0.0)
    on = alt > 0.5
    run_id = (on != on.shift()).cumsum()
    frame = pd.DataFrame({"t": minute.index, "A": alt, "V": minute[("voltage_V", "battery")], "run": run_id})[on]
    return frame.groupby("run").agg(start=("t", "min"), end=("t", "max"), Ah=("A", lambda a: a.sum() / 60.0),
                                    plateau_A=("A", lambda a: a.quantile(0.9)), max_A=("A", "max"),
                                    mean_V=("V", "mean"))


def _best(fn, *args, repeat: int) -> tuple[float, object]:
    times, out = [], None
    for _ in range(max(1, repeat)):
        t0 = time.perf_counter()
        out = fn(*args)
        times.append(time.perf_counter() - t0)
    return min(times), out


def baseline(df: pd.DataFrame, days: float, cap_days: float, repeat: int) -> dict:
    """Naive solar and charging against ours on the same first ``cap_days`` of ``df``."""
    sub_days = min(days, cap_days)
    sub = df[df["t"] < df["t"].min() + pd.Timedelta(days=sub_days)].reset_index(drop=True)
    sub["channel"] = sub["channel"].astype("category")
    ours_solar_s, ours_sa = _best(analyse_solar, sub, SYSTEM, repeat=repeat)
    ours_charging_s, _ = _best(analyse_charging, sub, SYSTEM, repeat=repeat)
    naive_solar_s, naive_pr = _best(naive_solar, sub, repeat=repeat)
    naive_charging_s, sessions = _best(naive_charging, sub, repeat=repeat)
    scale_rows = len(df) / len(sub)
    return {"what": "pvlib (expected_clear_sky) on every log timestamp + groupby local day; charging by "
                    "pivot + resample('1min').mean() + groupby over runs",
            "days": round(sub_days, 3), "rows": len(sub),
            "naive_solar_s": round(naive_solar_s, 3), "naive_charging_s": round(naive_charging_s, 3),
            "ours_solar_s_same_rows": round(ours_solar_s, 3), "ours_charging_s_same_rows": round(ours_charging_s, 3),
            "speedup_solar": round(naive_solar_s / ours_solar_s, 1),
            "speedup_charging": round(naive_charging_s / ours_charging_s, 1),
            "naive_solar_s_extrapolated_full": round(naive_solar_s * scale_rows, 2),
            "naive_charging_s_extrapolated_full": round(naive_charging_s * scale_rows, 2),
            "extrapolation_factor_rows": round(scale_rows, 2),
            "naive_performance_ratio": round(naive_pr, 3), "ours_performance_ratio_same_rows":
                ours_sa.performance_ratio, "naive_alternator_sessions": len(sessions)}


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scale", type=float, default=0.02, help="fraction of one year (default 0.02)")
    ap.add_argument("--repeat", type=int, default=2, help="runs of each analysis; the best is reported")
    ap.add_argument("--no-baseline", action="store_true", help="skip the naive pvlib-on-every-sample baseline")
    ap.add_argument("--baseline-days", type=float, default=7.0,
                    help="days of the log the naive baseline runs on (default 7; pvlib at 1 Hz is memory-hungry)")
    args = ap.parse_args()
    days = max(1.0, 365.0 * args.scale)
    t0 = time.perf_counter()
    df = build(days)
    built = time.perf_counter() - t0
    solar_runs, charging_runs = [], []
    for _ in range(max(1, args.repeat)):
        t0 = time.perf_counter()
        sa = analyse_solar(df, SYSTEM)
        solar_runs.append(time.perf_counter() - t0)
        t0 = time.perf_counter()
        analyse_charging(df, SYSTEM)
        charging_runs.append(time.perf_counter() - t0)
    solar_s, charging_s = min(solar_runs), min(charging_runs)
    out = {"days": days, "rows": len(df), "build_s": round(built, 2),
           "analyse_solar_s": round(solar_s, 3), "analyse_charging_s": round(charging_s, 3),
           "first_run_s": [round(solar_runs[0], 3), round(charging_runs[0], 3)],
           "performance_ratio": sa.performance_ratio}
    if not args.no_baseline:
        out["baseline"] = baseline(df, days, args.baseline_days, args.repeat)
        out["speedup_solar"] = out["baseline"]["speedup_solar"]
        out["speedup_charging"] = out["baseline"]["speedup_charging"]
    print(json.dumps(out))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
