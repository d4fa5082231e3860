"""Peukert's law: how a lead-acid (and, weakly, a lithium) bank loses capacity at high current.

Rated form (Peukert 1897; docs/peukert.md), for a bank rated ``C_H`` ampere-hours over
``H`` hours, i.e. at the rated current ``I_H = C_H / H``::

    t = H * (C_H / (I * H)) ** k          runtime at a constant current I [h]
    C(I) = I * t = C_H * (I_H / I) ** (k - 1)
    C_p = I ** k * t = H * I_H ** k       the Peukert capacity [A^k h]

For a state-of-charge counter the discharge current is replaced by the
*Peukert-corrected current* ``I_eff = |I| * (|I| / I_H) ** (k - 1)`` integrated
against ``C_H`` (common practice). Below ``I_H`` that formula credits the bank
with *more* than its rated capacity, which real batteries do not deliver
(capacity saturates at low current, from memory). drawdown therefore clamps
``I_eff >= |I|``: a slow discharge is counted at face value, never shrunk.

References
----------
W. Peukert, "Über die Abhängigkeit der Kapazität von der Entladestromstärke bei
Bleiakkumulatoren", Elektrotechnische Zeitschrift 18 (1897) 287-288 (from memory).
D. Doerffel, S. A. Sharkh, J. Power Sources 155 (2006) 395-400 (from memory).
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike


def _check_k(k: float) -> None:
    if not (np.isfinite(k) and 1.0 <= k <= 2.0):
        raise ValueError(f"Peukert exponent k must be in [1.0, 2.0] (typical 1.0-1.6), got {k!r}")


def runtime_h(C_H_Ah: float, H_h: float, I_A: ArrayLike, k: float) -> np.ndarray:
    """Runtime to empty at a constant discharge current, Peukert's rated form.

    Parameters
    ----------
    C_H_Ah : rated capacity at the ``H_h`` rate [Ah]
    H_h : rated discharge time [h]
    I_A : discharge current magnitude [A] (> 0; the sign is ignored)
    k : Peukert exponent [-]

    Returns
    -------
    numpy.ndarray
        ``t = H * (C_H / (|I| * H)) ** k`` [h].
    """
    _check_k(k)
    i = np.abs(np.asarray(I_A, dtype=float))
    with np.errstate(divide="ignore"):
        return H_h * (C_H_Ah / (i * H_h)) ** k


def capacity_at_current(C_H_Ah: float, H_h: float, I_A: ArrayLike, k: float) -> np.ndarray:
    """Capacity delivered at a constant current, ``C(I) = C_H * (I_H / I) ** (k - 1)`` [Ah]."""
    i = np.abs(np.asarray(I_A, dtype=float))
    return i * runtime_h(C_H_Ah, H_h, i, k)


def peukert_capacity(C_H_Ah: float, H_h: float, k: float) -> float:
    """The Peukert capacity ``C_p = H * I_H ** k`` [A^k h], so that ``t = C_p / I ** k``."""
    _check_k(k)
    return float(H_h * (C_H_Ah / H_h) ** k)


def effective_current(I_A: ArrayLike, I_H_A: float, k: float, *, clamp: bool = True) -> np.ndarray:
    """Peukert-corrected discharge current magnitude [A].

    ``I_eff = |I| * (|I| / I_H) ** (k - 1)``; with ``clamp`` (the default) the
    result is never below ``|I|`` (see the module docstring for why).

    Parameters
    ----------
    I_A : discharge current [A], either sign (the magnitude is used)
    I_H_A : rated current ``C_H / H`` [A]
    k : Peukert exponent [-]
    clamp : keep ``I_eff >= |I|``
    """
    _check_k(k)
    if I_H_A <= 0:
        raise ValueError(f"rated current I_H must be > 0 A, got {I_H_A!r}")
    i = np.abs(np.asarray(I_A, dtype=float))
    if k == 1.0:
        return i
    out = np.asarray(i * (i / I_H_A) ** (k - 1.0))
    if clamp:
        out = np.maximum(out, i)
    return out


def fit_exponent(currents_A: ArrayLike, runtimes_h: ArrayLike) -> tuple[float, float]:
    """Fit Peukert's exponent from discharges at different constant currents.

    Ordinary least squares of ``ln t = ln C_p - k ln I`` (docs/peukert.md#fitting-the-exponent); with
    two points this is exactly ``k = ln(t1/t2) / ln(I2/I1)``.

    Parameters
    ----------
    currents_A : discharge currents [A] (at least two distinct values)
    runtimes_h : runtime to the same end voltage at each current [h]

    Returns
    -------
    (k, C_p) : exponent [-] and Peukert capacity [A^k h]
    """
    i = np.abs(np.asarray(currents_A, dtype=float))
    t = np.asarray(runtimes_h, dtype=float)
    if i.shape != t.shape:
        raise ValueError(f"need one runtime per current, got {i.size} currents and {t.size} runtimes")
    ok = np.isfinite(i) & np.isfinite(t) & (i > 0) & (t > 0)
    if ok.sum() < 2 or np.ptp(np.log(i[ok])) < 1e-9:
        raise ValueError(f"need discharges at >= 2 distinct currents, got {int(ok.sum())} usable points")
    slope, intercept = np.polyfit(np.log(i[ok]), np.log(t[ok]), 1)
    return float(-slope), float(np.exp(intercept))
