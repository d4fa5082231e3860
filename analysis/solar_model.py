"""Expected clear-sky solar output for the arrays in ``system.toml``.

Every piece of solar geometry and irradiance comes from pvlib; this module only
chains pvlib's functions and adds the charge-controller model (MPPT vs PWM).

The chain, per array (pvlib function in brackets):

1. solar position (``Location.get_solarposition``, NREL SPA in numpy);
2. clear-sky GHI/DNI/DHI (``Location.get_clearsky``, Ineichen-Perez with
   pvlib's monthly Linke turbidity climatology, ``LinkeTurbidities.h5``, which
   ships inside pvlib's wheel);
3. plane-of-array irradiance (``irradiance.get_total_irradiance``, isotropic
   sky, ground albedo 0.25);
4. cell temperature (``temperature.sapm_cell`` with the
   ``insulated_back_glass_polymer`` parameters -- the closest of pvlib's
   mounting classes to a panel flush on a van roof, docs/solar.md -- air
   temperature from the log where present, else :data:`DEFAULT_TEMP_AIR_C`,
   wind :data:`DEFAULT_WIND_SPEED_MS`);
5. DC power (``pvsystem.pvwatts_dc``, PVWatts, Dobos 2014) with the array's
   ``gamma_pdc_per_C``;
6. the controller: MPPT delivers ``MPPT_EFFICIENCY`` x DC power; PWM holds the
   module at battery voltage (see :func:`pwm_fraction`).

No incidence-angle, soiling, wiring or mismatch losses are modelled: those are
what the measured performance ratio (measured / expected) estimates.
"""

from __future__ import annotations

from typing import Literal

import numpy as np
import pandas as pd
from pvlib import irradiance, pvsystem, temperature
from pvlib.location import Location

from drawdown.analysis.system import SolarArray, System

#: Air temperature used when the log has none [degC] (the docs/solar.md daily-energy
#: check also uses 20 degC).
DEFAULT_TEMP_AIR_C: float = 20.0
#: Wind speed for the cell-temperature model [m/s]; a parked vehicle sees
#: little, and pvlib's own temperature-model examples use 1 m/s.
DEFAULT_WIND_SPEED_MS: float = 1.0
#: Conversion efficiency of an MPPT controller (docs/solar.md#mppt-and-pwm sketch: eta 0.96).
MPPT_EFFICIENCY: float = 0.96
#: Module voltage at maximum power per 12 V block for a 36-cell module [V]
#: (docs/solar.md#mppt-and-pwm sketch: Vmp 18.0 V).
VMP_PER_12V_BLOCK_V: float = 18.0
#: Temperature coefficient of Vmp [1/degC] (docs/solar.md#mppt-and-pwm sketch: -0.45 %/degC).
VMP_TEMP_COEFF_PER_C: float = -0.0045
#: Module current at battery voltage (on the flat part of the I-V curve) over
#: Imp. docs/solar.md#mppt-and-pwm sketch: 73.7 W at 13.0 V from a 5.56 A-Imp module, i.e.
#: 5.67 A = 1.02 x Imp.
PWM_CURRENT_OVER_IMP: float = 1.02
#: Open-circuit over maximum-power voltage of a c-Si module (36-cell: 22 V / 18 V).
VOC_OVER_VMP: float = 1.22
#: Battery voltage assumed for a PWM controller when none is logged, per
#: 12 V block [V] (docs/solar.md#mppt-and-pwm sketch uses 13.0 V).
DEFAULT_PWM_BATTERY_V_PER_12V: float = 13.0
#: sapm_cell parameters used (docs/solar.md#solar-yield-with-pvlib).
TEMPERATURE_MOUNT: str = "insulated_back_glass_polymer"


def location_for(system: System) -> Location:
    """A pvlib :class:`~pvlib.location.Location` for the system's site (UTC inside)."""
    site = system.site
    return Location(site.latitude_deg, site.longitude_deg, tz="UTC", altitude=site.altitude_m)


def module_vmp_V(array: SolarArray, system: System) -> float:
    """Module (string) voltage at maximum power at 25 degC [V].

    The array's ``module_vmp_V`` when given, else a 36-cell module per 12 V
    block of the bank (18 V on 12 V, 36 V on 24 V), which is what a PWM
    controller needs to work at all (docs/solar.md#mppt-and-pwm).
    """
    if array.module_vmp_V is not None:
        return float(array.module_vmp_V)
    return VMP_PER_12V_BLOCK_V * max(1, round(system.battery.series_12V_blocks))


def pwm_fraction(battery_voltage_V: np.ndarray | float, cell_temperature_C: np.ndarray | float,
                 vmp_ref_V: float, *,
                 vmp_temp_coeff_per_C: float = VMP_TEMP_COEFF_PER_C) -> np.ndarray:
    """Power a PWM controller delivers, as a fraction of the module's DC maximum power.

    Parameters
    ----------
    battery_voltage_V : array_like
        Bank voltage the PWM switch pins the module to [V].
    cell_temperature_C : array_like
        Cell temperature [degC].
    vmp_ref_V : float
        Module voltage at maximum power at 25 degC [V].
    vmp_temp_coeff_per_C : float
        Temperature coefficient of Vmp [1/degC].

    Returns
    -------
    numpy.ndarray
        P_pwm / P_mp [-], between 0 and about 1.

    Notes
    -----
    docs/solar.md#mppt-and-pwm physics sketch: a PWM controller connects the module straight
    to the battery, so P = I(V_b)·V_b. Below Vmp the module is a near-constant
    current source, I(V_b) ≈ 1.02·Imp(T), so P_pwm/P_mp = 1.02·V_b/Vmp(T),
    with Vmp(T) = Vmp_ref·(1 + β(T − 25)). Above Vmp (a hot module on a bank
    in absorption) the current falls linearly to zero at Voc = 1.22·Vmp.
    The fraction multiplies the PVWatts DC power, which carries the
    irradiance and the power temperature coefficient γ.
    """
    vb = np.asarray(battery_voltage_V, dtype=float)
    tc = np.asarray(cell_temperature_C, dtype=float)
    vmp = vmp_ref_V * (1.0 + vmp_temp_coeff_per_C * (tc - 25.0))
    # The fraction is I·V_b / (Imp·Vmp) with I = 1.02·Imp on the flat part.
    voc = VOC_OVER_VMP * vmp
    knee = np.clip((voc - vb) / (voc - vmp), 0.0, 1.0)  # 1 below Vmp, falls to 0 at Voc
    current_over_imp = np.where(vb <= vmp, PWM_CURRENT_OVER_IMP, PWM_CURRENT_OVER_IMP * knee)
    return np.clip(current_over_imp * vb / vmp, 0.0, None)


def _aligned(series: pd.Series | None, times: pd.DatetimeIndex, default: float) -> np.ndarray:
    """A Series reindexed onto ``times`` (nearest within 1 h), gaps filled with ``default``."""
    if series is None or len(series) == 0:
        return np.full(len(times), default, dtype=float)
    s = series.astype(float)
    if s.index.tz is None:
        raise ValueError("temp_air_C/battery_voltage_V need a timezone-aware (UTC) index")
    s = s[~s.index.duplicated()].sort_index().dropna()
    if s.empty:
        return np.full(len(times), default, dtype=float)
    s.index = s.index.tz_convert("UTC").as_unit("us")
    out = s.reindex(times.tz_convert("UTC").as_unit("us"), method="nearest",
                    tolerance=pd.Timedelta("1h"))
    return out.fillna(default).to_numpy(dtype=float)


def expected_clear_sky(times: pd.DatetimeIndex, system: System, *,
                       temp_air_C: pd.Series | None = None,
                       battery_voltage_V: pd.Series | None = None,
                       linke_turbidity: float | None = None,
                       temperature_model: Literal["sapm", "faiman"] = "sapm",
                       wind_speed_ms: float = DEFAULT_WIND_SPEED_MS) -> pd.DataFrame:
    """Clear-sky plane-of-array irradiance, cell temperature and power of the arrays.

    Parameters
    ----------
    times : pandas.DatetimeIndex
        Timezone-aware instants (for interval means, pass interval centres).
    system : System
        Site (latitude, longitude, altitude) and ``[[solar]]`` arrays.
    temp_air_C : pandas.Series, optional
        Air temperature [degC] on a tz-aware index; matched to ``times`` by
        nearest value within 1 h. Missing: :data:`DEFAULT_TEMP_AIR_C`.
    battery_voltage_V : pandas.Series, optional
        Bank voltage [V] for the PWM model; missing: 13.0 V per 12 V block.
    linke_turbidity : float, optional
        A fixed Linke turbidity instead of pvlib's monthly climatology (for
        reproducing published check values).
    temperature_model : {"sapm", "faiman"}
        ``sapm``: ``sapm_cell`` with the insulated-back parameters (default,
        the van-roof proxy); ``faiman``: pvlib's Faiman model with its default
        u0 = 25, u1 = 6.84 (for the daily-energy check of docs/solar.md#check-values).
    wind_speed_ms : float
        Wind speed for the temperature model [m/s].

    Returns
    -------
    pandas.DataFrame
        Indexed by ``times``, columns ``ghi_Wm2``, ``dni_Wm2``, ``dhi_Wm2``,
        ``apparent_zenith_deg``, ``solar_azimuth_deg``, ``poa_Wm2`` (peak-power-weighted mean over
        arrays) [W m-2], ``cell_temperature_C`` (weighted mean) [degC],
        ``dc_W`` (sum over arrays) [W], ``delivered_W`` (after each array's
        controller) [W], ``mppt_W`` and ``pwm_W`` (what the arrays would
        deliver if every controller were MPPT / PWM) [W]. With no arrays the
        power columns are zero.

    Notes
    -----
    See the module docstring for the chain. PVWatts DC (Dobos 2014):
    P_dc = P_dc0·G_poa/1000·(1 + γ(T_cell − 25)).

    References
    ----------
    Ineichen & Perez (2002), Solar Energy 73(3) 151-157; Dobos (2014) PVWatts
    Version 5 Manual, NREL/TP-6A20-62641; King et al. (2004) SAPM, SAND2004-3535.
    """
    if not isinstance(times, pd.DatetimeIndex) or times.tz is None:
        raise ValueError("expected_clear_sky: times must be a timezone-aware pandas.DatetimeIndex "
                         "(UTC inside; localise local clock times first)")
    loc = location_for(system)
    solpos = loc.get_solarposition(times)
    if linke_turbidity is None:
        cs = loc.get_clearsky(times, model="ineichen", solar_position=solpos)
    else:
        cs = loc.get_clearsky(times, model="ineichen", solar_position=solpos,
                              linke_turbidity=float(linke_turbidity))
    if temperature_model not in ("sapm", "faiman"):
        raise ValueError(f"temperature_model must be 'sapm' or 'faiman', got {temperature_model!r}")
    tair = _aligned(temp_air_C, times, DEFAULT_TEMP_AIR_C)
    blocks = max(1, round(system.battery.series_12V_blocks))
    vbat = _aligned(battery_voltage_V, times, DEFAULT_PWM_BATTERY_V_PER_12V * blocks)
    params = temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"][TEMPERATURE_MOUNT]

    n = len(times)
    poa_w = np.zeros(n)
    tc_w = np.zeros(n)
    dc = np.zeros(n)
    delivered = np.zeros(n)
    mppt = np.zeros(n)
    pwm = np.zeros(n)
    total_peak = 0.0
    for array in system.solar:
        poa = irradiance.get_total_irradiance(
            array.tilt_deg, array.azimuth_deg, solpos["apparent_zenith"], solpos["azimuth"],
            cs["dni"], cs["ghi"], cs["dhi"])["poa_global"].fillna(0.0).clip(lower=0.0).to_numpy()
        if temperature_model == "sapm":
            tcell = np.asarray(temperature.sapm_cell(poa, tair, wind_speed_ms, **params), dtype=float)
        else:
            tcell = np.asarray(temperature.faiman(poa, tair, wind_speed_ms), dtype=float)
        p_dc = np.asarray(pvsystem.pvwatts_dc(poa, tcell, array.peak_power_W, array.gamma_pdc_per_C),
                          dtype=float).clip(min=0.0)
        frac = pwm_fraction(vbat, tcell, module_vmp_V(array, system))
        p_mppt = MPPT_EFFICIENCY * p_dc
        p_pwm = np.minimum(frac, 1.0) * p_dc
        dc += p_dc
        mppt += p_mppt
        pwm += p_pwm
        delivered += p_mppt if array.controller == "mppt" else p_pwm
        poa_w += array.peak_power_W * poa
        tc_w += array.peak_power_W * tcell
        total_peak += array.peak_power_W
    if total_peak > 0:
        poa_w /= total_peak
        tc_w /= total_peak
    else:
        tc_w = tair.copy()
    return pd.DataFrame({
        "ghi_Wm2": cs["ghi"].to_numpy(dtype=float),
        "dni_Wm2": cs["dni"].to_numpy(dtype=float),
        "dhi_Wm2": cs["dhi"].to_numpy(dtype=float),
        "apparent_zenith_deg": solpos["apparent_zenith"].to_numpy(dtype=float),
        "solar_azimuth_deg": solpos["azimuth"].to_numpy(dtype=float),
        "poa_Wm2": poa_w,
        "cell_temperature_C": tc_w,
        "dc_W": dc,
        "delivered_W": delivered,
        "mppt_W": mppt,
        "pwm_W": pwm,
    }, index=times)
