"""Usable capacity, state of health, Peukert exponent and internal resistance from field data.

Capacity from partial cycles (FIELDREF §3, anchor method): between two anchors
of known SoC (analysis.charge), ``Q = (Peukert/efficiency-corrected Ah moved) /
delta SoC``. All accepted anchor pairs (``|delta SoC| >= 0.4``, common
practice) are combined with the weighted least-squares form of Plett (2011),
``y_i = Q x_i`` with ``x_i = delta SoC_i`` and ``y_i`` the Ah over the same
interval, weights from an effective variance ``sigma_y^2 + Q^2 sigma_x^2`` so
that the SoC noise of the anchors counts too (statsmodels WLS).

References
----------
G. L. Plett, "Recursive approximate weighted total least squares estimation of
battery cell total capacity", J. Power Sources 196 (2011) 2319-2331.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from analysis.charge import Anchor, SocResult, corrected_current_A, trapezoid_increments
from analysis.peukert import fit_exponent
from analysis.readings import US_PER_S, Channel
from analysis.system import System

MIN_DELTA_SOC: float = 0.4  # common practice (FIELDREF §3)
#: One-sigma relative gain error of a shunt (common practice: ~1 %).
SHUNT_GAIN_SIGMA: float = 0.01
#: One-sigma uncertainty of the charge-efficiency factor (from memory: ranges of ~ +-3 %).
ETA_SIGMA: float = 0.03
#: One-sigma current offset of a shunt [A] (common practice: tens of mA).
OFFSET_SIGMA_A: float = 0.02
#: One-sigma uncertainty of a chemistry-default Peukert exponent (vendor ranges span ~0.05-0.1).
K_SIGMA: float = 0.05


@dataclass(frozen=True)
class AnchorPair:
    """Charge moved between two anchors [Ah] and the SoC change [fraction]."""

    start: Anchor
    end: Anchor
    delta_soc: float          # x: SoC_end - SoC_start [fraction]
    ah_moved: float           # y: corrected net charge over the interval [Ah]
    ah_discharged_A: float    # raw (uncorrected) discharge [Ah], >= 0
    ah_charged: float         # raw charge [Ah], >= 0
    mean_discharge_A: float   # mean discharge current while discharging [A]
    sigma_y: float            # [Ah]
    sigma_x: float            # [fraction]

    @property
    def capacity_Ah(self) -> float:
        return self.ah_moved / self.delta_soc

    def to_json(self) -> dict:
        return {"start": self.start.time.isoformat(), "end": self.end.time.isoformat(),
                "start_kind": self.start.kind, "end_kind": self.end.kind,
                "delta_soc_pct": round(100 * self.delta_soc, 2), "ah_moved": round(self.ah_moved, 3),
                "capacity_Ah": round(self.capacity_Ah, 2), "mean_discharge_A": round(self.mean_discharge_A, 3)}


@dataclass(frozen=True)
class CapacityEstimate:
    """Usable capacity [Ah] with a 95 % interval, or None with a reason."""

    usable_Ah: float | None
    ci95_Ah: tuple[float, float] | None
    why: str | None
    state_of_health_pct: float | None
    pairs: tuple[AnchorPair, ...] = ()
    method: str = "Plett 2011 WLS (y = Q x) with effective variance"


@dataclass(frozen=True)
class PeukertEstimate:
    k: float
    source: str                # 'fitted', 'system.toml', 'chemistry default'
    why: str | None
    points: tuple[tuple[float, float], ...] = ()   # (current_A, runtime_h) used in a fit


@dataclass(frozen=True)
class ResistanceEstimate:
    """Internal resistance from load steps [ohm], per day and overall."""

    ohm: float | None
    why: str | None
    per_day: pd.DataFrame = field(repr=False, default_factory=pd.DataFrame)  # date, ohm, steps
    trend_ohm_per_30d: float | None = None
    steps: int = 0


def plett_wls(x: np.ndarray, y: np.ndarray, sigma_y: np.ndarray | float = 1.0) -> float:
    """Plett (2011) weighted least squares for y = Q x: ``Q = c2 / c1``.

    ``c1 = sum(x^2 / sigma_y^2)``, ``c2 = sum(x y / sigma_y^2)``.
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    w = 1.0 / np.broadcast_to(np.asarray(sigma_y, float), x.shape) ** 2
    return float(np.sum(w * x * y) / np.sum(w * x * x))


def plett_tls(x: np.ndarray, y: np.ndarray, sigma_y: np.ndarray | float = 1.0, *, m: float = 1.0) -> float:
    """Plett (2011) total least squares for y = Q x with ``sigma_x = m sigma_y``.

    Solves ``m^2 c2 Q^2 + (c1 - m^2 c3) Q - c2 = 0`` (positive root), with
    ``c3 = sum(y^2 / sigma_y^2)``; reduces to :func:`plett_wls` as ``m -> 0``.
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    w = 1.0 / np.broadcast_to(np.asarray(sigma_y, float), x.shape) ** 2
    c1, c2, c3 = np.sum(w * x * x), np.sum(w * x * y), np.sum(w * y * y)
    if m == 0:
        return float(c2 / c1)
    b = c1 - m * m * c3
    return float((-b + np.sqrt(b * b + 4 * m * m * c2 * c2)) / (2 * m * m * c2))


def anchor_pairs(ch: Channel, soc: SocResult, system: System, *, peukert_k: float,
                 min_delta_soc: float = MIN_DELTA_SOC) -> list[AnchorPair]:
    """Anchor pairs spanning >= ``min_delta_soc``, free of gaps and of charging past full.

    For every anchor the nearest earlier anchor with a large enough SoC span
    is taken. A pair is refused when a gap lies between them (charge unknown)
    or when the bank was pushed past 100 % in between without a resync (the
    counted charge then overstates what went in).
    """
    b = system.battery
    anchors = list(soc.capacity_anchors)
    if len(anchors) < 2:
        return []
    gap_cum = np.concatenate(([0], np.cumsum(soc.gaps, dtype=np.int64)))
    pairs: list[AnchorPair] = []
    used_starts: set[int] = set()
    for j in range(1, len(anchors)):
        aj = anchors[j]
        for i in range(j - 1, -1, -1):
            ai = anchors[i]
            if abs(aj.soc_pct - ai.soc_pct) / 100.0 >= min_delta_soc:
                break
        else:
            continue
        if ai.index in used_starts and ai.kind != "full":
            continue
        # A full anchor counts from the last moment the bank still met the full-charge conditions:
        # a tail-current criterion fires a little before the bank is truly full.
        lo, hi = ai.last_index, aj.last_index
        if hi <= lo or gap_cum[hi] - gap_cum[lo] > 0:
            continue
        seg = slice(lo, hi + 1)
        t = ch.t_us[seg]
        cur = np.nan_to_num(ch.current_A[seg], nan=0.0)
        corr = corrected_current_A(cur, charge_efficiency=b.effective_charge_efficiency,
                                   rated_current_A=b.rated_current_A, peukert_k=peukert_k)
        y = float(trapezoid_increments(t, corr).sum())
        dis = float(-trapezoid_increments(t, np.minimum(cur, 0.0)).sum())
        chg = float(trapezoid_increments(t, np.maximum(cur, 0.0)).sum())
        dis_corr = float(-trapezoid_increments(t, np.minimum(corr, 0.0)).sum())
        x = (aj.soc_pct - ai.soc_pct) / 100.0
        # Charging past full in between: the provisional SoC path (from ai) exceeds 100 %.
        path = ai.soc_pct + 100.0 * np.cumsum(np.concatenate(([0.0], trapezoid_increments(t, corr)))) \
            / b.rated_capacity_Ah
        if path.max() > 100.0 + 100.0 * 0.02 and path.argmax() < len(path) - 1:
            continue
        hours_dis = float(np.diff(t)[cur[:-1] < 0].sum() / (US_PER_S * 3600.0))
        mean_dis = dis / hours_dis if hours_dis > 0 else 0.0
        dt_h = (t[-1] - t[0]) / (US_PER_S * 3600.0)
        rate_term = 0.0
        if mean_dis > b.rated_current_A and peukert_k > 1.0:
            rate_term = dis_corr * K_SIGMA * np.log(mean_dis / b.rated_current_A)
        sigma_y = float(np.sqrt((SHUNT_GAIN_SIGMA * (dis + chg)) ** 2 + (ETA_SIGMA * chg) ** 2
                                + (OFFSET_SIGMA_A * dt_h) ** 2 + rate_term ** 2))
        sigma_x = float(np.hypot(ai.sigma, aj.sigma))
        pairs.append(AnchorPair(ai, aj, x, y, dis, chg, mean_dis, max(sigma_y, 1e-6), sigma_x))
        used_starts.add(ai.index)
    return pairs


def estimate_capacity(pairs: list[AnchorPair], system: System, *,
                      largest_span_pct: float | None = None) -> CapacityEstimate:
    """Combine anchor pairs into a usable capacity with a 95 % interval (statsmodels WLS).

    The interval half-width is 1.96 times the larger of the known-variance
    standard error ``sqrt(1 / sum(x^2 / s^2))`` and, with three or more pairs,
    the residual-scaled standard error statsmodels reports; the wider one is
    kept so a scatter larger than the error model widens the interval.
    """
    import statsmodels.api as sm

    rated = system.battery.rated_capacity_Ah
    if not pairs:
        span = "" if largest_span_pct is None else f" (largest SoC span between anchors: {largest_span_pct:.0f} %)"
        return CapacityEstimate(None, None, "no pair of known-SoC anchors (full-charge resync or rested OCV) "
                                f"spans >= {100 * MIN_DELTA_SOC:.0f} % SoC without a gap{span}", None)
    x = np.array([p.delta_soc for p in pairs])
    y = np.array([p.ah_moved for p in pairs])
    sy = np.array([p.sigma_y for p in pairs])
    sx = np.array([p.sigma_x for p in pairs])
    q = float(np.median(y / x))
    for _ in range(3):  # effective variance: Q^2 sigma_x^2 added to sigma_y^2, iterated
        var = sy ** 2 + (q * sx) ** 2
        q = plett_wls(x, y, np.sqrt(var))
    var = sy ** 2 + (q * sx) ** 2
    res = sm.WLS(y, x[:, None], weights=1.0 / var).fit()
    q = float(res.params[0])
    se_known = float(np.sqrt(1.0 / np.sum(x * x / var)))
    se = se_known
    if len(pairs) >= 3:
        se = max(se, float(res.bse[0]))
    if not np.isfinite(q) or q <= 0:
        return CapacityEstimate(None, None, f"anchor pairs gave a non-physical capacity ({q:.1f} Ah)", None,
                                tuple(pairs))
    ci = (q - 1.96 * se, q + 1.96 * se)
    return CapacityEstimate(q, ci, None, 100.0 * q / rated, tuple(pairs))


def fit_peukert(pairs: list[AnchorPair], system: System, *, min_rate_ratio: float = 2.0) -> PeukertEstimate:
    """Peukert exponent from discharge-dominated anchor pairs at clearly different rates.

    Each pair that is mostly discharge (charge < 5 % of discharge) gives a
    capacity at its mean discharge current, ``C(I) = Ah / |delta SoC|``, and so
    a runtime ``t = C / I``; :func:`analysis.peukert.fit_exponent` fits
    ``ln t = ln C_p - k ln I`` when the currents differ by at least
    ``min_rate_ratio``. Otherwise the configured or chemistry default is kept.
    """
    b = system.battery
    src = "system.toml" if b.peukert_k is not None else "chemistry default"
    pts = [(p.mean_discharge_A, (p.ah_discharged_A - p.ah_charged * b.effective_charge_efficiency)
            / abs(p.delta_soc) / p.mean_discharge_A)
           for p in pairs if p.delta_soc < 0 and p.mean_discharge_A > 0 and p.ah_charged < 0.05 * p.ah_discharged_A]
    if len(pts) < 2:
        return PeukertEstimate(b.effective_peukert_k, src,
                               f"fewer than two discharge-only anchor pairs ({len(pts)}); kept the {src} value")
    cur = np.array([p[0] for p in pts])
    if cur.max() / cur.min() < min_rate_ratio:
        return PeukertEstimate(b.effective_peukert_k, src,
                               f"discharge rates differ by only {cur.max() / cur.min():.1f}x "
                               f"(need >= {min_rate_ratio:.0f}x); kept the {src} value")
    k, _ = fit_exponent(cur, [p[1] for p in pts])
    if not 1.0 <= k <= 1.8:
        return PeukertEstimate(b.effective_peukert_k, src, f"log-log fit gave k = {k:.2f}, outside 1.0-1.8; "
                               f"kept the {src} value", tuple(pts))
    return PeukertEstimate(float(k), "fitted", None, tuple(pts))


def internal_resistance(ch: Channel, bounds_us: np.ndarray, dates: list, *, min_step_A: float = 3.0,
                        max_interval_s: float = 10.0) -> ResistanceEstimate:
    """Internal resistance from step changes in current: ``R = dV / dI`` over one sample.

    A compressor or pump switching changes the current by several amperes
    within a sample while the open-circuit voltage barely moves, so the
    terminal-voltage step is the ohmic drop. Steps of at least ``min_step_A``
    over intervals no longer than ``max_interval_s`` are used; the estimate is
    the median (robust to a charge source switching at the same moment), per
    local day and overall, with a linear trend [ohm per 30 days] when at
    least three days have estimates (a rising resistance is an ageing sign).
    """
    import statsmodels.api as sm

    empty = pd.DataFrame({"date": [], "ohm": [], "steps": []})
    if len(ch) < 2 or not np.isfinite(ch.voltage_V).any():
        return ResistanceEstimate(None, "no voltage logged on the battery channel", empty)
    d_i = np.diff(ch.current_A)
    cand = np.flatnonzero(np.abs(d_i) >= min_step_A)
    if len(cand):
        dt = (ch.t_us[cand + 1] - ch.t_us[cand]) / US_PER_S
        cand = cand[dt <= max_interval_s]
    if len(cand) == 0:
        return ResistanceEstimate(None, f"no current steps >= {min_step_A:g} A within {max_interval_s:g} s "
                                  "(log faster, or no switching loads)", empty)
    r = (ch.voltage_V[cand + 1] - ch.voltage_V[cand]) / d_i[cand]
    ok = np.isfinite(r) & (r > 0) & (r < 1.0)
    cand, r = cand[ok], r[ok]
    if len(r) < 3:
        return ResistanceEstimate(None, f"only {len(r)} usable current steps", empty, steps=len(r))
    day = np.searchsorted(bounds_us, ch.t_us[cand], side="right") - 1
    frame = pd.DataFrame({"day": day, "ohm": r})
    g = frame.groupby("day")["ohm"].agg(["median", "size"])
    g = g[(g.index >= 0) & (g.index < len(dates))]
    per_day = pd.DataFrame({"date": [dates[i] for i in g.index], "ohm": g["median"].to_numpy(),
                            "steps": g["size"].to_numpy()})
    trend = None
    if len(per_day) >= 3:
        days_f = np.array([(pd.Timestamp(d) - pd.Timestamp(per_day["date"].iloc[0])).days for d in per_day["date"]],
                          dtype=float)
        if np.ptp(days_f) > 0:
            fit = sm.WLS(per_day["ohm"].to_numpy(), sm.add_constant(days_f), weights=per_day["steps"]).fit()
            trend = float(fit.params[1] * 30.0)
    return ResistanceEstimate(float(np.median(r)), None, per_day, trend, len(r))
