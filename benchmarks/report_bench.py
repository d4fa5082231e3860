"""Benchmark: the full report on synthetic 1 Hz multi-channel data, and a naive pandas ledger.

Targets (issue 3): one week at 1 Hz <= 1 s, one year at 1 Hz <= 15 s, peak RSS <= 2 GB.
``--scale`` shrinks both runs (``--scale 0.01`` = 1.7 h and 3.65 days); the lead runs
``--scale 1`` on a quiet machine. The frame is built in memory (no store, no CSV):
battery (voltage, current, temperature) at 1 Hz, solar and load channels at 10 s
(a typical charge-controller log rate), float32 values as the store keeps them.

The naive comparison computes the same daily consumed/solar Ah with a groupby-apply
over local days calling a per-day Python trapezoid on a wide frame — the way a quick
notebook would — on the week-long input only (it is far too slow for a year).

``--single-shunt`` keeps only the battery channel (the common installation: one shunt),
so the report runs the single-shunt load model and attribution.

Usage::

    python benchmarks/report_bench.py --scale 0.1 [--single-shunt] [--json]
"""

from __future__ import annotations

import argparse
import gc
import json
import os
import sys
import time

import numpy as np
import pandas as pd

os.environ.setdefault("PYBAMM_DISABLE_TELEMETRY", "true")


def synthetic_frame(seconds: int, *, seed: int = 1, source_interval_s: int = 10) -> pd.DataFrame:
    """A canonical long frame: battery at 1 Hz, solar and load at ``source_interval_s``.

    Value columns are float32, as the store keeps them: a year of 1 Hz battery readings
    is then 31.5 M x 25 bytes = 0.8 GB as a frame (float64 would be 1.3 GB).
    """
    rng = np.random.default_rng(seed)
    t0 = np.int64(1_780_000_000) * 1_000_000
    sec = np.arange(seconds, dtype=np.int64)
    t_us = t0 + sec * 1_000_000
    day_s = (sec % 86400).astype(np.float32)
    solar = np.clip(20.0 * np.sin((day_s - 21600) / 43200 * np.pi), 0, None).astype(np.float32)
    fridge = np.where((sec // 600) % 3 == 0, 4.5, 0.3).astype(np.float32)
    load = -(fridge + rng.normal(0, 0.05, seconds).astype(np.float32))
    bat = solar + load
    volt = (13.2 + 0.01 * bat).astype(np.float32)
    sub = slice(None, None, source_interval_s)
    blocks = [("battery", t_us, volt, bat, np.full(seconds, 15.0, np.float32)),
              ("load", t_us[sub], None, load[sub], None),
              ("solar", t_us[sub], volt[sub], solar[sub], None)]
    n_all = sum(len(b[1]) for b in blocks)
    codes = np.concatenate([np.full(len(b[1]), k, np.int8) for k, b in enumerate(blocks)])
    nanf = np.float32(np.nan)

    def col(j: int) -> np.ndarray:
        return np.concatenate([b[j] if b[j] is not None else np.full(len(b[1]), nanf, np.float32) for b in blocks])

    return pd.DataFrame({
        "t": pd.arrays.DatetimeArray._simple_new(np.concatenate([b[1] for b in blocks]).view("M8[us]"),
                                                 dtype=pd.DatetimeTZDtype("us", "UTC")),
        "channel": pd.Categorical.from_codes(codes, categories=[b[0] for b in blocks]),
        "voltage_V": col(2), "current_A": col(3), "temperature_C": col(4),
        "soc_pct": np.full(n_all, nanf, np.float32),
    })


def _system():
    from drawdown.analysis.system import system_from_mapping

    return system_from_mapping({"site": {"latitude_deg": 60.4, "longitude_deg": 5.3, "timezone": "Europe/Oslo"},
                                "battery": {"chemistry": "lifepo4", "nominal_voltage_V": 12.8,
                                            "rated_capacity_Ah": 200},
                                "solar": [{"peak_power_W": 300}]})


def _reset_peak_rss() -> None:
    """Reset the kernel's high-water mark of this process (Linux >= 4.0: clear_refs 5)."""
    try:
        with open("/proc/self/clear_refs", "w") as fh:
            fh.write("5")
    except OSError:
        pass


def _peak_rss_bytes() -> int:
    """Peak resident set size since the last reset [bytes] (VmHWM; getrusage elsewhere)."""
    try:
        with open("/proc/self/status") as fh:
            for line in fh:
                if line.startswith("VmHWM:"):
                    return int(line.split()[1]) * 1024
    except OSError:
        pass
    import resource

    return int(resource.getrusage(resource.RUSAGE_SELF).ru_maxrss) * 1024


def naive_ledger(readings: pd.DataFrame, timezone: str) -> pd.DataFrame:
    """The same consumed/solar Ah per local day the slow way (pivot, groupby-apply, Python trapezoid)."""
    wide = readings.pivot_table(index="t", columns="channel", values="current_A", observed=True).ffill()
    wide["date"] = wide.index.tz_convert(timezone).date

    def per_day(g: pd.DataFrame) -> pd.Series:
        secs = (g.index - g.index[0]).total_seconds().to_numpy()
        out = {"consumed_Ah": 0.0, "charged_Ah_solar": 0.0}
        for i in range(1, len(g)):  # the row loop a quick notebook writes
            dt_h = (secs[i] - secs[i - 1]) / 3600.0
            gross = (g["solar"].iat[i] - g["battery"].iat[i] + g["solar"].iat[i - 1] - g["battery"].iat[i - 1]) / 2
            out["consumed_Ah"] += gross * dt_h
            out["charged_Ah_solar"] += (g["solar"].iat[i] + g["solar"].iat[i - 1]) / 2 * dt_h
        return pd.Series(out)

    return wide.groupby("date").apply(per_day, include_groups=False)


def run(scale: float, single_shunt: bool = False) -> dict:
    from drawdown.analysis.ledger import daily_ledger
    from drawdown.analysis.report import build_report

    system = _system()
    def make(seconds: int) -> pd.DataFrame:
        frame = synthetic_frame(seconds)
        if single_shunt:
            frame = frame[frame["channel"] == "battery"].reset_index(drop=True)
        return frame

    build_report(make(7200), system)  # warm-up: imports and first-call costs
    results: dict = {"scale": scale, "single_shunt": single_shunt}
    for label, full_s, target_s in (("week", 7 * 86400, 1.0), ("year", 365 * 86400, 15.0)):
        seconds = max(3600, int(full_s * scale))
        frame = make(seconds)
        gc.collect()
        _reset_peak_rss()
        t = time.perf_counter()
        rep = build_report(frame, system)
        elapsed = time.perf_counter() - t
        peak = _peak_rss_bytes()
        n_days = len(rep.to_json()["days"])
        results[label] = {"samples_per_channel": seconds, "days": n_days, "report_s": round(elapsed, 3),
                          "target_s_at_scale_1": target_s,
                          "extrapolated_s_at_scale_1": round(elapsed * full_s / seconds, 2),
                          "peak_rss_MB": round(peak / 1e6, 1),
                          "frame_MB": round(float(frame.memory_usage(deep=False).sum()) / 1e6, 1)}
        if label == "week" and not single_shunt:
            t = time.perf_counter()
            fast = daily_ledger(frame, system)
            fast_s = time.perf_counter() - t
            naive_frame = frame if seconds <= 86400 * 2 else frame[frame["t"] < frame["t"].iloc[0]
                                                                   + pd.Timedelta(days=2)]
            t = time.perf_counter()
            slow = naive_ledger(naive_frame, system.site.timezone)
            slow_s = time.perf_counter() - t
            n_naive = naive_frame["t"].nunique()
            fast_per = fast_s / seconds
            slow_per = slow_s / n_naive
            # The naive frame is cut after two UTC days, so its last local day is partial:
            # compare the whole days only.
            whole = max(len(slow) - 1, 1)
            agree = float(np.max(np.abs(slow["consumed_Ah"].to_numpy()[:whole]
                                        - fast["consumed_Ah"].to_numpy()[:whole]))) if len(slow) else None
            results["naive_ratio"] = {"ledger_s": round(fast_s, 4), "naive_s": round(slow_s, 3),
                                      "naive_samples": int(n_naive),
                                      "speedup_per_sample": round(slow_per / fast_per, 1),
                                      "max_daily_consumed_difference_Ah": agree}
        del frame, rep
        gc.collect()
    return results


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--scale", type=float, default=0.1, help="fraction of a week / a year to run (default 0.1)")
    p.add_argument("--single-shunt", action="store_true", help="battery channel only (the single-shunt path)")
    p.add_argument("--json", action="store_true")
    a = p.parse_args(argv)
    res = run(a.scale, a.single_shunt)
    if a.json:
        json.dump(res, sys.stdout, indent=2)
        sys.stdout.write("\n")
    else:
        for k, v in res.items():
            print(f"{k}: {v}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
