"""The 95 % band of the state-of-charge series: what the capacity and the anchors leave open.

Between two moments of known state of charge (a full-charge resync, a rested voltage) the
SoC is counted in ampere-hours and divided by a capacity. Three things are not known exactly:

* the capacity the count is divided by: the measured usable capacity's 95 % interval, or the
  range the anchors allow when they cannot pin it, or - with no measurement at all - a bank
  of unknown health, 60-105 % of rated (from memory: banks are usually replaced at 70-80 % of
  rated and new ones test a few per cent above it; see docs/capacity.md). The counted
  excursion from the anchor scales with rated/actual, so the error grows with depth of
  discharge: a 200 Ah rating on a bank that really holds 177 Ah reads 29 % where it is 16 %;
* the anchor's own SoC (its one-sigma uncertainty; a LiFePO4 rested voltage between the knees
  is worth little, docs/ocv.md);
* the shunt's zero offset, counted every hour since the anchor (analysis/instrument.py).

They are independent and add in quadrature; the band is clipped to 0-100 %.
"""

from __future__ import annotations

import numpy as np

from drawdown.analysis.instrument import SHUNT_OFFSET95_A

#: With no capacity measurement: the range of health a bank of unknown age may have [x rated].
UNKNOWN_HEALTH_RANGE: tuple[float, float] = (0.60, 1.05)


def capacity_range_Ah(rated_Ah: float, ci95_Ah: tuple[float, float] | None,
                      allowed_Ah: tuple[float, float] | None) -> tuple[float, float]:
    """The 95 % range of the capacity the SoC is relative to [Ah]."""
    lo, hi = UNKNOWN_HEALTH_RANGE[0] * rated_Ah, UNKNOWN_HEALTH_RANGE[1] * rated_Ah
    if ci95_Ah is not None:
        return max(ci95_Ah[0], 1e-6), max(ci95_Ah[1], 1e-6)
    if allowed_Ah is not None:  # what the anchors allow, within what a bank of unknown health may be
        a, b = max(allowed_Ah[0], lo), min(allowed_Ah[1], hi)
        if a < b:
            return a, b
    return lo, hi


def soc_band_pct(t_us: np.ndarray, soc_pct: np.ndarray, ref_capacity_Ah: float,
                 cap_range_Ah: tuple[float, float], anchors: list[tuple[int, float, float]],
                 at: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Lower and upper 95 % SoC [%] at the samples ``at`` (default: every sample).

    ``soc_pct`` was counted against ``ref_capacity_Ah``; ``anchors`` are ``(sample index,
    SoC [%], one-sigma [fraction])`` of the resets the count started from, in time order.
    Each sample is referred to the last anchor at or before it (the first one before any).
    With no anchor the first sample is the reference, with the assumed start's full doubt.
    """
    at = np.arange(len(soc_pct)) if at is None else np.asarray(at, dtype=np.int64)
    soc = np.asarray(soc_pct, dtype=float)[at]
    t = np.asarray(t_us)[at]
    n = len(at)
    if n == 0:
        return soc.copy(), soc.copy()
    if anchors:
        idx = np.array([a[0] for a in anchors], dtype=np.int64)
        ref_soc = np.array([a[1] for a in anchors], dtype=float)
        ref_sig = np.array([a[2] for a in anchors], dtype=float)
        k = np.clip(np.searchsorted(idx, at, side="right") - 1, 0, len(idx) - 1)
        a_soc, a_sig, a_t = ref_soc[k], 100.0 * ref_sig[k], np.asarray(t_us)[idx[k]]
    else:
        a_soc = np.full(n, float(soc_pct[0]))
        a_sig = np.full(n, 50.0)  # an assumed start: anywhere from empty to full
        a_t = np.full(n, int(t_us[0]))
    t_us = t
    dev = soc - a_soc
    c_lo, c_hi = cap_range_Ah
    v1 = a_soc + dev * ref_capacity_Ah / c_lo
    v2 = a_soc + dev * ref_capacity_Ah / c_hi
    lo_cap, hi_cap = np.minimum(v1, v2), np.maximum(v1, v2)
    hours = np.abs(t_us - a_t) / 3.6e9
    drift = 100.0 * SHUNT_OFFSET95_A * hours / max(c_lo, 1e-6)
    spread = np.sqrt((1.96 * a_sig) ** 2 + drift ** 2)
    lo = np.clip(soc - np.sqrt((soc - lo_cap) ** 2 + spread ** 2), 0.0, 100.0)
    hi = np.clip(soc + np.sqrt((hi_cap - soc) ** 2 + spread ** 2), 0.0, 100.0)
    return lo, hi
