"""Coulomb counting and state of charge (docs/soc.md#check-values; OCV tables common practice, docs/ocv.md)."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from drawdown.analysis import ocv
from drawdown.analysis.charge import coulomb_count_Ah, state_of_charge
from drawdown.analysis.readings import Channel
from drawdown.analysis.system import system_from_mapping


def _system(chem="agm", cap=100.0, **bat):
    return system_from_mapping({"site": {"latitude_deg": 60, "longitude_deg": 10, "timezone": "UTC"},
                                "battery": {"chemistry": chem, "nominal_voltage_V": 12.8 if chem == "lifepo4" else 12,
                                            "rated_capacity_Ah": cap, "rated_hours": 20, **bat}})


def _channel(t_s, cur, volt=None):
    t_s = np.asarray(t_s, float)
    n = len(t_s)
    v = np.full(n, np.nan) if volt is None else np.asarray(volt, float)
    return Channel("battery", (t_s * 1e6).astype(np.int64) + 1_767_225_600_000_000, np.asarray(cur, float), v,
                   np.full(n, np.nan), np.full(n, np.nan))


def test_trapezoid_of_docs_three_samples_is_minus_12_5_Ah():
    # docs/soc.md#check-values: (0 s, -10 A), (1800 s, -10 A), (3600 s, -20 A), trapezoid -> -12.5 Ah.
    assert coulomb_count_Ah(np.array([0.0, 1800.0, 3600.0]), np.array([-10.0, -10.0, -20.0]),
                            max_gap_s=3600) == pytest.approx(-12.5)


def test_gap_longer_than_five_samples_is_not_integrated():
    t = np.concatenate([np.arange(0, 600, 60.0), np.arange(600 + 3600, 600 + 3600 + 600, 60.0)])
    ah = coulomb_count_Ah(t, np.full(len(t), -6.0))
    # 2 x 9 intervals of 60 s at 6 A = 1.8 Ah; the hour-long gap adds nothing.
    assert ah == pytest.approx(-1.8)


def test_discharge_10A_for_2h_removes_20_percent_with_k_1():
    # docs/soc.md#check-values: -10 A for 2 h on 100 Ah, k = 1 -> -20.0 %.
    t = np.arange(0, 7201, 60.0)
    res = state_of_charge(_channel(t, np.full(len(t), -10.0)), _system(peukert_k=1.0), use_ocv=False)
    assert res.soc[-1] - res.soc[0] == pytest.approx(-20.0, abs=0.01)


def test_charge_10A_for_2h_adds_19_percent_at_efficiency_0_95():
    # docs/soc.md#check-values: +10 A for 2 h with eta_c = 0.95 -> +19.0 %. Start from the device SoC 50 %.
    t = np.arange(0, 7201, 60.0)
    ch = _channel(t, np.full(len(t), 10.0))
    ch = Channel(ch.name, ch.t_us, ch.current_A, ch.voltage_V, ch.temperature_C, np.full(len(t), 50.0))
    res = state_of_charge(ch, _system(charge_efficiency=0.95), use_ocv=False)
    assert res.soc[0] == pytest.approx(50.0)
    assert res.soc[-1] == pytest.approx(69.0, abs=0.01)


def test_peukert_correction_removes_28_28_percent_in_one_hour_at_20A():
    # docs/peukert.md#check-values: I_eff(20 A) = 28.28 A on C20 = 100 Ah, k = 1.25.
    t = np.arange(0, 3601, 10.0)
    res = state_of_charge(_channel(t, np.full(len(t), -20.0)), _system(peukert_k=1.25), use_ocv=False)
    assert res.soc[0] - res.soc[-1] == pytest.approx(28.28, abs=0.01)


def test_full_charge_resync_sets_100_percent_after_the_hold_time():
    # Common-practice resync: V >= full_voltage_V, 0 <= I <= full current, held for full_hold_s.
    # AGM defaults (analysis.system): 13.2 V per 12 V, 2 % of C = 2 A, 120 s.
    t = np.arange(0, 4 * 3600, 10.0)
    cur = np.where(t < 7200, -10.0, 1.5)          # discharge 2 h, then a taper-like 1.5 A
    volt = np.where(t < 7200, 12.2, 13.5)
    res = state_of_charge(_channel(t, cur, volt), _system(), use_ocv=False)
    assert len(res.resync_times) == 1
    k = res.anchors[0].index
    assert (t[k] - 7200) >= 120 and res.soc[k] == pytest.approx(100.0)
    # Before the resync the SoC is back-calculated from it: at 7190 s, 100 % minus the charge
    # (0.90 x 1.5 A; AGM default efficiency 0.90, Sandia SAND87-7023) still to come before it fired.
    i = np.searchsorted(t, 7190)
    expect = 100 - 0.90 * 1.5 * (t[k] - 7200) / 3600  # Ah on 100 Ah = %
    assert res.soc[i] == pytest.approx(expect, abs=0.02)
    assert res.start == "back-calculated from the first anchor"


def test_soc_is_held_at_100_percent_while_charging_past_full():
    t = np.arange(0, 3 * 3600, 10.0)
    cur = np.where(t < 3600, 0.5, 20.0)
    volt = np.where(t < 3600, 13.4, 14.4)  # resync in the first hour (0.5 A < 2 A full current)
    res = state_of_charge(_channel(t, cur, volt), _system(), use_ocv=False)
    assert res.soc.max() == pytest.approx(100.0)
    assert np.all(res.soc[res.anchors[0].index:] == pytest.approx(100.0))


def test_rested_lead_acid_ocv_anchors_soc():
    # AGM OCV table (docs/ocv.md, common practice): 12.30 V rested = 50 %.
    t = np.arange(0, 6 * 3600, 60.0)
    res = state_of_charge(_channel(t, np.zeros(len(t)), np.full(len(t), 12.30)), _system())
    assert [a.kind for a in res.anchors] == ["ocv"]
    assert res.soc[-1] == pytest.approx(50.0, abs=0.1)


def test_lifepo4_plateau_voltage_is_not_used_as_an_anchor():
    # docs/ocv.md: the LFP plateau (13.2 V ~ 50 %) hides SoC; only the knees anchor.
    t = np.arange(0, 6 * 3600, 60.0)
    res = state_of_charge(_channel(t, np.zeros(len(t)), np.full(len(t), 13.2)), _system("lifepo4"))
    assert res.anchors == ()


@pytest.mark.parametrize("chem, volt, soc", [("flooded", 12.65, 100), ("flooded", 12.24, 50), ("flooded", 11.89, 0),
                                             ("agm", 12.60, 75), ("agm", 12.00, 25), ("lifepo4", 13.3, 80)])
def test_ocv_tables_match_common_practice_values(chem, volt, soc):
    # OCV tables: docs/ocv.md, common practice (from memory of trade tables).
    assert float(ocv.soc_from_ocv(volt, chem, 12.8 if chem == "lifepo4" else 12.0)) == pytest.approx(soc, abs=0.5)


def test_ocv_table_scales_to_a_24V_bank():
    assert float(ocv.soc_from_ocv(24.48, "flooded", 24.0)) == pytest.approx(50.0, abs=0.5)


def test_flooded_table_agrees_with_linden_specific_gravity_rule():
    # Linden, Handbook of Batteries (from memory): V_cell ~ SG + 0.84; SG 1.265 -> 12.63 V, ~ full.
    assert float(ocv.soc_from_ocv(6 * (1.265 + 0.84), "flooded", 12.0)) > 95.0


def test_state_of_charge_accepts_a_frame():
    t = pd.date_range("2026-01-01", periods=121, freq="60s", tz="UTC")
    res = state_of_charge(pd.DataFrame({"t": t, "current_A": -10.0, "voltage_V": np.nan}),
                          _system(peukert_k=1.0), use_ocv=False)
    assert isinstance(res.soc_pct, pd.Series) and res.soc_pct.index.tz is not None
    assert res.soc[0] - res.soc[-1] == pytest.approx(20.0, abs=0.01)  # 2 h at 10 A on 100 Ah


def test_soc_over_a_record_longer_than_one_block_matches_the_closed_form():
    # 5 M samples at 1 Hz cross the 1 M-sample blocks of the running sum: -1 mA for 5e6 s
    # removes 1.389 Ah of 100 Ah (k = 1) - the same as one exact sum.
    n = 5_000_000
    t = np.arange(n, dtype=float)
    res = state_of_charge(_channel(t, np.full(n, -0.001)), _system(peukert_k=1.0), use_ocv=False)
    assert res.soc[0] - res.soc[-1] == pytest.approx(0.001 * (n - 1) / 3600, rel=1e-5)
    assert res.charge_Ah[4_000_001] == pytest.approx(-0.001 * 4_000_000 / 3600, rel=1e-6)


def test_reflection_at_full_carries_across_blocks():
    # Charging past full for longer than one 1 M-sample block, then discharging: the SoC
    # must drop from 100 % at once (the excess over full is not remembered across blocks).
    n = 2_500_000
    t = np.arange(n, dtype=float)
    cur = np.where(t < 1_500_000, 1.0, -1.0)
    res = state_of_charge(_channel(t, cur), _system(cap=1000.0, peukert_k=1.0, charge_efficiency=1.0),
                          use_ocv=False)
    assert res.soc[1_499_999] == pytest.approx(100.0)
    # 1e6 s at 1 A = 277.8 Ah out of 1000 Ah, counted from full.
    assert res.soc[-1] == pytest.approx(100.0 - 100.0 * 1_000_000 / 3600 / 1000.0, abs=0.01)
