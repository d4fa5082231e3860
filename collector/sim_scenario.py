"""The simulation parameters of a bundled scenario (``<name>.scenario.toml``).

A scenario is two files in ``collector/scenarios/``:

* ``<name>.toml`` -- a valid ``system.toml`` (what the owner would write; it is
  copied next to a simulated log and validated with
  :func:`analysis.system.parse_system`);
* ``<name>.scenario.toml`` -- what the simulator needs beyond it: the TRUE
  battery health and resistances, the solar derate, the weather, the travel
  plan and the loads. Unknown keys are errors, as in ``system.toml``.

Day indexes in lists (``sky``, ``drive_days``, ``shore_nights``) count from 0 =
the first simulated local day. Beyond the listed days, weather and travel are
drawn at random (seeded) with the stated probabilities.
"""

from __future__ import annotations

import datetime as dt
import tomllib
from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, ValidationError

from drawdown.analysis.system import _explain

Sky = Literal["clear", "partly cloudy", "overcast"]


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class ScenarioInfo(_Strict):
    description: str
    start_date: dt.date
    default_days: int = Field(ge=1, le=3660)
    seed: int = 1
    interval_s: float = Field(default=10.0, gt=0, le=3600)
    internal_step_s: float = Field(default=60.0, ge=1, le=600)


class TruthBattery(_Strict):
    state_of_health_pct: float = Field(gt=10, le=110)
    peukert_k: float = Field(ge=1.0, le=1.8)
    charge_efficiency: float = Field(gt=0.5, le=1.0)
    internal_resistance_ohm: float = Field(gt=0, le=1.0)
    polarisation_ohm: float = Field(ge=0, le=1.0)
    relaxation_s: float = Field(gt=0, le=86400)
    absorption_V: float = Field(gt=0, le=80)
    float_V: float = Field(gt=0, le=80)
    soc_cv_pct: float = Field(ge=50, lt=100)
    # The current the full bank still takes at absorption voltage, where the charger
    # goes to float [% of the rated capacity per hour].
    absorption_end_current_pct: float = Field(gt=0, le=20)
    max_charge_C: float = Field(gt=0, le=5)
    float_current_pct: float = Field(default=0.0, ge=0, le=5)
    rebulk_soc_pct: float = Field(default=95.0, ge=50, lt=100)
    initial_soc_pct: float = Field(default=90.0, ge=5, le=100)
    ocv_temp_coeff_V_per_C_per_12V: float = 0.0
    temperature_lag_h: float = Field(default=3.0, gt=0, le=48)


class TruthSolar(_Strict):
    derate: float = Field(gt=0.2, le=1.0)
    wind_speed_m_s: float = Field(default=2.0, ge=0, le=30)
    array_vmp_V: list[float] = []    # MPPT array voltage at max power, per [[solar]] entry


class Weather(_Strict):
    temp_mean_C: float
    temp_trend_C_per_day: float = 0.0        # applies over the scenario's default_days, then holds
    temp_annual_amplitude_C: float = Field(default=0.0, ge=0, le=30)   # seasonal swing of the daily mean
    warmest_day_of_year: int = Field(default=200, ge=1, le=366)         # ~20 in the southern hemisphere
    temp_amplitude_C: float = Field(default=5.0, ge=0, le=25)
    temp_day_noise_C: float = Field(default=2.0, ge=0, le=10)
    sky: list[Sky] = []
    p_clear: float = Field(default=0.3, ge=0, le=1)
    p_partly: float = Field(default=0.4, ge=0, le=1)
    persistence: float = Field(default=0.5, ge=0, lt=1)


class Travel(_Strict):
    drive_days: list[int] = []
    drive_start_h: float = Field(default=10.0, ge=0, lt=24)
    drive_hours: float = Field(default=3.0, gt=0, le=14)
    p_drive: float = Field(default=0.3, ge=0, le=1)
    shore_nights: list[int] = []
    shore_from_h: float = Field(default=18.0, ge=0, lt=24)
    shore_to_h: float = Field(default=9.0, ge=0, lt=24)
    p_shore: float = Field(default=0.05, ge=0, le=1)


class ExtraLoad(_Strict):
    name: str
    power_W: float = Field(ge=0, le=5000)
    start_h: float = Field(ge=0, lt=24)
    hours: float = Field(gt=0, le=24)
    from_day: int = Field(default=0, ge=0)   # first day (index) it runs: a load fitted mid-trip


class Loads(_Strict):
    baseline_W: float = Field(default=3.0, ge=0)
    fridge_W: float = Field(default=45.0, ge=0)
    fridge_period_min: float = Field(default=30.0, gt=2)
    fridge_duty_at_20C: float = Field(default=0.35, gt=0, le=1)
    fridge_duty_per_C: float = Field(default=0.02, ge=0, le=0.2)
    cabin_gain_C: float = Field(default=3.0, ge=-10, le=20)
    lights_W: float = Field(default=18.0, ge=0)
    lights_on_h: float = Field(default=18.5, ge=0, lt=24)
    lights_off_h: float = Field(default=23.0, ge=0, lt=24)
    pump_W: float = Field(default=65.0, ge=0)
    pump_bursts_per_day: float = Field(default=16.0, ge=0)
    heater_fan_W: float = Field(default=18.0, ge=0)
    heater_glow_W: float = Field(default=110.0, ge=0)
    heater_below_C: float = Field(default=7.0)
    heater_on_h: float = Field(default=19.5, ge=0, lt=24)
    heater_off_h: float = Field(default=8.0, ge=0, lt=24)
    heater_setpoint_C: float = 19.0
    wake_h: float = Field(default=7.5, ge=0, lt=24)
    inverter_idle_W: float = Field(default=8.0, ge=0)
    inverter_efficiency: float = Field(default=0.88, gt=0.5, le=1)
    kettle_W: float = Field(default=900.0, ge=0)
    kettle_min: float = Field(default=4.0, ge=0, le=60)
    laptop_W: float = Field(default=55.0, ge=0)
    laptop_hours: float = Field(default=3.0, ge=0, le=24)
    extra: list[ExtraLoad] = []


class Device(_Strict):
    current_offset_A: float = 0.05
    gain_error: float = 0.01


class ScenarioParams(_Strict):
    scenario: ScenarioInfo
    battery: TruthBattery
    solar: TruthSolar
    weather: Weather
    travel: Travel = Travel()
    loads: Loads = Loads()
    device: Device = Device()


#: Keys renamed in scenario files: an old key is an error naming the new one.
_RENAMED: dict[tuple[str, str], str] = {("battery", "tail_current_pct"): "absorption_end_current_pct"}


class ScenarioError(ValueError):
    """A scenario file that cannot be used; the message names the file and key."""


def parse_scenario(text: str, *, source: str) -> ScenarioParams:
    """Parse and validate ``<name>.scenario.toml`` text."""
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise ScenarioError(f"{source}: not valid TOML: {exc}") from None
    try:
        return ScenarioParams.model_validate(data)
    except ValidationError as exc:
        raise ScenarioError(_explain(exc, source, renamed=_RENAMED).replace("system description", "scenario")) from None
