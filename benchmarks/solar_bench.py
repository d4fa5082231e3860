"""Time analyse_solar and analyse_charging on a long 1 Hz log.

Usage::

    .venv/bin/python benchmarks/solar_bench.py --scale 0.02   # ~7 days, a quick check
    .venv/bin/python benchmarks/solar_bench.py --scale 1      # one year at 1 Hz (~2.5 GB RAM)

The log is synthetic: a battery and a solar channel at 1 Hz (plus an
alternator channel with one drive a week), solar = pvlib clear sky x 0.8 x a
slow cloud factor, interpolated from 10-minute values. Prints one JSON line
with the row count and the seconds each analysis took (to stdout: this is a
script, not library code).
"""

from __future__ import annotations

import argparse
import json
import time

import numpy as np
import pandas as pd

from analysis.charging import analyse_charging
from analysis.solar import analyse_solar, expected_clear_sky
from analysis.system import system_from_mapping

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


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--scale", type=float, default=0.02, help="fraction of one year (default 0.02)")
    ap.add_argument("--repeat", type=int, default=2, help="runs of each analysis; the best is reported")
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
    print(json.dumps({"days": days, "rows": len(df), "build_s": round(built, 2),
                      "analyse_solar_s": round(solar_s, 3), "analyse_charging_s": round(charging_s, 3),
                      "first_run_s": [round(solar_runs[0], 3), round(charging_runs[0], 3)],
                      "performance_ratio": sa.performance_ratio}))
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
