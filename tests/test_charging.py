"""Alternator/DC-DC and shore charging diagnostics.

Outside references: docs/chargers.md (DC-DC input current check values; alternator
continuous-draw rule, common practice), the docs/chargers.md#safety rule (no lithium
charging below 0 degC, common practice), and the bundled simulator's truth.
Synthetic sessions are built here with known plateau, sag and taper.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from drawdown.analysis.charging import analyse_charging, dc_dc_input_current_A
from drawdown.analysis.system import system_from_mapping


def make_system(*, dcdc_A: float = 30.0, alternator_A: float | None = 180.0, shore_A: float | None = None):
    chargers = [{"source": "alternator", "max_current_A": dcdc_A,
                 **({"alternator_rating_A": alternator_A} if alternator_A else {})}]
    if shore_A:
        chargers.append({"source": "shore", "max_current_A": shore_A})
    return system_from_mapping({
        "site": {"latitude_deg": 61.2, "longitude_deg": 7.1, "timezone": "Europe/Oslo"},
        "battery": {"chemistry": "lifepo4", "nominal_voltage_V": 12.8, "rated_capacity_Ah": 200},
        "charger": chargers})


def frame_from(minutes_A: np.ndarray, *, bank_V: np.ndarray | float = 13.3, temp_C: float = 15.0,
               net_A: np.ndarray | None = None, step_s: int = 10, channel: str = "alternator",
               start: str = "2026-09-21 08:00") -> pd.DataFrame:
    """Canonical frame at ``step_s`` from per-minute charger current and bank voltage."""
    per_min = 60 // step_s
    cur = np.repeat(np.asarray(minutes_A, dtype=float), per_min)
    volts = np.repeat(np.broadcast_to(np.asarray(bank_V, dtype=float), len(minutes_A)), per_min)
    net = cur - 3.0 if net_A is None else np.repeat(np.asarray(net_A, dtype=float), per_min)
    t = pd.date_range(pd.Timestamp(start, tz="UTC"), periods=len(cur), freq=f"{step_s}s")
    src = pd.DataFrame({"t": t, "channel": channel, "voltage_V": np.nan, "current_A": cur,
                        "temperature_C": np.nan, "soc_pct": np.nan})
    bat = pd.DataFrame({"t": t, "channel": "battery", "voltage_V": volts, "current_A": net,
                        "temperature_C": temp_C, "soc_pct": np.nan})
    df = pd.concat([src, bat], ignore_index=True)
    df["t"] = df["t"].astype("datetime64[us, UTC]")
    df["channel"] = df["channel"].astype("category")
    return df


def pad(x: np.ndarray, before: int = 30, after: int = 30) -> np.ndarray:
    return np.concatenate([np.zeros(before), x, np.zeros(after)])


@pytest.mark.parametrize("input_V, expected_A", [(13.2, 36.4), (12.5, 38.4)])
def test_dc_dc_input_current_matches_docs_check_values(input_V, expected_A):
    # docs/chargers.md#check-values: 30 A out at 14.4 V, eta 0.9 -> 36.4 A at 13.2 V in, 38.4 A at 12.5 V in.
    assert float(dc_dc_input_current_A(30.0, 14.4, input_V, efficiency=0.9)) == pytest.approx(expected_A, abs=0.05)


def test_full_rate_drive_gives_plateau_at_rating_and_ah_per_hour():
    df = frame_from(pad(np.full(120, 30.0)))
    alt = analyse_charging(df, make_system()).to_json()["sources"]["alternator"]
    assert alt["plateau_A"] == pytest.approx(30.0, abs=0.01)
    assert alt["fraction_of_rating"] == pytest.approx(1.0, abs=0.01)
    assert alt["total_Ah"] == pytest.approx(60.0, rel=0.01)
    assert alt["Ah_per_hour_of_driving"] == pytest.approx(30.0, rel=0.02)
    assert alt["drives"] == 1 and alt["derated_sessions"] == 0


def test_charger_below_its_rating_is_a_finding():
    df = frame_from(pad(np.full(90, 20.0)))
    result = analyse_charging(df, make_system())
    assert result.sources["alternator"]["fraction_of_rating"] == pytest.approx(0.667, abs=0.01)
    assert any("voltage drop" in f for f in result.findings)


def test_mid_session_sag_with_bank_not_full_is_derating():
    cur = np.concatenate([np.full(40, 30.0), np.full(40, 17.0), np.full(20, 30.0)])
    df = frame_from(pad(cur), bank_V=13.35)
    result = analyse_charging(df, make_system())
    assert result.sources["alternator"]["derated_sessions"] == 1
    assert any("sagged" in f for f in result.findings)


def test_taper_at_absorption_is_not_derating_and_ends_full():
    # Bulk at 30 A, then absorption at 14.2 V with the current tapering (LFP, charged 14.0 V).
    taper = 30.0 * np.exp(-np.arange(40) / 10.0)
    cur = np.concatenate([np.full(60, 30.0), taper])
    volts = np.concatenate([np.linspace(13.3, 14.1, 60), np.full(40, 14.2)])
    df = frame_from(np.concatenate([cur, np.zeros(30)]), bank_V=np.concatenate([volts, np.full(30, 13.6)]))
    alt = analyse_charging(df, make_system()).sources["alternator"]
    assert alt["derated_sessions"] == 0
    assert alt["ended_full"] == 1
    assert alt["plateau_A"] == pytest.approx(30.0, abs=0.5)


def test_charger_cycling_on_a_smart_alternator_is_reported():
    cycle = np.concatenate([np.full(6, 30.0), np.zeros(3)])
    df = frame_from(pad(np.tile(cycle, 8)))
    result = analyse_charging(df, make_system())
    assert result.sources["alternator"]["on_off_interruptions"] == 7
    assert any("ignition or D+" in f for f in result.findings)


def test_heavy_dc_dc_load_on_a_small_alternator_is_a_finding():
    # Common practice (docs/chargers.md#alternators): keep continuous draw <= 50-70 % of the alternator rating.
    df = frame_from(pad(np.full(60, 60.0)))
    result = analyse_charging(df, make_system(dcdc_A=60.0, alternator_A=100.0))
    assert result.sources["alternator"]["alternator_load_fraction"] > 0.5
    assert any("alternator's rating" in f for f in result.findings)


def test_lithium_charging_below_freezing_is_flagged():
    # Safety (docs/chargers.md#safety; common practice): do not charge LiFePO4 below 0 degC.
    df = frame_from(pad(np.full(30, 20.0)), temp_C=-4.0)
    result = analyse_charging(df, make_system())
    assert result.cold_charging["minutes"] >= 29
    assert any("below 0 °C" in f for f in result.findings)


def test_missing_channel_is_reported_not_guessed():
    df = frame_from(pad(np.full(30, 20.0)), channel="solar")
    alt = analyse_charging(df, make_system()).sources["alternator"]
    assert alt["channel_logged"] is False and "single shunt" in alt["why"]


def test_shore_sessions_are_hook_ups_with_their_own_rating():
    df = frame_from(pad(np.full(180, 25.0)), channel="shore")
    shore = analyse_charging(df, make_system(shore_A=25.0)).sources["shore"]
    assert shore["hook_ups"] == 1 and shore["fraction_of_rating"] == pytest.approx(1.0, abs=0.01)
    assert shore["Ah_per_hour_on_hook_up"] == pytest.approx(25.0, rel=0.02)


def test_empty_readings_do_not_crash():
    out = analyse_charging(pd.DataFrame(columns=["t", "channel", "voltage_V", "current_A",
                                                 "temperature_C", "soc_pct"]), make_system()).to_json()
    assert out["sources"]["alternator"]["channel_logged"] is False
    json.dumps(out, allow_nan=False)


def test_to_json_is_plain_json():
    df = frame_from(pad(np.full(60, 30.0)))
    json.dumps(analyse_charging(df, make_system()).to_json(), allow_nan=False)


def test_simulated_autumn_van_alternator_ah_matches_truth():
    # The bundled simulator's truth: Ah delivered by the DC-DC charger over its drive days.
    from drawdown.collector.simulated import simulate, to_canonical

    sim = simulate("autumn-van", days=8)
    df = to_canonical(sim, interval_s=10)
    alt = analyse_charging(df, sim.scenario.system).sources["alternator"]
    truth_Ah = sum(d["charged_Ah"]["alternator"] for d in sim.truth["days"])
    assert alt["total_Ah"] == pytest.approx(truth_Ah, rel=0.02)
    assert alt["plateau_A"] == pytest.approx(30.0, abs=1.0)  # the simulator's DC-DC runs at its rating


