"""Solar yield against what a clear sky allowed: performance ratio, saturation, diagnostics.

The measured solar current (the ``solar`` channel, or the solar share the
single-shunt ledger attributes) is reduced to 10-minute means, multiplied by
the bank voltage and compared with the clear-sky output of the arrays in
``system.toml`` (:func:`analysis.solar_model.expected_clear_sky`, pvlib all the
way). Three things make the comparison honest:

* **Saturation.** When the bank is full, or in absorption/float, the
  controller throttles and the measured yield understates what the array
  could give. A 10-minute interval counts as *saturated* when the bank voltage
  is at or above ``battery.effective_full_voltage_V`` (or, for LiFePO4,
  held at float -- at least :data:`LFP_FLOAT_V_PER_12V` per 12 V block with the
  bank's net current within the tail current) **and** the solar output is
  below :data:`THROTTLED_BELOW` x the array's own clear-interval ratio x the
  clear-sky expectation. Saturated intervals are never used for the
  performance ratio.
* **Weather.** Each local day is classified clear / partly cloudy / overcast
  from the shape of its unsaturated measured curve against the clear-sky
  curve: Pearson correlation, variability index (Stein, Hansen & Reno 2012)
  and energy ratio. Only clear days estimate the system's derate.
* **Units.** UTC inside; days are local calendar days of ``site.timezone``.

The overall ``performance_ratio`` is the median of the clear days' ratios of
measured to expected energy over their unsaturated daylight intervals: the
derate of the whole chain (soiling, wiring, mismatch, incidence angle,
shading, controller) relative to pvlib's clear-sky model.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from drawdown.analysis.readings import epoch_us
from drawdown.analysis.solar_bins import ChannelBinner, Grid, bin_mean
from drawdown.analysis.solar_model import (
    DEFAULT_TEMP_AIR_C,
    MPPT_EFFICIENCY,
    TEMPERATURE_MOUNT,
    expected_clear_sky,
)
from drawdown.analysis.json_values import rounded
from drawdown.analysis.system import System

__all__ = ["SolarAnalysis", "analyse_solar", "expected_clear_sky", "BIN_MINUTES"]

#: Width of the intervals the log is averaged over [min].
BIN_MINUTES: int = 10
#: An interval is daylight when the clear-sky expectation exceeds this fraction
#: of the arrays' total peak power.
DAYLIGHT_FRACTION_OF_PEAK: float = 0.01
#: Throttled: measured output below this fraction of (clear-interval ratio x expected).
THROTTLED_BELOW: float = 0.85
#: LiFePO4 float level per 12 V block [V] (common practice: LFP float 13.4-13.6 V).
LFP_FLOAT_V_PER_12V: float = 13.4
#: A day's own performance ratio needs this share of its daylight expected
#: energy to be unsaturated and logged.
MIN_UNSATURATED_SHARE: float = 0.15
#: Clear days with at most this saturated fraction count as unsaturated days;
#: the overall ratio uses only those when there are at least two.
CLEAN_DAY_MAX_SATURATED: float = 0.02
#: ... and this share logged at all.
MIN_COVERAGE: float = 0.5
#: Clear-shape thresholds on 10-minute means (chosen on simulated clear and
#: broken-cloud days; a 10-minute mean smooths, so these are tighter than the
#: 1-minute thresholds of Stein et al.).
CLEAR_MIN_CORRELATION: float = 0.95
CLEAR_MAX_VARIABILITY_INDEX: float = 1.5
#: Energy relative to the clear-day ratio: >= clear, < overcast.
CLEAR_MIN_RELATIVE_ENERGY: float = 0.8
OVERCAST_MAX_RELATIVE_ENERGY: float = 0.4
#: Lowest ratio a clear day can have before we stop believing it is clear
#: rather than a dim, evenly overcast day.
PLAUSIBLE_MIN_DERATE: float = 0.45
#: Assumed clear-interval ratio when the log has too few clear intervals.
DEFAULT_CLEAR_RATIO: float = 0.8
#: Best clear hours below this fraction of the temperature-corrected rating
#: point to more than the usual losses (PVWatts' default losses are 14 %,
#: docs/solar.md; with a 0.96 controller the usual ratio is ~0.8-0.85).
SHORTFALL_RATIO: float = 0.7
#: Morning/afternoon difference worth a finding [fraction].
ASYMMETRY_FINDING: float = 0.15


@dataclass(frozen=True)
class SolarAnalysis:
    """Result of :func:`analyse_solar`.

    Attributes
    ----------
    performance_ratio : float or None
        Median measured/expected energy ratio of the clear days' unsaturated
        daylight [-]; None with ``performance_ratio_why``. Expected is what
        the arrays deliver after the controller model (MPPT x 0.96, or PWM at
        bank voltage).
    derate_vs_dc : float or None
        The same median against the arrays' clear-sky PVWatts DC power, i.e.
        the whole-system derate including the controller [-].
    days : pandas.DataFrame
        One row per local day (see :meth:`to_json` for the columns).
    series : pandas.DataFrame
        10-minute intervals (UTC start index): ``expected_W``, ``expected_dc_W``,
        ``mppt_W``, ``pwm_W``, ``poa_Wm2``, ``ghi_Wm2``, ``cell_temperature_C``,
        ``measured_W``, ``measured_A``, ``bank_voltage_V``, ``daylight``,
        ``saturated`` -- for plots.
    hourly : pandas.DataFrame
        Hourly (UTC start index) ``expected_Wh``, ``measured_Wh``,
        ``saturated_fraction``.
    saturated_periods : pandas.DataFrame
        Runs of saturated intervals: ``start``, ``end`` (UTC), ``hours``.
    """

    performance_ratio: float | None
    performance_ratio_why: str | None
    performance_ratio_spread: dict[str, Any] | None
    derate_vs_dc: float | None
    days: pd.DataFrame
    diagnostics: dict[str, Any]
    series: pd.DataFrame
    hourly: pd.DataFrame
    saturated_periods: pd.DataFrame
    hourly_profile: list[dict[str, Any]] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        """The report's ``solar`` object (docs/contracts.md#report contract keys plus more).

        Keys: ``performance_ratio`` (+ ``performance_ratio_why`` when null),
        ``performance_ratio_spread`` (n_days, min, p25, p75, max, std, method),
        ``derate_vs_dc``, ``days``, ``diagnostics``, ``hourly`` (mean Wh per
        local clock hour per day, expected and measured). Each day: ``date``
        (local), ``measured_Wh``, ``measured_Ah``, ``expected_Wh`` (clear sky,
        after the controller), ``expected_dc_Wh``, ``performance_ratio`` (+
        ``_why``), ``saturated_fraction`` (share of the day's logged clear-sky
        expected energy during which the bank was full and the array
        throttled), ``sky`` (clear / partly cloudy / overcast, or null with
        ``sky_why``), ``in_performance_ratio``, ``data_coverage``,
        ``correlation``, ``variability_index``, ``relative_energy``,
        ``peak_sun_hours_clear_sky`` (GHI kWh/m2), ``peak_sun_hours_poa_clear_sky``,
        ``measured_unsaturated_Wh``, ``expected_unsaturated_Wh``,
        ``mean_air_temperature_C``.
        """
        out: dict[str, Any] = {"performance_ratio": _r(self.performance_ratio, 3)}
        if self.performance_ratio is None:
            out["performance_ratio_why"] = self.performance_ratio_why
        out["performance_ratio_spread"] = self.performance_ratio_spread
        out["derate_vs_dc"] = _r(self.derate_vs_dc, 3)
        # Null never stands without its reason (docs/contracts.md#report-json): these follow the ratio's.
        for key in ("performance_ratio_spread", "derate_vs_dc"):
            if out[key] is None:
                out[f"{key}_why"] = self.performance_ratio_why or "no clear, unsaturated day to measure it on"
        out["days"] = [_day_json(row) for row in self.days.to_dict("records")]
        out["diagnostics"] = self.diagnostics
        out["hourly"] = self.hourly_profile
        return out


def _r(x: Any, nd: int = 1) -> Any:
    """This module's JSON rounding (1 decimals unless told): :func:`analysis.json_values.rounded`."""
    return rounded(x, nd)


_DAY_ROUND = {"measured_Wh": 1, "measured_Ah": 2, "expected_Wh": 1, "expected_dc_Wh": 1,
              "expected_unsaturated_Wh": 1, "measured_unsaturated_Wh": 1,
              "performance_ratio": 3, "saturated_fraction": 3, "data_coverage": 3,
              "correlation": 3, "variability_index": 3, "relative_energy": 3,
              "peak_sun_hours_clear_sky": 2, "peak_sun_hours_poa_clear_sky": 2,
              "mean_air_temperature_C": 1}


def _day_json(row: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in row.items():
        if k in _DAY_ROUND:
            out[k] = _r(v, _DAY_ROUND[k])
        elif isinstance(v, float) and not np.isfinite(v):
            out[k] = None
        else:
            out[k] = v
    for k in ("performance_ratio_why", "sky_why", "measured_why"):
        if out.get(k) is None:
            out.pop(k, None)
    return out


# ---------------------------------------------------------------------------- inputs

def _grid_for(first_us: int, last_us: int, tz: str) -> Grid:
    """10-minute UTC grid covering whole local days from the first to the last reading."""
    width = BIN_MINUTES * 60 * 1_000_000
    first = pd.Timestamp(first_us, unit="us", tz="UTC").tz_convert(tz).normalize()
    last = (pd.Timestamp(last_us, unit="us", tz="UTC").tz_convert(tz).normalize()
            + pd.Timedelta(days=1))
    epoch = pd.Timestamp(0, tz="UTC")
    s = (first - epoch) // pd.Timedelta(microseconds=1)
    e = (last - epoch) // pd.Timedelta(microseconds=1)
    s -= s % width
    n = int(-(-(e - s) // width))
    return Grid(start_us=int(s), width_us=width, n=max(n, 1))


def _temperature(readings: pd.DataFrame, grid: Grid, t_us: np.ndarray,
                 binner: ChannelBinner) -> tuple[np.ndarray, str]:
    """Air temperature per interval: battery channel first (an ambient proxy), else any channel."""
    if readings.empty or "temperature_C" not in readings:
        return np.full(grid.n, np.nan), "none"
    mean, counts = binner.mean("battery", "temperature_C")
    if counts.sum() > 0:
        return mean, "battery channel (ambient proxy)"
    temp = readings["temperature_C"].to_numpy(dtype=float, na_value=np.nan)
    if np.isfinite(temp).any():
        mean, _ = bin_mean(t_us, temp, grid)
        return mean, "any channel logging temperature"
    return np.full(grid.n, np.nan), "none"


def _fill_short_gaps(x: np.ndarray, limit: int) -> np.ndarray:
    s = pd.Series(x)
    return s.interpolate(limit=limit, limit_area="inside").to_numpy(dtype=float)


# ---------------------------------------------------------------------------- analysis

def _empty(why: str, diagnostics: dict[str, Any] | None = None) -> SolarAnalysis:
    empty_series = pd.DataFrame(index=pd.DatetimeIndex([], tz="UTC"))
    return SolarAnalysis(
        performance_ratio=None, performance_ratio_why=why, performance_ratio_spread=None,
        derate_vs_dc=None, days=pd.DataFrame(), diagnostics=diagnostics or {}, series=empty_series,
        hourly=empty_series.copy(), saturated_periods=pd.DataFrame(columns=["start", "end", "hours"]))


def analyse_solar(readings: pd.DataFrame, system: System, *,
                  solar_current_A: pd.Series | None = None) -> SolarAnalysis:
    """Measured solar yield against the arrays' clear-sky expectation.

    Parameters
    ----------
    readings : pandas.DataFrame
        Canonical long frame (``collector.store.Store.read()``): ``t`` (UTC),
        ``channel``, ``voltage_V``, ``current_A``, ``temperature_C``,
        ``soc_pct``. Used: the ``solar`` channel's current [A] (>= 0), the
        ``battery`` channel's voltage [V] and net current [A], and a
        temperature [degC] (battery channel first, as an ambient proxy).
    system : System
        Site, battery and ``[[solar]]`` arrays.
    solar_current_A : pandas.Series, optional
        Attributed solar charge current [A] on a tz-aware index, for
        single-shunt logs without a solar channel (ignored when a solar
        channel is logged).

    Returns
    -------
    SolarAnalysis
        ``performance_ratio`` None (with a reason) when there are no arrays,
        no solar data or no clear unsaturated day.
    """
    if not system.solar:
        return _empty("no [[solar]] arrays in system.toml: add peak_power_W, tilt_deg, azimuth_deg "
                      "and controller for each array")
    tz = system.site.timezone
    total_peak_W = float(sum(a.peak_power_W for a in system.solar))
    readings = readings if readings is not None else pd.DataFrame()
    t_us = epoch_us(readings["t"]) if not readings.empty else np.zeros(0, dtype=np.int64)

    # -- the grid: whole local days from the first to the last reading
    attributed = None
    if solar_current_A is not None and len(solar_current_A.dropna()) > 0:
        attributed = solar_current_A.dropna().astype(float)
    spans = [t_us] if len(t_us) else []
    if attributed is not None:
        spans.append(epoch_us(attributed.index))
    if not spans:
        return _empty("no readings in the period")
    first_us = int(min(sp.min() for sp in spans))
    last_us = int(max(sp.max() for sp in spans))
    grid = _grid_for(first_us, last_us, tz)
    starts = grid.starts
    binner = ChannelBinner(readings, grid, t_us=t_us)

    # -- measured means per interval: the solar channel, else the attributed current
    sol_A, sol_n = binner.mean("solar", "current_A", clip_min=0.0)
    if sol_n.sum() > 0:
        source = "solar channel"
    elif attributed is not None:
        sol_A, sol_n = bin_mean(epoch_us(attributed.index), attributed.to_numpy(), grid, clip_min=0.0)
        source = "attributed from the single shunt (ledger)"
    else:
        source = None
    bank_V, bank_n = binner.mean("battery", "voltage_V")
    bank_I, bank_In = binner.mean("battery", "current_A")
    nominal_V = system.battery.nominal_voltage_V
    voltage_source = "battery channel"
    if bank_n.sum() == 0:
        sol_V, sol_Vn = binner.mean("solar", "voltage_V")
        med = np.nanmedian(sol_V) if sol_Vn.sum() else np.nan
        if np.isfinite(med) and 0.85 * nominal_V <= med <= 1.3 * nominal_V:
            bank_V, bank_n = sol_V, sol_Vn
            voltage_source = "solar channel (its voltage is in the bank's range)"
        else:
            voltage_source = "none logged: nominal voltage used, saturation not detectable"
    bank_V_filled = _fill_short_gaps(bank_V, limit=6)
    volts = np.where(np.isfinite(bank_V_filled), bank_V_filled, nominal_V)
    meas_W = sol_A * volts
    has_data = sol_n > 0

    temp_C, temp_source = _temperature(readings, grid, t_us, binner)
    temp_C = _fill_short_gaps(temp_C, limit=36)
    temp_series = pd.Series(temp_C, index=grid.centres).dropna()

    # -- expected clear-sky output at interval centres (pvlib)
    exp = expected_clear_sky(grid.centres, system,
                             temp_air_C=temp_series if len(temp_series) else None,
                             battery_voltage_V=pd.Series(bank_V_filled, index=grid.centres).dropna()
                             if np.isfinite(bank_V_filled).any() else None)
    exp_W = exp["delivered_W"].to_numpy()
    daylight = exp_W > DAYLIGHT_FRACTION_OF_PEAK * total_peak_W
    h = grid.width_h

    local = starts.tz_convert(tz).tz_localize(None).normalize()
    day_key = pd.Index(local)
    day_codes, day_uniques = pd.factorize(day_key, sort=True)
    ndays = len(day_uniques)

    def day_sum(values: np.ndarray) -> np.ndarray:
        v = np.where(np.isfinite(values), values, 0.0)
        return np.bincount(day_codes, weights=v, minlength=ndays)

    def day_max(values: np.ndarray) -> np.ndarray:
        return pd.Series(values).groupby(day_codes).max().reindex(range(ndays)).to_numpy()

    # -- saturation
    bat = system.battery
    charged_V = bat.effective_full_voltage_V
    blocks = max(1, round(bat.series_12V_blocks))
    float_V = min(charged_V, LFP_FLOAT_V_PER_12V * blocks) if bat.chemistry == "lifepo4" else charged_V
    tail_A = bat.effective_full_current_A
    voltage_known = bank_n > 0
    day_exp_max = day_max(exp_W)[day_codes]
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio_bin = np.where(exp_W > 0, meas_W / exp_W, np.nan)
    high_V = voltage_known & (bank_V >= charged_V)
    held_float = voltage_known & (bank_In > 0) & (bank_V >= float_V) & (np.abs(bank_I) <= tail_A)
    high = high_V | held_float
    ref_mask = daylight & has_data & ~high & (exp_W >= 0.5 * day_exp_max)
    if ref_mask.sum() >= 6:
        clear_ratio_ref = float(np.clip(np.nanpercentile(ratio_bin[ref_mask], 90), 0.3, 1.05))
        ref_why = "90th percentile of unsaturated midday interval ratios"
    else:
        clear_ratio_ref = DEFAULT_CLEAR_RATIO
        ref_why = f"too few unsaturated midday intervals: default {DEFAULT_CLEAR_RATIO}"
    # Two passes: the second uses the clear days' own ratio as the reference for
    # 'throttled', which the first pass can only guess from midday intervals.
    for _pass in range(2):
        throttled = meas_W < THROTTLED_BELOW * clear_ratio_ref * exp_W
        saturated = daylight & has_data & high & throttled
        unsat = daylight & has_data & ~saturated

        # -- per-day sums
        e_all = day_sum(exp_W) * h
        e_dc = day_sum(exp["dc_W"].to_numpy()) * h
        e_day_data = day_sum(np.where(daylight & has_data, exp_W, 0.0)) * h
        e_daylight = day_sum(np.where(daylight, exp_W, 0.0)) * h
        e_sat = day_sum(np.where(saturated, exp_W, 0.0)) * h
        e_unsat = day_sum(np.where(unsat, exp_W, 0.0)) * h
        m_all = day_sum(np.where(has_data, meas_W, 0.0)) * h
        m_Ah = day_sum(np.where(has_data, sol_A, 0.0)) * h
        m_unsat = day_sum(np.where(unsat, meas_W, 0.0)) * h
        ghi_kWh = day_sum(exp["ghi_Wm2"].to_numpy()) * h / 1000.0
        poa_kWh = day_sum(exp["poa_Wm2"].to_numpy()) * h / 1000.0
        n_data = np.bincount(day_codes, weights=has_data.astype(float), minlength=ndays)
        tair_day = pd.Series(temp_C).groupby(day_codes).mean().reindex(range(ndays)).to_numpy()
        with np.errstate(invalid="ignore", divide="ignore"):
            coverage = np.where(e_daylight > 0, e_day_data / e_daylight, np.nan)
            sat_frac = np.where(e_day_data > 0, e_sat / e_day_data, np.nan)
            ratio_unsat = np.where(e_unsat > 0, m_unsat / e_unsat, np.nan)
            unsat_share = np.where(e_daylight > 0, e_unsat / e_daylight, 0.0)

        # -- shape of the unsaturated curve: Pearson r and variability index
        # Both curves scaled so the day's clear-sky peak is 1000 (W/m2-like), so the
        # variability index measures shape alike in June and in a northern December.
        scale = 1000.0 / np.where(day_exp_max > 0, day_exp_max, 1.0)
        x = np.where(unsat, exp_W, 0.0) * scale
        ratio_b = ratio_unsat[day_codes]
        y = np.where(unsat & np.isfinite(ratio_b) & (ratio_b > 0),
                     meas_W / np.where(ratio_b > 0, ratio_b, 1.0), 0.0) * scale
        w = unsat.astype(float)
        n = np.bincount(day_codes, weights=w, minlength=ndays)
        sx, sy = day_sum(x * w), day_sum(y * w)
        sxx, syy, sxy = day_sum(x * x * w), day_sum(y * y * w), day_sum(x * y * w)
        with np.errstate(invalid="ignore", divide="ignore"):
            cov = sxy - sx * sy / n
            corr = cov / np.sqrt((sxx - sx * sx / n) * (syy - sy * sy / n))
        # Variability index (Stein, Hansen & Reno 2012): path length of the measured
        # curve over that of the clear-sky curve, against minutes.
        pair = unsat[1:] & unsat[:-1] & (day_codes[1:] == day_codes[:-1])
        dt_min = BIN_MINUTES
        path_m = np.sqrt(np.diff(y) ** 2 + dt_min ** 2)
        path_e = np.sqrt(np.diff(x) ** 2 + dt_min ** 2)
        pm = np.bincount(day_codes[1:][pair], weights=path_m[pair], minlength=ndays)
        pe = np.bincount(day_codes[1:][pair], weights=path_e[pair], minlength=ndays)
        with np.errstate(invalid="ignore", divide="ignore"):
            vi = np.where(pe > 0, pm / pe, np.nan)

        # -- per-day performance ratio and sky
        enough = (coverage >= MIN_COVERAGE) & (unsat_share >= MIN_UNSATURATED_SHARE) & np.isfinite(ratio_unsat)
        day_pr = np.where(enough, ratio_unsat, np.nan)
        clear_shape = (corr >= CLEAR_MIN_CORRELATION) & (vi <= CLEAR_MAX_VARIABILITY_INDEX)
        candidates = enough & clear_shape & (ratio_unsat >= PLAUSIBLE_MIN_DERATE)
        ref = float(np.median(ratio_unsat[candidates])) if candidates.any() else clear_ratio_ref
        rel = ratio_unsat / ref
        shape_known = (n >= 6) & np.isfinite(ratio_unsat)
        sky = np.full(ndays, None, dtype=object)
        sky[shape_known] = "partly cloudy"
        sky[shape_known & (rel < OVERCAST_MAX_RELATIVE_ENERGY)] = "overcast"
        sky[shape_known & clear_shape & (rel >= CLEAR_MIN_RELATIVE_ENERGY)
            & (ratio_unsat >= PLAUSIBLE_MIN_DERATE)] = "clear"
        is_clear = np.array([s == "clear" for s in sky]) & enough
        if _pass == 1 or not candidates.any() or ref <= clear_ratio_ref * 1.02:
            break
        clear_ratio_ref = ref
        ref_why = "median clear-day ratio (second pass)"

    days = pd.DataFrame({
        "date": [d.strftime("%Y-%m-%d") for d in day_uniques],
        "measured_Wh": np.where(n_data > 0, m_all, np.nan) if source else np.nan,
        "measured_Ah": np.where(n_data > 0, m_Ah, np.nan) if source else np.nan,
        "expected_Wh": e_all,
        "expected_dc_Wh": e_dc,
        "performance_ratio": day_pr,
        "saturated_fraction": sat_frac,
        "sky": sky,
        "data_coverage": coverage,
        "measured_unsaturated_Wh": m_unsat,
        "expected_unsaturated_Wh": e_unsat,
        "correlation": corr,
        "variability_index": vi,
        "relative_energy": rel,
        "peak_sun_hours_clear_sky": ghi_kWh,
        "peak_sun_hours_poa_clear_sky": poa_kWh,
        "mean_air_temperature_C": tair_day,
    })
    why = np.full(ndays, None, dtype=object)
    why[~enough & (coverage < MIN_COVERAGE)] = "too little of the day's daylight was logged"
    why[~enough & (coverage >= MIN_COVERAGE) & (unsat_share < MIN_UNSATURATED_SHARE)] = (
        "bank full or in absorption/float for most of the day: the controller throttled the array")
    if source is None:
        why[:] = "no solar data"
    days["performance_ratio_why"] = why
    sky_why = np.full(ndays, None, dtype=object)
    sky_why[~shape_known] = "under an hour of unsaturated logged daylight"
    days["sky_why"] = sky_why
    if source is None:
        days["measured_why"] = "no solar channel and no attributed solar current"

    # -- overall ratio and spread: clear days without saturation when there are
    # enough of them, else the unsaturated periods of the clear days.
    e_dc_unsat = day_sum(np.where(unsat, exp["dc_W"].to_numpy(), 0.0)) * h
    with np.errstate(invalid="ignore", divide="ignore"):
        day_derate_dc = np.where(enough & (e_dc_unsat > 0), m_unsat / e_dc_unsat, np.nan)
    clean = is_clear & (np.nan_to_num(sat_frac, nan=1.0) <= CLEAN_DAY_MAX_SATURATED)
    if clean.sum() >= 2:
        used = clean
        method = ("median over clear days without saturation of measured/expected energy "
                  "(days with a full bank are left out)")
    else:
        used = is_clear
        method = ("median over clear days of measured/expected energy in their unsaturated periods "
                  "(fewer than two clear days without a full bank)")
    clear_pr = day_pr[used]
    if source is None:
        pr, pr_why, spread = None, "no solar channel in the log and no attributed solar current", None
        derate_dc = None
    elif clear_pr.size == 0:
        counts = {k: int(sum(1 for s in sky if s == k)) for k in ("partly cloudy", "overcast")}
        n_sat = int(np.sum((coverage >= MIN_COVERAGE) & (unsat_share < MIN_UNSATURATED_SHARE)))
        pr, spread, derate_dc = None, None, None
        pr_why = (f"no clear day with enough unsaturated, logged daylight among {ndays} day{'' if ndays == 1 else 's'} "
                  f"({counts['partly cloudy']} partly cloudy, {counts['overcast']} overcast, "
                  f"{n_sat} mostly saturated)")
    else:
        pr, pr_why = float(np.median(clear_pr)), None
        derate_dc = float(np.median(day_derate_dc[used]))
        spread = {"n_days": int(clear_pr.size), "min": _r(clear_pr.min(), 3),
                  "p25": _r(np.percentile(clear_pr, 25), 3), "p75": _r(np.percentile(clear_pr, 75), 3),
                  "max": _r(clear_pr.max(), 3),
                  "std": _r(np.std(clear_pr, ddof=1), 3) if clear_pr.size > 1 else None,
                  "method": method}
    days["in_performance_ratio"] = used & np.isfinite(day_pr)
    all_days_ratio = (float(m_unsat[enough].sum() / e_unsat[enough].sum())
                      if source and enough.any() and e_unsat[enough].sum() > 0 else None)

    series = pd.DataFrame({
        "expected_W": exp_W, "expected_dc_W": exp["dc_W"].to_numpy(),
        "mppt_W": exp["mppt_W"].to_numpy(), "pwm_W": exp["pwm_W"].to_numpy(),
        "poa_Wm2": exp["poa_Wm2"].to_numpy(), "ghi_Wm2": exp["ghi_Wm2"].to_numpy(),
        "cell_temperature_C": exp["cell_temperature_C"].to_numpy(),
        "solar_azimuth_deg": exp["solar_azimuth_deg"].to_numpy(),
        "measured_W": np.where(has_data, meas_W, np.nan), "measured_A": np.where(has_data, sol_A, np.nan),
        "bank_voltage_V": bank_V, "daylight": daylight, "saturated": saturated,
        "clear_day": is_clear[day_codes],
        # Smooth, bright days: clear, or clear but with a persistent distortion
        # (shading) that lowers the correlation without cloud's variability.
        "smooth_day": (shape_known & (vi <= CLEAR_MAX_VARIABILITY_INDEX) & (rel >= 0.6)
                       & enough)[day_codes],
    }, index=starts)
    hourly = _hourly(series, h)
    periods = _runs(series["saturated"].to_numpy(), starts, grid)
    diagnostics = _diagnostics(series, system, h=h, source=source, voltage_source=voltage_source,
                               temp_source=temp_source, clear_ratio_ref=clear_ratio_ref,
                               ref_why=ref_why, periods=periods, all_days_ratio=all_days_ratio,
                               charged_V=charged_V, float_V=float_V, pr=pr, days=days,
                               day_codes=day_codes, unsat=unsat)
    return SolarAnalysis(
        performance_ratio=pr, performance_ratio_why=pr_why, performance_ratio_spread=spread,
        derate_vs_dc=_r(derate_dc, 4), days=days, diagnostics=diagnostics, series=series, hourly=hourly,
        saturated_periods=periods, hourly_profile=_hourly_profile(series, tz, h, ndays))


def _hourly(series: pd.DataFrame, h: float) -> pd.DataFrame:
    hour = series.index.floor("h")
    g = pd.DataFrame({
        "expected_Wh": series["expected_W"].to_numpy() * h,
        "measured_Wh": series["measured_W"].to_numpy() * h,
        "sat_exp": np.where(series["saturated"], series["expected_W"], 0.0) * h,
    }, index=hour).groupby(level=0).sum(min_count=1)
    with np.errstate(invalid="ignore", divide="ignore"):
        g["saturated_fraction"] = np.where(g["expected_Wh"] > 0, g["sat_exp"] / g["expected_Wh"], np.nan)
    return g.drop(columns="sat_exp")


def _hourly_profile(series: pd.DataFrame, tz: str, h: float, ndays: int) -> list[dict[str, Any]]:
    """Mean Wh per local clock hour per day: the day's shape in 24 numbers."""
    hour = series.index.tz_convert(tz).hour
    g = pd.DataFrame({"expected": series["expected_W"].to_numpy() * h,
                      "measured": series["measured_W"].to_numpy() * h}).groupby(hour).sum(min_count=1)
    out = []
    for hr, row in g.iterrows():
        out.append({"hour": int(hr), "expected_Wh": _r(row["expected"] / max(ndays, 1), 1),
                    "measured_Wh": _r(row["measured"] / max(ndays, 1), 1)})
    return out


def _runs(flags: np.ndarray, starts: pd.DatetimeIndex, grid: Grid) -> pd.DataFrame:
    """Contiguous runs of True as (start, end, hours)."""
    f = np.concatenate([[False], flags.astype(bool), [False]])
    d = np.diff(f.astype(np.int8))
    s_idx = np.flatnonzero(d == 1)
    e_idx = np.flatnonzero(d == -1)
    width = pd.Timedelta(microseconds=grid.width_us)
    if len(s_idx) == 0:
        return pd.DataFrame({"start": pd.DatetimeIndex([], tz="UTC"),
                             "end": pd.DatetimeIndex([], tz="UTC"), "hours": np.array([], dtype=float)})
    return pd.DataFrame({"start": starts[s_idx], "end": starts[e_idx - 1] + width,
                         "hours": (e_idx - s_idx) * grid.width_h})


def _diagnostics(series: pd.DataFrame, system: System, *, h: float, source: str | None,
                 voltage_source: str, temp_source: str, clear_ratio_ref: float, ref_why: str,
                 periods: pd.DataFrame, all_days_ratio: float | None, charged_V: float,
                 float_V: float, pr: float | None, days: pd.DataFrame, day_codes: np.ndarray,
                 unsat: np.ndarray) -> dict[str, Any]:
    tz = system.site.timezone
    total_peak = float(sum(a.peak_power_W for a in system.solar))
    findings: list[str] = []
    diag: dict[str, Any] = {
        "measured_from": source,
        "bank_voltage_from": voltage_source,
        "air_temperature_from": temp_source if temp_source != "none"
        else f"not logged: {DEFAULT_TEMP_AIR_C} °C assumed",
        "interval_minutes": BIN_MINUTES,
        "model": {"clear_sky": "pvlib Ineichen-Perez, Linke turbidity climatology",
                  "transposition": "pvlib get_total_irradiance, isotropic",
                  "cell_temperature": f"pvlib sapm_cell, {TEMPERATURE_MOUNT}",
                  "dc": "pvlib pvwatts_dc (Dobos 2014)",
                  "controller": f"MPPT x{MPPT_EFFICIENCY}; PWM pins the module at bank voltage"},
        "arrays": [{"name": a.name, "peak_power_W": a.peak_power_W, "tilt_deg": a.tilt_deg,
                    "azimuth_deg": a.azimuth_deg, "controller": a.controller} for a in system.solar],
        "saturation": {"full_voltage_V": round(charged_V, 2), "float_voltage_V": round(float_V, 2),
                       "clear_interval_ratio": round(clear_ratio_ref, 3), "clear_interval_ratio_from": ref_why,
                       "saturated_hours": _r(float(periods["hours"].sum()) if len(periods) else 0.0, 2),
                       "saturated_periods": int(len(periods))},
        "cloud_inclusive_ratio": _r(all_days_ratio, 3),
        "findings": findings,
    }
    if source is None:
        findings.append("no solar data: log the solar controller's output (a 'solar' channel) "
                        "or let the ledger attribute it from the battery shunt")
        return diag
    clear = series["clear_day"].to_numpy() & unsat

    # Best clear hour vs the rating after temperature.
    hour = series.index.floor("h")
    hf = pd.DataFrame({"n": clear.astype(int), "meas": np.where(clear, series["measured_W"], 0.0),
                       "exp": np.where(clear, series["expected_W"], 0.0),
                       "dc": np.where(clear, series["expected_dc_W"], 0.0),
                       "poa": np.where(clear, series["poa_Wm2"], 0.0),
                       "tc": np.where(clear, series["cell_temperature_C"], 0.0)},
                      index=hour).groupby(level=0).sum()
    per_hour = int(round(1.0 / h))
    full = hf[(hf["n"] >= per_hour) & (hf["exp"] > 0)]
    if len(full):
        full = full[full["exp"] >= 0.5 * full["exp"].max()]
    if len(full):
        best_t = full["meas"].idxmax()
        b = full.loc[best_t] / full.loc[best_t, "n"]
        gamma = float(np.average([a.gamma_pdc_per_C for a in system.solar],
                                 weights=[a.peak_power_W for a in system.solar]))
        rating_T = total_peak * (1.0 + gamma * (b["tc"] - 25.0))
        at_1000 = b["meas"] * 1000.0 / b["poa"] if b["poa"] > 0 else np.nan
        hour_ratios = full["meas"] / full["exp"]
        diag["best_clear_hour"] = {
            "start": best_t.tz_convert(tz).isoformat(),
            "measured_W": _r(b["meas"], 1), "expected_W": _r(b["exp"], 1),
            "expected_dc_W": _r(b["dc"], 1), "poa_Wm2": _r(b["poa"], 0),
            "cell_temperature_C": _r(b["tc"], 1),
            "rating_after_temperature_W": _r(rating_T, 1),
            "measured_at_1000Wm2_W": _r(at_1000, 1),
            "ratio_to_expected": _r(b["meas"] / b["exp"], 3),
            "median_clear_hour_ratio": _r(float(hour_ratios.median()), 3),
            "clear_hours": int(len(full)),
        }
        if float(hour_ratios.quantile(0.9)) < SHORTFALL_RATIO:
            findings.append(
                f"even the best clear, unsaturated hours deliver only "
                f"{100 * float(hour_ratios.quantile(0.9)):.0f} % of the clear-sky expectation "
                f"(after temperature): more than soiling and normal losses explain; check the "
                f"array's wiring and connections, shading, and the controller")
    else:
        diag["best_clear_hour"] = None
        diag["best_clear_hour_why"] = "no full clear, unsaturated hour near midday"

    # Morning/afternoon asymmetry on smooth days (clear, or clear with a
    # persistent shade: low variability, decent energy), each day contributing only when
    # both halves are unsaturated over at least a quarter of its expected energy
    # (a full bank in the afternoon must not look like afternoon shading).
    meas = series["measured_W"].fillna(0.0).to_numpy()
    expw = series["expected_W"].to_numpy()
    am_side = series["solar_azimuth_deg"].to_numpy() < 180.0
    cd = series["smooth_day"].to_numpy()
    smooth = cd & unsat
    ndays = max(len(days), 1)

    def by_day(v: np.ndarray) -> np.ndarray:
        return np.bincount(day_codes, weights=v, minlength=ndays)

    day_exp = by_day(np.where(cd & series["daylight"].to_numpy(), expw, 0.0))
    am = smooth & am_side
    pmm = smooth & ~am_side
    e_am, e_pm = by_day(np.where(am, expw, 0.0)), by_day(np.where(pmm, expw, 0.0))
    with np.errstate(invalid="ignore", divide="ignore"):
        ok_day = (day_exp > 0) & (e_am >= 0.25 * day_exp) & (e_pm >= 0.25 * day_exp)
    if ok_day.any():
        keep = ok_day[day_codes]
        r_am = meas[am & keep].sum() / expw[am & keep].sum()
        r_pm = meas[pmm & keep].sum() / expw[pmm & keep].sum()
        asym = (r_am - r_pm) / ((r_am + r_pm) / 2.0)
        diag["morning_afternoon"] = {"morning_ratio": _r(r_am, 3), "afternoon_ratio": _r(r_pm, 3),
                                     "asymmetry": _r(asym, 3), "days": int(ok_day.sum())}
        if abs(asym) > ASYMMETRY_FINDING:
            weak = "afternoon" if asym > 0 else "morning"
            findings.append(f"the {weak} yields {100 * abs(asym):.0f} % less than the other half of "
                            f"the day against the clear-sky curve: look for shading on that side, "
                            f"or check the array's azimuth and tilt in system.toml")
    else:
        diag["morning_afternoon"] = None
        diag["morning_afternoon_why"] = ("no smooth (clear-sky) day with both the morning and "
                                         "the afternoon unsaturated")

    # PWM vs MPPT: what an MPPT controller would have added (unsaturated intervals only:
    # a full bank takes no more).
    if any(a.controller == "pwm" for a in system.solar):
        d = series["expected_W"].to_numpy()
        with np.errstate(invalid="ignore", divide="ignore"):
            gain = np.where(unsat & (d > 0), meas * (series["mppt_W"].to_numpy() / d - 1.0), 0.0)
        add_Wh = float(gain.sum() * h)
        base = float(meas[unsat].sum() * h)
        diag["mppt_would_add"] = {"Wh_per_day": _r(add_Wh / ndays, 1),
                                  "percent": _r(100 * add_Wh / base, 1) if base > 0 else None}
        if base > 0 and add_Wh / base > 0.08:
            findings.append(f"an MPPT controller would have added about {add_Wh / ndays:.0f} Wh/day "
                            f"({100 * add_Wh / base:.0f} %) at this bank voltage and cell temperature")
    else:
        with np.errstate(invalid="ignore", divide="ignore"):
            mp = series["mppt_W"].to_numpy()
            diag["pwm_would_lose_percent"] = _r(100 * (1 - series["pwm_W"].sum() / mp.sum()), 1) \
                if mp.sum() > 0 else None
    sat_days = days["saturated_fraction"].fillna(0) > 0.3
    if sat_days.mean() > 0.5:
        findings.append("the bank was full for much of most days: the array is bigger than the "
                        "loads need, or a load could run in the afternoon to use the surplus")
    if pr is not None and pr < SHORTFALL_RATIO:
        findings.append(f"clear days delivered {100 * pr:.0f} % of the clear-sky expectation; "
                        f"a healthy roof array usually reaches 75-90 %")
    return diag
