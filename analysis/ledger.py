"""The daily energy ledger: consumed and charged (by source) Ah and Wh per local calendar day.

Two situations occur in the field:

**Several channels** (a bank shunt plus charge-source and/or load shunts). The
balance at the bank is ``I_battery = sum(sources) + other - load``, so the gross
load is ``sum(measured sources) - net battery current``. A *persistent*
positive residual ``load_measured - gross`` (the bank gains charge no
measured source delivered) is an unmeasured source, reported as ``other``
rather than as a negative load.

**A single shunt** (the battery channel only). Load is hidden whenever a
source charges; :mod:`analysis.single_shunt` rebuilds it (load steps, charger
holds, an hour-of-day profile) with a 95 % interval, and splits the gross
charge ``net + load`` into sources by signature, with a confidence per day.

Days are the system's local calendar days (``site.timezone``). A day is
*complete* when its channels cover it from midnight to midnight without a gap.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from drawdown.analysis.charge import (
    SocResult,
    device_disagreement_by_day,
    state_of_charge,
    trapezoid_increments,
)
from drawdown.analysis.readings import (
    US_PER_S,
    Channel,
    Gap,
    day_index,
    fill0,
    find_gaps,
    gap_mask,
    gap_threshold_s,
    local_day_bounds,
    median_interval_s,
    per_day_mean,
    split_channels,
)
from drawdown.analysis.instrument import daily_half_width_Ah, offset_bound_A
from drawdown.analysis.single_shunt import SOURCES, LoadModel, single_shunt_ledger
from drawdown.analysis.system import System

LEDGER_COLUMNS: tuple[str, ...] = (
    "date", "complete", "consumed_Ah", "consumed_Wh",
    *(f"charged_Ah_{s}" for s in SOURCES), *(f"charged_Wh_{s}" for s in SOURCES),
    "soc_min_pct", "soc_end_pct", "mean_temperature_C", "driving_h",
)
_H_PER_US = 1.0 / (US_PER_S * 3600.0)


@dataclass(frozen=True)
class LedgerResult:
    """Everything the ledger found, for the report and the dashboard.

    Attributes
    ----------
    days : one row per local date (columns :data:`LEDGER_COLUMNS` plus extras:
        attribution_confidence, hidden_load_h (hours whose load was inferred, not seen),
        profile_filled_h (of those, hours filled from other days), observed_load_share,
        consumed_Ah_pi95_lo/hi, device_soc_diff_pct, gap_s)
    mode : 'multi-channel', 'single-shunt' or 'load channel only'
    gaps : every gap found on the channels used
    solar_current_A : attributed solar current (single shunt) on a UTC index, else None
    load_model : the single-shunt load model, else None
    soc : the state of charge used for soc_min/soc_end, if a battery channel exists
    """

    days: pd.DataFrame
    mode: str
    gaps: tuple[Gap, ...]
    solar_current_A: pd.Series | None = None
    load_model: LoadModel | None = None
    soc: SocResult | None = None
    notes: tuple[str, ...] = ()
    bounds_us: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int64), repr=False)


def daily_ledger(readings: pd.DataFrame, system: System) -> pd.DataFrame:
    """One row per local calendar day: consumed and charged-by-source Ah/Wh, SoC, completeness.

    Parameters
    ----------
    readings : canonical long frame (collector.canonical)
    system : system description

    Returns
    -------
    pandas.DataFrame
        Columns ``date`` (datetime.date), ``complete`` (bool), ``consumed_Ah``,
        ``consumed_Wh``, ``charged_Ah_{solar,alternator,shore,other}``,
        ``charged_Wh_{...}``, ``soc_min_pct``, ``soc_end_pct``,
        ``mean_temperature_C``, ``driving_h`` (hours with alternator charging), plus extras.
    """
    return compute_ledger(split_channels(readings), system).days


# -- helpers ----------------------------------------------------------------------------------

def _day_sum(t_us: np.ndarray, inc: np.ndarray, bounds_us: np.ndarray) -> np.ndarray:
    """Sum per-interval increments into local days (interval assigned to its start), in float64.

    ``np.add.reduceat`` between day boundaries: O(n), no per-sample day index, no copy.
    """
    n_days = len(bounds_us) - 1
    out = np.zeros(n_days)
    if len(inc) == 0:
        return out
    pos = np.searchsorted(t_us[:-1], bounds_us, side="left")
    pos[0], pos[-1] = 0, len(inc)
    nonempty = pos[1:] > pos[:-1]
    if nonempty.any():
        out[nonempty] = np.add.reduceat(inc, pos[:-1][nonempty], dtype=np.float64)
    return out


def _coverage(ch: Channel, bounds_us: np.ndarray, thr_s: float, gaps: np.ndarray) -> np.ndarray:
    """True for days the channel covers midnight to midnight with no gap."""
    n_days = len(bounds_us) - 1
    tol = thr_s * US_PER_S
    ok = (ch.t_us[0] <= bounds_us[:-1] + tol) & (ch.t_us[-1] >= bounds_us[1:] - tol)
    gi = np.flatnonzero(gaps)
    if len(gi):
        d0 = np.clip(day_index(ch.t_us[gi], bounds_us), 0, n_days - 1)
        d1 = np.clip(day_index(ch.t_us[gi + 1] - 1, bounds_us), 0, n_days - 1)
        diff = np.zeros(n_days + 1, dtype=np.int64)
        np.add.at(diff, d0, 1)
        np.add.at(diff, d1 + 1, -1)
        ok &= np.cumsum(diff)[:n_days] == 0
    return ok


def _interp_on(t_target: np.ndarray, ch: Channel, values: np.ndarray, gaps: np.ndarray) -> tuple[np.ndarray,
                                                                                                np.ndarray]:
    """A channel's values at other times (linear), and a mask of target times the channel cannot vouch for."""
    if len(ch.t_us) == len(t_target) and np.array_equal(ch.t_us, t_target):
        return fill0(values), gaps_to_samples(gaps, len(t_target))
    out = np.interp(t_target, ch.t_us, fill0(values), left=0.0, right=0.0)
    pos = np.searchsorted(ch.t_us, t_target, side="right")
    inside = (pos > 0) & (pos < len(ch.t_us))
    bad = np.zeros(len(t_target), dtype=bool)
    if gaps.any():
        bad[inside] = gaps[pos[inside] - 1]
    return out, bad


def gaps_to_samples(gaps: np.ndarray, n: int) -> np.ndarray:
    """Per-sample mask: a sample touching a gap interval (either side)."""
    bad = np.zeros(n, dtype=bool)
    if gaps.any():
        bad[:-1] |= gaps
        bad[1:] |= gaps
    return bad


def _bad_intervals(bad_samples: np.ndarray) -> np.ndarray:
    return bad_samples[:-1] & bad_samples[1:]


# -- the ledger -------------------------------------------------------------------------------

def compute_ledger(channels: dict[str, Channel], system: System, *, soc: SocResult | None = None) -> LedgerResult:
    """The ledger from split channels (see :func:`daily_ledger`), with its by-products."""
    bat = channels.get("battery")
    sources: dict[str, Channel] = {s: channels[s] for s in ("solar", "alternator", "shore")
                                   if s in channels and len(channels[s]) > 1}
    load = channels.get("load")
    used = [c for c in [bat, load, *sources.values()] if c is not None and len(c) > 1]
    if not used:
        raise ValueError("no battery, load or charge-source channel with at least two readings "
                         f"(channels present: {sorted(channels)})")
    t0 = min(int(c.t_us[0]) for c in used)
    t1 = max(int(c.t_us[-1]) for c in used)
    bounds, dates = local_day_bounds(t0, t1, system.site.timezone)
    n_days = len(dates)
    cols: dict[str, np.ndarray] = {c: np.zeros(n_days) for c in LEDGER_COLUMNS[2:]}
    complete = np.ones(n_days, dtype=bool)
    gaps_all: list[Gap] = []
    notes: list[str] = []
    extras: dict[str, np.ndarray] = {"attribution_confidence": np.full(n_days, np.nan),
                                     "hidden_load_h": np.zeros(n_days),
                                     "profile_filled_h": np.zeros(n_days),
                                     "observed_load_share": np.full(n_days, np.nan),
                                     "consumed_Ah_pi95_lo": np.full(n_days, np.nan),
                                     "consumed_Ah_pi95_hi": np.full(n_days, np.nan),
                                     "device_soc_diff_pct": np.full(n_days, np.nan),
                                     "gap_s": np.zeros(n_days)}
    gmask: dict[str, np.ndarray] = {}
    thr: dict[str, float] = {}
    for c in used:
        thr[c.name] = gap_threshold_s(c.t_us)
        gmask[c.name] = gap_mask(c.t_us, threshold_s=thr[c.name])
        complete &= _coverage(c, bounds, thr[c.name], gmask[c.name])
        found = find_gaps(c, threshold_s=thr[c.name])
        gaps_all.extend(found)
        per_channel = np.zeros(n_days)
        for gp in found:
            per_channel += _overlap_s(gp, bounds)
        # A gap on several channels at once (one logger) counts once: the longest per day.
        np.maximum(extras["gap_s"], per_channel, out=extras["gap_s"])
    solar_series = None
    model = None
    nominal = system.battery.nominal_voltage_V
    if bat is not None and len(bat) > 1:
        if soc is None:
            soc = state_of_charge(bat, system)
        v_b = bat.voltage_V
        if not np.isfinite(v_b).any():
            v_b = np.full(len(bat), nominal, dtype=np.float32)
            notes.append("no battery voltage logged: Wh use the nominal voltage")
        elif np.isnan(v_b).any():
            v_b = pd.Series(v_b).ffill().bfill().to_numpy()
        if sources or load is not None:
            mode = "multi-channel"
            _multi_channel(bat, v_b, sources, load, system, bounds, gmask, cols, notes)
        else:
            mode = "single-shunt"
            solar_series, model = single_shunt_ledger(bat, v_b, system, bounds, gmask["battery"], cols, extras, notes)
        _soc_columns(bat, soc, bounds, cols)
        extras["device_soc_diff_pct"] = device_disagreement_by_day(soc.soc, bat.soc_pct, bat.t_us, bounds)
        if np.isfinite(bat.temperature_C).any():
            cols["mean_temperature_C"] = _day_mean(bat.t_us, bat.temperature_C, bounds)
        else:
            cols["mean_temperature_C"][:] = np.nan
    else:
        mode = "load channel only" if load is not None else "sources only"
        _multi_channel(None, None, sources, load, system, bounds, gmask, cols, notes)
        cols["soc_min_pct"][:] = np.nan
        cols["soc_end_pct"][:] = np.nan
        cols["mean_temperature_C"][:] = np.nan
        notes.append("no battery channel: no state of charge")
    if mode == "multi-channel":
        extras["attribution_confidence"][:] = 1.0  # measured on their own shunts
        extras["observed_load_share"][:] = 1.0
    if mode in ("multi-channel", "load channel only"):
        ref = bat if mode == "multi-channel" else load
        assert ref is not None  # multi-channel has a battery, "load channel only" a load
        _instrument_range(ref, sources, load, system, bounds, gmask,
                          cols, extras, notes)
    days = pd.DataFrame({"date": dates, "complete": complete, **cols, **extras})
    return LedgerResult(days, mode, tuple(gaps_all), solar_series, model, soc, tuple(notes), bounds)


def _instrument_range(ref: Channel, sources: dict[str, Channel], load: Channel | None, system: System,
                      bounds: np.ndarray, gmask: dict[str, np.ndarray], cols: dict[str, np.ndarray],
                      extras: dict[str, np.ndarray], notes: list[str]) -> None:
    """The 95 % range of each day's consumed Ah that the shunts' own errors leave.

    Every load is measured, so nothing is inferred; what is left is the battery (or
    load) shunt's zero offset, unseen because that shunt never idles, over every hour
    of the day, and each channel's gain error (see :mod:`analysis.instrument`).
    """
    hours = _day_sum(ref.t_us, trapezoid_increments(ref.t_us, np.ones(len(ref)), gaps=gmask[ref.name]), bounds)
    offsets = [idle_offset_A(fill0(ch.current_A), system) for ch in sources.values()]
    off95 = offset_bound_A(offsets)
    flows = [cols["consumed_Ah"], *(cols[f"charged_Ah_{s}"] for s in sources)]
    both = ref is not load and load is not None
    half = daily_half_width_Ah(hours, flows, off95, measured_twice=both)
    extras["consumed_Ah_pi95_lo"] = np.maximum(cols["consumed_Ah"] - half, 0.0)
    extras["consumed_Ah_pi95_hi"] = cols["consumed_Ah"] + half
    which = "load" if ref is load else "battery"
    notes.append(f"the {which} shunt's zero offset cannot be seen in a log (it never idles): up to "
                 f"{1000 * off95:.0f} mA, {24 * off95:.1f} Ah a day, is inside each day's consumed range; "
                 f"zeroing the monitor with every load and charger off removes it")


def _overlap_s(gap: Gap, bounds: np.ndarray) -> np.ndarray:
    lo = np.maximum(bounds[:-1], gap.start_us)
    hi = np.minimum(bounds[1:], gap.end_us)
    return np.maximum(hi - lo, 0) / US_PER_S


def _day_mean(t_us: np.ndarray, values: np.ndarray, bounds: np.ndarray) -> np.ndarray:
    """Mean of the finite values in each local day (see analysis.readings.per_day_mean)."""
    return per_day_mean(t_us, values, bounds)


def _soc_columns(bat: Channel, soc: SocResult, bounds: np.ndarray, cols: dict[str, np.ndarray]) -> None:
    n_days = len(bounds) - 1
    starts = np.searchsorted(bat.t_us, bounds[:-1], side="left")
    ends = np.searchsorted(bat.t_us, bounds[1:], side="left")
    has = ends > starts
    cols["soc_min_pct"][:] = np.nan
    cols["soc_end_pct"][:] = np.nan
    if has.any():
        s = starts[has]
        cols["soc_min_pct"][has] = np.minimum.reduceat(soc.soc, s).astype(float)
        cols["soc_end_pct"][has] = soc.soc[ends[has] - 1].astype(float)
    del n_days


def _bank_voltage_at(t_us: np.ndarray, bank_t_us: np.ndarray, bank_V: np.ndarray) -> np.ndarray:
    """The bank voltage linearly interpolated at ``t_us`` (both time axes sorted).

    Same result as ``np.interp`` but without its float64 copies of the whole bank
    record (500 MB on a year at 1 Hz): only the neighbouring samples are gathered.
    """
    n = len(bank_t_us)
    if n == 1:
        return np.full(len(t_us), float(bank_V[0]))
    hi = np.clip(np.searchsorted(bank_t_us, t_us, side="right"), 1, n - 1)
    lo = hi - 1
    t0, t1 = bank_t_us[lo], bank_t_us[hi]
    w = np.clip((t_us - t0) / np.maximum(t1 - t0, 1), 0.0, 1.0)
    return bank_V[lo] * (1.0 - w) + bank_V[hi] * w


#: Share of a source's samples that must sit near zero before their median is taken as its offset.
IDLE_SHARE_MIN: float = 0.2


def idle_offset_A(current_A: np.ndarray, system: System) -> float:
    """A charge source's reading while it delivers nothing [A]: its shunt's zero offset.

    A solar controller at night, an alternator charger with the engine off and a
    mains charger unplugged deliver exactly 0 A, so what their shunt reads then is
    its offset (zero calibration, common practice for shunts). Readings within
    ``max(0.3 A, 0.2 % of C)`` of zero are the idle ones; with at least
    :data:`IDLE_SHARE_MIN` of the samples idle, their median is the offset, else 0.
    """
    c = current_A[np.isfinite(current_A)]
    if not len(c):
        return 0.0
    near = np.abs(c) <= max(0.3, 0.002 * system.battery.rated_capacity_Ah)
    if near.mean() < IDLE_SHARE_MIN:
        return 0.0
    return float(np.median(c[near]))


def source_current_A(ch: Channel, system: System) -> np.ndarray:
    """A source channel's delivered current [A, >= 0], its idle offset taken out."""
    cur = fill0(ch.current_A)
    off = idle_offset_A(cur, system)
    return np.clip(cur - off, 0.0, None) if off else np.clip(cur, 0.0, None)


def _multi_channel(bat: Channel | None, v_b: np.ndarray | None, sources: dict[str, Channel],
                   load: Channel | None, system: System, bounds: np.ndarray, gmask: dict[str, np.ndarray],
                   cols: dict[str, np.ndarray], notes: list[str]) -> None:
    """Ledger columns when sources and/or a load are measured on their own shunts."""
    nominal = system.battery.nominal_voltage_V
    # 1. Each source on its own time grid: delivered Ah, Wh, driving hours.
    for name, ch in sources.items():
        cur = source_current_A(ch, system)
        g = gmask[name]
        cols[f"charged_Ah_{name}"] += _day_sum(ch.t_us, trapezoid_increments(ch.t_us, cur, gaps=g), bounds)
        # Energy INTO THE BANK is the source's current times the bank voltage. A source
        # channel's own voltage may be the far side of its converter (an MPPT array at
        # 36 V on a 12 V bank), so it is used only when no bank voltage is logged.
        if bat is not None and v_b is not None:
            v = _bank_voltage_at(ch.t_us, bat.t_us, v_b)
        elif np.isfinite(ch.voltage_V).any():
            v = pd.Series(ch.voltage_V).ffill().bfill().to_numpy()
        else:
            v = np.full(len(ch), nominal)
        cols[f"charged_Wh_{name}"] += _day_sum(ch.t_us, trapezoid_increments(ch.t_us, cur * v, gaps=g), bounds)
        if name == "alternator":
            on = (cur[:-1] > 0.5) & ~g
            dt_h = np.diff(ch.t_us) * _H_PER_US
            cols["driving_h"] += _day_sum(ch.t_us, np.where(on, dt_h, 0.0), bounds)
    if bat is None:
        if load is None:
            return
        cur = np.clip(-fill0(load.current_A), 0.0, None)
        v = pd.Series(load.voltage_V).ffill().bfill().fillna(nominal).to_numpy()
        cols["consumed_Ah"] += _day_sum(load.t_us, trapezoid_increments(load.t_us, cur, gaps=gmask["load"]), bounds)
        cols["consumed_Wh"] += _day_sum(load.t_us, trapezoid_increments(load.t_us, cur * v, gaps=gmask["load"]),
                                        bounds)
        return
    assert v_b is not None  # given with the battery channel
    # 2. The balance on the battery's grid, in chunks of whole local days so that the
    #    temporaries stay small on a year at 1 Hz (a loop over chunks, not over rows).
    pos = np.searchsorted(bat.t_us, bounds, side="left")
    pos[0], pos[-1] = 0, len(bat)
    start_day = 0
    n_days = len(bounds) - 1
    while start_day < n_days:
        end_day = start_day + 1
        while end_day < n_days and pos[end_day + 1] - pos[start_day] <= BALANCE_CHUNK:
            end_day += 1
        lo, hi = int(pos[start_day]), int(min(pos[end_day] + 1, len(bat)))  # +1: the interval into the next day
        if hi - lo >= 2:
            part = Channel(bat.name, bat.t_us[lo:hi], bat.current_A[lo:hi], bat.voltage_V[lo:hi],
                           bat.temperature_C[lo:hi], bat.soc_pct[lo:hi])
            _balance(part, v_b[lo:hi], gmask["battery"][lo:hi - 1], sources, load, system, bounds, gmask, cols)
        start_day = end_day


#: Battery samples per balance chunk (whole local days; ~40 MB of temporaries each).
BALANCE_CHUNK: int = 1_000_000


def _balance(bat: Channel, v_b: np.ndarray, bat_gaps: np.ndarray, sources: dict[str, Channel],
             load: Channel | None, system: System, bounds: np.ndarray, gmask: dict[str, np.ndarray],
             cols: dict[str, np.ndarray]) -> None:
    """Gross load and unmeasured charge on one chunk of the battery's time grid."""
    n = len(bat)
    bad = gaps_to_samples(bat_gaps, n)
    r = -fill0(bat.current_A).astype(np.float64)
    for name, ch in sources.items():
        s_on_b, s_bad = _interp_on(bat.t_us, ch, source_current_A(ch, system), gmask[name])
        r += s_on_b
        bad |= s_bad
        del s_on_b
    if load is not None:
        l_on_b, _ = _interp_on(bat.t_us, load, np.clip(-fill0(load.current_A), 0.0, None), gmask["load"])
    else:
        l_on_b = np.zeros(n)
    bad_iv = _bad_intervals(bad)
    # With a load shunt too, the load is measured twice: directly, and as the balance. Their
    # shunts' offsets are independent, so the mean of the two halves the error variance.
    meas_ah = meas_wh = None
    if load is not None:
        meas_ah = _day_sum(bat.t_us, trapezoid_increments(bat.t_us, l_on_b, gaps=bad_iv, dt_h=bat.dt_h), bounds)
        meas_wh = _day_sum(bat.t_us, trapezoid_increments(bat.t_us, l_on_b * v_b, gaps=bad_iv, dt_h=bat.dt_h),
                           bounds)
    # 3. Persistent positive residual (measured load - gross load) = an unmeasured source ("other").
    l_on_b -= r
    other_day, other_wh = _other_source(bat, l_on_b, v_b, bad_iv, system, bounds)
    del l_on_b
    cols["charged_Ah_other"] += other_day
    cols["charged_Wh_other"] += other_wh
    bal_ah = _day_sum(bat.t_us, trapezoid_increments(bat.t_us, r, gaps=bad_iv, dt_h=bat.dt_h), bounds) + other_day
    r *= v_b  # in place: gross load power [W]
    bal_wh = _day_sum(bat.t_us, trapezoid_increments(bat.t_us, r, gaps=bad_iv, dt_h=bat.dt_h), bounds) + other_wh
    cols["consumed_Ah"] += bal_ah if meas_ah is None else 0.5 * (bal_ah + meas_ah)
    cols["consumed_Wh"] += bal_wh if meas_wh is None else 0.5 * (bal_wh + meas_wh)


def _other_source(bat: Channel, resid_A: np.ndarray, v_b: np.ndarray, bad_iv: np.ndarray, system: System,
                  bounds: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Unmeasured charging [Ah/day, Wh/day] from a residual that stays positive.

    The residual is averaged over 1-minute bins; a bin counts as an unmeasured
    source when its mean and the 5-bin rolling median both exceed a noise
    threshold (0.3 A or 0.2 % of C), so shunt noise and timing skew between
    channels are not booked as charge.
    """
    n_days = len(bounds) - 1
    bin_s = max(60.0, math.ceil(median_interval_s(bat.t_us) / 60.0) * 60.0)
    inc = trapezoid_increments(bat.t_us, resid_A, gaps=bad_iv, dt_h=bat.dt_h)
    b = ((bat.t_us[:-1] - bat.t_us[0]) // int(bin_s * US_PER_S)).astype(np.int32)
    dt_h = np.where(bad_iv, np.float32(0.0), bat.dt_h)
    n_bins = int(b[-1]) + 1 if len(b) else 0
    ah = np.bincount(b, weights=inc, minlength=n_bins)
    del inc
    # Energy of the residual per bin: Ah x the bin's mean voltage (the residual is small and
    # slowly varying, so this equals the trapezoid of I*V within rounding).
    vw = np.bincount(b, weights=v_b[:-1] * dt_h, minlength=n_bins)
    hrs = np.bincount(b, weights=dt_h, minlength=n_bins)
    with np.errstate(invalid="ignore", divide="ignore"):
        wh = ah * np.where(hrs > 0, vw / np.maximum(hrs, 1e-12), 0.0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean_a = np.where(hrs > 0, ah / np.maximum(hrs, 1e-12), 0.0)
    thr = max(0.3, 0.002 * system.battery.rated_capacity_Ah)
    rolled = pd.Series(mean_a).rolling(5, center=True, min_periods=1).median().to_numpy()
    on = (mean_a > thr) & (rolled > thr)
    if not on.any():
        return np.zeros(n_days), np.zeros(n_days)
    t_bin = bat.t_us[0] + (np.arange(n_bins) * bin_s * US_PER_S).astype(np.int64)
    d = np.clip(day_index(t_bin, bounds), 0, n_days - 1)
    return (np.bincount(d[on], weights=ah[on], minlength=n_days)[:n_days],
            np.bincount(d[on], weights=wh[on], minlength=n_days)[:n_days])
