"""Solar yield against pvlib's clear sky: the model chain, saturation, sky, diagnostics.

Outside references: pvlib run directly in the test (the model chain, check
values of docs/solar.md computed with pvlib 0.16.1), the docs/solar.md MPPT/PWM
physics sketch, and "common practice" (MPPT harvests ~10-30 % more than PWM
on a 36-cell module). Synthetic logs are built here from pvlib's clear sky
times a known derate, so the truth is known exactly.
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from pvlib import clearsky, irradiance, pvsystem, temperature
from pvlib.location import Location

import drawdown.analysis.solar_model as solar_model
from drawdown.analysis.solar import analyse_solar, expected_clear_sky
from drawdown.analysis.solar_model import pwm_fraction
from drawdown.analysis.system import system_from_mapping

TZ = "Europe/Oslo"


def make_system(*, controller: str = "mppt", chemistry: str = "lifepo4", nominal_V: float = 12.8,
                peak_W: float = 300.0, lat: float = 61.2, lon: float = 7.1, tz: str = TZ,
                tilt: float = 0.0, azimuth: float = 180.0, arrays: bool = True):
    data = {"site": {"latitude_deg": lat, "longitude_deg": lon, "timezone": tz},
            "battery": {"chemistry": chemistry, "nominal_voltage_V": nominal_V, "rated_capacity_Ah": 200}}
    if arrays:
        data["solar"] = [{"peak_power_W": peak_W, "tilt_deg": tilt, "azimuth_deg": azimuth,
                          "controller": controller}]
    return system_from_mapping(data)


def synthetic_log(system, *, start: str = "2026-09-20", days: int = 4, step_s: int = 60,
                  derate: float = 0.82, skies: list[str] | None = None, full_days: tuple[int, ...] = (),
                  bank_V: float = 13.25, full_V: float = 14.2, temp_C: float = 10.0,
                  afternoon_factor: float = 1.0, seed: int = 1):
    """A canonical long frame: solar = pvlib clear-sky delivered power x derate x cloud.

    On ``full_days`` the bank sits at ``full_V`` from 13:00 local and the
    controller throttles the array to a 2 A load. Returns (frame, truth) where
    truth has the delivered power [W] per sample and the potential [W].
    """
    rng = np.random.default_rng(seed)
    t = pd.date_range(pd.Timestamp(start, tz=system.site.timezone), periods=int(days * 86400 / step_s),
                      freq=f"{step_s}s").tz_convert("UTC")
    exp = expected_clear_sky(t, system, temp_air_C=pd.Series(temp_C, index=t),
                             battery_voltage_V=pd.Series(bank_V, index=t))
    local = t.tz_convert(system.site.timezone)
    day = (local.normalize() - pd.Timestamp(start, tz=system.site.timezone)).days.to_numpy()
    cloud = np.ones(len(t))
    for d, sky in enumerate(skies or ["clear"] * days):
        m = day == d
        if sky == "overcast":
            cloud[m] = 0.2
        elif sky == "partly cloudy":
            k = int(m.sum())
            blocks = rng.choice([0.25, 1.0], size=k // 20 + 1)  # 20-sample cloud/sun blocks
            cloud[m] = np.repeat(blocks, 20)[:k]
    potential = exp["delivered_W"].to_numpy() * derate * cloud
    potential = np.where(exp["solar_azimuth_deg"].to_numpy() >= 180, potential * afternoon_factor, potential)
    power = potential.copy()
    volts = np.full(len(t), bank_V)
    hour = local.hour.to_numpy()
    for d in full_days:
        m = (day == d) & (hour >= 13)
        volts[m] = full_V
        power[m] = np.minimum(power[m], 2.0 * full_V)
    current = power / volts
    solar = pd.DataFrame({"t": t, "channel": "solar", "voltage_V": np.nan, "current_A": current,
                          "temperature_C": np.nan, "soc_pct": np.nan})
    batt = pd.DataFrame({"t": t, "channel": "battery", "voltage_V": volts, "current_A": current - 2.0,
                         "temperature_C": temp_C, "soc_pct": np.nan})
    frame = pd.concat([batt, solar], ignore_index=True)
    frame["channel"] = frame["channel"].astype("category")
    frame["t"] = frame["t"].astype("datetime64[us, UTC]")
    truth = pd.DataFrame({"power_W": power, "potential_W": potential, "day": day,
                          "current_A": current}, index=t)
    return frame, truth


# ------------------------------------------------ pvlib check values (docs/solar.md#check-values)

def test_haurwitz_clear_sky_matches_docs_check_values():
    # docs/solar.md#check-values, pvlib 0.16.1: zenith 0 -> 1035.09, 60 -> 487.89 W/m2 (±0.01).
    ghi = clearsky.haurwitz(pd.Series([0.0, 60.0]))["ghi"].to_numpy()
    assert ghi == pytest.approx([1035.09, 487.89], abs=0.01)


def test_pvwatts_dc_matches_dobos_2014_check_value():
    # PVWatts (Dobos 2014, NREL/TP-6A20-62641) via pvlib; docs/solar.md#check-values: 147.20 W.
    assert float(pvsystem.pvwatts_dc(800.0, 45.0, 200.0, -0.004)) == pytest.approx(147.20, abs=0.01)


def test_flat_panel_poa_is_dni_cos_z_plus_dhi():
    # docs/solar.md#check-values: isotropic sky, tilt 0: POA = DNI cos z + DHI; DNI 900, DHI 70, z 30 -> 849.42.
    poa = irradiance.get_total_irradiance(0, 180, 30.0, 180.0, 900.0, 900 * np.cos(np.radians(30)) + 70,
                                          70.0)["poa_global"]
    assert float(poa) == pytest.approx(849.42, abs=0.01)


@pytest.mark.parametrize("day, kwh_m2", [("2026-06-21", 8.389), ("2026-12-21", 1.653)])
def test_daily_clear_sky_ghi_at_45n_matches_docs(day, kwh_m2):
    # docs/solar.md#check-values: 45N 0E, altitude 0, Ineichen, TL = 3 fixed, dni_extra from
    # get_extra_radiation, 1-min steps over the UTC day: Jun 21 8.389, Dec 21 1.653 kWh/m2 (±1 %).
    system = make_system(lat=45.0, lon=0.0, tz="UTC", peak_W=200)
    t = pd.date_range(day, periods=1440, freq="1min", tz="UTC")
    exp = expected_clear_sky(t, system, linke_turbidity=3.0)
    assert exp["ghi_Wm2"].sum() / 60 / 1000 == pytest.approx(kwh_m2, rel=0.01)


@pytest.mark.parametrize("day, wh", [("2026-06-21", 1557.7), ("2026-03-20", 974.0), ("2026-12-21", 326.6)])
def test_daily_dc_energy_of_200W_flat_panel_matches_docs(day, wh):
    # docs/solar.md#check-values: 200 W flat panel, Faiman (u0 25, u1 6.84), air 20 degC, wind 1 m/s,
    # gamma -0.4 %/degC, TL 3, 45N 0E: Jun 21 1557.7, Mar 20 974.0, Dec 21 326.6 Wh DC (±1.5 %).
    system = make_system(lat=45.0, lon=0.0, tz="UTC", peak_W=200)
    t = pd.date_range(day, periods=1440, freq="1min", tz="UTC")
    exp = expected_clear_sky(t, system, linke_turbidity=3.0, temperature_model="faiman",
                             temp_air_C=pd.Series(20.0, index=t), wind_speed_ms=1.0)
    assert exp["dc_W"].sum() / 60 == pytest.approx(wh, rel=0.015)


def test_linke_turbidity_climatology_ships_in_pvlib_wheel():
    # The climatology is read offline from pvlib's own data folder.
    import pvlib

    h5 = Path(pvlib.__file__).parent / "data" / "LinkeTurbidities.h5"
    assert h5.is_file() and h5.stat().st_size > 1_000_000
    tl = clearsky.lookup_linke_turbidity(pd.date_range("2026-06-21", periods=1, tz="UTC"), 45.0, 0.0)
    assert 1.5 < float(tl.iloc[0]) < 7.0


# ----------------------------------------------------------------- our chain == pvlib's chain

def test_expected_clear_sky_equals_pvlib_chain_run_directly():
    # Reference: the same pvlib functions called here, step by step (within 0.5 %).
    system = make_system(tilt=30.0, azimuth=200.0, peak_W=400.0)
    t = pd.date_range("2026-10-05", periods=144, freq="10min", tz="UTC")
    tair = pd.Series(8.0, index=t)
    ours = expected_clear_sky(t, system, temp_air_C=tair)
    loc = Location(61.2, 7.1, tz="UTC", altitude=0.0)
    sp = loc.get_solarposition(t)
    cs = loc.get_clearsky(t, model="ineichen", solar_position=sp)
    poa = irradiance.get_total_irradiance(30.0, 200.0, sp["apparent_zenith"], sp["azimuth"],
                                          cs["dni"], cs["ghi"], cs["dhi"])["poa_global"].clip(lower=0)
    p = temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"]["insulated_back_glass_polymer"]
    tc = temperature.sapm_cell(poa, 8.0, 1.0, **p)
    dc = pvsystem.pvwatts_dc(poa, tc, 400.0, -0.004)
    assert ours["dc_W"].sum() == pytest.approx(dc.sum(), rel=0.005)
    assert ours["delivered_W"].sum() == pytest.approx(0.96 * dc.sum(), rel=0.005)
    assert ours["poa_Wm2"].sum() == pytest.approx(poa.sum(), rel=0.005)


def test_two_arrays_sum_and_each_keeps_its_own_controller():
    base = {"site": {"latitude_deg": 61.2, "longitude_deg": 7.1, "timezone": TZ},
            "battery": {"chemistry": "agm", "nominal_voltage_V": 12.0, "rated_capacity_Ah": 200}}
    roof = {"peak_power_W": 300, "tilt_deg": 0, "controller": "mppt"}
    side = {"peak_power_W": 100, "tilt_deg": 90, "azimuth_deg": 90, "controller": "pwm"}
    t = pd.date_range("2026-06-21", periods=144, freq="10min", tz="UTC")
    both = expected_clear_sky(t, system_from_mapping({**base, "solar": [roof, side]}))
    one = expected_clear_sky(t, system_from_mapping({**base, "solar": [roof]}))
    two = expected_clear_sky(t, system_from_mapping({**base, "solar": [side]}))
    np.testing.assert_allclose(both["dc_W"], one["dc_W"] + two["dc_W"], rtol=1e-9)
    np.testing.assert_allclose(both["delivered_W"], one["mppt_W"] + two["pwm_W"], rtol=1e-9)


def test_analysis_expected_wh_per_day_equals_pvlib_daily_sum():
    # pvlib run directly on a 1-minute grid over the local day vs our 10-minute means (0.5 %).
    system = make_system()
    frame, _ = synthetic_log(system, days=2)
    result = analyse_solar(frame, system)
    day = pd.date_range(pd.Timestamp("2026-09-20", tz=TZ), periods=1440, freq="1min").tz_convert("UTC")
    loc = Location(61.2, 7.1, tz="UTC")
    sp = loc.get_solarposition(day)
    cs = loc.get_clearsky(day, solar_position=sp)
    poa = irradiance.get_total_irradiance(0, 180, sp["apparent_zenith"], sp["azimuth"],
                                          cs["dni"], cs["ghi"], cs["dhi"])["poa_global"].clip(lower=0)
    p = temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"]["insulated_back_glass_polymer"]
    dc = pvsystem.pvwatts_dc(poa, temperature.sapm_cell(poa, 10.0, 1.0, **p), 300.0, -0.004)
    row = result.days.set_index("date").loc["2026-09-20"]
    assert row["expected_Wh"] == pytest.approx(0.96 * dc.sum() / 60, rel=0.005)
    # Peak sun hours = daily insolation in kWh/m2 (docs/solar.md#peak-sun-hours).
    assert row["peak_sun_hours_clear_sky"] == pytest.approx(cs["ghi"].sum() / 60 / 1000, rel=0.005)


# ----------------------------------------------------------------- controller model

@pytest.mark.parametrize("cell_C, gain", [(25.0, 0.30), (60.0, 0.10)])
def test_mppt_over_pwm_gain_reproduces_docs_sketch(cell_C, gain):
    # docs/solar.md#mppt-and-pwm sketch: 100 W 36-cell module (Vmp 18.0 V, Imp 5.56 A) on a 13.0 V battery:
    # PWM 73.7 W vs MPPT (eta 0.96) 96.1 W at 25 degC (+30 %), +10 % at 60 degC;
    # the usual 10-30 % gain (common practice).
    frac = float(pwm_fraction(13.0, cell_C, 18.0))
    ratio = solar_model.MPPT_EFFICIENCY / frac
    assert ratio - 1 == pytest.approx(gain, abs=0.01)
    assert 0.09 <= ratio - 1 <= 0.31
    if cell_C == 25.0:
        assert frac * 100.0 == pytest.approx(73.7, abs=0.2)


def test_pwm_output_collapses_when_battery_voltage_exceeds_hot_module_vmp():
    # Physics sketch (docs/solar.md#mppt-and-pwm): above Vmp the module current falls towards Voc.
    assert float(pwm_fraction(14.6, 75.0, 18.0)) < float(pwm_fraction(13.0, 75.0, 18.0))


def test_pwm_system_reports_what_mppt_would_add():
    # Common practice: MPPT harvests roughly 10-15 % (up to 30 % cold) more than PWM.
    system = make_system(controller="pwm")
    frame, _ = synthetic_log(system, days=2)
    diag = analyse_solar(frame, system).diagnostics
    assert 8.0 <= diag["mppt_would_add"]["percent"] <= 35.0
    assert diag["mppt_would_add"]["Wh_per_day"] > 0


# ----------------------------------------------------------------- measured, saturation, sky

def test_measured_wh_per_day_matches_logged_truth_within_half_percent():
    system = make_system()
    frame, truth = synthetic_log(system, days=3, full_days=(1,))
    result = analyse_solar(frame, system)
    true_Wh = truth["power_W"].groupby(truth["day"]).sum() / 60
    got = result.days["measured_Wh"].to_numpy()[:3]
    np.testing.assert_allclose(got, true_Wh.to_numpy(), rtol=0.005)


def test_days_are_local_calendar_dates_of_the_site():
    system = make_system(tz="Pacific/Auckland", lat=-41.3, lon=174.8)
    frame, _ = synthetic_log(system, start="2026-01-10", days=2)
    dates = analyse_solar(frame, system).days["date"].tolist()
    assert dates == ["2026-01-10", "2026-01-11"]


def test_daylight_saving_change_keeps_local_days_whole():
    # Europe/Oslo leaves summer time on 2026-10-25 (a 25-hour local day).
    system = make_system()
    frame, truth = synthetic_log(system, start="2026-10-24", days=3)
    days = analyse_solar(frame, system).days
    assert days["date"].tolist() == ["2026-10-24", "2026-10-25", "2026-10-26"]
    true_Wh = truth["power_W"].groupby(truth["day"]).sum().to_numpy() / 60
    np.testing.assert_allclose(days["measured_Wh"].to_numpy(), true_Wh, rtol=0.005)


def test_full_bank_days_carry_saturated_fraction_and_others_none():
    system = make_system()
    frame, _ = synthetic_log(system, days=4, full_days=(1, 2))
    sat = analyse_solar(frame, system).days["saturated_fraction"].to_numpy()
    assert sat[1] > 0.2 and sat[2] > 0.2
    assert sat[0] == 0.0 and sat[3] == 0.0


def test_saturated_periods_are_left_out_of_the_performance_ratio():
    # Truth: derate 0.82 on every day; the throttled afternoons would drag a naive ratio down.
    system = make_system()
    frame, truth = synthetic_log(system, days=4, full_days=(0, 1, 2, 3), derate=0.82)
    result = analyse_solar(frame, system)
    naive = result.days["measured_Wh"].sum() / result.days["expected_Wh"].sum()
    assert naive < 0.7
    assert result.performance_ratio == pytest.approx(0.82, abs=0.02)
    assert len(result.saturated_periods) == 4


def test_derate_is_recovered_on_clear_days_among_cloudy_ones():
    system = make_system()
    skies = ["clear", "partly cloudy", "overcast", "clear", "partly cloudy", "clear"]
    frame, _ = synthetic_log(system, days=6, skies=skies, derate=0.78)
    result = analyse_solar(frame, system)
    assert result.performance_ratio == pytest.approx(0.78, abs=0.02)
    assert result.performance_ratio_spread["n_days"] == 3


def test_sky_is_classified_from_the_curve_shape():
    system = make_system()
    skies = ["clear", "partly cloudy", "overcast", "clear"]
    frame, _ = synthetic_log(system, days=4, skies=skies)
    assert analyse_solar(frame, system).days["sky"].tolist() == skies


def test_lead_acid_bulk_charging_above_full_voltage_is_not_saturation():
    # 24 V lead-acid: 13.2 V x 2 is the full voltage (2.20 V/cell, analysis.system); at 27.0 V in bulk the array
    # still delivers its full output, so nothing is throttled.
    system = make_system(chemistry="agm", nominal_V=24.0)
    frame, _ = synthetic_log(system, days=2, bank_V=27.0)
    result = analyse_solar(frame, system)
    assert (result.days["saturated_fraction"] == 0).all()
    assert result.performance_ratio == pytest.approx(0.82, abs=0.02)


def test_attributed_solar_current_is_used_without_a_solar_channel():
    system = make_system()
    frame, truth = synthetic_log(system, days=2)
    single = frame[frame["channel"] == "battery"].copy()
    single["channel"] = single["channel"].astype(str).astype("category")
    result = analyse_solar(single, system, solar_current_A=truth["current_A"])
    assert result.diagnostics["measured_from"].startswith("attributed")
    true_Wh = truth["power_W"].groupby(truth["day"]).sum().to_numpy() / 60
    np.testing.assert_allclose(result.days["measured_Wh"].to_numpy()[:2], true_Wh, rtol=0.005)


# ----------------------------------------------------------------- diagnostics

def test_afternoon_shading_is_reported_as_asymmetry():
    system = make_system()
    frame, _ = synthetic_log(system, days=3, afternoon_factor=0.6)
    result = analyse_solar(frame, system)
    assert result.diagnostics["morning_afternoon"]["asymmetry"] > 0.3
    assert any("afternoon" in f for f in result.diagnostics["findings"])


def test_persistent_shortfall_on_clear_hours_is_a_finding():
    system = make_system()
    frame, _ = synthetic_log(system, days=3, derate=0.5)
    result = analyse_solar(frame, system)
    assert result.diagnostics["best_clear_hour"]["ratio_to_expected"] == pytest.approx(0.5, abs=0.03)
    assert any("wiring" in f for f in result.diagnostics["findings"])


def test_healthy_array_has_no_shortfall_finding():
    system = make_system()
    frame, _ = synthetic_log(system, days=3, derate=0.85)
    findings = analyse_solar(frame, system).diagnostics["findings"]
    assert not any("wiring" in f for f in findings)


# ----------------------------------------------------------------- missing things, bad input

def test_no_arrays_gives_null_ratio_with_reason():
    system = make_system(arrays=False)
    frame, _ = synthetic_log(make_system(), days=1)
    result = analyse_solar(frame, system)
    assert result.performance_ratio is None
    assert "[[solar]]" in result.to_json()["performance_ratio_why"]


def test_no_solar_data_gives_null_ratio_but_expected_days():
    system = make_system()
    frame, _ = synthetic_log(system, days=2)
    batt = frame[frame["channel"] == "battery"]
    out = analyse_solar(batt, system).to_json()
    assert out["performance_ratio"] is None and "no solar channel" in out["performance_ratio_why"]
    assert out["days"][0]["measured_Wh"] is None and out["days"][0]["expected_Wh"] > 0


def test_gaps_and_nan_rows_do_not_crash_and_lower_coverage():
    system = make_system()
    frame, _ = synthetic_log(system, days=2)
    t = frame["t"]
    gap = (t >= pd.Timestamp("2026-09-20 09:00", tz="UTC")) & (t < pd.Timestamp("2026-09-20 12:00", tz="UTC"))
    frame = frame[~gap].copy()
    frame.loc[frame.index[::7], "current_A"] = np.nan
    result = analyse_solar(frame, system)
    assert result.days["data_coverage"].iloc[0] < 0.7
    assert result.days["data_coverage"].iloc[1] == pytest.approx(1.0)
    json.dumps(result.to_json())  # plain JSON, no NaN


def test_to_json_has_the_report_contract_keys():
    system = make_system()
    frame, _ = synthetic_log(system, days=2, full_days=(1,))
    out = analyse_solar(frame, system).to_json()
    text = json.dumps(out, allow_nan=False)
    assert "performance_ratio" in out and isinstance(out["days"], list)
    for key in ("date", "measured_Wh", "expected_Wh", "performance_ratio", "saturated_fraction", "sky"):
        assert key in out["days"][0], key
    assert len(out["hourly"]) == 24 and text


# ----------------------------------------------------------------- bundled simulated scenarios
# Truth from collector.simulated (pvlib clear sky x cloud x a known derate, through
# the controller, throttled when the bank is full).

@pytest.fixture(scope="module")
def scenario_runs():
    from drawdown.collector.simulated import simulate, to_canonical

    runs = {}
    for name in ("autumn-van", "spring-truck"):
        sim = simulate(name)
        frame = to_canonical(sim, interval_s=60)
        frame["channel"] = frame["channel"].astype("category")
        runs[name] = (sim, analyse_solar(frame, sim.scenario.system))
    return runs


@pytest.mark.parametrize("name", ["autumn-van", "spring-truck"])
def test_scenario_measured_solar_per_day_within_two_percent_of_truth(scenario_runs, name):
    sim, result = scenario_runs[name]
    truth = {d["date"]: d for d in sim.truth["solar"]["days"]}
    days = result.days.set_index("date")
    for date, t in truth.items():
        if t["delivered_Ah"] < 1.0:
            continue
        assert days.loc[date, "measured_Ah"] == pytest.approx(t["delivered_Ah"], rel=0.02), date
        assert days.loc[date, "measured_Wh"] == pytest.approx(t["delivered_Wh"], rel=0.02), date


@pytest.mark.parametrize("name", ["autumn-van", "spring-truck"])
def test_scenario_full_bank_days_are_saturated_and_left_out(scenario_runs, name):
    sim, result = scenario_runs[name]
    days = result.days.set_index("date")
    full_days = [d["date"] for d in sim.truth["solar"]["days"] if d["saturated_fraction"] > 0.05]
    assert full_days, "the scenario should have days with a full bank"
    for date in full_days:
        assert days.loc[date, "saturated_fraction"] > 0, date
    if "without saturation" in result.performance_ratio_spread["method"]:
        # Enough clean clear days: every day with a full bank is left out entirely.
        assert not days.loc[full_days, "in_performance_ratio"].any()
    else:
        # Every clear day saw a full bank: only their unsaturated periods count, so
        # each used day's ratio is not dragged down by the throttled hours.
        used = days[days["in_performance_ratio"]]
        naive = used["measured_Wh"] / used["expected_Wh"]
        assert (used["performance_ratio"] >= naive - 0.005).all()
        heavy = used["saturated_fraction"] > 0.3
        assert heavy.any()
        assert (used.loc[heavy, "performance_ratio"] > naive[heavy] + 0.1).all()


@pytest.mark.parametrize("name", ["autumn-van", "spring-truck"])
def test_scenario_derate_is_recovered_on_clear_days(scenario_runs, name):
    sim, result = scenario_runs[name]
    assert result.performance_ratio == pytest.approx(sim.truth["solar"]["derate"], abs=0.08)


def test_scenario_mppt_derate_against_dc_is_close_to_truth(scenario_runs):
    # autumn-van has an MPPT controller; the simulator's derate multiplies PVWatts DC.
    sim, result = scenario_runs["autumn-van"]
    assert result.derate_vs_dc == pytest.approx(sim.truth["solar"]["derate"], abs=0.03)


@pytest.mark.parametrize("name", ["autumn-van", "spring-truck"])
def test_scenario_sky_classes_match_truth(scenario_runs, name):
    sim, result = scenario_runs[name]
    days = result.days.set_index("date")
    pairs = [(d["sky"], days.loc[d["date"], "sky"]) for d in sim.truth["solar"]["days"]]
    known = [(t, g) for t, g in pairs if isinstance(g, str)]
    agree = sum(t == g for t, g in known)
    assert agree >= 0.85 * len(known)
    assert len(known) >= 0.7 * len(pairs)


def test_scenario_csv_log_melted_to_long_frame_gives_same_daily_yield(tmp_path):
    # The simulator's CSV (rounded as a logger writes it), read with pandas and melted
    # into the canonical long frame without the importer.
    from drawdown.collector.simulated import simulate, write_log

    sim = simulate("autumn-van", days=3)
    path = tmp_path / "van.csv"
    write_log(sim, path, interval_s=60)
    wide = pd.read_csv(path)
    t = pd.to_datetime(wide["time"], utc=True).astype("datetime64[us, UTC]")
    parts = []
    for ch in ("battery", "solar", "alternator", "shore", "load"):
        parts.append(pd.DataFrame({
            "t": t, "channel": ch,
            "voltage_V": wide.get(f"{ch}_voltage_V", np.nan),
            "current_A": wide.get(f"{ch}_current_A", np.nan),
            "temperature_C": wide.get(f"{ch}_temperature_C", np.nan),
            "soc_pct": wide.get(f"{ch}_soc_pct", np.nan)}))
    frame = pd.concat(parts, ignore_index=True)
    frame["channel"] = frame["channel"].astype("category")
    result = analyse_solar(frame, sim.scenario.system)
    for d in sim.truth["solar"]["days"]:
        got = result.days.set_index("date").loc[d["date"], "measured_Ah"]
        assert got == pytest.approx(d["delivered_Ah"], rel=0.02)


@pytest.mark.xfail(strict=True, reason="single-shunt solar attribution (analysis.ledger) is within ±15 % on 8 of "
                   "these 10 days, not all: on 2026-09-23 (+25 %) and 2026-09-25 (+44 %) a drive fills the "
                   "bank and goes on under the hold, where the alternator's share cannot be told from the "
                   "sun's (across 280 simulated days: 250 within)")
def test_scenario_single_shunt_attribution_within_fifteen_percent():
    # Issue 4 "must show": measured solar Ah per day within ±15 % when attributed from a
    # single shunt (the ledger's attribution, analysis.ledger).
    from drawdown.analysis.ledger import compute_ledger
    from drawdown.analysis.readings import split_channels
    from drawdown.collector.simulated import simulate, to_canonical

    sim = simulate("autumn-van", days=10)
    frame = to_canonical(sim, interval_s=60, single_shunt=True)
    ledger = compute_ledger(split_channels(frame), sim.scenario.system)
    result = analyse_solar(frame, sim.scenario.system, solar_current_A=ledger.solar_current_A)
    assert result.diagnostics["measured_from"].startswith("attributed")
    days = result.days.set_index("date")
    for d in sim.truth["solar"]["days"]:
        if d["delivered_Ah"] >= 5.0:
            assert days.loc[d["date"], "measured_Ah"] == pytest.approx(d["delivered_Ah"], rel=0.15), d["date"]
