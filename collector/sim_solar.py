"""Solar input of the simulator: pvlib clear-sky chain, cloudiness, MPPT/PWM at the bank.

The clear-sky DC power of one array is the pvlib chain (pvlib 0.16):

``Location.get_clearsky`` (Ineichen, Linke turbidity from pvlib's own table)
-> ``irradiance.get_total_irradiance`` (isotropic sky, array tilt/azimuth)
-> ``temperature.sapm_cell`` (``insulated_back_glass_polymer``: a module flush on
a vehicle roof, docs/solar.md#solar-yield-with-pvlib) -> ``pvsystem.pvwatts_dc`` (Dobos 2014).

The simulator multiplies it by a cloud factor (0-1, per step) and by the system
derate (the truth the solar analysis must recover on clear days). An MPPT
controller delivers that power at the battery voltage; a PWM controller
connects the module to the battery, so it delivers about the module's
maximum-power current at the battery voltage (the sketch in docs/solar.md#mppt-and-pwm).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pvlib

#: Module voltage temperature coefficient used by the PWM model [1/degC]
#: (crystalline silicon, about -0.45 %/degC of Vmp; docs/solar.md#mppt-and-pwm).
VMP_TEMP_COEFF_PER_C: float = -0.0045


def clear_sky_poa_W_m2(times: pd.DatetimeIndex, *, latitude_deg: float, longitude_deg: float,
                       altitude_m: float, timezone: str, tilt_deg: float,
                       azimuth_deg: float) -> pd.Series:
    """Clear-sky plane-of-array global irradiance [W m-2] (Ineichen, isotropic sky)."""
    loc = pvlib.location.Location(latitude_deg, longitude_deg, tz=timezone, altitude=altitude_m)
    cs = loc.get_clearsky(times, model="ineichen")
    sp = loc.get_solarposition(times)
    poa = pvlib.irradiance.get_total_irradiance(
        surface_tilt=tilt_deg, surface_azimuth=azimuth_deg,
        solar_zenith=sp["apparent_zenith"], solar_azimuth=sp["azimuth"],
        dni=cs["dni"], ghi=cs["ghi"], dhi=cs["dhi"])
    return poa["poa_global"].fillna(0.0).clip(lower=0.0)


def array_dc_power_W(poa_W_m2: np.ndarray, *, temp_air_C: np.ndarray, wind_speed_m_s: float,
                     peak_power_W: float, gamma_pdc_per_C: float) -> tuple[np.ndarray, np.ndarray]:
    """DC power of an array for a given plane-of-array irradiance.

    Parameters
    ----------
    poa_W_m2 : array_like
        Plane-of-array irradiance [W m-2].
    temp_air_C : array_like
        Ambient air temperature [degC].
    wind_speed_m_s : float
        Wind speed [m s-1].
    peak_power_W : float
        Nameplate power at STC [W].
    gamma_pdc_per_C : float
        Power temperature coefficient [1/degC].

    Returns
    -------
    power_W, cell_temperature_C : numpy.ndarray
    """
    params = pvlib.temperature.TEMPERATURE_MODEL_PARAMETERS["sapm"]["insulated_back_glass_polymer"]
    poa = np.asarray(poa_W_m2, dtype=float)
    t_cell = np.asarray(pvlib.temperature.sapm_cell(poa, np.asarray(temp_air_C, dtype=float),
                                                    wind_speed_m_s, **params), dtype=float)
    p = np.asarray(pvlib.pvsystem.pvwatts_dc(poa, t_cell, peak_power_W, gamma_pdc_per_C), dtype=float)
    return np.clip(p, 0.0, None), t_cell


def pwm_current_A(power_W: np.ndarray, *, cell_temperature_C: np.ndarray, module_vmp_V: float) -> np.ndarray:
    """Current a PWM controller passes from the array to the bank [A].

    The module is pulled down to the battery voltage, on the flat part of its
    I-V curve, so it delivers about its maximum-power current
    ``I_mp = P_mp / V_mp(T_cell)`` whatever the battery voltage.
    """
    vmp = module_vmp_V * (1.0 + VMP_TEMP_COEFF_PER_C * (np.asarray(cell_temperature_C) - 25.0))
    return np.asarray(power_W) / np.maximum(vmp, 1.0)


def cloud_factor_series(rng: np.random.Generator, sky: str, n: int, dt_s: float) -> np.ndarray:
    """Multiplicative cloud factor for one day's steps (0-1].

    ``clear``: exactly 1. ``overcast``: a slowly varying 0.10-0.35.
    ``partly cloudy``: a random telegraph between sun (0.85-1.0) and cloud
    shadows (0.2-0.45) with minute-scale dwell times: the fast fluctuation.
    """
    if sky == "clear":
        return np.ones(n)
    if sky == "overcast":
        level = rng.uniform(0.14, 0.26)
        knots = rng.normal(0.0, 0.25, size=max(3, int(n * dt_s / 3600) + 2))
        wave = np.interp(np.linspace(0, len(knots) - 1, n), np.arange(len(knots)), knots)
        return np.clip(level * (1.0 + wave), 0.08, 0.4)
    if sky == "partly cloudy":
        out = np.empty(n)
        t = 0
        sunny = bool(rng.random() < 0.5)
        sun_share = rng.uniform(0.45, 0.75)
        while t < n:
            mean_min = 12.0 * sun_share if sunny else 12.0 * (1.0 - sun_share)
            k = max(1, int(rng.exponential(mean_min * 60.0) / dt_s))
            out[t:t + k] = rng.uniform(0.85, 1.0) if sunny else rng.uniform(0.2, 0.45)
            t += k
            sunny = not sunny
        return out
    raise ValueError(f"unknown sky {sky!r}: expected 'clear', 'partly cloudy' or 'overcast'")
