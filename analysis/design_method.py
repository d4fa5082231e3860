"""The stand-alone PV sizing worksheet method, as a cross-check.

Sandia SAND87-7023, *Stand-Alone Photovoltaic Systems: Handbook of Recommended
Design Practices* (1988, updated 1995), with the IEEE 1013 (battery) and
IEEE 1562 (array and battery) approach: design month, days of autonomy,
maximum depth of discharge and derates. Formulas as summarised in
docs/solar.md#stand-alone-sizing (worksheet steps (1)-(2) verified there; battery and
module steps from memory).

* Corrected load = load / (wire efficiency 0.98 * battery efficiency 0.90) [Ah/day].
* Design current = corrected load / peak sun hours [A]; module count =
  design current / (module derate 0.9 * Imp).
* Battery C = L * D / (DoD_max * K_T) [Ah].
* Array, energy form: P = E * F_o / (PSH * eta_wire * eta_batt * eta_ctrl * K_derate) [Wp].
* Temperature correction (IEEE 485 factors, from memory): 1.00 at 25 degC,
  1.11 at 15.6, 1.19 at 10, 1.30 at 4.4 degC; K_T is its reciprocal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

#: IEEE 485 temperature correction factors (from memory): electrolyte temperature [degC] -> factor.
IEEE485_TEMPERATURE_FACTOR: tuple[tuple[float, float], ...] = ((4.4, 1.30), (10.0, 1.19), (15.6, 1.11),
                                                              (25.0, 1.00))


def ieee485_capacity_factor(temperature_C: float) -> float:
    """K_T = 1 / IEEE 485 correction factor, interpolated; 1 at or above 25 degC [-].

    Below 4.4 degC the last slope is extended (an extrapolation; say so in reports).
    """
    t = np.array([p[0] for p in IEEE485_TEMPERATURE_FACTOR])
    f = np.array([p[1] for p in IEEE485_TEMPERATURE_FACTOR])
    if temperature_C >= 25.0:
        return 1.0
    if temperature_C < t[0]:
        slope = (f[1] - f[0]) / (t[1] - t[0])
        return 1.0 / (f[0] + slope * (temperature_C - t[0]))
    return 1.0 / float(np.interp(temperature_C, t, f))


def corrected_load_Ah(load_Ah_per_day: float, *, wire_efficiency: float = 0.98,
                      battery_efficiency: float = 0.90) -> float:
    """Sandia worksheet 1: load / (eta_wire * eta_batt) [Ah/day]."""
    return load_Ah_per_day / (wire_efficiency * battery_efficiency)


def design_current_A(corrected_load_Ah_per_day: float, peak_sun_hours: float) -> float:
    """Sandia worksheet 2: corrected load / PSH [A]."""
    return corrected_load_Ah_per_day / peak_sun_hours


def modules_in_parallel(design_current: float, module_imp_A: float, *, module_derate: float = 0.9) -> int:
    """Parallel module strings: ceil(design current / (derate * Imp)) [-]."""
    return math.ceil(design_current / module_derate / module_imp_A - 1e-9)


def battery_capacity_Ah(load_Ah_per_day: float, autonomy_days: float, max_dod: float,
                        temperature_factor: float = 1.0) -> float:
    """C = L * D / (DoD_max * K_T) [Ah]."""
    return load_Ah_per_day * autonomy_days / (max_dod * temperature_factor)


def array_energy_W(load_Wh_per_day: float, peak_sun_hours: float, *, oversize: float = 1.2,
                   wire_efficiency: float = 0.98, battery_efficiency: float = 0.90,
                   controller_efficiency: float = 0.96, module_derate: float = 0.85) -> float:
    """P = E * F_o / (PSH * eta_wire * eta_batt * eta_ctrl * K_derate) [Wp]."""
    return load_Wh_per_day * oversize / (peak_sun_hours * wire_efficiency * battery_efficiency
                                         * controller_efficiency * module_derate)


#: Round-trip (Ah) battery efficiency used by the worksheet by chemistry (docs/solar.md#worked-example).
WORKSHEET_BATTERY_EFFICIENCY: dict[str, float] = {"lifepo4": 0.99, "agm": 0.90, "gel": 0.90, "flooded": 0.90}


@dataclass(frozen=True)
class WorksheetResult:
    method: str
    load_Ah_per_day: float
    load_Wh_per_day: float
    peak_sun_hours: float
    design_month: int | None
    autonomy_days: float
    max_dod: float
    temperature_factor: float
    corrected_load_Ah_per_day: float
    design_current_A: float
    battery_capacity_Ah: float
    array_W: float


def worksheet(load_Wh_per_day: float, system_voltage_V: float, peak_sun_hours: float, *,
              chemistry: str, autonomy_days: float, max_dod: float, temperature_factor: float = 1.0,
              design_month: int | None = None) -> WorksheetResult:
    """The whole worksheet for one design month.

    Parameters
    ----------
    load_Wh_per_day : float
        Design daily load [Wh/day].
    system_voltage_V : float
        Nominal system voltage [V] (the worksheet divides Wh by it).
    peak_sun_hours : float
        Design-month insolation on the array plane [h = kWh/m2/day].
    chemistry, autonomy_days, max_dod, temperature_factor
        As in :func:`battery_capacity_Ah`; the battery efficiency follows the chemistry.
    """
    if peak_sun_hours <= 0:
        raise ValueError(f"peak_sun_hours = {peak_sun_hours}: expected > 0 (the design month has no sun)")
    load_Ah = load_Wh_per_day / system_voltage_V
    eta_b = WORKSHEET_BATTERY_EFFICIENCY.get(chemistry, 0.90)
    corr = corrected_load_Ah(load_Ah)
    return WorksheetResult(
        method="Sandia SAND87-7023 worksheet / IEEE 1013, IEEE 1562 sun-hour method",
        load_Ah_per_day=load_Ah, load_Wh_per_day=load_Wh_per_day, peak_sun_hours=peak_sun_hours,
        design_month=design_month, autonomy_days=autonomy_days, max_dod=max_dod,
        temperature_factor=temperature_factor, corrected_load_Ah_per_day=corr,
        design_current_A=design_current_A(corr, peak_sun_hours),
        battery_capacity_Ah=battery_capacity_Ah(load_Ah, autonomy_days, max_dod, temperature_factor),
        array_W=array_energy_W(load_Wh_per_day, peak_sun_hours, battery_efficiency=eta_b),
    )
