"""A simulated fleet of rental camper vans: many invented banks, uses and sites, each with its truth.

``drawdown simulate --fleet N --days D --out DIR [--interval S] [--seed SEED] [--json]`` writes N
invented vehicles (:func:`write_fleet`), for the fleet demo, the tests and the fleet benchmark.
Every vehicle is one run of the project's simulator (:func:`collector.simulated.simulate`) with
parameters drawn here, and the same physics: the bank, the sun, the chargers, the loads.

Options
-------
``--fleet N``    number of vehicles (at least 1); they are named ``van-001``, ``van-002``, ...
``--days D``     local calendar days per vehicle (at least 1), from :data:`FLEET_START` (26
                 September 2025: a 10-day run already spans two calendar months)
``--out DIR``    the folder to write (created; must not be a file); files of the same names in it
                 are replaced
``--interval S`` sample interval [s] of the readings (default 10 s)
``--seed SEED``  fleet seed (default :data:`DEFAULT_SEED`); the same (N, D, SEED, S) gives the same
                 vehicles and the same figures, and vehicle k is the same in a fleet of any size
                 (a smaller fleet is a prefix of a larger one; a shorter run a prefix of a longer one,
                 except a use-jump vehicle's jump, which sits at the run's middle day)
``--json``       one JSON object on stdout: the manifest, plus rows and seconds

Layout (other code reads it)::

    DIR/fleet.json                  {"vehicles": [{"name": "van-001", "path": "van-001"}, ...],
                                     "days": D, "seed": SEED, "interval_s": S, "start_date": "2025-09-26"}
    DIR/<name>/system.toml          the vehicle's system description (what its owner would write)
    DIR/<name>/readings.parquet     its readings, as ``drawdown export readings --format parquet`` writes
                                    them (the export's own writer, schema v1, metadata and encodings)
    DIR/<name>/truth.json           what really happened (below)

The readings are multi-channel: ``battery`` (voltage, current, temperature, the monitor's own SoC),
``solar`` (current, array voltage), ``load`` (current, negative) and ``alternator`` / ``shore``
(current) where the vehicle has that charger. Values are rounded as the simulator's CSV log rounds
them (mV, mA), then held as float32 as the store holds them; ``drawdown import`` of the file stores
every row (none rejected) and a readings export of that store gives the same rows.

The fleet
---------
Vehicles differ in (drawn per vehicle from ``(SEED, k)``; the mix cycles so any four vehicles in a
row already differ):

* the bank: LiFePO4 12 V and 24 V, AGM 12 V and 24 V, flooded 12 V; 95-300 Ah rated; an age of 0-8
  years and a starting state of health that goes with it (55-102 % of rated);
* capacity fade, in % of the rated capacity per month (of 30.4375 days): *healthy* 0-0.3,
  *moderate* 0.4-1.0, *fast* 1.4-2.0 (about 3 in 7 healthy, 3 in 7 moderate, 1 in 7 fast). The fade
  is in the physics (:func:`collector.simulated.simulate` with ``capacity_fade_Ah_per_day``): the
  true capacity steps down every local day, and the state of charge is counted against it;
* the use: *light* (a fridge, some lights, a laptop) or *heavy* (a bigger fridge run harder, long
  laptop sessions, a kettle, a television and router, a cooking plate, a heater on more nights), and
  the pattern: *full-time* (on the road: drives and hook-up nights drawn day by day, heavy users
  seldom hooked up, so their banks cycle deep) or *weekend* (driven out on Friday and back on
  Sunday, hooked up at the depot Monday to Thursday nights when the van has a shore charger);
* the charging: 100-520 W of flat roof solar through MPPT or PWM, a 20-40 A DC-DC charger, and a
  shore charger on about 70 % of the vans;
* a use jump on one vehicle in :data:`USE_JUMP_EVERY`: from the run's middle day a load is added
  (220 Wh a day on a light user, 400 Wh on a heavy one), so the fleet report's ``use_up`` flag has
  something to find beside the season's own rise (heater nights as autumn cools);
* the site: nine invented touring regions from 61 degN to 43 degS, eight timezones (southern
  hemisphere vans are in spring, northern ones in autumn).

The load model is the same every day (:mod:`collector.sim_loads` has no weekday calendar), so a
weekend van differs from a full-time one in its travel and charging, not in what it draws on a
weekday.

Truth (``truth.json``)
----------------------
Everything :func:`collector.simulated.simulate` states (``battery``, ``days`` with the consumed and
charged Ah and Wh per local day, ``solar``, ``full_charges``, ``loads_Wh``, ``device_soc``,
``system``, ``timezone``, ``start``, ``end``, ``seed``: the vehicle's own simulator seed), and:

``vehicle``, ``description``, ``fleet_seed``, ``fleet_index`` (0-based), ``interval_s``;
``chemistry``, ``nominal_V``, ``blocks_12V``, ``rated_Ah``, ``age_years``;
``usable_Ah_start``, ``usable_Ah_end``, ``state_of_health_pct_start``, ``state_of_health_pct_end``;
``fade_pct_per_month`` (of rated, per 30.4375 days), ``fade_Ah_per_day``, ``fade_class``;
``usable_Ah_by_day`` (``date``, ``usable_Ah``, ``from``: the UTC instant the day's capacity took over,
at or a little after local midnight); ``usable_Ah_by_month`` (``month`` YYYY-MM of the local calendar,
``days``, ``usable_Ah_start``, ``usable_Ah_end``, ``usable_Ah_mean``);
``use`` (light/heavy), ``pattern`` (full-time/weekend), ``use_jump`` (``from_date``,
``added_Wh_per_day``; null without one), ``site`` (``name``, ``latitude_deg``,
``longitude_deg``, ``timezone``, ``altitude_m``); ``consumed_Ah_by_day`` (``date``, ``consumed_Ah``,
``consumed_Wh``), ``mean_consumed_Ah_per_day``; ``drive_days`` and ``shore_nights`` (local dates);
``soc_min_pct`` (the lowest true state of charge of the run) and ``readings`` (file, rows per
channel, channels).

Every scenario here is invented; no real vehicle or product is described.
"""

from __future__ import annotations

import datetime as dt
import json
import math
import os
from collections.abc import Callable, Iterator
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import asdict, dataclass, replace
from multiprocessing import get_context
from pathlib import Path
from typing import Any

import numpy as np

#: The fleet's first local day (a 10-day run spans September and October; a run of up to 14 months
#: ends before this code was written, so every reading imports: an import refuses times after tomorrow).
FLEET_START = dt.date(2025, 9, 26)
DEFAULT_SEED = 1
DEFAULT_INTERVAL_S = 10.0
#: Days in the "month" of ``fade_pct_per_month`` (the mean Gregorian month).
DAYS_PER_MONTH = 30.4375
MANIFEST = "fleet.json"
SYSTEM = "system.toml"
READINGS = "readings.parquet"
TRUTH = "truth.json"


@dataclass(frozen=True)
class Site:
    """An invented touring region: where the van is and the weather it sees at the start."""

    name: str
    latitude_deg: float
    longitude_deg: float
    timezone: str
    altitude_m: float
    temp_mean_C: float           # daily mean at FLEET_START
    temp_annual_amplitude_C: float
    warmest_day_of_year: int
    temp_amplitude_C: float      # half the day-night swing
    p_clear: float
    p_partly: float


SITES: tuple[Site, ...] = (
    Site("western Norway fjords", 61.2, 7.1, "Europe/Oslo", 20, 10.0, 7.0, 205, 4.0, 0.25, 0.40),
    Site("Scottish Highlands", 57.1, -4.7, "Europe/London", 150, 11.0, 6.0, 205, 4.0, 0.20, 0.40),
    Site("Bavarian Alps foothills", 47.6, 11.1, "Europe/Berlin", 700, 11.0, 9.0, 200, 6.0, 0.35, 0.35),
    Site("Algarve coast", 37.1, -8.5, "Europe/Lisbon", 30, 20.0, 6.0, 215, 5.0, 0.60, 0.25),
    Site("Colorado Front Range", 39.7, -105.2, "America/Denver", 1800, 13.0, 11.0, 200, 8.0, 0.55, 0.30),
    Site("British Columbia coast", 49.3, -123.1, "America/Vancouver", 50, 12.0, 7.0, 210, 4.0, 0.25, 0.35),
    Site("Tasmania", -42.9, 147.3, "Australia/Hobart", 50, 11.0, 4.5, 30, 5.0, 0.30, 0.40),
    Site("Canterbury plains", -43.5, 172.6, "Pacific/Auckland", 20, 12.0, 5.0, 35, 6.0, 0.35, 0.35),
    Site("Arizona high desert", 34.9, -111.7, "America/Phoenix", 1300, 17.0, 10.0, 195, 8.0, 0.70, 0.20),
)

#: (chemistry, 12 V blocks) in the order the fleet cycles through (LiFePO4 most common).
BANK_KINDS: tuple[tuple[str, int], ...] = (
    ("lifepo4", 1), ("agm", 1), ("lifepo4", 2), ("flooded", 1), ("lifepo4", 1), ("agm", 2),
)
#: Rated sizes [Ah] by bank kind.
SIZES_AH: dict[tuple[str, int], tuple[float, ...]] = {
    ("lifepo4", 1): (100, 150, 200, 280, 300), ("lifepo4", 2): (100, 150, 200),
    ("agm", 1): (95, 115, 140, 210, 230), ("agm", 2): (100, 150, 230),
    ("flooded", 1): (110, 130, 220, 225),
}
#: Fade classes in the order the fleet cycles through, with their range [% of rated per month].
FADE_CYCLE: tuple[str, ...] = ("healthy", "moderate", "healthy", "fast", "healthy", "moderate", "moderate")
FADE_RANGE: dict[str, tuple[float, float]] = {"healthy": (0.0, 0.3), "moderate": (0.4, 1.0), "fast": (1.4, 2.0)}
#: One vehicle in this many has its use jump mid-run (``VehicleSpec.use_jump``).
USE_JUMP_EVERY = 4


@dataclass(frozen=True)
class VehicleSpec:
    """One invented vehicle: everything :func:`vehicle_scenario` needs (all drawn by :func:`fleet_specs`)."""

    name: str
    index: int
    fleet_seed: int
    sim_seed: int
    chemistry: str
    blocks_12V: int
    rated_Ah: float
    age_years: float
    state_of_health_pct: float     # at the start
    fade_class: str
    fade_pct_per_month: float      # of rated
    use: str                       # light | heavy
    pattern: str                   # full-time | weekend
    site: Site
    solar_W: float
    controller: str                # mppt | pwm
    alternator_A: float
    shore_A: float                 # 0: no shore charger
    initial_soc_pct: float
    #: From the run's middle day a load is added (a cool box and more inverter use): the daily
    #: use rises by ~40 % against the vehicle's own first half (the fleet's ``use_up`` flag).
    use_jump: bool = False

    @property
    def use_jump_Wh(self) -> float:
        return 400.0 if self.use == "heavy" else 220.0

    @property
    def nominal_V(self) -> float:
        return (12.8 if self.chemistry == "lifepo4" else 12.0) * self.blocks_12V

    @property
    def fade_Ah_per_day(self) -> float:
        return self.rated_Ah * self.fade_pct_per_month / 100.0 / DAYS_PER_MONTH

    @property
    def description(self) -> str:
        chem = {"lifepo4": "LiFePO4", "agm": "AGM", "flooded": "flooded lead-acid"}[self.chemistry]
        return (f"{self.nominal_V:g} V {self.rated_Ah:g} Ah {chem}, {self.age_years:.1f} years, {self.fade_class} "
                f"({self.fade_pct_per_month:.2f} % of rated a month); {self.use} {self.pattern} use; "
                f"{self.solar_W:g} W solar ({self.controller.upper()}), {self.alternator_A:g} A DC-DC"
                + (f", {self.shore_A:g} A shore charger" if self.shore_A else ", no shore charger")
                + f"; {self.site.name}"
                + (f"; use up ~{self.use_jump_Wh:g} Wh a day from the run's middle day" if self.use_jump else ""))


def vehicle_name(index: int) -> str:
    """``van-001`` for index 0."""
    return f"van-{index + 1:03d}"


def fleet_specs(n: int, seed: int = DEFAULT_SEED) -> list[VehicleSpec]:
    """The first ``n`` vehicles of the fleet of ``seed`` (vehicle k does not depend on ``n``)."""
    if n < 1:
        raise ValueError(f"a fleet needs at least 1 vehicle, got {n}")
    mix = np.random.default_rng([seed, 0xF1EE7])
    kind_offset = int(mix.integers(len(BANK_KINDS)))
    fade_offset = int(mix.integers(len(FADE_CYCLE)))
    jump_offset = int(mix.integers(USE_JUMP_EVERY))
    return [replace(_spec(k, seed, kind_offset, fade_offset), use_jump=(k + jump_offset) % USE_JUMP_EVERY == 0)
            for k in range(n)]


def _spec(k: int, seed: int, kind_offset: int, fade_offset: int) -> VehicleSpec:
    rng = np.random.default_rng([seed, k, 0xF1EE7])
    chemistry, blocks = BANK_KINDS[(k + kind_offset) % len(BANK_KINDS)]
    fade_class = FADE_CYCLE[(k + fade_offset) % len(FADE_CYCLE)]
    lead = chemistry != "lifepo4"
    age = float(np.round(rng.uniform(0.0, 8.0 if lead else 6.0), 1))
    soh = float(np.clip(101.5 - age * (rng.uniform(4.0, 7.0) if lead else rng.uniform(1.0, 3.0)), 55.0, 102.0))
    lo, hi = FADE_RANGE[fade_class]
    fade = float(np.round(rng.uniform(lo, hi), 3))
    use = "heavy" if rng.random() < 0.5 else "light"
    pattern = "full-time" if rng.random() < 0.6 else "weekend"
    site = SITES[int(rng.integers(len(SITES)))]
    # a heavy user's van has the bigger bank and array of its kind (a rental company sizes for the use)
    sizes = SIZES_AH[(chemistry, blocks)]
    half = (len(sizes) + 1) // 2
    rated = float(rng.choice(sizes[len(sizes) - half:] if use == "heavy" else sizes[:half]))
    solar = float(rng.choice((300, 360, 400, 520) if use == "heavy" else (100, 160, 200, 300)))
    if blocks > 1:
        solar = float(max(solar, 200))
    controller = "pwm" if lead and rng.random() < 0.35 else "mppt"
    alternator = float(rng.choice((20, 25, 30, 40) if blocks == 1 else (20, 30)))
    shore = float(rng.choice((15, 20, 25, 30) if blocks == 1 else (10, 15, 20))) if rng.random() < 0.7 else 0.0
    return VehicleSpec(
        name=vehicle_name(k), index=k, fleet_seed=seed, sim_seed=int(rng.integers(1, 2**31 - 1)),
        chemistry=chemistry, blocks_12V=blocks, rated_Ah=rated, age_years=age, state_of_health_pct=round(soh, 2),
        fade_class=fade_class, fade_pct_per_month=fade, use=use, pattern=pattern, site=site, solar_W=solar,
        controller=controller, alternator_A=alternator, shore_A=shore,
        initial_soc_pct=float(np.round(rng.uniform(70.0, 100.0), 1)),
    )


# --------------------------------------------------------------------------------------------
# a vehicle as a scenario of the simulator
# --------------------------------------------------------------------------------------------

def _calendar(spec: VehicleSpec, days: int) -> tuple[list[int], list[int]]:
    """Drive days and hook-up nights (day indexes), each day drawn from its own stream."""
    drive: list[int] = []
    shore: list[int] = []
    for d in range(days):
        rng = np.random.default_rng([spec.sim_seed, d, 0xCA1])
        u_drive, u_shore = rng.random(), rng.random()
        weekday = (FLEET_START + dt.timedelta(days=d)).weekday()  # Monday 0
        if spec.pattern == "weekend":
            if weekday in (4, 6) or (weekday == 5 and u_drive < 0.3):
                drive.append(d)
            if spec.shore_A and weekday in (0, 1, 2, 3):
                shore.append(d)
        else:
            if u_drive < 0.3:
                drive.append(d)
            if spec.shore_A and u_shore < (0.08 if spec.use == "heavy" else 0.12):
                shore.append(d)
    return drive, shore


def _loads(spec: VehicleSpec, rng: np.random.Generator) -> dict[str, Any]:
    if spec.use == "light":
        return {"baseline_W": round(rng.uniform(2.0, 4.0), 1), "fridge_W": round(rng.uniform(35, 45)),
                "fridge_duty_at_20C": round(rng.uniform(0.28, 0.35), 2), "lights_W": round(rng.uniform(10, 15)),
                "lights_on_h": 18.5, "lights_off_h": 22.5, "pump_W": round(rng.uniform(45, 65)),
                "pump_bursts_per_day": round(rng.uniform(10, 16)), "heater_fan_W": round(rng.uniform(12, 18)),
                "heater_glow_W": 100, "heater_below_C": round(rng.uniform(6.0, 8.0), 1),
                "inverter_idle_W": 6, "kettle_W": 0 if rng.random() < 0.5 else 700, "kettle_min": 3,
                "laptop_W": 45, "laptop_hours": round(rng.uniform(0.5, 1.5), 1)}
    return {"baseline_W": round(rng.uniform(4.0, 6.0), 1), "fridge_W": round(rng.uniform(50, 60)),
            "fridge_duty_at_20C": round(rng.uniform(0.33, 0.40), 2), "lights_W": round(rng.uniform(20, 28)),
            "lights_on_h": 18.0, "lights_off_h": 23.0, "pump_W": round(rng.uniform(65, 80)),
            "pump_bursts_per_day": round(rng.uniform(18, 26)), "heater_fan_W": round(rng.uniform(16, 22)),
            "heater_glow_W": 120, "heater_below_C": round(rng.uniform(8.0, 10.0), 1),
            "inverter_idle_W": round(rng.uniform(8, 12)), "kettle_W": round(rng.uniform(900, 1200)),
            "kettle_min": round(rng.uniform(3.5, 5.0), 1), "laptop_W": round(rng.uniform(60, 80)),
            "laptop_hours": round(rng.uniform(2.0, 3.5), 1),
            "extra": [{"name": "television and router", "power_W": round(rng.uniform(30, 45)),
                       "start_h": 19.5, "hours": round(rng.uniform(2.0, 3.0), 1)},
                      {"name": "cooking plate", "power_W": round(rng.uniform(800, 1200)),
                       "start_h": 18.75, "hours": round(rng.uniform(0.1, 0.15), 2)}]}


def _battery_truth(spec: VehicleSpec, rng: np.random.Generator) -> dict[str, Any]:
    b = spec.blocks_12V
    aged = 1.0 + 0.08 * spec.age_years
    if spec.chemistry == "lifepo4":
        return {"peukert_k": round(rng.uniform(1.02, 1.04), 3), "charge_efficiency": 0.99,
                "internal_resistance_ohm": round(rng.uniform(0.004, 0.008) * aged * b * 150 / spec.rated_Ah, 5),
                "polarisation_ohm": round(0.004 * b * 150 / spec.rated_Ah, 5), "relaxation_s": 1800,
                "absorption_V": round(rng.choice((14.2, 14.4)) * b, 2), "float_V": 13.5 * b, "soc_cv_pct": 95,
                "absorption_end_current_pct": round(rng.uniform(2.0, 4.0), 2), "max_charge_C": 0.5,
                "float_current_pct": 0.0, "rebulk_soc_pct": 96, "temperature_lag_h": 3.0}
    flooded = spec.chemistry == "flooded"
    return {"peukert_k": round(rng.uniform(1.20, 1.30) if flooded else rng.uniform(1.08, 1.15), 3),
            "charge_efficiency": round(rng.uniform(0.88, 0.92) if flooded else rng.uniform(0.92, 0.96), 3),
            "internal_resistance_ohm": round(rng.uniform(0.010, 0.016) * aged * b * 150 / spec.rated_Ah, 5),
            "polarisation_ohm": round(0.010 * b * 150 / spec.rated_Ah, 5), "relaxation_s": 3600,
            "absorption_V": (14.6 if flooded else 14.4) * b, "float_V": (13.5 if flooded else 13.6) * b,
            "soc_cv_pct": 78 if flooded else 80, "absorption_end_current_pct": 2.0 if flooded else 1.5,
            "max_charge_C": 0.2 if flooded else 0.25, "float_current_pct": 0.5 if flooded else 0.3,
            "rebulk_soc_pct": 93 if flooded else 94, "ocv_temp_coeff_V_per_C_per_12V": 0.0012,
            "temperature_lag_h": 4.0}


def system_text(spec: VehicleSpec, loads: dict[str, Any] | None = None) -> str:
    """The vehicle's ``system.toml``: what its owner would write (the truth stays out of it)."""
    s = spec.site
    lines = [
        f"# {spec.name}: an invented rental camper van of drawdown's simulated fleet (fleet seed {spec.fleet_seed}).",
        f"# {spec.description}",
        "[site]",
        f"latitude_deg = {s.latitude_deg}", f"longitude_deg = {s.longitude_deg}", f'timezone = "{s.timezone}"',
        f"altitude_m = {s.altitude_m:g}", "",
        "[battery]", f'chemistry = "{spec.chemistry}"', f"nominal_voltage_V = {spec.nominal_V:g}",
        f"rated_capacity_Ah = {spec.rated_Ah:g}", "rated_hours = 20", "",
        "[[solar]]", 'name = "roof"', f"peak_power_W = {spec.solar_W:g}", "tilt_deg = 0", "azimuth_deg = 180",
        f'controller = "{spec.controller}"',
    ]
    if spec.controller == "pwm":
        lines.append(f"module_vmp_V = {18.0 * spec.blocks_12V:g}")
    lines += ["", "[[charger]]", 'source = "alternator"', f"max_current_A = {spec.alternator_A:g}",
              f"alternator_rating_A = {120 if spec.blocks_12V == 1 else 80}"]
    if spec.shore_A:
        lines += ["", "[[charger]]", 'source = "shore"', f"max_current_A = {spec.shore_A:g}"]
    ld = loads or {}
    declared = [("compressor fridge", ld.get("fridge_W", 45), 8 if spec.use == "heavy" else 6, False),
                ("lights", ld.get("lights_W", 15), 5 if spec.use == "heavy" else 4, False),
                ("laptop", ld.get("laptop_W", 45), ld.get("laptop_hours", 1), True)]
    if spec.use == "heavy":
        declared.append(("television and router", 45, 3, False))
    for name, power, hours, ac in declared:
        lines += ["", "[[load]]", f'name = "{name}"', f"power_W = {float(power):g}", f"hours_per_day = {float(hours):g}"]
        if ac:
            lines.append("ac = true")
    return "\n".join(lines) + "\n"


def vehicle_scenario(spec: VehicleSpec, days: int) -> Any:
    """The vehicle as a :class:`collector.simulated.Scenario` of ``days`` local days."""
    from drawdown.analysis.system import parse_system
    from drawdown.collector.sim_scenario import ScenarioParams
    from drawdown.collector.simulated import Scenario

    rng = np.random.default_rng([spec.sim_seed, 0x5CE])
    loads = _loads(spec, rng)
    if spec.use_jump and days >= 2:
        hours = 5.0
        loads["extra"] = [*loads.get("extra", []),
                          {"name": "added cool box and inverter use", "power_W": round(spec.use_jump_Wh / hours, 1),
                           "start_h": 11.0, "hours": hours, "from_day": days // 2}]
    battery = _battery_truth(spec, rng)
    battery.update(state_of_health_pct=spec.state_of_health_pct, initial_soc_pct=spec.initial_soc_pct)
    drive, shore = _calendar(spec, days)
    s = spec.site
    params = ScenarioParams.model_validate({
        "scenario": {"description": spec.description, "start_date": FLEET_START, "default_days": days,
                     "seed": spec.sim_seed, "interval_s": DEFAULT_INTERVAL_S, "internal_step_s": 60.0},
        "battery": battery,
        "solar": {"derate": round(rng.uniform(0.75, 0.9), 3), "wind_speed_m_s": round(rng.uniform(1.5, 4.0), 1),
                  "array_vmp_V": [36.0 * spec.blocks_12V]},
        "weather": {"temp_mean_C": s.temp_mean_C, "temp_annual_amplitude_C": s.temp_annual_amplitude_C,
                    "warmest_day_of_year": s.warmest_day_of_year, "temp_amplitude_C": s.temp_amplitude_C,
                    "temp_day_noise_C": 1.5, "p_clear": s.p_clear, "p_partly": s.p_partly, "persistence": 0.5},
        "travel": {"drive_days": drive, "drive_start_h": round(rng.uniform(9.0, 11.0), 1),
                   "drive_hours": round(rng.uniform(1.5, 3.5), 1),
                   "p_drive": 0.0, "shore_nights": shore, "shore_from_h": 18.0, "shore_to_h": 9.0, "p_shore": 0.0},
        "loads": loads,
        "device": {"current_offset_A": round(rng.uniform(0.02, 0.08) * spec.blocks_12V, 3),
                   "gain_error": round(rng.uniform(-0.01, 0.01), 4)},
    })
    text = system_text(spec, loads)
    system = parse_system(text, source=f"{spec.name}/{SYSTEM}")
    return Scenario(name=spec.name, system_text=text, system=system, params=params)


# --------------------------------------------------------------------------------------------
# readings and truth
# --------------------------------------------------------------------------------------------

#: Output column of the simulator -> (channel, quantity); quantities in VALUE_COLUMNS order.
_CHANNEL_COLUMNS: dict[str, dict[str, str]] = {
    "alternator": {"current_A": "alternator_current_A"},
    "battery": {"voltage_V": "battery_voltage_V", "current_A": "battery_current_A",
                "temperature_C": "battery_temperature_C", "soc_pct": "battery_soc_pct"},
    "load": {"current_A": "load_current_A"},
    "shore": {"current_A": "shore_current_A"},
    "solar": {"voltage_V": "solar_voltage_V", "current_A": "solar_current_A"},
}


class _Readings:
    """A vehicle's readings as a store would hand them to the readings export (``iter_pieces``)."""

    def __init__(self, t_us: np.ndarray, channels: dict[str, list[np.ndarray | None]]):
        self.t_us = t_us
        self.channels = channels

    def iter_pieces(self, start: Any = None, end: Any = None
                    ) -> Iterator[tuple[str, np.ndarray, list[np.ndarray | None]]]:
        from drawdown.collector.store import MAX_CHUNK

        n = len(self.t_us)
        for name in sorted(self.channels):  # channel, then time: the store's order and chunk size
            vals = self.channels[name]
            for s0 in range(0, n, MAX_CHUNK):
                s1 = min(n, s0 + MAX_CHUNK)
                yield name, self.t_us[s0:s1], [None if v is None else v[s0:s1] for v in vals]


def render_readings(sim: Any, interval_s: float) -> _Readings:
    """The simulation's readings at ``interval_s`` (means over ``[t, t + interval)``), per channel.

    The same values as :func:`collector.simulated.write_log` writes (the same per-day random
    streams), rounded as it rounds them, as float32.
    """
    from drawdown.collector.canonical import VALUE_COLUMNS
    from drawdown.collector.simulated import _DECIMALS, _render_day

    bounds = [int(math.ceil(s / interval_s - 1e-9)) for s in sim.day_start_s]
    system = sim.scenario.system
    sources = {"solar"} if system.solar else set()
    sources |= {c.source for c in system.charger}
    names = ["battery", "load", *sorted(sources)]
    cols = sorted({c for ch in names for c in _CHANNEL_COLUMNS[ch].values()})
    total = bounds[-1] - bounds[0]
    out = {c: np.empty(total, dtype=np.float32) for c in cols}
    for d in range(sim.days):
        k0, k1 = bounds[d], bounds[d + 1]
        if k1 <= k0:
            continue
        t_s = np.arange(k0, k1) * interval_s
        meas = _render_day(sim, t_s, interval_s, np.random.default_rng([sim.seed, d, 99]))
        for c in cols:
            out[c][k0 - bounds[0]:k1 - bounds[0]] = np.round(meas[c], _DECIMALS[c]) + 0.0
    t0_us = int(sim.t0.value // 1000)
    t_us = t0_us + np.round(np.arange(bounds[0], bounds[-1]) * interval_s * 1e6).astype(np.int64)
    channels = {ch: [out[_CHANNEL_COLUMNS[ch][q]] if q in _CHANNEL_COLUMNS[ch] else None for q in VALUE_COLUMNS]
                for ch in names}
    return _Readings(t_us, channels)


def write_readings_parquet(path: Path, readings: _Readings, timezone: str) -> int:
    """Write ``readings`` with the readings export's own writer (docs/export.md); rows written."""
    from drawdown import __version__
    from drawdown.cli.commands.export import SCHEMA_VERSION, _stream_readings_parquet, _write_atomic
    from drawdown.collector.parquet_file import META_KIND, META_PRODUCER, META_SCHEMA_VERSION, META_TIMEZONE

    meta = {META_PRODUCER: f"drawdown {__version__}", META_SCHEMA_VERSION: str(SCHEMA_VERSION),
            META_KIND: "readings", META_TIMEZONE: timezone, "drawdown.from": "", "drawdown.to": ""}
    got: dict[str, Any] = {}
    _write_atomic(path, lambda tmp: got.update(_stream_readings_parquet(tmp, readings, None, None, meta)))
    return int(got["rows"])


def _months(by_day: list[dict[str, Any]]) -> list[dict[str, Any]]:
    months: dict[str, list[float]] = {}
    for row in by_day:
        months.setdefault(row["date"][:7], []).append(row["usable_Ah"])
    return [{"month": m, "days": len(v), "usable_Ah_start": v[0], "usable_Ah_end": v[-1],
             "usable_Ah_mean": float(np.mean(v))} for m, v in months.items()]


def vehicle_truth(spec: VehicleSpec, sim: Any, interval_s: float, readings: _Readings) -> dict[str, Any]:
    """The simulator's truth plus what the fleet knows of the vehicle (module docstring)."""
    truth = dict(sim.truth)
    tz = sim.scenario.system.site.timezone
    start = sim.scenario.params.scenario.start_date
    by_day = truth["battery"].get("usable_Ah_by_day") or [
        {"date": d["date"], "usable_Ah": truth["battery"]["usable_Ah"], "from": truth["start"]} for d in truth["days"]]
    travel = sim.scenario.params.travel
    consumed = [{"date": d["date"], "consumed_Ah": d["consumed_Ah"], "consumed_Wh": d["consumed_Wh"]}
                for d in truth["days"]]
    rows = {ch: len(readings.t_us) for ch in readings.channels}
    truth.update({
        "vehicle": spec.name, "description": spec.description, "fleet_seed": spec.fleet_seed,
        "fleet_index": spec.index, "interval_s": float(interval_s),
        "chemistry": spec.chemistry, "nominal_V": spec.nominal_V, "blocks_12V": spec.blocks_12V,
        "rated_Ah": spec.rated_Ah, "age_years": spec.age_years,
        "usable_Ah_start": by_day[0]["usable_Ah"], "usable_Ah_end": by_day[-1]["usable_Ah"],
        "state_of_health_pct_start": 100.0 * by_day[0]["usable_Ah"] / spec.rated_Ah,
        "state_of_health_pct_end": 100.0 * by_day[-1]["usable_Ah"] / spec.rated_Ah,
        "fade_pct_per_month": spec.fade_pct_per_month, "fade_Ah_per_day": spec.fade_Ah_per_day,
        "fade_class": spec.fade_class, "usable_Ah_by_day": by_day, "usable_Ah_by_month": _months(by_day),
        "use": spec.use, "pattern": spec.pattern,
        "use_jump": ({"from_date": (start + dt.timedelta(days=sim.days // 2)).isoformat(),
                      "added_Wh_per_day": spec.use_jump_Wh} if spec.use_jump and sim.days >= 2 else None),
        "site": {"name": spec.site.name, "latitude_deg": spec.site.latitude_deg,
                 "longitude_deg": spec.site.longitude_deg, "timezone": tz, "altitude_m": spec.site.altitude_m},
        "consumed_Ah_by_day": consumed,
        "mean_consumed_Ah_per_day": float(np.mean([c["consumed_Ah"] for c in consumed])),
        "drive_days": [(start + dt.timedelta(days=d)).isoformat() for d in travel.drive_days],
        "shore_nights": [(start + dt.timedelta(days=d)).isoformat() for d in travel.shore_nights],
        "soc_min_pct": float(sim.run.soc_end.min() * 100.0),
        "readings": {"file": READINGS, "rows": int(sum(rows.values())), "rows_by_channel": rows,
                     "channels": sorted(readings.channels), "row_meaning": "mean over [t, t + interval_s)"},
    })
    return truth


def simulate_vehicle(spec: VehicleSpec, days: int) -> Any:
    """Run the vehicle's scenario with its fade (a :class:`collector.simulated.Simulation`)."""
    from drawdown.collector.simulated import simulate

    return simulate(vehicle_scenario(spec, days), days=days, seed=spec.sim_seed,
                    capacity_fade_Ah_per_day=spec.fade_Ah_per_day)


def write_vehicle(spec: VehicleSpec, days: int, folder: str | Path, interval_s: float) -> dict[str, Any]:
    """Simulate one vehicle and write its ``system.toml``, ``readings.parquet`` and ``truth.json``."""
    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    sim = simulate_vehicle(spec, days)
    readings = render_readings(sim, interval_s)
    rows = write_readings_parquet(folder / READINGS, readings, sim.scenario.system.site.timezone)
    (folder / SYSTEM).write_text(sim.scenario.system_text, encoding="utf-8")
    truth = vehicle_truth(spec, sim, interval_s, readings)
    (folder / TRUTH).write_text(json.dumps(truth, indent=1, allow_nan=False) + "\n", encoding="utf-8")
    return {"name": spec.name, "rows": rows, "chemistry": spec.chemistry, "nominal_V": spec.nominal_V,
            "rated_Ah": spec.rated_Ah, "fade_pct_per_month": spec.fade_pct_per_month}


def _write_one(args: tuple[VehicleSpec, int, str, float]) -> dict[str, Any]:
    return write_vehicle(*args)


def default_workers(n: int) -> int:
    """Processes to simulate ``n`` vehicles with: one per core, at most 8 (1 for a single vehicle)."""
    return max(1, min(n, os.cpu_count() or 1, 8))


def write_fleet(out: str | Path, n: int, days: int, *, seed: int = DEFAULT_SEED,
                interval_s: float = DEFAULT_INTERVAL_S, workers: int | None = None,
                progress: Callable[[dict[str, Any]], None] | None = None) -> dict[str, Any]:
    """Write the fleet (module docstring); returns the manifest written to ``DIR/fleet.json``
    with ``rows`` (readings written, all vehicles) beside it.

    ``workers`` processes simulate vehicles side by side (default :func:`default_workers`); the
    files do not depend on it. ``progress`` is called with each vehicle's summary as it is done.
    """
    if n < 1:
        raise ValueError(f"a fleet needs at least 1 vehicle, got {n}")
    if days < 1:
        raise ValueError(f"days must be at least 1, got {days}")
    if not interval_s > 0:
        raise ValueError(f"the interval must be positive, got {interval_s} s")
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    specs = fleet_specs(n, seed)
    jobs = [(spec, days, str(out / spec.name), float(interval_s)) for spec in specs]
    workers = default_workers(n) if workers is None else max(1, int(workers))
    done: dict[str, dict[str, Any]] = {}
    if workers == 1:
        for job in jobs:
            r = _write_one(job)
            done[r["name"]] = r
            if progress is not None:
                progress(r)
    else:
        # spawn: a fresh interpreter per worker (never a fork of a process holding threads)
        with ProcessPoolExecutor(max_workers=workers, mp_context=get_context("spawn")) as pool:
            for fut in as_completed([pool.submit(_write_one, job) for job in jobs]):
                r = fut.result()
                done[r["name"]] = r
                if progress is not None:
                    progress(r)
    manifest: dict[str, Any] = {"vehicles": [{"name": s.name, "path": s.name} for s in specs], "days": int(days),
                                "seed": int(seed), "interval_s": float(interval_s),
                                "start_date": FLEET_START.isoformat()}
    tmp = out / f".{MANIFEST}.part"
    tmp.write_text(json.dumps(manifest, indent=1) + "\n", encoding="utf-8")
    os.replace(tmp, out / MANIFEST)
    return {**manifest, "rows": int(sum(r["rows"] for r in done.values()))}


def spec_summary(spec: VehicleSpec) -> dict[str, Any]:
    """A vehicle's drawn parameters as plain JSON values."""
    d = asdict(spec)
    d["site"] = spec.site.name
    d["nominal_V"] = spec.nominal_V
    return d
