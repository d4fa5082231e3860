"""Usable capacity, state of health, Peukert fit and internal resistance (docs/peukert.md, docs/capacity.md)."""

from __future__ import annotations

import numpy as np
import pytest

from drawdown.analysis.capacity import (
    anchor_pairs,
    estimate_capacity,
    fit_peukert,
    internal_resistance,
    plett_tls,
    plett_wls,
)
from drawdown.analysis.charge import state_of_charge
from drawdown.analysis.readings import Channel, local_day_bounds
from drawdown.analysis.system import system_from_mapping

T0_US = 1_767_225_600_000_000  # 2026-01-01T00:00Z


def _system(chem="agm", cap=100.0, **bat):
    return system_from_mapping({"site": {"latitude_deg": 60, "longitude_deg": 10, "timezone": "UTC"},
                                "battery": {"chemistry": chem, "nominal_voltage_V": 12, "rated_capacity_Ah": cap,
                                            "rated_hours": 20, **bat}})


def _ch(t_s, cur, volt):
    n = len(t_s)
    return Channel("battery", (np.asarray(t_s) * 1e6).astype(np.int64) + T0_US, np.asarray(cur, float),
                   np.asarray(volt, float), np.full(n, np.nan), np.full(n, np.nan))


# Plett 2011 WLS/TLS check values: docs/capacity.md#check-values, tolerance 1e-3.
X = np.array([0.60, 0.35, 0.80, 0.50])
Y = np.array([61.0, 34.0, 79.0, 50.5])


def test_plett_wls_matches_docs_check_value():
    assert plett_wls(X, Y, 1.0) == pytest.approx(99.7814, abs=1e-3)


def test_plett_tls_matches_docs_check_value():
    assert plett_tls(X, Y, 1.0, m=0.01) == pytest.approx(99.7930, abs=1e-3)


def test_plett_tls_reduces_to_wls_as_m_goes_to_zero():
    assert plett_tls(X, Y, 1.0, m=1e-6) == pytest.approx(plett_wls(X, Y, 1.0), abs=1e-4)


def _full_then_discharge_then_rest(cap_true=100.0, amps=6.0, out_Ah=60.0):
    # Full (13.5 V, 1 A taper for 10 min), then out_Ah at amps, then a 6 h rest at the OCV of the
    # true final SoC (AGM table, docs/ocv.md, common practice).
    from drawdown.analysis.ocv import ocv_from_soc
    t1 = np.arange(0, 600, 10.0)
    t2 = np.arange(600, 600 + out_Ah / amps * 3600 + 10, 10.0)
    t3 = np.arange(t2[-1] + 10, t2[-1] + 10 + 6 * 3600, 10.0)
    soc_end = 100 * (1 - out_Ah / cap_true)
    t = np.concatenate([t1, t2, t3])
    cur = np.concatenate([np.full(len(t1), 1.0), np.full(len(t2), -amps), np.zeros(len(t3))])
    volt = np.concatenate([np.full(len(t1), 13.5), np.full(len(t2), 12.2),
                           np.full(len(t3), float(ocv_from_soc(soc_end, "agm", 12)))])
    return t, cur, volt


def test_anchor_method_full_then_60Ah_then_rested_40_percent_gives_100Ah():
    # docs/capacity.md#check-values: full resync, 60.0 Ah out, rested OCV reading 40 % -> Q = 100.0 Ah.
    t, cur, volt = _full_then_discharge_then_rest()
    sys_ = _system(peukert_k=1.0)
    ch = _ch(t, cur, volt)
    soc = state_of_charge(ch, sys_)
    pairs = anchor_pairs(ch, soc, sys_, peukert_k=1.0)
    est = estimate_capacity(pairs, sys_)
    assert est.usable_Ah == pytest.approx(100.0, rel=0.01)
    assert est.ci95_Ah[0] < 100.0 < est.ci95_Ah[1]
    assert est.state_of_health_pct == pytest.approx(100.0, rel=0.01)


def test_capacity_is_null_with_a_reason_when_no_pair_spans_40_percent():
    t, cur, volt = _full_then_discharge_then_rest(out_Ah=20.0)  # 20 % span only
    sys_ = _system(peukert_k=1.0)
    ch = _ch(t, cur, volt)
    soc = state_of_charge(ch, sys_)
    est = estimate_capacity(anchor_pairs(ch, soc, sys_, peukert_k=1.0), sys_, largest_span_pct=20.0)
    assert est.usable_Ah is None and est.ci95_Ah is None
    assert "40 %" in est.why and "20 %" in est.why


def test_peukert_exponent_is_fitted_from_discharges_at_different_rates():
    # Two full->rested cycles at 5 A and 25 A on a k = 1.2 bank (capacities from Peukert 1897's form).
    from drawdown.analysis.ocv import ocv_from_soc
    from drawdown.analysis.peukert import capacity_at_current
    k_true, parts_t, parts_i, parts_v, t_off = 1.2, [], [], [], 0.0
    for amps in (5.0, 25.0):
        c_at = float(capacity_at_current(100.0, 20.0, amps, k_true))
        out = 0.6 * c_at  # 60 % of what the bank gives at this rate
        t, cur, volt = _full_then_discharge_then_rest(cap_true=c_at, amps=amps, out_Ah=out)
        volt[(cur == 0)] = float(ocv_from_soc(40.0, "agm", 12))
        parts_t.append(t + t_off); parts_i.append(cur); parts_v.append(volt)
        t_off = parts_t[-1][-1] + 60
    sys_ = _system(peukert_k=1.1)
    ch = _ch(np.concatenate(parts_t), np.concatenate(parts_i), np.concatenate(parts_v))
    soc = state_of_charge(ch, sys_)
    est = fit_peukert(anchor_pairs(ch, soc, sys_, peukert_k=1.1), sys_)
    assert est.source == "fitted"
    assert est.k == pytest.approx(k_true, abs=0.02)


def test_peukert_keeps_the_default_and_says_why_without_rate_contrast():
    est = fit_peukert([], _system())
    assert est.source == "chemistry default" and est.k == pytest.approx(1.10) and "fewer than two" in est.why


def test_internal_resistance_is_the_median_voltage_step_over_current_step():
    # A 1 s log with a 5 A load switching every 5 min on a bank with R = 12 mOhm (Ohm's law).
    t = np.arange(0, 3 * 86400, 1.0)
    on = ((t // 300) % 2).astype(bool)
    cur = np.where(on, -5.5, -0.5)
    rng = np.random.default_rng(3)
    volt = 12.7 + cur * 0.012 + rng.normal(0, 0.001, len(t))
    ch = _ch(t, cur, volt)
    bounds, dates = local_day_bounds(int(ch.t_us[0]), int(ch.t_us[-1]), "UTC")
    est = internal_resistance(ch, bounds, dates)
    assert est.ohm == pytest.approx(0.012, rel=0.05)
    assert len(est.per_day) == 3 and est.trend_ohm_per_30d == pytest.approx(0.0, abs=0.002)


def test_internal_resistance_is_null_with_a_reason_for_slow_logs():
    t = np.arange(0, 86400, 60.0)
    cur = np.where((t // 600) % 2 == 1, -6.0, -0.5)
    ch = _ch(t, cur, 12.7 + cur * 0.01)
    bounds, dates = local_day_bounds(int(ch.t_us[0]), int(ch.t_us[-1]), "UTC")
    est = internal_resistance(ch, bounds, dates)
    assert est.ohm is None and "within 10 s" in est.why
