"""Usable capacity, state of health, Peukert exponent and internal resistance from field data.

Capacity from partial cycles (docs/capacity.md#anchor-pairs, anchor method): between two anchors
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

from drawdown.analysis.charge import Anchor, SocResult, corrected_current_A, trapezoid_increments
from drawdown.analysis.peukert import fit_exponent
from drawdown.analysis.readings import US_PER_S, Channel
from drawdown.analysis.system import CHEMISTRY_DEFAULTS, System

MIN_DELTA_SOC: float = 0.4  # common practice (docs/capacity.md)
#: How far back [us] beyond the nearest qualifying start anchor a better-known one is sought.
PAIR_LOOKBACK_US: int = 2 * 86400 * 1_000_000
#: One-sigma relative gain error of a shunt (common practice: ~1 %).
SHUNT_GAIN_SIGMA: float = 0.01
#: One-sigma uncertainty of an assumed (chemistry-default) charge efficiency [fraction]: the
#: published ranges (from memory) are 0.85-0.95 flooded, 0.90-0.97 AGM/gel, 0.99-0.999 LiFePO4,
#: and lower still while a lead-acid bank gasses in absorption; half the range as sigma.
ETA_SIGMA: dict[str, float] = {"flooded": 0.05, "agm": 0.04, "gel": 0.04, "lifepo4": 0.005}
#: A full-to-full cycle estimates the charge efficiency only if it gave up at least this
#: fraction of the rated capacity (smaller cycles are swamped by the resyncs' own spread).
ETA_MIN_CYCLE_FRACTION: float = 0.2
#: One-sigma current offset of a shunt [A] (common practice: tens of mA).
OFFSET_SIGMA_A: float = 0.02
#: A capacity whose 95 % half-width exceeds this fraction of itself is reported as unknown
#: (null with the range the data allow) rather than as a number.
MAX_CI_HALF_FRACTION: float = 0.25
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
    sigma_y: float            # [Ah], every error source as if independent of other pairs
    sigma_x: float            # [fraction]
    sigma_y_own: float = 0.0  # [Ah], the part independent between pairs (offset, rate)
    eta_sigma: float = 0.0    # the charge efficiency's sigma, shared by every pair

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
    #: When ``usable_Ah`` is None for want of precision: the 95 % range the data allow [Ah].
    range_Ah: tuple[float, float] | None = None


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


@dataclass(frozen=True)
class EfficiencyEstimate:
    """Charge (Ah) efficiency from full-to-full cycles, or None with a reason."""

    eta: float | None
    sigma: float | None
    cycles: int
    why: str | None


def estimate_charge_efficiency(ch: Channel, soc: SocResult, system: System, *,
                               peukert_k: float) -> EfficiencyEstimate:
    """The bank's charge efficiency from the cycles between two full-charge resyncs.

    Between the last moment a bank met the full-charge conditions and the next
    resync it gave up ``Q_out`` (Peukert-corrected) and took in ``Q_in``; it ends as
    full as it started, so ``eta = Q_out / Q_in`` (the definition of the Ah
    efficiency, e.g. Linden's Handbook of Batteries). Cycles that gave up at least
    :data:`ETA_MIN_CYCLE_FRACTION` of the rated capacity without a gap are
    combined weighted by ``Q_in``; each end's full-charge spread (3 % of C) sets
    the uncertainty, and the measurement is combined with the chemistry's default
    and its :data:`ETA_SIGMA` (inverse-variance weights: the default is the prior).
    The result is bounded to 0.70-1.00.
    """
    from drawdown.analysis.charge import FULL_SIGMA

    b = system.battery
    full = [a for a in soc.anchors if a.kind == "full"]
    if len(full) < 2:
        return EfficiencyEstimate(None, None, 0, f"fewer than two full-charge resyncs ({len(full)})")
    gap_cum = np.concatenate(([0], np.cumsum(soc.gaps, dtype=np.int64)))
    outs, ins = [], []
    for a, z in zip(full[:-1], full[1:]):  # loop over cycles (events)
        # From the end of one full spell to the end of the next: both ends after the bank
        # sat full (a resync fires at the tail current, before the bank is truly full).
        lo, hi = a.last_index, z.last_index
        if hi <= lo or gap_cum[hi] - gap_cum[lo] > 0:
            continue
        t = ch.t_us[lo:hi + 1]
        cur = np.nan_to_num(ch.current_A[lo:hi + 1], nan=0.0)
        corr = corrected_current_A(cur, charge_efficiency=1.0, rated_current_A=b.rated_current_A,
                                   peukert_k=peukert_k)
        q_out = float(-trapezoid_increments(t, np.minimum(corr, 0.0)).sum())
        q_in = float(trapezoid_increments(t, np.maximum(cur, 0.0)).sum())
        if q_out >= ETA_MIN_CYCLE_FRACTION * b.rated_capacity_Ah and q_in > 0:
            outs.append(q_out)
            ins.append(q_in)
    if not outs:
        return EfficiencyEstimate(None, None, 0, "no full-to-full cycle gave up "
                                  f">= {100 * ETA_MIN_CYCLE_FRACTION:.0f} % of the rated capacity")
    q_in_sum = float(np.sum(ins))
    measured = float(np.clip(np.sum(outs) / q_in_sum, 0.70, 1.0))
    # Each cycle's two resyncs each miss full by ~FULL_SIGMA x C; cycles are independent.
    s_meas = max(float(np.sqrt(len(outs) * 2.0) * FULL_SIGMA * b.rated_capacity_Ah / q_in_sum), 0.005)
    # Combined with the chemistry's published range (the prior): a short cycle, whose two
    # resyncs' spread swamps it, moves the default little; many deep cycles pin it.
    prior = CHEMISTRY_DEFAULTS[b.chemistry]["charge_efficiency"]
    s_prior = ETA_SIGMA[b.chemistry]
    w_m, w_p = 1.0 / s_meas ** 2, 1.0 / s_prior ** 2
    eta = float(np.clip((measured * w_m + prior * w_p) / (w_m + w_p), 0.70, 1.0))
    return EfficiencyEstimate(eta, float(1.0 / np.sqrt(w_m + w_p)), len(outs), None)


def anchor_pairs(ch: Channel, soc: SocResult, system: System, *, peukert_k: float,
                 min_delta_soc: float = MIN_DELTA_SOC, eta_sigma: float | None = None) -> list[AnchorPair]:
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
        # Among the earlier anchors far enough away in SoC (and with no gap between),
        # the best known one: a full resync or a steep-knee reading rather than a
        # shoulder reading an hour later.
        cands = [i for i in range(j - 1, -1, -1)
                 if abs(aj.soc_pct - anchors[i].soc_pct) / 100.0 >= min_delta_soc
                 and gap_cum[aj.last_index] - gap_cum[anchors[i].last_index] == 0]
        if not cands:
            continue
        near = [i for i in cands if (anchors[cands[0]].t_us - anchors[i].t_us) <= PAIR_LOOKBACK_US]
        ai = anchors[min(near, key=lambda i: (anchors[i].sigma, -i))]
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
        s_eta = eta_sigma if eta_sigma is not None else (0.0 if b.charge_efficiency is not None
                                                          else ETA_SIGMA[b.chemistry])
        sigma_y = float(np.sqrt((SHUNT_GAIN_SIGMA * (dis + chg)) ** 2 + (s_eta * chg) ** 2
                                + (OFFSET_SIGMA_A * dt_h) ** 2 + rate_term ** 2))
        sigma_x = float(np.hypot(ai.sigma, aj.sigma))
        own = float(np.sqrt((OFFSET_SIGMA_A * dt_h) ** 2 + rate_term ** 2))
        pairs.append(AnchorPair(ai, aj, x, y, dis, chg, mean_dis, max(sigma_y, 1e-6), sigma_x,
                                max(own, 1e-6), s_eta))
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
    q = float(np.median(y / x))
    for _ in range(4):  # the covariance depends on Q through the anchors' SoC errors: iterate
        cov = pair_covariance(pairs, q)
        res = sm.GLS(y, x[:, None], sigma=cov).fit()
        q = float(res.params[0])
    cov = pair_covariance(pairs, q)
    res = sm.GLS(y, x[:, None], sigma=cov).fit()
    q = float(res.params[0])
    se_known = float(np.sqrt(1.0 / (x @ np.linalg.solve(cov, x))))
    se = se_known
    if len(pairs) >= 3:
        se = max(se, float(res.bse[0]))
    if not np.isfinite(q) or q <= 0:
        return CapacityEstimate(None, None, f"anchor pairs gave a non-physical capacity ({q:.1f} Ah)", None,
                                tuple(pairs))
    ci = (q - 1.96 * se, q + 1.96 * se)
    if 1.96 * se > MAX_CI_HALF_FRACTION * q:
        return CapacityEstimate(None, None, f"the known-SoC anchors cannot pin the capacity: the data allow "
                                f"{max(ci[0], 0):.0f}-{ci[1]:.0f} Ah (the rested voltages lie where the "
                                f"chemistry's voltage curve differs between makers; a discharge into the steep "
                                f"last 10 % or a longer log would pin it)", None, tuple(pairs),
                                range_Ah=(max(ci[0], 0.0), ci[1]))
    return CapacityEstimate(q, ci, None, 100.0 * q / rated, tuple(pairs))


def pair_covariance(pairs: list[AnchorPair] | tuple[AnchorPair, ...], capacity_Ah: float) -> np.ndarray:
    """Covariance [Ah^2] of the pairs' residuals ``y_i - Q x_i``.

    Independent per pair: the current offset and the rate term (``sigma_y_own``).
    Shared: an anchor's SoC error enters every pair that starts or ends on it
    (``Q^2 A diag(sigma_a^2) A^T`` with A the pairs-by-anchors incidence, +1 at an
    end, -1 at a start), the shunt's gain error scales every pair's Ah alike
    (rank one in ``y``) and so does the charge efficiency's error (rank one in the
    charge each pair took in). Treating these as independent would count one knee
    reading, one gain and one efficiency as many.
    """
    n = len(pairs)
    keys: dict[int, int] = {}
    sig: list[float] = []
    inc = np.zeros((n, 2 * n))
    for k, p in enumerate(pairs):
        for a, sgn in ((p.start, -1.0), (p.end, 1.0)):
            col = keys.setdefault(a.index, len(keys))
            if col == len(sig):
                sig.append(a.sigma)
            inc[k, col] += sgn
    inc = inc[:, :len(sig)]
    y = np.array([p.ah_moved for p in pairs])
    chg = np.array([p.ah_charged * (1.0 if p.eta_sigma else 0.0) for p in pairs])
    eta_s = max((p.eta_sigma for p in pairs), default=0.0)
    cov = np.diag([p.sigma_y_own ** 2 if p.sigma_y_own else p.sigma_y ** 2 for p in pairs])
    cov += capacity_Ah ** 2 * (inc * np.square(sig)) @ inc.T
    if any(p.sigma_y_own for p in pairs):
        cov += SHUNT_GAIN_SIGMA ** 2 * np.outer(y, y) + eta_s ** 2 * np.outer(chg, chg)
    return cov + 1e-9 * np.eye(n)


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
