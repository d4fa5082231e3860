"""Tests of the simulator (collector/simulated.py and its sim_* helpers).

Outside references, named beside each test: Peukert 1897 (docs/peukert.md check
values), the docs/soc.md coulomb-counting check and OCV tables (docs/ocv.md, common practice),
pvlib's clear-sky chain run directly in the test, and plain energy bookkeeping
(what the truth file says must be what the log integrates to).
"""

from __future__ import annotations

import json
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pvlib
import pytest

from drawdown.analysis.system import parse_system
from drawdown.collector.sim_physics import BankModel, open_circuit_voltage_V, run_bank
from drawdown.collector.sim_solar import pwm_current_A
from drawdown.collector.simulated import (MULTI_CHANNEL_COLUMNS, SINGLE_SHUNT_COLUMNS, available_scenarios,
                                 load_scenario, simulate, write_log)
from drawdown.cli import main as cli_main

REPO = Path(__file__).resolve().parents[1]


def _bank(**kw) -> BankModel:
    base = dict(chemistry="flooded", blocks_12V=1, capacity_Ah=100.0, rated_hours=20.0, peukert_k=1.25,
                charge_efficiency=1.0, internal_resistance_ohm=0.01, polarisation_ohm=0.0, relaxation_s=600.0,
                absorption_V=14.4, float_V=13.6, soc_cv=0.95, absorption_end_current_A=1.0, max_charge_current_A=50.0,
                float_current_A=0.0, rebulk_soc=0.95)
    base.update(kw)
    return BankModel(**base)


def _hours_to_empty(bank: BankModel, current_A: float, dt_s: float = 5.0, max_h: float = 80.0) -> float:
    n = int(max_h * 3600 / dt_s)
    run = run_bank(bank, dt_s=dt_s, source_A=np.zeros(n), load_W=np.zeros(n), load_A=np.full(n, current_A),
                   soc0=1.0, enable_disconnect=False)
    empty = np.flatnonzero(run.soc_end <= 0.0)
    assert empty.size, "the bank never emptied"
    # Interpolate inside the step where SoC crossed zero.
    i = int(empty[0])
    before = run.soc_end[i - 1]
    return (i + before / (before - run.soc_end[i])) * dt_s / 3600.0


@pytest.fixture(scope="module")
def van3(tmp_path_factory):
    """autumn-van, 3 days, written at 60 s (multi-channel)."""
    sim = simulate("autumn-van", days=3)
    out = tmp_path_factory.mktemp("van") / "van.csv"
    truth_path = write_log(sim, out, interval_s=60)
    return sim, out, json.loads(truth_path.read_text())


@pytest.fixture(scope="module")
def truck3(tmp_path_factory):
    sim = simulate("spring-truck", days=3)
    out = tmp_path_factory.mktemp("truck") / "truck.csv"
    truth_path = write_log(sim, out, interval_s=60)
    return sim, out, json.loads(truth_path.read_text())


def _read_log(path: Path, tz: str) -> pd.DataFrame:
    df = pd.read_csv(path)
    df["date"] = pd.to_datetime(df["time"], utc=True).dt.tz_convert(tz).dt.date.astype(str)
    return df


# --- Peukert (Peukert 1897, t = H (C/(I H))^k; docs/peukert.md check values, C20 = 100 Ah, k = 1.25)

@pytest.mark.parametrize(("current_A", "hours"), [(10.0, 8.409), (20.0, 3.536), (50.0, 1.125)])
def test_constant_current_discharge_lasts_peukert_time(current_A, hours):
    # docs/peukert.md#check-values: t(10 A) = 8.409 h, t(20 A) = 3.536 h, t(50 A) = 1.125 h, tolerance +-0.01 h.
    assert _hours_to_empty(_bank(), current_A) == pytest.approx(hours, abs=0.01)


def test_discharge_below_rated_current_is_not_credited_extra_capacity():
    # docs/peukert.md (common practice): clamp I_eff >= |I|, so 2 A from 100 Ah lasts C/I = 50 h, not more.
    assert _hours_to_empty(_bank(), 2.0, dt_s=30.0) == pytest.approx(50.0, abs=0.02)


def test_charge_counts_with_charge_efficiency():
    # docs/soc.md#check-values: +10 A for 2 h with eta_c = 0.95 on 100 Ah -> +19.0 %.
    n = 2 * 3600 // 10
    run = run_bank(_bank(charge_efficiency=0.95), dt_s=10.0, source_A=np.full(n, 10.0), load_W=np.zeros(n),
                   soc0=0.5)
    assert (run.soc_end[-1] - 0.5) * 100 == pytest.approx(19.0, abs=1e-9)


def test_absorption_tapers_to_tail_current_then_floats():
    # Trade practice (common practice): constant current, then constant voltage with the current
    # falling to the tail current, then float at a lower voltage with (almost) no current.
    n = 8 * 3600 // 10
    bank = _bank(chemistry="lifepo4", peukert_k=1.0, absorption_V=14.2, float_V=13.5, absorption_end_current_A=4.0,
                 soc_cv=0.95)
    run = run_bank(bank, dt_s=10.0, source_A=np.full(n, 30.0), load_W=np.zeros(n), soc0=0.8)
    assert run.full_steps, "the bank never reached full"
    i = run.full_steps[0]
    assert run.net_A[: i // 2].max() == pytest.approx(30.0)        # bulk: what the charger gives
    assert run.net_A[i] == pytest.approx(4.0, abs=0.5)              # tail current at full
    assert np.nanmax(run.regulated_V[:i]) == pytest.approx(14.2)    # absorption set-point
    assert run.regulated_V[i + 10] == pytest.approx(13.5)           # float set-point afterwards
    assert abs(run.net_A[i + 10]) < 1e-9
    assert run.source_factor[i + 10] < 0.01                         # the charger is throttled


# --- OCV tables (docs/ocv.md, rested batteries at 25 degC, common practice)

@pytest.mark.parametrize(("chemistry", "soc", "volts"), [
    ("flooded", [100, 75, 50, 25, 0], [12.65, 12.45, 12.24, 12.06, 11.89]),
    ("agm", [100, 75, 50, 25, 0], [12.85, 12.60, 12.30, 12.00, 11.80]),
    ("gel", [100, 75, 50, 25, 0], [12.85, 12.60, 12.30, 12.00, 11.80]),
    ("lifepo4", [95, 90, 80, 70, 50, 40, 30, 20, 10], [13.4, 13.35, 13.3, 13.25, 13.2, 13.15, 13.1, 13.0, 12.8]),
])
def test_rested_ocv_equals_docs_table(chemistry, soc, volts):
    got = open_circuit_voltage_V(np.array(soc, float), chemistry=chemistry, blocks_12V=1)
    np.testing.assert_allclose(got, volts, atol=1e-9)


def test_rested_ocv_of_a_24V_bank_is_two_12V_blocks():
    # docs/ocv.md tables are per 12 V; a 24 V lead-acid bank is two blocks in series (common practice).
    got = open_circuit_voltage_V(np.array([100.0, 50.0]), chemistry="agm", blocks_12V=2)
    np.testing.assert_allclose(got, [25.70, 24.60], atol=1e-9)


def test_simulated_terminal_voltage_rests_at_ocv_with_no_current():
    # With no current and the relaxation branch settled, the terminal voltage is the docs/ocv.md OCV.
    n = 6 * 3600 // 60
    run = run_bank(_bank(chemistry="agm", blocks_12V=2, polarisation_ohm=0.01, relaxation_s=1800.0),
                   dt_s=60.0, source_A=np.zeros(n), load_W=np.zeros(n), soc0=0.75)
    assert run.voltage_V[-1] == pytest.approx(2 * 12.60, abs=1e-6)


# --- Solar: the simulated clear-sky potential is pvlib's chain (run directly here)

def test_clear_day_potential_equals_pvlib_chain_times_derate(van3):
    sim, _, truth = van3
    system = sim.scenario.system
    arr = system.solar[0]
    times = sim.t0 + pd.to_timedelta(sim.step_mid_s, unit="s")
    loc = pvlib.location.Location(system.site.latitude_deg, system.site.longitude_deg,
                                  tz=system.site.timezone, altitude=system.site.altitude_m)
    cs = loc.get_clearsky(times, model="ineichen")
    sp = loc.get_solarposition(times)
    poa = pvlib.irradiance.get_total_irradiance(arr.tilt_deg, arr.azimuth_deg, sp["apparent_zenith"],
                                                sp["azimuth"], cs["dni"], cs["ghi"], cs["dhi"])["poa_global"]
    params = pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"]["insulated_back_glass_polymer"]
    tcell = pvlib.temperature.sapm_cell(poa, sim.ambient_C, sim.scenario.params.solar.wind_speed_m_s, **params)
    pdc = pvlib.pvsystem.pvwatts_dc(poa, tcell, arr.peak_power_W, arr.gamma_pdc_per_C).fillna(0).clip(lower=0)
    daily_Wh = (pdc * sim.dt_s / 3600).groupby(times.tz_convert(system.site.timezone).date).sum()
    clear = [d for d in truth["solar"]["days"] if d["sky"] == "clear"]
    assert clear, "the 3-day van run should contain a clear day"
    derate = truth["solar"]["derate"]
    for d in clear:
        expected = daily_Wh[pd.Timestamp(d["date"]).date()] * derate
        assert d["potential_Wh"] == pytest.approx(expected, rel=0.005)
        assert d["cloud_factor"] == 1.0


@pytest.mark.parametrize(("cell_C", "pwm_W", "mppt_gain"), [(25.0, 73.7, 0.30), (60.0, None, 0.10)])
def test_pwm_model_matches_docs_sketch(cell_C, pwm_W, mppt_gain):
    # docs/solar.md#mppt-and-pwm sketch (computed): 100 W 36-cell module (Vmp 18.0 V, Imp 5.56 A), battery at 13.0 V:
    # PWM 73.7 W vs MPPT (eta 0.96) 96.1 W at 25 degC (+30 %), +10 % at 60 degC (Vmp -0.45 %/degC).
    # Our PWM current is I_mp, a little below the true current at 13 V: tolerance 3 %.
    p_mp = 100.0 * (1 - 0.004 * (cell_C - 25.0))
    pwm = float(pwm_current_A(np.array([p_mp]), cell_temperature_C=np.array([cell_C]), module_vmp_V=18.0)[0]) * 13.0
    if pwm_W is not None:
        assert pwm == pytest.approx(pwm_W, rel=0.03)
    assert 0.96 * p_mp / pwm - 1 == pytest.approx(mppt_gain, abs=0.03)


def test_pwm_truck_delivers_less_than_its_array_could_through_mppt(truck3):
    sim, _, truth = truck3
    d = next(d for d in truth["solar"]["days"] if d["sky"] == "clear")
    assert d["clear_sky_dc_Wh"] * truth["solar"]["derate"] > 1.03 * d["potential_Wh"]


@pytest.mark.parametrize("name", ["autumn-van", "spring-truck"])
def test_bank_full_throttles_solar_on_some_days_but_not_all_clear_days(name):
    sim = simulate(name)
    sat = [d["saturated_fraction"] for d in sim.truth["solar"]["days"]]
    assert max(sat) > 0.5
    assert sum(s == 0.0 for s in sat) >= 3          # and some days are not throttled at all
    clear_unthrottled = [d for d in sim.truth["solar"]["days"] if d["sky"] == "clear" and d["saturated_fraction"] == 0]
    assert clear_unthrottled, "the derate must be recoverable on clear, unthrottled days"


# --- Energy conservation: truth vs integrating the written log (+-0.5 %)

@pytest.mark.parametrize("which", ["van3", "truck3"])
def test_log_integrates_to_truth_energy(which, request):
    sim, out, truth = request.getfixturevalue(which)
    df = _read_log(out, truth["timezone"])
    h = truth["interval_s"] / 3600.0
    v = df["battery_voltage_V"]
    by_day = df.groupby("date")
    for day in truth["days"]:
        g = by_day.get_group(day["date"])
        vg = v[g.index]
        assert (-g["load_current_A"]).sum() * h == pytest.approx(day["consumed_Ah"], rel=0.005)
        assert (-g["load_current_A"] * vg).sum() * h == pytest.approx(day["consumed_Wh"], rel=0.005)
        for src in ("solar", "alternator", "shore"):
            ah = g[f"{src}_current_A"].sum() * h
            wh = (g[f"{src}_current_A"] * vg).sum() * h
            assert ah == pytest.approx(day["charged_Ah"][src], rel=0.005, abs=0.05)
            assert wh == pytest.approx(day["charged_Wh"][src], rel=0.005, abs=0.7)


def test_battery_current_is_sum_of_channels_plus_noise(van3):
    _, out, _ = van3
    df = pd.read_csv(out)
    resid = df["battery_current_A"] - df[["solar_current_A", "alternator_current_A", "shore_current_A",
                                          "load_current_A"]].sum(axis=1)
    assert abs(resid.mean()) < 0.005
    assert resid.abs().quantile(0.99) < 0.3


def test_log_signs_and_columns(van3):
    _, out, _ = van3
    df = pd.read_csv(out)
    assert tuple(df.columns) == MULTI_CHANNEL_COLUMNS
    assert (df["load_current_A"] < 0).all()
    assert (df[["solar_current_A", "alternator_current_A", "shore_current_A"]] >= 0).all().all()
    assert df["time"].str.match(r"^\d{4}-\d\d-\d\dT\d\d:\d\d:\d\dZ$").all()


# --- Scenarios

def test_spring_truck_has_a_cycle_spanning_more_than_half_between_full_charges():
    sim = simulate("spring-truck")
    soc = sim.run.soc_end
    fulls = sim.run.full_steps
    spans = [1.0 - soc[a:b].min() for a, b in zip(fulls, fulls[1:])]
    assert max(spans) > 0.5


def test_autumn_van_full_run_has_a_deep_cycle_but_its_first_five_days_do_not():
    # The short variant (--days 5) leaves no cycle spanning 50 % SoC: capacity is not identifiable.
    short = simulate("autumn-van", days=5)
    soc = np.concatenate([[short.soc0], short.run.soc_end])
    assert soc.max() - soc.min() < 0.5
    full = simulate("autumn-van")
    fulls = full.run.full_steps
    assert max(1.0 - full.run.soc_end[a:b].min() for a, b in zip(fulls, fulls[1:])) > 0.5


def test_true_capacity_is_below_rated(van3, truck3):
    for _, _, truth in (van3, truck3):
        b = truth["battery"]
        assert b["usable_Ah"] == pytest.approx(b["rated_Ah"] * b["state_of_health_pct"] / 100)
        assert b["usable_Ah"] < b["rated_Ah"]


def test_device_soc_drifts_away_from_the_true_soc():
    sim = simulate("autumn-van", days=12)
    assert np.abs(sim.run.device_soc_end - sim.run.soc_end).max() > 0.05


@pytest.mark.parametrize("name", ["autumn-van", "spring-truck"])
def test_bundled_system_description_passes_parse_system(name):
    sc = load_scenario(name)
    parse_system(sc.system_text, source=name)
    fixture = REPO / "fixtures" / "scenarios" / name / "system.toml"
    assert fixture.read_text() == sc.system_text


def test_truth_has_the_contract_keys(van3):
    _, _, truth = van3
    for key in ("scenario", "seed", "interval_s", "timezone", "system", "battery", "solar", "days", "full_charges"):
        assert key in truth
    assert set(truth["battery"]) >= {"rated_Ah", "usable_Ah", "state_of_health_pct", "peukert_k",
                                     "internal_resistance_ohm", "charge_efficiency"}
    assert set(truth["solar"]["days"][0]) >= {"date", "sky", "cloud_factor", "delivered_Wh", "delivered_Ah",
                                             "potential_Wh", "saturated_fraction"}
    assert set(truth["days"][0]) >= {"date", "consumed_Ah", "consumed_Wh", "charged_Ah", "charged_Wh",
                                     "soc_min_pct", "soc_end_pct", "driving_h", "mean_temperature_C"}
    assert [d["date"] for d in truth["days"]] == ["2026-09-21", "2026-09-22", "2026-09-23"]  # local dates


# --- Determinism

def test_same_seed_writes_identical_bytes(tmp_path):
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    write_log(simulate("autumn-van", days=2, seed=7), a, interval_s=60)
    write_log(simulate("autumn-van", days=2, seed=7), b, interval_s=60)
    assert a.read_bytes() == b.read_bytes()


def test_different_seed_writes_different_log(tmp_path):
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    write_log(simulate("autumn-van", days=2, seed=7), a, interval_s=60)
    write_log(simulate("autumn-van", days=2, seed=8), b, interval_s=60)
    assert a.read_bytes() != b.read_bytes()


def test_a_shorter_run_is_a_prefix_of_a_longer_one():
    short = simulate("spring-truck", days=2)
    long = simulate("spring-truck", days=4)
    n = short.n_steps
    np.testing.assert_allclose(short.run.soc_end, long.run.soc_end[:n])


# --- Command line

def test_cli_simulate_writes_log_truth_and_system(tmp_path, capsys):
    out = tmp_path / "trip.csv"
    rc = cli_main(["simulate", "--scenario", "spring-truck", "--days", "2", "--out", str(out), "--interval", "60"])
    assert rc == 0
    assert out.exists() and (tmp_path / "trip.truth.json").exists() and (tmp_path / "system.toml").exists()
    parse_system((tmp_path / "system.toml").read_text())
    assert json.loads((tmp_path / "trip.truth.json").read_text())["interval_s"] == 60
    assert "trip.truth.json" in capsys.readouterr().err


def test_cli_simulate_keeps_an_existing_system_toml(tmp_path, capsys):
    (tmp_path / "system.toml").write_text("# mine\n")
    rc = cli_main(["simulate", "--scenario", "autumn-van", "--days", "1", "--out", str(tmp_path / "x.csv"),
                   "--interval", "300", "--single-shunt"])
    assert rc == 0
    assert (tmp_path / "system.toml").read_text() == "# mine\n"
    assert "already exists" in capsys.readouterr().err
    assert tuple(pd.read_csv(tmp_path / "x.csv").columns) == SINGLE_SHUNT_COLUMNS


def test_cli_simulate_unknown_scenario_exits_2_and_lists_names(tmp_path, capsys):
    rc = cli_main(["simulate", "--scenario", "no-such-trip", "--days", "2", "--out", str(tmp_path / "x.csv")])
    assert rc == 2
    err = capsys.readouterr().err
    for name in available_scenarios():
        assert name in err
    assert not (tmp_path / "x.csv").exists()


def test_scenario_toml_files_have_no_unknown_keys():
    for name in available_scenarios():
        text = (REPO / "collector" / "scenarios" / f"{name}.scenario.toml").read_text()
        assert "scenario" in tomllib.loads(text)
        load_scenario(name)  # validates both files; unknown keys would raise


def test_old_scenario_key_is_an_error_naming_the_new_one():
    from drawdown.collector.sim_scenario import ScenarioError, parse_scenario

    text = (REPO / "collector" / "scenarios" / "autumn-van.scenario.toml").read_text()
    old = text.replace("absorption_end_current_pct =", "tail_current_pct =")
    with pytest.raises(ScenarioError, match=r"battery\.tail_current_pct: this key is now called "
                                            r"absorption_end_current_pct"):
        parse_scenario(old, source="autumn-van.scenario.toml")


# --- The collector interface and the demo

def test_to_canonical_follows_the_sign_convention_and_matches_the_log(van3):
    from drawdown.collector.simulated import to_canonical

    sim, out, _ = van3
    frame = to_canonical(sim, interval_s=60)
    assert set(frame["channel"]) == {"battery", "solar", "alternator", "shore", "load"}
    assert str(frame["t"].dtype) == "datetime64[us, UTC]"
    assert (frame.loc[frame.channel == "load", "current_A"] < 0).all()
    assert (frame.loc[frame.channel == "solar", "current_A"] >= 0).all()
    log = pd.read_csv(out)
    bat = frame[frame.channel == "battery"].reset_index(drop=True)
    np.testing.assert_allclose(bat["current_A"], log["battery_current_A"], atol=6e-4)
    np.testing.assert_allclose(bat["voltage_V"], log["battery_voltage_V"], atol=6e-4)


def test_demo_twice_does_not_double_the_data(tmp_path, capsys):
    from drawdown.collector.store import Store

    store = tmp_path / "s.sqlite"
    args = ["--store", str(store), "demo", "--no-serve", "--days", "2"]
    assert cli_main(args) == 0
    assert (tmp_path / "system.toml").exists()
    with Store(store) as s:
        first = s.channel_summary()
    assert first and all(v["rows"] > 0 for v in first.values())
    assert cli_main(args) == 0
    with Store(store) as s:
        second = s.channel_summary()
    assert str(first) == str(second)
    assert "already" in capsys.readouterr().err
