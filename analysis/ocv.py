"""Open-circuit voltage (OCV) to state of charge, by chemistry.

A rested battery's terminal voltage tells its state of charge: well for
lead-acid (about 0.8 V from empty to full per 12 V block), poorly for LiFePO4,
whose plateau between ~80 % and ~40 % spans only ~0.23 V per 4-cell pack and
shows 5-25 mV per cell of hysteresis (docs/ocv.md). So lead-acid OCV anchors
are used across the range, LiFePO4 anchors only near its knees.

Tables are per 12 V block (12 V lead-acid; 4S LiFePO4 = 12.8 V nominal) at
about 25 degC; a 24 V or 48 V bank is scaled by its number of blocks.

Sources
-------
Lead-acid (flooded, AGM/gel): common practice tables as given in docs/ocv.md
(from memory of trade tables; flooded also agrees with Linden's rule
V_cell ~ SG + 0.84 within ~0.03 V).
LiFePO4 4S: common-practice typical table, docs/ocv.md (from memory). The same
page lists a PyBaMM Prada2013 model table that differs by ~0.1 V, which is
~20 % SoC on the plateau; hence the knee-only use.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

#: (SoC [%], OCV per 12 V block [V]) in increasing SoC. Common practice, from memory.
OCV_TABLES: dict[str, tuple[tuple[float, ...], tuple[float, ...]]] = {
    "flooded": ((0, 25, 50, 75, 100), (11.89, 12.06, 12.24, 12.45, 12.65)),
    "agm": ((0, 25, 50, 75, 100), (11.80, 12.00, 12.30, 12.60, 12.85)),
    "gel": ((0, 25, 50, 75, 100), (11.80, 12.00, 12.30, 12.60, 12.85)),
    # The 0 % and 100 % LiFePO4 points (12.0 V = 3.0 V/cell rested after a full discharge,
    # 13.6 V = 3.4 V/cell rested after a full charge) are common practice, from memory.
    "lifepo4": ((0, 10, 20, 30, 40, 50, 70, 80, 90, 95, 100),
                (12.0, 12.8, 13.0, 13.1, 13.15, 13.2, 13.25, 13.3, 13.35, 13.4, 13.6)),
}

#: Minimum rest (|I| ~ 0) before the terminal voltage is taken as OCV [s].
#: Lead-acid: >= 4 h (common practice; 12-24 h for ~ +-5 %). LiFePO4: 1-3 h (Voicila 2025).
MIN_REST_S: dict[str, float] = {"flooded": 4 * 3600.0, "agm": 4 * 3600.0, "gel": 4 * 3600.0,
                                "lifepo4": 2 * 3600.0}

#: SoC ranges [%] where an OCV reading is trusted as an anchor.
TRUSTED_RANGE_PCT: dict[str, tuple[tuple[float, float], ...]] = {
    "flooded": ((0.0, 100.0),), "agm": ((0.0, 100.0),), "gel": ((0.0, 100.0),),
    # LiFePO4: only the knees; the plateau in between hides SoC.
    "lifepo4": ((0.0, 15.0), (96.0, 100.0)),
}

#: One-sigma uncertainty of an OCV-derived SoC [fraction of capacity] (common practice: ~ +-5 %).
OCV_SIGMA: dict[str, float] = {"flooded": 0.05, "agm": 0.05, "gel": 0.05, "lifepo4": 0.05}

#: How far a real bank's rested-voltage curve may lie from the table [V per 12 V block],
#: taken as a +-2 sigma envelope. LiFePO4: published 4S curves differ by 0.1-0.3 V near the
#: knees (maker to maker, cell to cell, hysteresis of 5-25 mV per cell; e.g. the trade table
#: above against PyBaMM's Prada2013 open-circuit potentials, which sit 0.2-0.3 V lower below
#: 30 % SoC), so 0.25 V. Lead-acid: the full-charge specific gravity varies with the design
#: (about 1.265-1.300), i.e. ~0.03 V per cell by Linden's V_cell ~ SG + 0.84, ~0.2 V per
#: 12 V block between designs, half of it within one chemistry's table: 0.1 V.
#: (Common practice and from memory; see docs/ocv.md.)
CURVE_SPREAD_V: dict[str, float] = {"flooded": 0.10, "agm": 0.10, "gel": 0.10, "lifepo4": 0.25}

#: The spread left when the bank's own curve is declared (``[battery] rest_voltage_curve``, LiFePO4
#: only for now) [V per 12 V block, +-2 sigma]: its hysteresis (5-25 mV per cell, up to 0.1 V a
#: block) stays. From memory; docs/ocv.md#your-banks-own-curve.
DECLARED_CURVE_SPREAD_V: dict[str, float] = {"lifepo4": 0.10}

#: A declared curve: ((SoC %, bank volts), ...) rising in both.
Curve = tuple[tuple[float, float], ...]


def blocks(chemistry: str, nominal_voltage_V: float) -> int:
    """Number of 12 V blocks (12 V lead-acid or 12.8 V 4S LiFePO4) in the bank."""
    per = 12.8 if chemistry == "lifepo4" else 12.0
    return max(1, round(nominal_voltage_V / per))


def soc_from_ocv(ocv_V: ArrayLike, chemistry: str, nominal_voltage_V: float, curve: Curve | None = None) -> np.ndarray:
    """State of charge [%] of a rested bank from its open-circuit voltage.

    Linear interpolation in the bank's declared curve (``curve``, bank volts) when given, else in
    the chemistry's table (per 12 V block, scaled to the bank), clipped to the ends.

    Parameters
    ----------
    ocv_V : rested terminal voltage of the bank [V]
    chemistry : 'flooded', 'agm', 'gel' or 'lifepo4'
    nominal_voltage_V : bank nominal voltage [V] (12/24/48 V lead-acid, 12.8/25.6/51.2 V LiFePO4)
    curve : the bank's own ((SoC %, V), ...) from ``[battery] rest_voltage_curve``, or None
    """
    if chemistry not in OCV_TABLES:
        raise ValueError(f"no OCV table for chemistry {chemistry!r}; expected one of {sorted(OCV_TABLES)}")
    if curve is not None:
        return np.interp(np.asarray(ocv_V, dtype=float), [p[1] for p in curve], [p[0] for p in curve])
    soc, v = OCV_TABLES[chemistry]
    per_block = np.asarray(ocv_V, dtype=float) / blocks(chemistry, nominal_voltage_V)
    return np.interp(per_block, v, soc)


def ocv_from_soc(soc_pct: ArrayLike, chemistry: str, nominal_voltage_V: float, curve: Curve | None = None) -> np.ndarray:
    """Inverse of :func:`soc_from_ocv`: the bank OCV [V] at a state of charge [%]."""
    if curve is not None:
        return np.interp(np.asarray(soc_pct, dtype=float), [p[0] for p in curve], [p[1] for p in curve])
    soc, v = OCV_TABLES[chemistry]
    return np.interp(np.asarray(soc_pct, dtype=float), soc, v) * blocks(chemistry, nominal_voltage_V)


def trusted(soc_pct: ArrayLike, chemistry: str) -> np.ndarray:
    """True where an OCV-derived SoC lies in a range the chemistry allows as an anchor."""
    s = np.asarray(soc_pct, dtype=float)
    ok = np.zeros(s.shape, dtype=bool)
    for lo, hi in TRUSTED_RANGE_PCT[chemistry]:
        ok |= (s >= lo) & (s <= hi)
    return ok


def soc_sigma_from_ocv(ocv_V: ArrayLike, chemistry: str, nominal_voltage_V: float,
                       curve: Curve | None = None) -> np.ndarray:
    """One-sigma uncertainty [fraction] of the SoC read from a rested voltage, curve spread included.

    The SoC range the reading maps to when the bank's own curve lies anywhere within
    +-:data:`CURVE_SPREAD_V` of the table (taken as +-2 sigma), combined with the
    reading's own :data:`OCV_SIGMA`. On the LiFePO4 plateau and its lower shoulder a
    0.25 V spread is 10-40 % of SoC; in the steep last 10 % it is a few %. With the bank's own
    curve declared the spread is :data:`DECLARED_CURVE_SPREAD_V`.
    """
    v = np.asarray(ocv_V, dtype=float)
    spread = (DECLARED_CURVE_SPREAD_V if curve is not None else CURVE_SPREAD_V)[chemistry]
    dv = spread * blocks(chemistry, nominal_voltage_V)
    hi = soc_from_ocv(v + dv, chemistry, nominal_voltage_V, curve)
    lo = soc_from_ocv(v - dv, chemistry, nominal_voltage_V, curve)
    curve = (hi - lo) / 4.0 / 100.0
    return np.hypot(curve, OCV_SIGMA[chemistry])
