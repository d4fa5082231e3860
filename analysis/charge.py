"""Coulomb counting and state of charge, re-run over the whole history.

The SoC update (docs/soc.md#the-update) is::

    SoC_k = SoC_{k-1} + dt_h * (eta_c * I+ - I_eff-) / C_ref

integrated with the trapezoid rule over irregular timestamps. Charge current
is scaled by the charge (Ah) efficiency ``eta_c``; discharge current is
replaced by the Peukert-corrected current (analysis.peukert, clamped so that
``I_eff >= |I|``). Nothing is integrated across a gap (an interval longer than
~5 median intervals, analysis.readings): its charge is unknown and counted as 0.

*Anchors* are moments of known SoC:

* **full-charge resync** (common practice): voltage >= ``full_voltage_V``
  and 0 <= current <= the full current, held for ``full_hold_s``; SoC := 100 %.
* **OCV anchor**: after a rest (|I| ~ 0) of >= 4 h for lead-acid (>= 2 h for
  LiFePO4), the rested voltage gives SoC via analysis.ocv; for LiFePO4 only
  near its knees.

Between anchors the SoC is the anchor value plus the counted charge, held at
100 % while charging past full (the reflected, i.e. clamped, running sum is
computed with ``np.maximum.accumulate``, no Python loop). Before the first
anchor the SoC is back-calculated from it.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from drawdown.analysis import ocv as ocv_mod
from drawdown.analysis.peukert import effective_current
from drawdown.analysis.readings import (
    BLOCK,
    US_PER_S,
    Channel,
    epoch_us,
    fill0,
    gap_mask,
    gap_threshold_s,
    median_interval_s,
)
from drawdown.analysis.system import System

#: One-sigma uncertainty of a full-charge resync [fraction of capacity] (common practice: ~ 2-3 %;
#: a tail-current criterion fires a little before the bank is truly full).
FULL_SIGMA: float = 0.03
#: Discharge (fraction of rated capacity) that re-arms the full-charge detector.
REARM_FRACTION: float = 0.02
#: LiFePO4 quasi-OCV anchors only below this SoC [%]: the lower knee, where the OCV
#: slope is steep enough (docs/ocv.md: 20 % = 13.0 V, 10 % = 12.8 V per 4S, common practice).
LFP_QUASI_MAX_SOC_PCT: float = 20.0
#: One-sigma uncertainty of a quasi-OCV (low-current night) anchor [fraction].
QUASI_SIGMA: float = 0.06
#: A rested-voltage anchor resets the SoC only when its one-sigma uncertainty is at most this
#: [fraction]; a looser one (the curve's spread, analysis.ocv.CURVE_SPREAD_V) counts for capacity only.
RESET_MAX_SIGMA: float = 0.09


@dataclass(frozen=True)
class Anchor:
    """A moment of known state of charge.

    Attributes
    ----------
    index : sample index in the battery channel
    t_us : UTC time [microseconds since 1970]
    soc_pct : the known SoC [%]
    kind : 'full' (full-charge resync), 'ocv' (rested open-circuit voltage), 'quasi-ocv'
        (low-current night voltage, lead-acid; used for capacity only, never to reset SoC)
    sigma : one-sigma uncertainty of ``soc_pct`` [fraction, 0-1]
    end_index : for 'full', the last sample at which the bank still met the full-charge
        conditions (the best start for a discharge measured from full); else ``index``
    """

    index: int
    t_us: int
    soc_pct: float
    kind: str
    sigma: float
    end_index: int = -1

    @property
    def last_index(self) -> int:
        return self.end_index if self.end_index >= 0 else self.index

    @property
    def time(self) -> pd.Timestamp:
        return pd.Timestamp(self.t_us, unit="us", tz="UTC")


@dataclass(frozen=True)
class SocResult:
    """State of charge over a battery channel's history.

    Attributes
    ----------
    t_us : sample times [int64 us, UTC]
    soc : state of charge [%] per sample (float32)
    anchors : every anchor used, in time order
    capacity_Ah : the reference capacity the SoC is relative to [Ah]
    charge_Ah : cumulative Peukert/efficiency-corrected charge since the first sample [Ah]
    gaps : boolean per interval, True where nothing was integrated
    start : how the SoC before the first anchor was set ('back-calculated from the first anchor',
        'device SoC', 'assumed full')
    """

    t_us: np.ndarray
    soc: np.ndarray
    anchors: tuple[Anchor, ...]
    capacity_Ah: float
    charge_Ah: np.ndarray = field(repr=False)
    gaps: np.ndarray = field(repr=False)
    start: str = ""
    quasi_anchors: tuple[Anchor, ...] = ()

    @property
    def capacity_anchors(self) -> tuple[Anchor, ...]:
        """Anchors usable for capacity: resets plus quasi-OCV anchors, in time order."""
        return tuple(sorted(self.anchors + self.quasi_anchors, key=lambda a: a.index))

    @property
    def soc_pct(self) -> pd.Series:
        """SoC [%] as a Series on a UTC DatetimeIndex."""
        # A zero-copy view of the times (tz_localize would copy 250 MB on a year at 1 Hz).
        arr = pd.arrays.DatetimeArray._simple_new(np.ascontiguousarray(self.t_us, dtype=np.int64).view("M8[us]"),
                                                  dtype=pd.DatetimeTZDtype("us", "UTC"))
        return pd.Series(self.soc, index=pd.DatetimeIndex(arr, copy=False), name="soc_pct", copy=False)

    @property
    def resync_times(self) -> list[pd.Timestamp]:
        """Times of the full-charge resyncs (SoC set to 100 %)."""
        return [a.time for a in self.anchors if a.kind == "full"]

    def with_capacity(self, capacity_Ah: float) -> SocResult:
        """The same history re-run against another reference capacity (cheap: no re-integration)."""
        if len(self.charge_Ah) != len(self.t_us):
            raise ValueError("this SocResult no longer holds its cumulative charge; re-run state_of_charge")
        start = float(self.soc[0]) if not self.anchors and len(self.soc) else None
        soc = soc_from_anchors(self.charge_Ah, self.anchors, capacity_Ah, start_soc_pct=start)
        return replace(self, soc=soc, capacity_Ah=float(capacity_Ah))


def trapezoid_increments(t_us: np.ndarray, current_A: np.ndarray, *,
                         gaps: np.ndarray | None = None, dt_h: np.ndarray | None = None) -> np.ndarray:
    """Charge moved in each sampling interval by the trapezoid rule [Ah] (length n-1).

    NaN currents and gap intervals contribute 0 (unknown, not guessed). The
    result keeps the input's float precision (float32 logs stay float32:
    relative error ~1e-7 per interval; sums are taken in float64).

    Parameters
    ----------
    t_us : sample times [int64 us], increasing
    current_A : current at each sample [A]
    gaps : optional boolean per interval; True intervals are not integrated
    dt_h : optional precomputed intervals [h] (``Channel.dt_h``), saves a pass
    """
    if len(t_us) < 2:
        return np.zeros(0)
    out = np.add(current_A[1:], current_A[:-1])
    if not np.issubdtype(out.dtype, np.floating):
        out = out.astype(np.float64)
    if dt_h is None:
        dt_h = np.diff(t_us) * (1.0 / (US_PER_S * 3600.0))
    np.multiply(out, dt_h, out=out, casting="same_kind")
    out *= 0.5
    if gaps is not None and gaps.any():
        out[gaps] = 0.0
    nan = np.isnan(out)
    if nan.any():
        out[nan] = 0.0
    return out


def coulomb_count_Ah(t: pd.Series | pd.DatetimeIndex | np.ndarray, current_A: np.ndarray, *,
                     max_gap_s: float | None = None) -> float:
    """Net charge over a record by the trapezoid rule [Ah], skipping gaps.

    Parameters
    ----------
    t : sample times (tz-aware datetimes, or float seconds)
    current_A : current [A], positive into the bank
    max_gap_s : intervals longer than this are not integrated (default: 5 median intervals)
    """
    if isinstance(t, np.ndarray) and np.issubdtype(t.dtype, np.floating):
        t_us = np.round(t * US_PER_S).astype(np.int64)
    else:
        t_us = pd.DatetimeIndex(t).as_unit("us").asi8
    cur = np.asarray(current_A, dtype=float)
    g = gap_mask(t_us, threshold_s=max_gap_s if max_gap_s is not None else gap_threshold_s(t_us))
    return float(trapezoid_increments(t_us, cur, gaps=g).sum())


def corrected_current_A(current_A: np.ndarray, *, charge_efficiency: float, rated_current_A: float,
                        peukert_k: float) -> np.ndarray:
    """Current as it changes the state of charge [A]: eta*I on charge, -I_eff on discharge."""
    out = np.where(current_A > 0, current_A * charge_efficiency, current_A)
    if peukert_k != 1.0:
        # With the clamp I_eff >= |I| the correction only acts above the rated current,
        # usually a small share of samples: compute it there only.
        hi = np.flatnonzero(current_A < -rated_current_A)
        if len(hi):
            out[hi] = -effective_current(current_A[hi], rated_current_A, peukert_k)
    return out


def _runs(cond: np.ndarray, t_us: np.ndarray, breaks: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (inclusive) sample index of each run of True in ``cond``.

    A run is also broken at intervals flagged in ``breaks`` (gaps, length n-1).
    """
    n = len(cond)
    if n == 0:
        return np.zeros(0, dtype=np.int64), np.zeros(0, dtype=np.int64)
    start = cond.copy()
    start[1:] &= ~cond[:-1] | breaks
    end = cond.copy()
    end[:-1] &= ~cond[1:] | breaks
    return np.flatnonzero(start), np.flatnonzero(end)


def detect_full_charges(ch: Channel, system: System, gaps: np.ndarray,
                        charge_Ah: np.ndarray | None = None) -> list[Anchor]:
    """Full-charge resyncs: V >= full voltage, 0 <= I <= full current, for full_hold_s.

    A resync re-arms only after the bank has given up at least ``REARM_FRACTION``
    of its rated capacity (counted) since the previous one; a qualifying run
    before that extends the previous resync's ``end_index`` instead (the bank
    is still full, e.g. solar on and off through a sunny afternoon).
    """
    b = system.battery
    v, i = ch.voltage_V, ch.current_A
    if len(ch) < 2 or not np.isfinite(v).any():
        return []
    cond = (v >= b.effective_full_voltage_V) & (i >= 0.0) & (i <= b.effective_full_current_A)
    starts, ends = _runs(cond, ch.t_us, gaps)
    if len(starts) == 0:
        return []
    need_us = b.full_hold_s * US_PER_S
    long_ = (ch.t_us[ends] - ch.t_us[starts]) >= need_us
    out: list[Anchor] = []
    rearm_Ah = REARM_FRACTION * b.rated_capacity_Ah
    for s, e in zip(starts[long_], ends[long_]):  # loop over qualifying runs (events)
        # The resync fires the first moment the conditions have held for the detection time.
        k = int(np.searchsorted(ch.t_us, ch.t_us[s] + need_us, side="left"))
        if out and charge_Ah is not None:
            prev = out[-1]
            lo = prev.last_index
            if charge_Ah[lo:k + 1].min() > charge_Ah[lo] - rearm_Ah:
                out[-1] = replace(prev, end_index=int(e))
                continue
        out.append(Anchor(k, int(ch.t_us[k]), 100.0, "full", FULL_SIGMA, int(e)))
    return out


def detect_ocv_anchors(ch: Channel, system: System, gaps: np.ndarray) -> list[Anchor]:
    """Rested open-circuit-voltage anchors (lead-acid anywhere, LiFePO4 only at its knees)."""
    b = system.battery
    v, i = ch.voltage_V, ch.current_A
    if len(ch) < 2 or not np.isfinite(v).any():
        return []
    # "At rest": |I| below 0.2 % of C (>= 0.1 A), a trade rule of thumb for a rested bank.
    rest_A = max(0.1, 0.002 * b.rated_capacity_Ah)
    cond = np.abs(i) <= rest_A
    starts, ends = _runs(cond, ch.t_us, gaps)
    if len(starts) == 0:
        return []
    need_us = ocv_mod.MIN_REST_S[b.chemistry] * US_PER_S
    long_ = (ch.t_us[ends] - ch.t_us[starts]) >= need_us
    out = []
    for s, e in zip(starts[long_], ends[long_]):
        # Read the most relaxed voltage: the median of the rest's last 10 minutes.
        lo = int(np.searchsorted(ch.t_us, ch.t_us[e] - 600 * US_PER_S, side="left"))
        volt = float(np.nanmedian(v[lo:e + 1]))
        if not np.isfinite(volt):
            continue
        soc = float(ocv_mod.soc_from_ocv(volt, b.chemistry, b.nominal_voltage_V, b.rest_voltage_curve))
        if not ocv_mod.trusted(soc, b.chemistry):
            continue
        sigma = float(ocv_mod.soc_sigma_from_ocv(volt, b.chemistry, b.nominal_voltage_V, b.rest_voltage_curve))
        out.append(Anchor(int(e), int(ch.t_us[e]), soc, "ocv", sigma))
    return out


def detect_quasi_ocv_anchors(ch: Channel, system: System, gaps: np.ndarray,
                             *, internal_resistance_ohm: float | None = None) -> list[Anchor]:
    """Low-current voltage anchors for capacity (lead-acid anywhere, LiFePO4 at its low knee).

    A van or truck is rarely at true rest (a fridge cycles all night), but
    after a spell without charging (3 h for lead-acid, 1.5 h for LiFePO4; none
    in the next half hour either) with a small mean draw (<= 2 % C), at a
    sample drawing <= 1 % C the terminal voltage plus the ohmic drop ``|I| R``
    approximates the OCV. The SoC from it is noisier than a true rest
    (sigma ~ 6 %), so these anchors
    only enter the capacity fit, never reset the SoC. One per 6 h at most.
    """
    b = system.battery
    v, i = ch.voltage_V, ch.current_A
    if len(ch) < 3 or not np.isfinite(v).any():
        return []
    cap = b.rated_capacity_Ah
    r_ohm = internal_resistance_ohm if internal_resistance_ohm else 0.01 * ocv_mod.blocks(b.chemistry,
                                                                                         b.nominal_voltage_V)
    # Work on a ~1-minute grid (a subsample): anchors need minutes, not seconds.
    step = max(1, int(60.0 / max(median_interval_s(ch.t_us), 1e-3)))
    if step > 1:
        keep = np.arange(0, len(ch), step)
        t_s = ch.t_us[keep]
        g = np.add.reduceat(gaps.astype(np.int64), keep[:-1]) > 0 if len(keep) > 1 else np.zeros(0, bool)
        ch = Channel(ch.name, t_s, ch.current_A[keep], v[keep], ch.temperature_C[keep], ch.soc_pct[keep])
        v, i, gaps = ch.voltage_V, ch.current_A, g
        if len(ch) < 3:
            return []
    else:
        keep = np.arange(len(ch))
    cur = fill0(i)
    dt_h = np.diff(ch.t_us) / (US_PER_S * 3600.0)
    # Running integrals to get 2-hour windows with searchsorted (vectorised).
    absq = np.concatenate(([0.0], np.cumsum(np.abs(cur[:-1]) * dt_h)))
    chg = np.concatenate(([0.0], np.cumsum(np.where(cur[:-1] > 0.1, dt_h, 0.0))))
    gapc = np.concatenate(([0], np.cumsum(gaps, dtype=np.int64)))
    # Lead-acid relaxes slowly (>= 3 h used here); LiFePO4 in 1-3 h (Voicila 2025): 1.5 h.
    win_us = int((1.5 if b.chemistry == "lifepo4" else 3.0) * 3600 * US_PER_S)
    lo = np.searchsorted(ch.t_us, ch.t_us - win_us, side="left")
    # ... and no charging in the next 30 min either (a sunrise or a charger about to start).
    hi = np.minimum(np.searchsorted(ch.t_us, ch.t_us + 1800 * US_PER_S, side="right") - 1, len(ch) - 1)
    full_window = (ch.t_us - ch.t_us[lo]) >= 0.95 * win_us
    hours = np.maximum((ch.t_us - ch.t_us[lo]) / (US_PER_S * 3600.0), 1e-9)
    mean_abs = (absq - absq[lo]) / hours
    cand = (full_window & (mean_abs <= 0.02 * cap) & ((chg[hi] - chg[lo]) == 0) & ((gapc - gapc[lo]) == 0)
            & (cur <= 0.0) & (cur >= -max(0.1, 0.01 * cap)) & np.isfinite(v))
    idx = np.flatnonzero(cand)
    if len(idx) == 0:
        return []
    # One per 6-hour block: the latest candidate in each (most relaxed).
    block = (ch.t_us[idx] // int(6 * 3600 * US_PER_S))
    last = np.flatnonzero(np.diff(block, append=block[-1] + 1) != 0)
    idx = idx[last]
    ocv_v = v[idx] + np.abs(cur[idx]) * r_ohm
    soc = ocv_mod.soc_from_ocv(ocv_v, b.chemistry, b.nominal_voltage_V, b.rest_voltage_curve)
    trusted_ = ocv_mod.trusted(soc, b.chemistry) if b.chemistry != "lifepo4" else soc <= LFP_QUASI_MAX_SOC_PCT
    keep_idx = keep
    sigma = np.hypot(QUASI_SIGMA, ocv_mod.soc_sigma_from_ocv(ocv_v, b.chemistry, b.nominal_voltage_V,
                                                            b.rest_voltage_curve))
    return [Anchor(int(keep_idx[k]), int(ch.t_us[k]), float(sv), "quasi-ocv", float(sg))
            for k, sv, sg, ok in zip(idx, soc, sigma, trusted_) if ok]


def soc_from_anchors(charge_Ah: np.ndarray, anchors: tuple[Anchor, ...] | list[Anchor], capacity_Ah: float,
                     *, start_soc_pct: float | None) -> np.ndarray:
    """SoC [%] per sample from cumulative corrected charge and anchors (vectorised per segment).

    Between anchors: ``SoC = SoC_anchor + 100 (Q - Q_anchor) / C``, reflected at
    100 % (charging past full does not raise SoC above 100 %) using the
    Skorokhod form ``x - max(0, running_max(x - 100))``. Before the first
    anchor the SoC is back-calculated from it; with no anchor at all it starts
    at ``start_soc_pct`` (100 % when None). The result is clipped to [0, 100].
    The loop is over anchors (events), each segment a handful of numpy passes.
    """
    n = len(charge_Ah)
    out = np.empty(n, dtype=np.float32)
    if n == 0:
        return out
    scale = 100.0 / capacity_Ah
    # Several anchors at one sample collapse: the last one wins.
    by_index: dict[int, float] = {}
    for a in anchors:
        by_index[int(a.index)] = float(a.soc_pct)
    starts = sorted(by_index)
    if not starts:
        starts_vals = [(0, 100.0 if start_soc_pct is None else float(start_soc_pct))]
    else:
        starts_vals = [(i, by_index[i]) for i in starts]
        first = starts_vals[0][0]
        if first > 0:  # back-calculated from the first anchor
            pre = (charge_Ah[:first] - charge_Ah[first]) * scale
            pre += starts_vals[0][1]
            np.clip(pre, 0.0, 100.0, out=pre)
            out[:first] = pre
    for k, (lo, value) in enumerate(starts_vals):
        hi = starts_vals[k + 1][0] if k + 1 < len(starts_vals) else n
        q0 = charge_Ah[lo]
        carry = 0.0  # running max of the excess over 100 %, carried across blocks
        for b0 in range(lo, hi, BLOCK):  # blocks bound the float64 temporaries
            b1 = min(b0 + BLOCK, hi)
            x = (charge_Ah[b0:b1] - q0) * scale
            x += value
            excess = np.maximum(x - 100.0, carry)
            np.maximum.accumulate(excess, out=excess)
            carry = float(excess[-1])
            x -= excess
            np.clip(x, 0.0, 100.0, out=x)
            out[b0:b1] = x
    return out


def state_of_charge(battery: Channel | pd.DataFrame, system: System, *, capacity_Ah: float | None = None,
                    peukert_k: float | None = None, max_gap_s: float | None = None,
                    use_ocv: bool = True) -> SocResult:
    """State of charge over the whole history of the bank's (net) battery channel.

    Parameters
    ----------
    battery : the battery channel, as a :class:`analysis.readings.Channel` or a frame with a
        UTC ``t`` column (or UTC DatetimeIndex) and ``current_A``/``voltage_V`` [A, V]
    system : the system description (chemistry defaults and overrides)
    capacity_Ah : reference capacity [Ah] (default: the rated capacity)
    peukert_k : Peukert exponent (default: the system's effective value)
    max_gap_s : longest interval still integrated [s] (default: 5 median intervals)
    use_ocv : also anchor on rested open-circuit voltage

    Returns
    -------
    SocResult
    """
    ch = battery if isinstance(battery, Channel) else _channel_from_frame(battery)
    b = system.battery
    cap = float(capacity_Ah if capacity_Ah is not None else b.rated_capacity_Ah)
    k = float(peukert_k if peukert_k is not None else b.effective_peukert_k)
    thr = max_gap_s if max_gap_s is not None else gap_threshold_s(ch.t_us)
    gaps = gap_mask(ch.t_us, threshold_s=thr) if len(ch) > 1 else np.zeros(0, dtype=bool)
    cur = fill0(ch.current_A)
    corr = corrected_current_A(cur, charge_efficiency=b.effective_charge_efficiency,
                               rated_current_A=b.rated_current_A, peukert_k=k)
    inc = trapezoid_increments(ch.t_us, corr, gaps=gaps, dt_h=ch.dt_h if len(ch) > 1 else None)
    del corr
    q = np.empty(len(ch))
    if len(ch):
        q[0] = 0.0
        for lo in range(0, len(inc), BLOCK):  # float64 running sum in blocks: no full-length temporary
            hi = min(lo + BLOCK, len(inc))
            seg = np.cumsum(inc[lo:hi], dtype=np.float64)
            seg += q[lo]
            q[lo + 1:hi + 1] = seg
    del inc
    anchors = detect_full_charges(ch, system, gaps, q)
    loose: list[Anchor] = []
    if use_ocv:
        # A rested voltage resets the SoC only where the curve pins it; elsewhere (the
        # LiFePO4 shoulder, where makers' curves differ by tenths of a volt) it only
        # enters the capacity fit, with its wide uncertainty.
        for a in detect_ocv_anchors(ch, system, gaps):
            (anchors if a.sigma <= RESET_MAX_SIGMA else loose).append(a)
    anchors.sort(key=lambda a: a.index)
    quasi = tuple(sorted(loose + (detect_quasi_ocv_anchors(ch, system, gaps) if use_ocv else []),
                         key=lambda a: a.index))
    start = "back-calculated from the first anchor"
    start_soc = None
    if not anchors:
        dev = ch.soc_pct[np.isfinite(ch.soc_pct)][:1]
        if len(dev):
            start_soc, start = float(np.clip(dev[0], 0, 100)), "device SoC at the first sample"
        else:
            start_soc, start = 100.0, "assumed full (no anchor and no device SoC)"
    soc = soc_from_anchors(q, anchors, cap, start_soc_pct=start_soc)
    return SocResult(ch.t_us, soc, tuple(anchors), cap, q, gaps, start, quasi)


def device_disagreement_pct(soc: np.ndarray, device_soc_pct: np.ndarray, day: np.ndarray,
                            n_days: int) -> np.ndarray:
    """Mean absolute difference between our SoC and the device's own, per day [%] (NaN: no device SoC)."""
    ok = np.isfinite(device_soc_pct) & (day >= 0) & (day < n_days)
    if not ok.any():
        return np.full(n_days, np.nan)
    diff = np.abs(soc[ok].astype(float) - device_soc_pct[ok])
    s = np.bincount(day[ok], weights=diff, minlength=n_days)
    c = np.bincount(day[ok], minlength=n_days)
    with np.errstate(invalid="ignore", divide="ignore"):
        return np.where(c > 0, s / np.maximum(c, 1), np.nan)


def device_disagreement_by_day(soc: np.ndarray, device_soc_pct: np.ndarray, t_us: np.ndarray,
                               bounds_us: np.ndarray) -> np.ndarray:
    """As :func:`device_disagreement_pct`, one local day at a time (bounded memory on a year at 1 Hz)."""
    from drawdown.analysis.readings import per_day_mean

    return per_day_mean(t_us, device_soc_pct, bounds_us, minus=soc)


def _channel_from_frame(frame: pd.DataFrame) -> Channel:
    if "t" in frame.columns:
        t = pd.DatetimeIndex(frame["t"])
    else:
        t = pd.DatetimeIndex(frame.index)
    if t.tz is None:
        raise ValueError("battery frame times must be timezone-aware (UTC)")
    t_us = epoch_us(t)
    n = len(frame)

    def col(name: str) -> np.ndarray:
        return frame[name].to_numpy(dtype=float, na_value=np.nan) if name in frame.columns else np.full(n, np.nan)

    order = np.argsort(t_us, kind="stable")
    return Channel("battery", t_us[order], col("current_A")[order], col("voltage_V")[order],
                   col("temperature_C")[order], col("soc_pct")[order])
