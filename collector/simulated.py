"""A physically grounded simulator of a 12/24/48 V battery bank with its log and its truth.

:func:`simulate` runs a bundled scenario (``collector/scenarios/<name>.toml`` +
``<name>.scenario.toml``, see :mod:`collector.sim_scenario`) at a coarse internal
step (default 60 s); :func:`write_log` renders it at any output interval (1 s
and up) as the CSV a logging battery monitor would export, with a truth JSON
beside it that states what really happened (true capacity, Peukert exponent,
solar derate, energy by day and source, full charges).

Model (details in :mod:`collector.sim_physics`, :mod:`collector.sim_solar`,
:mod:`collector.sim_loads`):

* the bank: coulomb counting against the TRUE capacity with Peukert-corrected
  discharge and a charge efficiency; bulk / absorption (taper to the tail
  current) / float, with the chargers throttled when the bank is full;
  terminal voltage = OCV(SoC, T) + I R + one RC relaxation;
* solar: pvlib clear-sky chain x daily cloudiness x the system derate, through
  an MPPT or a PWM controller;
* alternator through a DC-DC charger on drive days, shore charger on hook-up nights;
* loads: compressor fridge (duty rises with the cabin temperature), evening
  lights, water-pump bursts, diesel heater (glow plug + fan) on cold nights,
  inverter loads (kettle/coffee, laptop), an always-on baseline;
* the monitor's own SoC, which counts against the rated capacity with a small
  current offset and gain error, and resyncs at full.

Every random draw comes from a stream seeded by ``(seed, day, kind)``: a run
is deterministic given the seed, and a shorter run is a prefix of a longer one.

Log rows are interval means over ``[t, t + interval)`` (a logging monitor's
average), stamped with the interval's start in UTC.

Log columns (the importer detects them by name)::

    time,battery_voltage_V,battery_current_A,battery_temperature_C,battery_soc_pct,
    solar_current_A,solar_voltage_V,alternator_current_A,shore_current_A,load_current_A

``battery_current_A`` is the net current at the bank shunt (positive charging)
and equals ``solar + alternator + shore + load`` plus measurement noise;
``load_current_A`` is negative.
"""

from __future__ import annotations

import json
import math
import os
from collections import deque
from concurrent.futures import ThreadPoolExecutor
import tomllib
from dataclasses import dataclass, field, replace
from importlib import resources
from pathlib import Path
from typing import Any, Literal
from zoneinfo import ZoneInfo

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.csv as pacsv
from scipy.signal import lfilter

from drawdown.analysis.system import System, parse_system
from drawdown.collector.sim_loads import EventSchedule, build_load_events
from drawdown.collector.sim_physics import BankModel, BankRun, open_circuit_voltage_V, run_bank
from drawdown.collector.sim_scenario import ScenarioParams, parse_scenario
from drawdown.collector.sim_solar import array_dc_power_W, clear_sky_poa_W_m2, cloud_factor_series, pwm_current_A

MULTI_CHANNEL_COLUMNS: tuple[str, ...] = (
    "time", "battery_voltage_V", "battery_current_A", "battery_temperature_C", "battery_soc_pct",
    "solar_current_A", "solar_voltage_V", "alternator_current_A", "shore_current_A", "load_current_A",
)
SINGLE_SHUNT_COLUMNS: tuple[str, ...] = MULTI_CHANNEL_COLUMNS[:5]
SOURCES: tuple[str, ...] = ("solar", "alternator", "shore")


class UnknownScenarioError(KeyError):
    """No bundled scenario of that name; ``available`` lists the names there are."""

    def __init__(self, name: str, available: list[str]) -> None:
        super().__init__(name)
        self.name = name
        self.available = available

    def __str__(self) -> str:
        return f"unknown scenario {self.name!r}; available: {', '.join(self.available)}"


def _scenario_dir():
    return resources.files("drawdown.collector") / "scenarios"


def available_scenarios() -> list[str]:
    """Names of the bundled scenarios (each ``<name>.toml`` + ``<name>.scenario.toml``)."""
    names = []
    for entry in _scenario_dir().iterdir():
        if entry.name.endswith(".scenario.toml"):
            names.append(entry.name[: -len(".scenario.toml")])
    return sorted(names)


#: The scenario ``drawdown demo`` runs when none is named.
DEFAULT_SCENARIO = "autumn-van"


@dataclass(frozen=True)
class Scenario:
    """A bundled scenario: the system description (text and parsed) and the simulation parameters."""

    name: str
    system_text: str
    system: System
    params: ScenarioParams


def load_scenario(name: str) -> Scenario:
    """Read and validate a bundled scenario.

    Raises
    ------
    UnknownScenarioError
        When there is no such scenario (the error lists the available names).
    analysis.system.SystemError_, collector.sim_scenario.ScenarioError
        When a bundled file is invalid (names the file and key).
    """
    names = available_scenarios()
    if name not in names:
        raise UnknownScenarioError(name, names)
    folder = _scenario_dir()
    sys_text = (folder / f"{name}.toml").read_text(encoding="utf-8")
    sc_text = (folder / f"{name}.scenario.toml").read_text(encoding="utf-8")
    system = parse_system(sys_text, source=f"collector/scenarios/{name}.toml")
    params = parse_scenario(sc_text, source=f"collector/scenarios/{name}.scenario.toml")
    return Scenario(name=name, system_text=sys_text, system=system, params=params)


@dataclass
class Simulation:
    """A finished simulation at the internal step; :func:`write_log` renders it."""

    scenario: Scenario
    seed: int
    days: int
    dt_s: float
    t0: pd.Timestamp                 # UTC instant of the first local midnight
    day_start_s: np.ndarray          # local midnights [s since t0], days + 1
    bank: BankModel
    run: BankRun
    loads: EventSchedule
    ambient_C: np.ndarray            # per step
    battery_C: np.ndarray            # per step (logged temperature)
    delivered_A: dict[str, np.ndarray]   # per source category, per step
    solar_potential_W: np.ndarray    # unthrottled, at the bank, per step
    solar_clear_dc_W: np.ndarray     # clear-sky DC power (before cloud and derate), per step
    solar_cloudy_dc_W: np.ndarray    # DC power with clouds, before derate
    solar_voltage_V: np.ndarray      # array voltage per step
    driving: np.ndarray              # bool per step
    sky: list[str]
    soc0: float
    load_energy_by_kind_Wh: dict[str, float]
    truth: dict = field(default_factory=dict)

    @property
    def n_steps(self) -> int:
        return len(self.run.soc_end)

    @property
    def step_mid_s(self) -> np.ndarray:
        return (np.arange(self.n_steps) + 0.5) * self.dt_s


def _local_midnights(start_date, days: int, tz: str) -> pd.DatetimeIndex:
    mids = pd.date_range(pd.Timestamp(start_date), periods=days + 1, freq="D").tz_localize(ZoneInfo(tz))
    return mids.tz_convert("UTC")


def _day_flags(days: int, listed: list[int], default_days: int, p: float, seed: int, kind: int) -> np.ndarray:
    flags = np.zeros(days, dtype=bool)
    for d in range(days):
        if d < default_days:
            flags[d] = d in listed
        else:
            flags[d] = np.random.default_rng([seed, d, kind]).random() < p
    return flags


def _sky_sequence(params: ScenarioParams, days: int, seed: int) -> list[str]:
    w = params.weather
    skies: list[str] = []
    kinds = ["clear", "partly cloudy", "overcast"]
    p_over = max(0.0, 1.0 - w.p_clear - w.p_partly)
    probs = np.array([w.p_clear, w.p_partly, p_over]) / max(1e-9, w.p_clear + w.p_partly + p_over)
    for d in range(days):
        if d < len(w.sky):
            skies.append(w.sky[d])
            continue
        rng = np.random.default_rng([seed, d, 5])
        if skies and rng.random() < w.persistence:
            skies.append(skies[-1])
        else:
            skies.append(kinds[int(rng.choice(3, p=probs))])
    return skies


def _ambient(params: ScenarioParams, skies: list[str], local_hour: np.ndarray, step_t_s: np.ndarray,
             day_start_s: np.ndarray, seed: int) -> np.ndarray:
    """Ambient temperature per step [degC].

    Daily mean = ``temp_mean_C`` at the start, + the trend (over the scenario's
    default days, then held) + a seasonal cosine (``temp_annual_amplitude_C``,
    peak on ``warmest_day_of_year``) relative to the start, + an AR(1) weather
    anomaly; a daily sinusoid (min ~03 h, max ~15 h) scaled by the sky; an
    hourly wobble.
    """
    w = params.weather
    days = len(skies)
    doy0 = params.scenario.start_date.timetuple().tm_yday

    def season(doy: float) -> float:
        return w.temp_annual_amplitude_C * math.cos(2 * math.pi * (doy - w.warmest_day_of_year) / 365.25)
    amp_by_sky = {"clear": 1.3, "partly cloudy": 1.0, "overcast": 0.45}
    mean = np.empty(days)
    amp = np.empty(days)
    anomaly = 0.0
    for d in range(days):
        rng = np.random.default_rng([seed, d, 4])
        anomaly = 0.6 * anomaly + rng.normal(0.0, w.temp_day_noise_C)
        # Clear nights and days: a little colder on average in the season we model.
        trend = w.temp_trend_C_per_day * min(d, params.scenario.default_days)
        mean[d] = (w.temp_mean_C + trend + season(doy0 + d) - season(doy0) + anomaly
                   - (0.8 if skies[d] == "clear" else 0.0))
        amp[d] = w.temp_amplitude_C * amp_by_sky[skies[d]]
    noon = day_start_s[:-1] + 12 * 3600.0
    m = np.interp(step_t_s, noon, mean)
    a = np.interp(step_t_s, noon, amp)
    hourly = np.random.default_rng([seed, 0, 6]).normal(0.0, 0.4, int(step_t_s[-1] // 3600) + 3)
    wobble = np.interp(step_t_s / 3600.0, np.arange(len(hourly)), hourly)
    return m + a * np.sin(2 * np.pi * (local_hour - 9.0) / 24.0) + wobble


def _bank_model(system: System, params: ScenarioParams) -> BankModel:
    b = system.battery
    t = params.battery
    capacity = b.rated_capacity_Ah * t.state_of_health_pct / 100.0
    return BankModel(
        chemistry=b.chemistry, blocks_12V=max(1, round(b.series_12V_blocks)), capacity_Ah=capacity,
        rated_hours=b.rated_hours, peukert_k=t.peukert_k, charge_efficiency=t.charge_efficiency,
        internal_resistance_ohm=t.internal_resistance_ohm, polarisation_ohm=t.polarisation_ohm,
        relaxation_s=t.relaxation_s, absorption_V=t.absorption_V, float_V=t.float_V,
        soc_cv=t.soc_cv_pct / 100.0,
        absorption_end_current_A=t.absorption_end_current_pct / 100.0 * b.rated_capacity_Ah,
        max_charge_current_A=t.max_charge_C * capacity, float_current_A=t.float_current_pct / 100.0 * capacity,
        rebulk_soc=t.rebulk_soc_pct / 100.0, ocv_temp_coeff_V_per_C_per_12V=t.ocv_temp_coeff_V_per_C_per_12V,
        no_charge_below_C=0.0 if b.chemistry == "lifepo4" else None,
    )


def simulate(scenario: str | Scenario, *, days: int | None = None, seed: int | None = None,
             capacity_fade_Ah_per_day: float = 0.0) -> Simulation:
    """Run a scenario at its internal step.

    Parameters
    ----------
    scenario : str or Scenario
        A bundled scenario name (see :func:`available_scenarios`) or a loaded one.
    days : int, optional
        Local calendar days to simulate (default: the scenario's ``default_days``).
    seed : int, optional
        Random seed (default: the scenario's ``seed``).
    capacity_fade_Ah_per_day : float
        Capacity fade [Ah per day] (default 0: the bank keeps its capacity, as every bundled
        scenario does). The true capacity of local day ``d`` is ``C0 - fade * d`` (never below
        :data:`FADE_FLOOR` of ``C0``), applied from the first internal step at or after that
        day's local midnight where the charger state carries over (see :func:`_run_bank_fading`).
        The truth then holds ``battery.capacity_fade_Ah_per_day`` and ``battery.usable_Ah_by_day``.

    Returns
    -------
    Simulation
        With ``truth`` filled in (without ``interval_s``, which the log sets).
    """
    sc = load_scenario(scenario) if isinstance(scenario, str) else scenario
    p = sc.params
    system = sc.system
    days = p.scenario.default_days if days is None else int(days)
    if days < 1:
        raise ValueError(f"days must be at least 1, got {days}")
    seed = p.scenario.seed if seed is None else int(seed)
    dt = float(p.scenario.internal_step_s)
    tz = system.site.timezone

    mids = _local_midnights(p.scenario.start_date, days, tz)
    t0 = mids[0]
    day_start_s = (mids - t0).total_seconds().to_numpy()
    n = int(day_start_s[-1] // dt)
    step_t = np.arange(n) * dt
    mid_times = t0 + pd.to_timedelta(step_t + dt / 2, unit="s")
    day_idx = np.searchsorted(day_start_s, step_t, side="right") - 1

    # Weather is drawn one day further than simulated, so that the last evening
    # (tonight's heater decision, the temperature trend) is the same as in a
    # longer run: a shorter run is then an exact prefix of a longer one.
    mids_ext = _local_midnights(p.scenario.start_date, days + 1, tz)
    day_start_ext = (mids_ext - t0).total_seconds().to_numpy()
    n_ext = int(day_start_ext[-1] // dt)
    step_t_ext = np.arange(n_ext) * dt
    local_ext = (t0 + pd.to_timedelta(step_t_ext + dt / 2, unit="s")).tz_convert(ZoneInfo(tz))
    hour_ext = (local_ext.hour + local_ext.minute / 60.0 + local_ext.second / 3600.0).to_numpy(dtype=float)
    skies = _sky_sequence(p, days + 1, seed)
    ambient_ext = _ambient(p, skies, hour_ext, step_t_ext, day_start_ext, seed)
    skies = skies[:days]
    ambient = ambient_ext[:n]

    # Solar: pvlib clear-sky chain per array, clouds, derate, controller.
    cloud = np.ones(n)
    for d in range(days):
        sel = day_idx == d
        cloud[sel] = cloud_factor_series(np.random.default_rng([seed, d, 3]), skies[d], int(sel.sum()), dt)
    clear_dc = np.zeros(n)
    cloudy_dc = np.zeros(n)
    src_A: list[np.ndarray] = []   # available current per source column
    src_W: list[np.ndarray] = []   # available power per source column (MPPT)
    src_cat: list[str] = []
    pv_voltage = np.zeros(n)
    derate = p.solar.derate
    for k, arr in enumerate(system.solar):
        poa = clear_sky_poa_W_m2(mid_times, latitude_deg=system.site.latitude_deg,
                                 longitude_deg=system.site.longitude_deg, altitude_m=system.site.altitude_m,
                                 timezone=tz, tilt_deg=arr.tilt_deg, azimuth_deg=arr.azimuth_deg).to_numpy()
        p_clear, _ = array_dc_power_W(poa, temp_air_C=ambient, wind_speed_m_s=p.solar.wind_speed_m_s,
                                      peak_power_W=arr.peak_power_W, gamma_pdc_per_C=arr.gamma_pdc_per_C)
        p_cloud, t_cell = array_dc_power_W(poa * cloud, temp_air_C=ambient, wind_speed_m_s=p.solar.wind_speed_m_s,
                                           peak_power_W=arr.peak_power_W, gamma_pdc_per_C=arr.gamma_pdc_per_C)
        clear_dc += p_clear
        cloudy_dc += p_cloud
        if arr.controller == "pwm":
            vmp = arr.module_vmp_V or 18.0 * max(1, round(system.battery.series_12V_blocks))
            src_A.append(pwm_current_A(p_cloud * derate, cell_temperature_C=t_cell, module_vmp_V=vmp))
            src_W.append(np.zeros(n))
        else:
            vmp = (p.solar.array_vmp_V[k] if k < len(p.solar.array_vmp_V)
                   else arr.module_vmp_V or 36.0 * max(1, round(system.battery.series_12V_blocks)))
            src_A.append(np.zeros(n))
            src_W.append(p_cloud * derate)
        if k == 0:
            lit = poa * cloud > 2.0
            pv_voltage = np.where(lit, vmp * (1 - 0.0045 * (t_cell - 25.0)) * np.clip(0.92 + poa * cloud / 2500, 0, 1.0), 0.0)
        src_cat.append("solar")

    # Alternator (DC-DC) on drive days, shore charger on hook-up nights.
    t = p.travel
    drive_days = _day_flags(days, t.drive_days, p.scenario.default_days, t.p_drive, seed, 7)
    shore_nights = _day_flags(days, t.shore_nights, p.scenario.default_days, t.p_shore, seed, 8)
    driving = np.zeros(n, dtype=bool)
    shore_on = np.zeros(n, dtype=bool)
    for d in range(days):
        rng = np.random.default_rng([seed, d, 9])
        t0d = day_start_s[d]
        if drive_days[d]:
            s = t0d + (t.drive_start_h + rng.normal(0, 0.5)) * 3600
            dur = t.drive_hours * rng.uniform(0.75, 1.25) * 3600
            if dur > 2 * 3600:  # a break half way
                half = dur / 2
                driving |= ((step_t >= s) & (step_t < s + half)) | ((step_t >= s + half + 1800) & (step_t < s + dur + 1800))
            else:
                driving |= (step_t >= s) & (step_t < s + dur)
        if shore_nights[d]:
            s = t0d + t.shore_from_h * 3600 + rng.uniform(-1800, 1800)
            e = t0d + (24 + t.shore_to_h) * 3600 + rng.uniform(-1800, 1800)
            shore_on |= (step_t >= s) & (step_t < e)
    alt_max = sum(c.max_current_A for c in system.charger if c.source == "alternator")
    shore_max = sum(c.max_current_A for c in system.charger if c.source == "shore")
    if alt_max > 0:
        src_A.append(np.where(driving, alt_max, 0.0)); src_W.append(np.zeros(n)); src_cat.append("alternator")
    if shore_max > 0:
        src_A.append(np.where(shore_on, shore_max, 0.0)); src_W.append(np.zeros(n)); src_cat.append("shore")

    # Loads and temperatures.
    schedule, cabin_ext, load_energy = build_load_events(p.loads, day_start_s=day_start_ext, step_t_s=step_t_ext,
                                                         ambient_C=ambient_ext, seed=seed, days=days)
    cabin = cabin_ext[:n]
    edges = np.arange(n + 1) * dt
    load_W = schedule.bin_mean_W(edges)
    a = 1.0 - math.exp(-dt / (p.battery.temperature_lag_h * 3600.0))
    battery_C, _ = lfilter([a], [1.0, a - 1.0], cabin, zi=[cabin[0] * (1 - a)])

    bank = _bank_model(system, p)
    soc0 = p.battery.initial_soc_pct / 100.0
    a_mat = np.column_stack(src_A) if src_A else np.zeros((n, 1))
    w_mat = np.column_stack(src_W) if src_W else np.zeros((n, 1))
    bank_kw: dict[str, Any] = dict(source_A=a_mat, source_W=w_mat, load_W=load_W, temperature_C=battery_C,
                                   device_rated_Ah=system.battery.rated_capacity_Ah,
                                   device_offset_A=p.device.current_offset_A,
                                   device_gain_error=p.device.gain_error,
                                   device_efficiency=system.battery.effective_charge_efficiency)
    fade_changes: list[tuple[int, float]] = []
    if capacity_fade_Ah_per_day:
        run, fade_changes = _run_bank_fading(bank, capacity_fade_Ah_per_day, day_start_s, dt, soc0, bank_kw)
    else:
        run = run_bank(bank, dt_s=dt, soc0=soc0, device_soc0=soc0, **bank_kw)

    avail = a_mat + w_mat / run.conv_V[:, None]
    delivered = {c: np.zeros(n) for c in SOURCES}
    potential = np.zeros(n)
    for j, cat in enumerate(src_cat):
        delivered[cat] += avail[:, j] * run.source_factor
        if cat == "solar":
            potential += np.where(w_mat[:, j] > 0, w_mat[:, j], a_mat[:, j] * run.voltage_V)

    sim = Simulation(
        scenario=sc, seed=seed, days=days, dt_s=dt, t0=t0, day_start_s=day_start_s, bank=bank, run=run,
        loads=schedule, ambient_C=ambient, battery_C=battery_C, delivered_A=delivered,
        solar_potential_W=potential, solar_clear_dc_W=clear_dc, solar_cloudy_dc_W=cloudy_dc,
        solar_voltage_V=pv_voltage, driving=driving, sky=skies, soc0=soc0, load_energy_by_kind_Wh=load_energy,
    )
    sim.truth = _truth(sim, mids, day_idx, derate)
    if capacity_fade_Ah_per_day:
        sim.truth["battery"]["capacity_fade_Ah_per_day"] = float(capacity_fade_Ah_per_day)
        sim.truth["battery"]["usable_Ah_by_day"] = [
            {"date": mids[d].tz_convert(ZoneInfo(tz)).date().isoformat(), "usable_Ah": cap,
             "from": _iso(t0 + pd.Timedelta(seconds=step * dt))}
            for d, (step, cap) in enumerate(fade_changes)]
    return sim


#: The fade never takes the true capacity below this share of its starting value.
FADE_FLOOR = 0.1
#: How far past a local midnight a fading capacity's change may wait for a step where the
#: charger state carries over [s]; past it the change is made anyway.
FADE_LOOKAHEAD_S = 12 * 3600.0


def _run_bank_fading(bank: BankModel, fade_Ah_per_day: float, day_start_s: np.ndarray, dt: float, soc0: float,
                     kw: dict[str, Any]) -> tuple[BankRun, list[tuple[int, float]]]:
    """:func:`run_bank` with a capacity that falls by ``fade_Ah_per_day`` a local day.

    The step loop holds one capacity, so the run is made of day segments, each a
    :func:`run_bank` with that day's capacity (``dataclasses.replace`` of the bank: its
    Peukert reference current follows), starting from the previous segment's state of
    charge, relaxation voltage and the monitor's own SoC. The state of charge is the
    fraction of the *present* capacity, so a capacity step takes the stored charge down in
    proportion (lost active material). A segment ends at the first step at or after the
    next local midnight whose end state a new :func:`run_bank` call starts from
    unchanged (SoC exactly 100 % or below the re-bulk level: the charger's "full" state is
    then what ``soc0`` implies), looking at most :data:`FADE_LOOKAHEAD_S` ahead.

    Returns
    -------
    run : BankRun
        The whole run, as one :func:`run_bank` would return it.
    changes : list of (int, float)
        Per local day: the first step of its capacity and that capacity [Ah].
    """
    n = len(kw["load_W"])
    look = int(round(FADE_LOOKAHEAD_S / dt))
    c0 = bank.capacity_Ah
    parts: list[BankRun] = []
    changes: list[tuple[int, float]] = []
    start, soc, vpol, dsoc = 0, soc0, 0.0, soc0
    days = len(day_start_s) - 1
    for d in range(days):
        if start >= n:
            break
        cap = max(c0 - fade_Ah_per_day * d, FADE_FLOOR * c0)
        nominal = n if d + 1 >= days else min(n, int(math.ceil(day_start_s[d + 1] / dt - 1e-9)))
        stop = min(n, nominal + look) if d + 1 < days else n
        if stop <= start:
            continue
        seg_kw: dict[str, Any] = {k: (v[start:stop] if isinstance(v, np.ndarray) and v.shape[:1] == (n,) else v)
                                  for k, v in kw.items()}
        part = run_bank(replace(bank, capacity_Ah=cap), dt_s=dt, soc0=soc, vpol0=vpol, device_soc0=dsoc, **seg_kw)
        end = stop - start  # steps kept
        if d + 1 < days and nominal - start < end:
            tail = part.soc_end[max(0, nominal - start - 1):]
            safe = np.flatnonzero((tail >= 1.0) | (tail < bank.rebulk_soc))
            end = (max(0, nominal - start - 1) + int(safe[0]) + 1) if len(safe) else nominal - start
            end = max(1, end)
        changes.append((start, float(cap)))
        parts.append(_cut_run(part, end, start))
        start += end
        soc, vpol, dsoc = float(part.soc_end[end - 1]), float(part.vpol_end[end - 1]), float(part.device_soc_end[end - 1])
    run = BankRun(**{f: np.concatenate([getattr(r, f) for r in parts]) for f in (
        "soc_end", "net_A", "source_factor", "load_A", "load_scale", "conv_V", "voltage_V", "vpol_end",
        "regulated_V", "mode", "device_soc_end")}, full_steps=[i for r in parts for i in r.full_steps])
    return run, changes


def _cut_run(run: BankRun, end: int, offset: int) -> BankRun:
    """The first ``end`` steps of ``run``, its full-charge steps shifted by ``offset``."""
    arrays = {f: getattr(run, f)[:end] for f in (
        "soc_end", "net_A", "source_factor", "load_A", "load_scale", "conv_V", "voltage_V", "vpol_end",
        "regulated_V", "mode", "device_soc_end")}
    return BankRun(**arrays, full_steps=[i + offset for i in run.full_steps if i < end])


def _iso(ts: pd.Timestamp) -> str:
    return ts.tz_convert("UTC").strftime("%Y-%m-%dT%H:%M:%SZ")


def _truth(sim: Simulation, mids: pd.DatetimeIndex, day_idx: np.ndarray, derate: float) -> dict:
    sc, run, dt = sim.scenario, sim.run, sim.dt_s
    system = sc.system
    tz = system.site.timezone
    v = run.voltage_V
    h = dt / 3600.0
    peak_total = sum(a.peak_power_W for a in system.solar) or 1.0
    days_out = []
    solar_days = []
    for d in range(sim.days):
        sel = day_idx == d
        if not sel.any():
            continue
        date = mids[d].tz_convert(ZoneInfo(tz)).date().isoformat()
        load = run.load_A[sel]
        charged_Ah = {c: float(sim.delivered_A[c][sel].sum() * h) for c in SOURCES}
        charged_Wh = {c: float((sim.delivered_A[c][sel] * v[sel]).sum() * h) for c in SOURCES}
        days_out.append({
            "date": date,
            "consumed_Ah": float(load.sum() * h),
            "consumed_Wh": float((load * v[sel]).sum() * h),
            "charged_Ah": charged_Ah,
            "charged_Wh": charged_Wh,
            "soc_min_pct": float(run.soc_end[sel].min() * 100.0),
            "soc_end_pct": float(run.soc_end[sel][-1] * 100.0),
            "driving_h": float(sim.driving[sel].sum() * h),
            "mean_temperature_C": float(sim.battery_C[sel].mean()),
        })
        pot = sim.solar_potential_W[sel]
        daylight = pot > 0.01 * peak_total * derate
        throttled = daylight & (run.source_factor[sel] < 0.98)
        clear = sim.solar_clear_dc_W[sel].sum()
        solar_days.append({
            "date": date,
            "sky": sim.sky[d],
            "cloud_factor": float(sim.solar_cloudy_dc_W[sel].sum() / clear) if clear > 0 else None,
            "delivered_Wh": charged_Wh["solar"],
            "delivered_Ah": charged_Ah["solar"],
            "potential_Wh": float(pot.sum() * h),
            "clear_sky_dc_Wh": float(clear * h),
            "saturated_fraction": float(throttled.sum() / daylight.sum()) if daylight.any() else 0.0,
        })
    b = system.battery
    bank = sim.bank
    return {
        "scenario": sc.name,
        "seed": sim.seed,
        "interval_s": None,
        "timezone": tz,
        "start": _iso(mids[0]),
        "end": _iso(mids[-1]),
        "internal_step_s": dt,
        "system": tomllib.loads(sc.system_text),
        "battery": {
            "rated_Ah": b.rated_capacity_Ah,
            "usable_Ah": bank.capacity_Ah,
            "state_of_health_pct": sc.params.battery.state_of_health_pct,
            "peukert_k": bank.peukert_k,
            "internal_resistance_ohm": bank.internal_resistance_ohm,
            "charge_efficiency": bank.charge_efficiency,
            "initial_soc_pct": sim.soc0 * 100.0,
            "absorption_V": bank.absorption_V,
            "float_V": bank.float_V,
            "absorption_end_current_A": bank.absorption_end_current_A,
        },
        "solar": {"derate": derate, "days": solar_days},
        "days": days_out,
        "full_charges": [_iso(sim.t0 + pd.Timedelta(seconds=(i + 1) * dt)) for i in run.full_steps],
        "loads_Wh": sim.load_energy_by_kind_Wh,
        "device_soc": {"current_offset_A": sc.params.device.current_offset_A,
                       "gain_error": sc.params.device.gain_error,
                       "counts_against_Ah": b.rated_capacity_Ah},
    }


def _resample_steps(values: np.ndarray, dt: float, t_s: np.ndarray, interval_s: float) -> np.ndarray:
    """Step means -> means over ``[t, t + interval)``.

    Finer than the step: linear interpolation between step centres (smooth,
    mean-preserving to second order). Coarser: exact bin means of the step function.
    """
    if interval_s < dt:
        mids = (np.arange(len(values)) + 0.5) * dt
        return np.interp(t_s + interval_s / 2, mids, values)
    cum = np.concatenate([[0.0], np.cumsum(values) * dt])
    edges = np.arange(len(values) + 1) * dt
    f = np.interp(np.concatenate([t_s, [t_s[-1] + interval_s]]), edges, cum)
    return np.diff(f) / interval_s


def _render_day(sim: Simulation, t_s: np.ndarray, interval_s: float, rng: np.random.Generator) -> dict[str, np.ndarray]:
    """Noiseless and measured values for the output rows starting at ``t_s``."""
    run, dt, bank = sim.run, sim.dt_s, sim.bank
    n = sim.n_steps
    step = np.clip(((t_s + interval_s / 2) // dt).astype(np.int64), 0, n - 1)
    edges = np.concatenate([t_s, [t_s[-1] + interval_s]])
    load_W = sim.loads.bin_mean_W(edges) * run.load_scale[step]
    load_A = load_W / run.conv_V[step]
    src = {c: np.clip(_resample_steps(sim.delivered_A[c], dt, t_s, interval_s), 0.0, None) for c in SOURCES}
    net = src["solar"] + src["alternator"] + src["shore"] - load_A
    soc_edges = np.concatenate([[sim.soc0], run.soc_end])
    vpol_edges = np.concatenate([[0.0], run.vpol_end])
    tq = t_s + interval_s / 2
    soc = np.interp(tq / dt, np.arange(n + 1), soc_edges)
    vpol = np.interp(tq / dt, np.arange(n + 1), vpol_edges)
    temp = np.interp(tq, sim.step_mid_s, sim.battery_C)
    ocv = open_circuit_voltage_V(soc * 100.0, chemistry=bank.chemistry, blocks_12V=bank.blocks_12V,
                                 temperature_C=temp, temp_coeff_V_per_C_per_12V=bank.ocv_temp_coeff_V_per_C_per_12V)
    v = ocv + net * bank.internal_resistance_ohm + vpol
    knee0 = bank.soc_cv - 0.1
    x = np.clip((soc - knee0) / (1 - knee0), 0, 1)
    v = np.where(net > 0, v + np.maximum(0.0, bank.absorption_V - v) * x ** 3, v)
    v = np.where(net > 0, np.minimum(v, bank.absorption_V), v)
    reg = run.regulated_V[step]
    v = np.where(np.isfinite(reg), reg, v)
    dsoc = np.interp(tq / dt, np.arange(n + 1), np.concatenate([[sim.soc0], run.device_soc_end]))

    def noisy_source(x_A: np.ndarray) -> np.ndarray:
        on = x_A > 0.02
        return np.where(on, np.clip(x_A * (1 + rng.normal(0, 0.004, x_A.shape)) + rng.normal(0, 0.01, x_A.shape), 0, None), 0.0)

    meas = {
        "battery_voltage_V": v + rng.normal(0, 0.003, v.shape),
        "battery_current_A": net + rng.normal(0, 0.01, net.shape) + net * rng.normal(0, 0.002, net.shape),
        "battery_temperature_C": temp + rng.normal(0, 0.05, temp.shape),
        "battery_soc_pct": dsoc * 100.0,
        "solar_current_A": noisy_source(src["solar"]),
        "solar_voltage_V": np.where(
            src["solar"] > 0.02,
            np.clip(np.interp(tq, sim.step_mid_s, sim.solar_voltage_V) + rng.normal(0, 0.05, v.shape), 0.0, None),
            0.0),
        "alternator_current_A": noisy_source(src["alternator"]),
        "shore_current_A": noisy_source(src["shore"]),
        "load_current_A": -np.clip(load_A * (1 + rng.normal(0, 0.003, load_A.shape))
                                   + rng.normal(0, 0.01, load_A.shape), 0, None),
    }
    # A PWM controller holds the array at the battery voltage while it delivers.
    if sim.scenario.system.solar and sim.scenario.system.solar[0].controller == "pwm":
        meas["solar_voltage_V"] = np.where(src["solar"] > 0.02, meas["battery_voltage_V"] + 0.15,
                                           meas["solar_voltage_V"])
    return meas


_DECIMALS = {"battery_voltage_V": 3, "battery_current_A": 3, "battery_temperature_C": 2, "battery_soc_pct": 1,
             "solar_current_A": 3, "solar_voltage_V": 2, "alternator_current_A": 3, "shore_current_A": 3,
             "load_current_A": 3}


def write_log(sim: Simulation, out: str | Path, *, interval_s: float | None = None,
              single_shunt: bool = False) -> Path:
    """Write the simulated log (CSV) and its truth JSON beside it.

    Parameters
    ----------
    sim : Simulation
    out : path
        The CSV to write; the truth goes to ``<out without .csv>.truth.json``.
    interval_s : float, optional
        Output interval [s] (default: the scenario's, 10 s for the bundled ones).
    single_shunt : bool
        Write only the battery shunt columns.

    Returns
    -------
    pathlib.Path
        The truth file's path.
    """
    out = Path(out)
    interval_s = float(interval_s or sim.scenario.params.scenario.interval_s)
    if interval_s <= 0:
        raise ValueError(f"interval must be positive, got {interval_s} s")
    columns = SINGLE_SHUNT_COLUMNS if single_shunt else MULTI_CHANNEL_COLUMNS
    unit: Literal["s", "ms"] = "s" if float(interval_s).is_integer() else "ms"
    t0_us = int((sim.t0 - pd.Timestamp(0, tz="UTC")) // pd.Timedelta(microseconds=1))
    schema = pa.schema([(c, pa.string() if c == "time" else pa.float64()) for c in columns])
    # Day chunks: local day d covers rows k0..k1 (the last one ends at the last midnight).
    bounds = [int(math.ceil(s / interval_s - 1e-9)) for s in sim.day_start_s]
    chunks = [(d, bounds[d], bounds[d + 1]) for d in range(sim.days) if bounds[d + 1] > bounds[d]]
    write_options = pacsv.WriteOptions(include_header=False, quoting_style="none")

    def render(chunk: tuple[int, int, int]) -> bytes:
        d, k0, k1 = chunk
        t_s = np.arange(k0, k1) * interval_s
        meas = _render_day(sim, t_s, interval_s, np.random.default_rng([sim.seed, d, 99]))
        times = (t0_us + np.round(t_s * 1e6).astype(np.int64)).astype("datetime64[us]")
        cols = {"time": pa.array(np.datetime_as_string(times.astype(f"datetime64[{unit}]"), unit=unit,
                                                       timezone="UTC"))}
        for c in columns[1:]:
            cols[c] = pa.array(np.round(meas[c], _DECIMALS[c]) + 0.0)  # + 0.0: no "-0"
        sink = pa.BufferOutputStream()
        pacsv.write_csv(pa.table(cols, schema=schema), sink, write_options=write_options)
        return sink.getvalue().to_pybytes()

    out.parent.mkdir(parents=True, exist_ok=True)
    # numpy and pyarrow release the GIL, so days render in parallel; written in order.
    workers = max(1, min(4, os.cpu_count() or 1))
    with open(out, "wb") as fh, ThreadPoolExecutor(max_workers=workers) as pool:
        fh.write((",".join(columns) + "\n").encode())
        pending: deque = deque()
        for chunk in chunks:
            pending.append(pool.submit(render, chunk))
            if len(pending) > 2 * workers:
                fh.write(pending.popleft().result())
        while pending:
            fh.write(pending.popleft().result())
    rows = bounds[-1] - bounds[0]
    truth = dict(sim.truth)
    truth["interval_s"] = interval_s
    truth["log"] = {"file": out.name, "rows": rows, "columns": list(columns), "single_shunt": single_shunt,
                    "row_meaning": "mean over [time, time + interval_s)"}
    truth_path = out.with_name(out.name[:-4] + ".truth.json" if out.name.lower().endswith(".csv")
                               else out.name + ".truth.json")
    truth_path.write_text(json.dumps(truth, indent=1, allow_nan=False) + "\n", encoding="utf-8")
    return truth_path


def truth_path_for(out: str | Path) -> Path:
    """Where :func:`write_log` puts the truth of a log written to ``out``."""
    out = Path(out)
    return out.with_name(out.name[:-4] + ".truth.json" if out.name.lower().endswith(".csv")
                         else out.name + ".truth.json")


def to_canonical(sim: Simulation, *, interval_s: float = 60.0, single_shunt: bool = False) -> pd.DataFrame:
    """The simulation as a canonical long frame (``collector.canonical``), without a file.

    Channels ``battery`` (voltage, current, temperature, device SoC), and unless
    ``single_shunt``: ``solar`` (current, voltage), ``alternator``, ``shore`` and
    ``load`` (current). Same values as :func:`write_log` writes (before rounding).
    """
    frames = []
    total_s = float(sim.day_start_s[-1])
    k_all = np.arange(int(math.ceil(total_s / interval_s - 1e-9)))
    for d in range(sim.days):
        t_s = k_all[(k_all * interval_s >= sim.day_start_s[d]) & (k_all * interval_s < sim.day_start_s[d + 1])] * interval_s
        if len(t_s) == 0:
            continue
        m = _render_day(sim, t_s, interval_s, np.random.default_rng([sim.seed, d, 99]))
        t = sim.t0 + pd.to_timedelta(t_s, unit="s")
        nan = np.full(len(t_s), np.nan)
        frames.append(pd.DataFrame({"t": t, "channel": "battery", "voltage_V": m["battery_voltage_V"],
                                    "current_A": m["battery_current_A"], "temperature_C": m["battery_temperature_C"],
                                    "soc_pct": m["battery_soc_pct"]}))
        if not single_shunt:
            for ch, volt in (("solar", m["solar_voltage_V"]), ("alternator", nan), ("shore", nan), ("load", nan)):
                frames.append(pd.DataFrame({"t": t, "channel": ch, "voltage_V": volt, "current_A": m[f"{ch}_current_A"],
                                            "temperature_C": nan, "soc_pct": nan}))
    df = pd.concat(frames, ignore_index=True)
    df["t"] = df["t"].astype("datetime64[us, UTC]")
    return df.sort_values(["channel", "t"], kind="stable").reset_index(drop=True)


def simulate_to_file(scenario: str, out: str | Path, *, days: int | None = None, seed: int | None = None,
                     interval_s: float | None = None, single_shunt: bool = False) -> tuple[Path, Path, Simulation]:
    """:func:`simulate` then :func:`write_log`; returns (log path, truth path, simulation)."""
    sim = simulate(scenario, days=days, seed=seed)
    truth = write_log(sim, out, interval_s=interval_s, single_shunt=single_shunt)
    return Path(out), truth, sim
