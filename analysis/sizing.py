"""Right-sizing: battery, array, DC-DC charger and inverter from measured use.

Entry point: :func:`recommend` takes the :class:`~analysis.system.System` and
the daily ledger frame (one row per local day, as made by
``analysis.ledger.daily_ledger``: ``date, complete, consumed_Ah, consumed_Wh,
charged_Wh_solar, ..., mean_temperature_C, driving_h``) and returns a
:class:`SizingResult`. With no logged days it sizes from the ``[[load]]``
inventory; with neither it raises :class:`SizingInputError`.

How each size is chosen
-----------------------
* **Energy basis** - the bank is balanced in charge: daily consumption and
  solar charge are taken in Ah from the ledger and expressed as Wh at the
  nominal voltage (Ah x V_nom), the basis the bank's capacity is rated on.
* **Design day** - the ``percentile`` (default 90th) of daily consumption on
  parked days, from a quantile regression (statsmodels ``QuantReg``) on the
  day's mean temperature and day type, evaluated at the coldest (5th
  percentile) and hottest (95th percentile) logged temperatures; the larger is
  used. With few days, the empirical percentile.
* **Battery** - the smallest catalogue bank that (a) holds one design day
  between full and its reserve, 1 - max DoD (solar only arrives in daylight, common
  practice), and (b) in the block-bootstrap simulation of parked days with the
  array you have now, lasts ``autonomy_days`` in ``percentile`` % of the
  sequences. Usable energy = Ah x V x max DoD x temperature factor (lead-acid:
  IEC 60896-11 ``1 + lambda (T - 25)``, lambda 0.006 /degC for discharges
  > 3 h, from memory) x rate factor (lead-acid: Peukert ``(I_H / I)^(k-1)`` at
  the mean autonomy discharge current, never above 1). Sizing against the
  present array keeps the answer monotone (more use never gives a smaller
  bank); the step-up table shows what the recommended array adds.
* **Array** - watts to refill the design day in the design month: design Wh /
  (clear-sky peak sun hours on the roof's tilt, from pvlib, x performance
  ratio). The design month is the month of use (months in the log; all months
  without logs) with the fewest clear-sky sun hours.
* **DC-DC charger** - the current that replaces a design day in the typical
  driving hours, capped by the bank's charge acceptance (C-rate) and checked
  against the alternator (input ``I_out V_out / (V_in eta)``).
* **Inverter** - continuous and surge from the AC loads of the inventory; its
  DC input ``P / (V eta)`` at nominal voltage and at the low-voltage cut-off,
  and its idle draw.
* **Cross-check** - the Sandia SAND87-7023 / IEEE 1013 / IEEE 1562 worksheet
  (see :mod:`analysis.design_method`) beside the data-driven answer.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import asdict, dataclass, field
from functools import lru_cache
from typing import Any

import numpy as np
import pandas as pd

from drawdown.analysis import autonomy as _auto
from drawdown.analysis import catalogue as _cat
from drawdown.analysis import design_method as _dm
from drawdown.analysis.cautions import build_cautions
from drawdown.analysis.charging import dc_dc_input_current_A
from drawdown.analysis.json_values import json_ready
from drawdown.analysis.system import System
from drawdown.analysis.wiring import RunSizing, size_run


class SizingInputError(ValueError):
    """Not enough input to size anything; the message says what is missing."""


# --- constants (each with its source) -----------------------------------------

#: Default performance ratio of measured to clear-sky array output when none was
#: measured (a stated default; mobile arrays lose to heat, shading, soiling, weather).
DEFAULT_PERFORMANCE_RATIO: float = 0.75
#: IEC 60896-11 capacity temperature coefficient for discharges > 3 h [1/degC] (from memory).
IEC60896_LAMBDA_SLOW: float = 0.006
#: Design temperature for lead-acid without logged temperatures [degC] (stated assumption).
DEFAULT_DESIGN_TEMPERATURE_C: float = 10.0
#: Recommended maximum charge current as a C-rate (common practice, from memory).
CHARGE_ACCEPTANCE_C: dict[str, float] = {"lifepo4": 0.5, "agm": 0.25, "gel": 0.2, "flooded": 0.2}
#: Continuous discharge a bank is usually allowed, as a C-rate (LFP BMS ~1C; common practice).
MAX_DISCHARGE_C: dict[str, float] = {"lifepo4": 1.0, "agm": 0.5, "gel": 0.3, "flooded": 0.3}
#: Inverter efficiency at nominal voltage and at the low-voltage cut-off (docs/chargers.md#check-values example).
INVERTER_EFFICIENCY: float = 0.90
INVERTER_EFFICIENCY_AT_CUTOFF: float = 0.88
#: Low-voltage cut-off per 12 V block [V] (docs/chargers.md#check-values example).
LOW_VOLTAGE_CUTOFF_PER_12V: float = 10.5


def inverter_dc_current_A(ac_power_W: float, voltage_V: float, efficiency: float) -> float:
    """DC input current of an inverter [A]: I_dc = P_ac / (V · η).

    Size the cable and fuse at the low-voltage cut-off, where the current is highest
    (docs/chargers.md#inverter-input-current).
    """
    if voltage_V <= 0 or not 0 < efficiency <= 1:
        raise ValueError(f"need voltage_V > 0 and 0 < efficiency <= 1, got {voltage_V} V and {efficiency}")
    return ac_power_W / (voltage_V * efficiency)
#: Inverter idle draw as a fraction of its rating (docs/chargers.md: 0.5-1.5 %, common practice).
INVERTER_IDLE_FRACTION: float = 0.01
#: Continuous-rating margin over the AC loads that run together (common practice).
INVERTER_MARGIN: float = 1.25
#: DC-DC charger efficiency and voltages (docs/chargers.md; smart alternators sag to 12.2-12.8 V).
DC_DC_EFFICIENCY: float = 0.90
DC_DC_INPUT_V: float = 12.5
DC_DC_OUTPUT_PER_12V: float = 14.4
#: Most a logged day may exceed clear-sky sun hours x rating before it is treated as an error [-].
CLEAR_SKY_ALLOWANCE: float = 1.1
#: Typical driving per driving day when the log has none [h] (stated assumption).
DEFAULT_DRIVING_H: float = 2.0
#: A day counts as a driving day above this much driving [h].
DRIVING_DAY_THRESHOLD_H: float = 0.25
#: Default one-way run lengths [m] (stated assumptions for a van or small boat).
DEFAULT_RUN_LENGTHS_M: dict[str, float] = {
    "battery-inverter": 1.5,
    "battery-dc-dc charger": 1.0,
    "starter battery-dc-dc charger": 5.0,
    "charge controller-battery": 1.0,
    "battery-distribution": 2.0,
}
#: Peak DC load on the distribution feeder when neither logs nor inventory say [A] (stated).
DEFAULT_DISTRIBUTION_A: float = 30.0
#: Month names for sentences (design month, months an array cannot cover).
MONTH_NAMES: tuple[str, ...] = ("January", "February", "March", "April", "May", "June", "July", "August",
                                "September", "October", "November", "December")
#: The starter (vehicle) battery's nominal voltage [V] (stated assumption).
STARTER_VOLTAGE_V: float = 12.0


# --- design loads ---------------------------------------------------------------

@dataclass(frozen=True)
class DesignLoad:
    """The daily load the system is sized for."""

    source: str  # "logs" or "inventory"
    percentile: float
    design_Wh_per_day: float
    design_Ah_per_day: float
    n_days: int
    mean_Wh_per_day: float | None = None
    median_Wh_per_day: float | None = None
    empirical_percentile_Wh: float | None = None
    model: dict | None = None
    inventory: dict | None = None
    planned_vs_actual: dict | None = None
    notes: list[str] = field(default_factory=list)


def inventory_budget(system: System, *, inverter_W: float | None = None,
                     inverter_efficiency: float = INVERTER_EFFICIENCY) -> dict:
    """Daily energy of the ``[[load]]`` inventory [Wh/day].

    AC loads are divided by the inverter efficiency; an inverter's idle draw
    (1 % of ``inverter_W``, all day - common practice) is added when there are AC loads.
    """
    items = []
    total = 0.0
    ac_any = False
    for load in system.load:
        wh = load.power_W * load.hours_per_day
        dc_wh = wh / inverter_efficiency if load.ac else wh
        ac_any |= load.ac
        items.append({"name": load.name, "power_W": load.power_W, "hours_per_day": load.hours_per_day,
                      "ac": load.ac, "Wh_per_day": dc_wh})
        total += dc_wh
    idle = INVERTER_IDLE_FRACTION * inverter_W * 24.0 if (ac_any and inverter_W) else 0.0
    return {"loads": items, "loads_Wh_per_day": total, "inverter_idle_Wh_per_day": idle,
            "total_Wh_per_day": total + idle}


def _complete_days(days: pd.DataFrame | None, voltage_V: float) -> pd.DataFrame | None:
    if days is None or len(days) == 0:
        return None
    d = days.copy()
    if "complete" in d:
        d = d[d["complete"].fillna(False).astype(bool)]
    # The bank is balanced in charge (Ah, what its capacity is rated in) at the nominal voltage:
    # "Wh" below is Ah x nominal V. A logged Wh column is used only when Ah is missing.
    if "consumed_Ah" in d and d["consumed_Ah"].notna().any():
        d["consumed_Wh"] = d["consumed_Ah"].astype(float).abs() * voltage_V
    elif "consumed_Wh" not in d:
        raise SizingInputError("the daily ledger has neither consumed_Ah nor consumed_Wh columns")
    if "charged_Ah_solar" in d and d["charged_Ah_solar"].notna().any():
        d["charged_Wh_solar"] = d["charged_Ah_solar"].astype(float).abs() * voltage_V
    d = d[np.isfinite(d["consumed_Wh"].to_numpy(dtype=float))]
    d["consumed_Wh"] = d["consumed_Wh"].astype(float).abs()
    return d.reset_index(drop=True) if len(d) else None


def _driving(d: pd.DataFrame) -> np.ndarray:
    if "driving_h" in d:
        return d["driving_h"].fillna(0.0).to_numpy(dtype=float) > DRIVING_DAY_THRESHOLD_H
    return np.zeros(len(d), dtype=bool)


def design_load(system: System, days: pd.DataFrame | None, *, percentile: float = 90.0) -> DesignLoad:
    """The design day from logged days (quantile regression) or from the inventory.

    Parameters
    ----------
    system : System
    days : DataFrame or None
        Daily ledger; only ``complete`` days are used.
    percentile : float
        Design percentile of daily consumption [%], 50-99.

    Notes
    -----
    Model (statsmodels ``QuantReg`` at q = percentile/100)::

        consumed_Wh = b0 + b1 * mean_temperature_C + b2 * driving_day

    evaluated for a parked day at the 5th and 95th percentile of logged
    temperature; the larger prediction is the design day (cold days add
    heating, hot days add fridge work). Terms without spread in the data are
    dropped. Fewer than 10 days: the empirical percentile. Quantile regression
    is equivariant to scaling and shifting the consumption, so the design day
    rises when every day's use rises.
    """
    if not 50 <= percentile < 100:
        raise SizingInputError(f"percentile = {percentile}: expected 50 <= P < 100 (e.g. 90)")
    v = system.battery.nominal_voltage_V
    d = _complete_days(days, v)
    inv = inventory_budget(system) if system.load else None
    if d is None:
        if inv is None:
            raise SizingInputError(
                "nothing to size from: the store holds no complete logged day and system.toml has no "
                "[[load]] inventory. Import a log ('drawdown import FILE') or add [[load]] entries "
                "(name, power_W, hours_per_day) to system.toml.")
        wh = inv["total_Wh_per_day"]
        return DesignLoad(source="inventory", percentile=percentile, design_Wh_per_day=wh,
                          design_Ah_per_day=wh / v, n_days=0, inventory=inv,
                          notes=["no logged days: the design day is the planned [[load]] inventory "
                                 "(the same every day, so the percentile has no effect)"])
    y = d["consumed_Wh"].to_numpy(dtype=float)
    drive = _driving(d)
    parked = ~drive
    q = percentile / 100.0
    emp = float(np.quantile(y[parked] if parked.sum() >= 3 else y, q))
    notes: list[str] = []
    model: dict | None = None
    design = emp
    if len(y) >= 10:
        cols = {"const": np.ones(len(y))}
        temp = d["mean_temperature_C"].to_numpy(dtype=float) if "mean_temperature_C" in d else None
        if temp is not None and np.isfinite(temp).sum() == len(y) and np.std(temp) > 0.5:
            cols["mean_temperature_C"] = temp
        else:
            notes.append("temperature term dropped (no logged temperature or no spread)")
        if drive.sum() >= 3 and parked.sum() >= 3:
            cols["driving_day"] = drive.astype(float)
        X = pd.DataFrame(cols)
        try:
            from statsmodels.regression.quantile_regression import QuantReg

            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                fit = QuantReg(y, X).fit(q=q, max_iter=2000)
            params = fit.params.to_dict()
            conds = []
            temps = ([float(np.quantile(temp, 0.05)), float(np.quantile(temp, 0.95))]
                     if "mean_temperature_C" in cols and temp is not None else [None])
            for t in temps:
                pred = params["const"] + (params.get("mean_temperature_C", 0.0) * t if t is not None else 0.0)
                conds.append({"mean_temperature_C": t, "day": "parked", "predicted_Wh": pred})
            worst = max(conds, key=lambda c: c["predicted_Wh"])
            design = max(0.0, float(worst["predicted_Wh"]))
            model = {"method": f"statsmodels QuantReg, q={q:g}", "coefficients": params,
                     "n_days": int(len(y)), "design_conditions": conds, "design_condition": worst,
                     "slope_Wh_per_C": params.get("mean_temperature_C"),
                     "driving_day_extra_Wh": params.get("driving_day")}
        except Exception as exc:  # noqa: BLE001 - a failed fit falls back to the empirical percentile
            notes.append(f"quantile regression failed ({type(exc).__name__}); empirical percentile used")
            design = emp
    else:
        notes.append(f"only {len(y)} complete days: the empirical {percentile:g}th percentile is the design day")
    pva = None
    if inv is not None:
        planned = inv["total_Wh_per_day"]
        actual = float(np.mean(y))
        pva = {"planned_Wh_per_day": planned, "actual_mean_Wh_per_day": actual,
               "actual_design_Wh_per_day": design, "difference_Wh_per_day": actual - planned,
               "difference_pct": (actual - planned) / planned * 100 if planned > 0 else None,
               "loads": inv["loads"]}
    return DesignLoad(source="logs", percentile=percentile, design_Wh_per_day=design,
                      design_Ah_per_day=design / v, n_days=int(len(y)), mean_Wh_per_day=float(np.mean(y)),
                      median_Wh_per_day=float(np.median(y)), empirical_percentile_Wh=emp, model=model,
                      inventory=inv, planned_vs_actual=pva, notes=notes)


# --- solar resource (pvlib clear sky) -------------------------------------------

@lru_cache(maxsize=32)
def _clear_sky_daily(lat: float, lon: float, alt: float, tilt: float, azimuth: float,
                     linke_turbidity: float | None = None) -> pd.Series:
    import pvlib

    times = pd.date_range("2025-01-01 00:30", "2025-12-31 23:30", freq="1h", tz="UTC")
    loc = pvlib.location.Location(lat, lon, tz="UTC", altitude=alt)
    kw = {} if linke_turbidity is None else {"linke_turbidity": linke_turbidity}
    with warnings.catch_warnings():
        warnings.filterwarnings("ignore", message=".*dayofyear is deprecated.*")  # inside pvlib 0.16, pandas 3
        cs = loc.get_clearsky(times, model="ineichen", **kw)
        sp = loc.get_solarposition(times)
    poa = pvlib.irradiance.get_total_irradiance(tilt, azimuth, sp["apparent_zenith"], sp["azimuth"],
                                                cs["dni"], cs["ghi"], cs["dhi"], model="isotropic")
    # Hourly samples, so the sum in Wh/m2 per day / 1000 is peak sun hours (kWh/m2/day).
    daily = poa["poa_global"].fillna(0.0).clip(lower=0.0).groupby(times.day_of_year).sum() / 1000.0
    return daily


def clear_sky_psh(system: System, *, tilt_deg: float | None = None, azimuth_deg: float | None = None,
                  linke_turbidity: float | None = None) -> tuple[pd.Series, pd.Series]:
    """Clear-sky peak sun hours on the array plane, by day of year and by month [h].

    pvlib ``Location.get_clearsky`` (Ineichen with pvlib's Linke turbidity
    climatology) and an isotropic-sky plane-of-array transposition, hourly
    over a typical year. Clear sky is an upper bound; the performance ratio
    brings it down to what an array really delivers. ``linke_turbidity``
    fixes the turbidity instead of pvlib's monthly climatology.
    """
    arr = system.solar[0] if system.solar else None
    tilt = tilt_deg if tilt_deg is not None else (arr.tilt_deg if arr else 0.0)
    az = azimuth_deg if azimuth_deg is not None else (arr.azimuth_deg if arr else 180.0)
    s = system.site
    daily = _clear_sky_daily(s.latitude_deg, s.longitude_deg, s.altitude_m, float(tilt), float(az),
                             linke_turbidity)
    month = pd.to_datetime(daily.index.to_numpy() - 1, unit="D", origin="2025-01-01").month
    monthly = daily.groupby(month).mean()
    return daily, monthly


# --- battery helpers ------------------------------------------------------------

def temperature_capacity_factor(chemistry: str, design_temperature_C: float) -> float:
    """Available capacity at a temperature relative to 25 degC [-], never above 1.

    Lead-acid: IEC 60896-11 ``1 + lambda (T - 25)``, lambda = 0.006 /degC for
    discharges longer than 3 h (from memory). LiFePO4: 1 above 0 degC (small
    effect; docs/soc.md#temperature); below 0 degC the same slope is used as a stated,
    rough assumption.
    """
    if chemistry == "lifepo4":
        return 1.0 if design_temperature_C >= 0 else max(0.5, 1 + IEC60896_LAMBDA_SLOW * design_temperature_C)
    return min(1.0, max(0.3, 1 + IEC60896_LAMBDA_SLOW * (design_temperature_C - 25.0)))


def rate_capacity_factor(capacity_Ah: float, rated_hours: float, current_A: float, peukert_k: float) -> float:
    """Peukert capacity at a discharge current relative to rated, ``(I_H/I)^(k-1)``, clamped <= 1 [-].

    Below the rated current the formula credits more than the rated capacity;
    real capacity saturates (docs/peukert.md#corrected-current), so no credit is taken.
    """
    i_h = capacity_Ah / rated_hours
    if current_A <= i_h:
        return 1.0
    return float((i_h / current_A) ** (peukert_k - 1.0))


# --- result ---------------------------------------------------------------------

@dataclass(frozen=True)
class SizingResult:
    """Everything :func:`recommend` found; :meth:`to_json` gives the ``size`` object of docs/contracts.md#size."""

    battery: dict
    solar: dict
    dc_dc_charger: dict
    inverter: dict
    autonomy: dict
    runs: list[RunSizing]
    design_load: DesignLoad
    present: dict
    steps: dict
    cross_check: dict
    assumptions: dict
    cautions: list[str]
    notes: list[str]
    #: Plain sentences that say what the answer means against the present system (analysis.answers).
    verdict: list[str] = field(default_factory=list)

    def to_json(self) -> dict:
        """The ``size`` JSON object, floats rounded (3 decimals; small values 4 significant digits)."""
        runs = [r.to_json() for r in self.runs]
        return json_ready({"verdict": self.verdict, **self._sections(runs)})

    def _sections(self, runs: list[dict]) -> dict:
        return {
            "battery": self.battery, "solar": self.solar, "dc_dc_charger": self.dc_dc_charger,
            "inverter": self.inverter, "autonomy": self.autonomy, "runs": runs,
            "design_load": asdict(self.design_load), "present_system": self.present, "steps": self.steps,
            "cross_check": self.cross_check, "assumptions": self.assumptions, "cautions": self.cautions,
            "notes": self.notes,
        }


# --- the recommender ------------------------------------------------------------

def _usable_Wh(capacity_Ah: np.ndarray, system: System, design_Ah_per_day: float,
               temp_factor: float, max_dod: float) -> tuple[np.ndarray, np.ndarray]:
    b = system.battery
    cap = np.asarray(capacity_Ah, dtype=float)
    if b.chemistry == "lifepo4":
        rate = np.ones_like(cap)
    else:
        # Mean discharge over a parked spell: the design day spread over 24 h.
        i = design_Ah_per_day / 24.0
        rate = np.array([rate_capacity_factor(c, b.rated_hours, i, b.effective_peukert_k) for c in cap])
    return cap * b.nominal_voltage_V * max_dod * temp_factor * rate, rate


def _simulation_inputs(system: System, d: pd.DataFrame | None, design: DesignLoad, psh_daily: pd.Series,
                       pr: float) -> tuple[np.ndarray, np.ndarray, list[str]] | None:
    """Observed (consumption, solar per W) day pairs to resample, or None without logs."""
    if d is None:
        return None
    notes = []
    drive = _driving(d)
    use = ~drive if (~drive).sum() >= 7 else np.ones(len(d), dtype=bool)
    if use.all() and drive.any():
        notes.append("fewer than 7 parked days: all days resampled, alternator and shore charge left out")
    dd = d[use]
    cons = dd["consumed_Wh"].to_numpy(dtype=float)
    present_W = sum(a.peak_power_W for a in system.solar)
    solar = dd["charged_Wh_solar"].to_numpy(dtype=float) if "charged_Wh_solar" in dd else None
    doy = pd.to_datetime(dd["date"]).dt.day_of_year.clip(upper=365).to_numpy() if "date" in dd else None
    clear = (psh_daily.reindex(doy).to_numpy(dtype=float) if doy is not None
             else np.full(len(dd), float(psh_daily.max())))
    if present_W > 0 and solar is not None and np.isfinite(solar).any():
        per_w = np.nan_to_num(np.abs(solar), nan=0.0) / present_W
        notes.append("solar per watt from the logged solar charge of the present array; days when the bank "
                     "was full understate it, so the simulation is on the safe side")
        # An array cannot deliver more than clear-sky sun hours x its rating (10 % allowed for cold
        # cells and cloud-edge enhancement): more means a mislabelled channel or wrong array size.
        limit = clear * CLEAR_SKY_ALLOWANCE
        over = per_w > limit
        if over.any():
            per_w = np.minimum(per_w, limit)
            notes.append(f"{int(over.sum())} of {len(per_w)} days logged more solar than {present_W:.0f} W can "
                         f"deliver under clear sky (x{CLEAR_SKY_ALLOWANCE:g}); capped there - check the solar "
                         "channel and the [[solar]] peak_power_W")
    else:
        per_w = clear * pr
        notes.append("no logged solar: each day's solar per watt is clear-sky peak sun hours x performance "
                     "ratio (no cloudy days, so optimistic)")
    return cons, per_w, notes


def recommend(system: System, days: pd.DataFrame | None, *, autonomy_days: float = 3.0,
              percentile: float = 90.0, performance_ratio: float | None = None, seed: int = 0,
              n_sequences: int = 2000, driving_hours_per_day: float | None = None,
              min_temperature_C: float | None = None, peak_dc_load_A: float | None = None,
              run_lengths_m: dict[str, float] | None = None, months: list[int] | None = None,
              conductor_temperature_C: float = 30.0, insulation_C: int = 105) -> SizingResult:
    """Recommend battery, array, DC-DC charger and inverter sizes with their cable runs.

    Parameters
    ----------
    system : System
        The system description (battery, arrays, chargers, loads, site).
    days : DataFrame or None
        Daily ledger (see module docstring); None or empty to size from the inventory.
    autonomy_days : float
        Target days parked before the bank reaches its reserve (1 - max DoD) [days].
    percentile : float
        Design percentile [%]: the design day's consumption percentile, and
        the share of simulated sequences that must reach ``autonomy_days``.
    performance_ratio : float, optional
        Measured array output / clear-sky expectation [-]; default 0.75 (stated).
    seed : int
        Seed of the bootstrap (results are reproducible).
    n_sequences : int
        Resampled sequences per candidate.
    driving_hours_per_day : float, optional
        Typical driving per driving day [h]; default from the log, else 2 h.
    min_temperature_C : float, optional
        Lowest logged temperature [degC] (for the lithium cold-charge flag);
        default the lowest daily mean in ``days``.
    peak_dc_load_A : float, optional
        Peak DC current through the distribution feeder [A].
    run_lengths_m : dict, optional
        One-way lengths [m] overriding :data:`DEFAULT_RUN_LENGTHS_M`.
    months : list of int, optional
        Months of use (1-12) for the design month; default the logged months, else all.
    conductor_temperature_C, insulation_C
        Cable assumptions for every run.

    Raises
    ------
    SizingInputError
        No logs and no inventory, or an input out of range (named).
    """
    if not (autonomy_days > 0 and math.isfinite(autonomy_days)) or autonomy_days > 60:
        raise SizingInputError(f"autonomy_days = {autonomy_days}: expected 0 < N <= 60 days")
    if performance_ratio is not None and not 0.05 <= performance_ratio <= 1.2:
        raise SizingInputError(f"performance_ratio = {performance_ratio}: expected 0.05..1.2")
    b = system.battery
    v = b.nominal_voltage_V
    chem = b.chemistry
    notes: list[str] = []
    design = design_load(system, days, percentile=percentile)
    d = _complete_days(days, v)
    pr = DEFAULT_PERFORMANCE_RATIO if performance_ratio is None else float(performance_ratio)
    pr_source = "stated default" if performance_ratio is None else "measured"

    # ---- temperatures
    logged_min = None
    if d is not None and "mean_temperature_C" in d and d["mean_temperature_C"].notna().any():
        logged_min = float(d["mean_temperature_C"].min())
    if min_temperature_C is None:
        min_temperature_C = logged_min
    if chem == "lifepo4":
        design_T = logged_min if logged_min is not None else 25.0
    else:
        design_T = logged_min if logged_min is not None else DEFAULT_DESIGN_TEMPERATURE_C
    k_t = temperature_capacity_factor(chem, design_T)
    dod = b.effective_max_dod

    # ---- solar resource and design month
    psh_daily, psh_month = clear_sky_psh(system)
    if months is None and d is not None and "date" in d:
        months = sorted(set(pd.to_datetime(d["date"]).dt.month.tolist()))
    use_months = months or list(range(1, 13))
    design_month = int(min(use_months, key=lambda m: psh_month[m]))
    psh = float(psh_month[design_month])
    present_W = float(sum(a.peak_power_W for a in system.solar))

    # ---- inverter (from the AC loads of the inventory)
    ac = [ld for ld in system.load if ld.ac]
    inverter: dict
    inv_W = None
    if ac:
        cont_need = sum(ld.power_W for ld in ac) * INVERTER_MARGIN
        surge_need = max(ld.power_W * ld.surge_factor + sum(o.power_W for o in ac if o is not ld) for ld in ac)
        inv_W = None
        for cont_W in _cat.INVERTER_CONTINUOUS_W:
            if cont_W >= cont_need and cont_W * _cat.INVERTER_SURGE_MULTIPLE >= surge_need:
                inv_W = float(cont_W)
                break
        blocks = round(b.series_12V_blocks)
        v_cut = LOW_VOLTAGE_CUTOFF_PER_12V * blocks
        if inv_W is None:
            inverter = {"continuous_W": None, "continuous_W_why":
                        f"the AC loads need {cont_need:.0f} W continuous / {surge_need:.0f} W surge, above the "
                        "largest catalogue inverter (3000 W): split the loads or use a higher-voltage system",
                        "required_continuous_W": cont_need, "required_surge_W": surge_need}
        else:
            i_nom = inverter_dc_current_A(inv_W, v, INVERTER_EFFICIENCY)
            i_cut = inverter_dc_current_A(inv_W, v_cut, INVERTER_EFFICIENCY_AT_CUTOFF)
            inverter = {"continuous_W": inv_W, "surge_W": inv_W * _cat.INVERTER_SURGE_MULTIPLE,
                        "required_continuous_W": cont_need, "required_surge_W": surge_need,
                        "dc_input_A_nominal": i_nom, "dc_input_A_at_cutoff": i_cut,
                        "low_voltage_cutoff_V": v_cut, "idle_W": INVERTER_IDLE_FRACTION * inv_W,
                        "idle_Wh_per_day": INVERTER_IDLE_FRACTION * inv_W * 24.0,
                        "basis": "sum of [[load]] ac=true powers x 1.25; surge = the largest start "
                                 "(power x surge_factor) with the rest running; catalogue surge 2x continuous"}
    else:
        inverter = {"continuous_W": None,
                    "continuous_W_why": "no AC loads: add [[load]] entries with ac = true to size an inverter"}

    design_Wh = design.design_Wh_per_day
    if design.source == "inventory" and inv_W:
        inv_budget = inventory_budget(system, inverter_W=inv_W)
        design_Wh = inv_budget["total_Wh_per_day"]
        notes.append(f"inverter idle draw {inverter['idle_Wh_per_day']:.0f} Wh/day added to the planned budget "
                     "(inverter left on all day; switching it off when unused saves most of it)")
    elif design.source == "logs" and inv_W:
        notes.append("the measured consumption already includes any inverter that was running; a new "
                     f"{inv_W:.0f} W inverter left on adds about {inverter['idle_Wh_per_day']:.0f} Wh/day")
    design_Ah = design_Wh / v

    # ---- array: refill the design day in the design month
    array_need = design_Wh / (psh * pr) if psh > 0 else math.inf
    array_sizes = _cat.array_sizes_W(present_W)
    arr_pick = _cat.smallest_at_least(tuple(s for s in array_sizes if s >= present_W), array_need)
    solar: dict = {"present_W": present_W, "required_W": array_need, "design_month": design_month,
                   "design_month_psh_h": psh, "performance_ratio": pr, "performance_ratio_source": pr_source,
                   "months_of_use": use_months, "clear_sky_psh_by_month_h":
                   {int(m): float(x) for m, x in psh_month.items()}}
    if arr_pick is None and months is None and psh > 0:
        # No months of use known (no logs): size for the darkest month a mobile array can still
        # refill, and say which months need the alternator or shore power instead.
        coverable = [m for m in use_months if psh_month[m] > 0 and design_Wh / (psh_month[m] * pr)
                     <= _cat.ARRAY_MAX_W]
        if coverable:
            uncovered = sorted(set(use_months) - set(coverable))
            design_month = int(min(coverable, key=lambda m: psh_month[m]))
            psh = float(psh_month[design_month])
            array_need = design_Wh / (psh * pr)
            arr_pick = _cat.smallest_at_least(tuple(s for s in array_sizes if s >= present_W), array_need)
            solar.update({"required_W": array_need, "design_month": design_month, "design_month_psh_h": psh,
                          "months_not_covered": uncovered,
                          "months_not_covered_why": (
                              f"in {', '.join(MONTH_NAMES[m - 1] for m in uncovered)} no mobile array (up to "
                              f"{_cat.ARRAY_MAX_W:.0f} W) refills the design day: rely on alternator or shore "
                              "charge then")})
            notes.append(f"no months of use known (no logs): the array is sized for {MONTH_NAMES[design_month - 1]}, "
                         f"the darkest month it can cover; {solar['months_not_covered_why']}")
    if arr_pick is None:
        solar["array_W"] = None
        need_txt = (f"needs {array_need:.0f} W, beyond a {_cat.ARRAY_MAX_W:.0f} W mobile array"
                    if math.isfinite(array_need) else "cannot be done by any array (polar night)")
        solar["array_W_why"] = (f"refilling {design_Wh:.0f} Wh in {MONTH_NAMES[design_month - 1]} "
                                f"({psh:.2f} clear-sky sun hours) {need_txt}: rely on alternator or shore "
                                "charge in that month, or size for the months you use the system")
        rec_array = present_W
    else:
        solar["array_W"] = max(present_W, arr_pick)
        solar["add_W"] = solar["array_W"] - present_W
        rec_array = solar["array_W"]

    # ---- battery candidates
    caps = np.array(_cat.battery_capacities_Ah(chem), dtype=float)
    usable, rate = _usable_Wh(caps, system, design_Ah, k_t, dod)
    one_day_ok = usable >= design_Wh
    sim = _simulation_inputs(system, d, design, psh_daily, pr)
    eta = b.effective_charge_efficiency
    target = float(autonomy_days)
    horizon = int(min(120, max(30, math.ceil(4 * target))))
    steps: dict = {}

    def simulate(cand_usable: np.ndarray, cand_array: np.ndarray) -> np.ndarray:
        if sim is None:
            # No logs: classic autonomy, days with no charge at all.
            days_ = np.minimum(cand_usable / design_Wh, horizon) if design_Wh > 0 else \
                np.full(len(cand_usable), float(horizon))
            return np.repeat(days_[:, None], 1, axis=1)
        cons, per_w, _ = sim
        idx = _auto.block_bootstrap_indices(len(cons), horizon, n_sequences, seed=seed)
        return _auto.days_to_reserve(cand_usable, cand_array, cons[idx], per_w[idx], charge_efficiency=eta)

    def summary(row: np.ndarray) -> _auto.AutonomySummary:
        return _auto.summarise(row, target_days=target, percentile=percentile, horizon_days=horizon)

    if sim is not None:
        notes.extend(sim[2])
    sims_present = simulate(usable, np.full(len(caps), present_W))
    sums_present = [summary(r) for r in sims_present]
    ok = one_day_ok & np.array([s.meets_target for s in sums_present])
    if ok.any():
        i_pick = int(np.argmax(ok))
        meets = True
    else:
        i_pick = len(caps) - 1
        meets = False
    cap_pick = float(caps[i_pick])
    steps["catalogue_with_present_array"] = [
        {"battery_Ah": float(c), "usable_Wh": float(u), "holds_one_design_day": bool(o),
         "days_p50": sm.days_p50, "days_at_percentile": sm.days_at_percentile, "meets_target": sm.meets_target}
        for c, u, o, sm in zip(caps, usable, one_day_ok, sums_present)]
    battery = {
        "capacity_Ah": cap_pick, "chemistry": chem, "nominal_voltage_V": v, "energy_Wh": cap_pick * v,
        "usable_Wh": float(usable[i_pick]), "max_dod": dod, "reserve_pct": 100.0 * (1.0 - dod),
        "temperature_factor": k_t,
        "design_temperature_C": design_T, "rate_factor": float(rate[i_pick]),
        "present_Ah": b.rated_capacity_Ah, "meets_target": meets,
        "one_design_day_Ah": design_Wh / (v * dod * k_t),
        "no_sun_capacity_Ah": design_Wh * target / (v * dod * k_t * float(rate[i_pick])),
        "charge_acceptance_A": CHARGE_ACCEPTANCE_C[chem] * cap_pick,
        "max_continuous_discharge_A": MAX_DISCHARGE_C[chem] * cap_pick,
        "basis": ("smallest catalogue bank that holds one design day and, with the present array, lasts the "
                  f"target in {percentile:g} % of simulated parked spells" if sim is not None else
                  "no logs: smallest catalogue bank whose usable energy covers the target days with no charge"),
    }
    if not meets:
        battery["meets_target_why"] = (f"even {cap_pick:.0f} Ah (the largest in the catalogue, parallel banks "
                                       "included) does not reach the target with the present array: use less, "
                                       "add charging, or lower the target")
    if chem != "lifepo4":
        i_inv = inverter.get("dc_input_A_nominal")
        if i_inv:
            c_full = cap_pick * rate_capacity_factor(cap_pick, b.rated_hours, i_inv, b.effective_peukert_k)
            battery["capacity_at_inverter_full_load_Ah"] = c_full
            battery["hours_at_inverter_full_load"] = c_full * dod / i_inv

    # ---- the recommended set and steps up
    rec_usable, _ = _usable_Wh(np.array([cap_pick]), system, design_Ah, k_t, dod)
    rec_sum = summary(simulate(rec_usable, np.array([rec_array]))[0])
    present_idx_usable, _ = _usable_Wh(np.array([b.rated_capacity_Ah]), system, design_Ah, k_t, dod)
    pres_sum = summary(simulate(present_idx_usable, np.array([present_W]))[0])
    autonomy = {"days_p50": rec_sum.days_p50, "days_p90": rec_sum.days_p90,
                f"days_p{percentile:g}": rec_sum.days_at_percentile,
                "chance_reserve_within_target": rec_sum.chance_reserve_within_target,
                "target_days": target, "percentile": percentile, "meets_target": rec_sum.meets_target,
                "horizon_days": horizon, "censored_fraction": rec_sum.censored_fraction,
                "days_p50_at_horizon": rec_sum.days_p50 >= horizon,
                "days_p90_at_horizon": rec_sum.days_p90 >= horizon,
                "sequences": n_sequences if sim is not None else 0,
                "method": ("block bootstrap of observed parked days (consumption and solar kept together), "
                           "day-by-day bank balance from full" if sim is not None else
                           "no logs: usable energy / design day, with no charge (p50 = p90)"),
                "of": {"battery_Ah": cap_pick, "array_W": rec_array}}
    # Steps: battery sizes with the recommended array, and array sizes with the recommended battery.
    step_caps = caps[max(0, i_pick - 1): i_pick + 3]
    su, _ = _usable_Wh(step_caps, system, design_Ah, k_t, dod)
    s_sims = simulate(su, np.full(len(step_caps), rec_array))
    steps["battery"] = _with_gains([_step(f"{c:.0f} Ah", c, rec_array, summary(r))
                                    for c, r in zip(step_caps, s_sims)])
    if sim is None:
        steps["array"] = []
        steps["array_why"] = ("no logs: the days parked count days with no charge at all, so a larger array does "
                              "not change them (it refills the bank between spells)")
    else:
        arr_steps = np.array(sorted({present_W, *(s for s in array_sizes if s >= present_W)}))[:8]
        a_sims = simulate(np.repeat(rec_usable, len(arr_steps)), arr_steps)
        steps["array"] = _with_gains([_step(f"{a:.0f} W", cap_pick, a, summary(r))
                                      for a, r in zip(arr_steps, a_sims)])
    full_sims = simulate(usable, np.full(len(caps), rec_array))
    ok_rec = one_day_ok & np.array([summary(r).meets_target for r in full_sims])
    if ok_rec.any():
        steps["smallest_battery_with_recommended_array_Ah"] = float(caps[int(np.argmax(ok_rec))])
    steps["explain"] = ("each row: the set, its days parked at p50 / at the design percentile, and the chance of "
                        "reaching the reserve within the target; 'buys' is the gain over the row above; "
                        "'at_horizon' means the simulation never reached the reserve within the horizon")

    # ---- DC-DC charger
    alt = [c for c in system.charger if c.source == "alternator"]
    drive_days = None
    if d is not None and "driving_h" in d:
        dh = d["driving_h"].fillna(0.0).to_numpy(dtype=float)
        drive_days = dh[dh > DRIVING_DAY_THRESHOLD_H]
    if driving_hours_per_day is not None:
        drive_h, drive_src = float(driving_hours_per_day), "given"
    elif drive_days is not None and len(drive_days):
        drive_h, drive_src = float(np.median(drive_days)), f"median of {len(drive_days)} logged driving days"
    else:
        drive_h, drive_src = DEFAULT_DRIVING_H, "stated default (no driving in the log)"
    acceptance = CHARGE_ACCEPTANCE_C[chem] * cap_pick
    dc_dc: dict
    no_driving = (not alt and d is not None and (drive_days is None or len(drive_days) == 0)
                  and driving_hours_per_day is None)
    dc_pick = None
    if no_driving:
        dc_dc = {"current_A": None, "current_A_why": "no alternator charger in system.toml and no driving in the "
                 "log: nothing to size (pass driving hours if the vehicle is driven)"}
    else:
        need_A = design_Ah / (drive_h * eta)
        dc_pick = _cat.smallest_at_least(_cat.DC_DC_CURRENTS_A, need_A)
        capped = False
        allowed = [c for c in _cat.DC_DC_CURRENTS_A if c <= acceptance]
        if dc_pick is None or dc_pick > acceptance:
            dc_pick = float(allowed[-1]) if allowed else float(_cat.DC_DC_CURRENTS_A[0])
            capped = True
        present_A = max((c.max_current_A for c in alt), default=None)
        v_out = DC_DC_OUTPUT_PER_12V * round(b.series_12V_blocks)
        i_in = float(dc_dc_input_current_A(dc_pick, v_out, DC_DC_INPUT_V, efficiency=DC_DC_EFFICIENCY))
        rating = max((c.alternator_rating_A for c in alt if c.alternator_rating_A), default=None)
        dc_dc = {"current_A": dc_pick, "required_A": need_A, "driving_h_per_day": drive_h,
                 "driving_h_source": drive_src, "present_A": present_A,
                 "capped_by_battery_acceptance": capped, "battery_acceptance_A": acceptance,
                 "input_A": i_in, "input_V": DC_DC_INPUT_V, "output_V": v_out,
                 "alternator_rating_A": rating,
                 "alternator_check": (None if rating is None else
                                      ("ok" if i_in <= 0.5 * rating else "too much for the alternator")),
                 "basis": "replace one design day during a typical day's driving, / charge efficiency"}
        if capped:
            dc_dc["capped_why"] = (f"{need_A:.0f} A would exceed the bank's charge acceptance "
                                   f"({CHARGE_ACCEPTANCE_C[chem]:g}C = {acceptance:.0f} A, common practice)")
        if not alt:
            dc_dc["note"] = "system.toml has no alternator charger: this assumes the vehicle is driven"

    # ---- runs
    lengths = dict(DEFAULT_RUN_LENGTHS_M)
    for k, val in (run_lengths_m or {}).items():
        if k not in lengths:
            raise SizingInputError(f"run_lengths_m[{k!r}]: unknown run; expected one of {', '.join(lengths)}")
        if not val > 0:
            raise SizingInputError(f"run_lengths_m[{k!r}] = {val}: expected a length > 0 m")
        lengths[k] = float(val)
    cable: dict[str, Any] = {"conductor_temperature_C": conductor_temperature_C, "insulation_C": insulation_C}
    runs: list[RunSizing] = []
    if inv_W:
        runs.append(size_run(inverter["dc_input_A_nominal"], lengths["battery-inverter"], v,
                             name="battery-inverter", circuit="critical",
                             protect_current_A=inverter["dc_input_A_at_cutoff"], **cable))
    if dc_pick:
        runs.append(size_run(dc_pick, lengths["battery-dc-dc charger"], v, name="battery-dc-dc charger",
                             circuit="charging", **cable))
        runs.append(size_run(dc_dc["input_A"], lengths["starter battery-dc-dc charger"], STARTER_VOLTAGE_V,
                             name="starter battery-dc-dc charger", circuit="charging", **cable))
    if rec_array > 0:
        runs.append(size_run(rec_array / v, lengths["charge controller-battery"], v,
                             name="charge controller-battery", circuit="charging", **cable))
    if peak_dc_load_A is not None:
        dist_A, dist_src = float(peak_dc_load_A), "given"
    elif any(not ld.ac for ld in system.load):
        dist_A = sum(ld.power_W for ld in system.load if not ld.ac) / v
        dist_src = "sum of the DC [[load]] powers / nominal voltage (all on at once)"
    else:
        dist_A, dist_src = DEFAULT_DISTRIBUTION_A, "stated default"
    dist_A = max(dist_A, 1.0)
    runs.append(size_run(dist_A, lengths["battery-distribution"], v, name="battery-distribution",
                         circuit="critical", **cable))
    run_notes = {
        "battery-inverter": "fuse at the battery end; fuse rated for the inverter's input at the low-voltage cut-off",
        "battery-dc-dc charger": "fuse at the house battery end (and at the charger if its maker asks)",
        "starter battery-dc-dc charger": "fuse at the starter battery end; starter system assumed 12 V",
        "charge controller-battery": "fuse at the battery end; the array side follows NEC 690.8 "
                                     "(1.25 x 1.25 x Isc, from memory)",
        "battery-distribution": f"current: {dist_src}",
    }
    for r in runs:
        r.notes.append(run_notes[r.name])

    # ---- Sandia / IEEE cross-check
    k_t_method = _dm.ieee485_capacity_factor(design_T) if chem != "lifepo4" else 1.0
    cross: dict
    if psh > 0:
        w = _dm.worksheet(design_Wh, v, psh, chemistry=chem, autonomy_days=target, max_dod=dod,
                          temperature_factor=k_t_method, design_month=design_month)
        cross = asdict(w)
        cross["psh_source"] = ("pvlib clear sky on the array plane (an upper bound on sun hours, so the method's "
                              "array is a minimum)")
        ratio_b = cap_pick / w.battery_capacity_Ah if w.battery_capacity_Ah else None
        ratio_a = (solar["array_W"] / w.array_W) if (solar.get("array_W") and w.array_W) else None
        cross["data_vs_method_battery"] = ratio_b
        cross["data_vs_method_array"] = ratio_a
        cross["explanation"] = _explain_difference(ratio_b, ratio_a, sim, design, target, present_W, pr)
    else:
        cross = {"battery_capacity_Ah": None, "battery_capacity_Ah_why": f"no sun in month {design_month}"}

    # ---- cautions
    extra = []
    i_inv_cut = inverter.get("dc_input_A_at_cutoff")
    if i_inv_cut and i_inv_cut > battery["max_continuous_discharge_A"]:
        limit_A = battery["max_continuous_discharge_A"]
        extra.append(f"The inverter can draw {i_inv_cut:.0f} A, above the {limit_A:.0f} A "
                     f"a {cap_pick:.0f} Ah {chem} bank usually allows continuously (common practice): check the "
                     "battery's (BMS) discharge rating or choose a larger bank.")
    if rec_array / v > acceptance:
        extra.append(f"The array can push {rec_array / v:.0f} A, above the bank's {acceptance:.0f} A charge "
                     "acceptance: set the controller's current limit.")
    for r in runs:
        if r.why:
            extra.append(f"Run '{r.name}': {r.why}.")
    cautions = build_cautions(chemistry=chem, min_temperature_C=min_temperature_C, has_dc_dc=bool(dc_pick),
                              alternator_input_A=dc_dc.get("input_A"),
                              alternator_rating_A=dc_dc.get("alternator_rating_A"), extra=extra)

    assumptions = {
        "autonomy_days": target, "percentile": percentile, "design_Wh_per_day": design_Wh,
        "design_Ah_per_day": design_Ah, "design_source": design.source,
        "max_dod": dod, "design_temperature_C": design_T, "temperature_factor": k_t,
        "temperature_factor_source": ("IEC 60896-11 lambda 0.006/°C (from memory)" if chem != "lifepo4"
                                      else "LiFePO4: 1 above 0 °C (common practice)"),
        "charge_efficiency": eta, "performance_ratio": pr, "performance_ratio_source": pr_source,
        "design_month": design_month, "run_lengths_one_way_m": lengths, "conductor_temperature_C":
        conductor_temperature_C, "insulation_rating_C": insulation_C, "bundled_conductors": 1,
        "inverter_efficiency": INVERTER_EFFICIENCY, "inverter_efficiency_at_cutoff": INVERTER_EFFICIENCY_AT_CUTOFF,
        "dc_dc_efficiency": DC_DC_EFFICIENCY, "dc_dc_input_V": DC_DC_INPUT_V, "seed": seed,
        "catalogue": "common nominal sizes, no brands (analysis/catalogue.py)",
        "simulation": f"day resolution; bank starts full; reserve {100 * (1 - dod):.0f} % (1 - max DoD); horizon "
                      f"{horizon} days",
    }
    present = {"battery_Ah": b.rated_capacity_Ah, "array_W": present_W, "usable_Wh": float(present_idx_usable[0]),
               "autonomy": {"days_p50": pres_sum.days_p50, "days_p90": pres_sum.days_p90,
                            f"days_p{percentile:g}": pres_sum.days_at_percentile,
                            "chance_reserve_within_target": pres_sum.chance_reserve_within_target,
                            "meets_target": pres_sum.meets_target}}
    return SizingResult(battery=battery, solar=solar, dc_dc_charger=dc_dc, inverter=inverter, autonomy=autonomy,
                        runs=runs, design_load=design, present=present, steps=steps, cross_check=cross,
                        assumptions=assumptions, cautions=cautions, notes=notes + design.notes)


def _step(label: str, cap: float, arr: float, s: _auto.AutonomySummary) -> dict:
    return {"set": label, "battery_Ah": float(cap), "array_W": float(arr), "days_p50": s.days_p50,
            "days_p90": s.days_p90, "days_at_percentile": s.days_at_percentile,
            "chance_reserve_within_target": s.chance_reserve_within_target, "meets_target": s.meets_target,
            "at_horizon": s.days_at_percentile >= s.horizon_days}


def _with_gains(rows: list[dict]) -> list[dict]:
    """Add what each row buys over the row above: days at the design percentile and at p50."""
    prev = None
    for row in rows:
        row["buys_days_at_percentile"] = None if prev is None else row["days_at_percentile"] - prev["days_at_percentile"]
        row["buys_days_p50"] = None if prev is None else row["days_p50"] - prev["days_p50"]
        prev = row
    return rows


def _explain_difference(ratio_b: float | None, ratio_a: float | None, sim, design: DesignLoad,
                        target: float, present_W: float, pr: float) -> list[str]:
    out = []
    if ratio_b is not None and not 0.7 <= ratio_b <= 1.43:
        if sim is not None and present_W > 0:
            cons, per_w, _ = sim
            cover = float(np.median(np.minimum(per_w * present_W / np.maximum(cons, 1e-9), 5.0)))
            out.append(f"battery differs by x{ratio_b:.2f}: the method assumes {target:g} days with no charge at "
                       f"all; on the median logged parked day the present array covered {cover * 100:.0f} % of "
                       "the use, so the simulated bank drains more slowly")
        elif sim is not None:
            out.append(f"battery differs by x{ratio_b:.2f}: catalogue steps and the one-design-day minimum; "
                       "the method has no solar in its battery step")
        else:
            out.append(f"battery differs by x{ratio_b:.2f}: catalogue rounding and different derates")
    if ratio_a is not None and not 0.7 <= ratio_a <= 1.43:
        out.append(f"array differs by x{ratio_a:.2f}: the method divides by wire, battery, controller and module "
                   f"losses (and 1.2 oversize) on clear-sky sun hours; the data-driven figure uses the "
                   f"performance ratio {pr:g} instead, and never goes below the present array")
    if ratio_a is None:
        out.append("array: no comparison, the data-driven answer sized no array (see the solar section)")
    elif 0.7 <= ratio_a <= 1.43 and ratio_b is not None and not 0.7 <= ratio_b <= 1.43:
        out.append(f"array: the two answers agree within a factor of 0.7-1.43 (x{ratio_a:.2f})")
    if ratio_b is None:
        out.append("battery: no comparison, one of the two answers has no battery size")
    elif 0.7 <= ratio_b <= 1.43 and (ratio_a is None or not 0.7 <= ratio_a <= 1.43):
        out.append(f"battery: the two answers agree within a factor of 0.7-1.43 (x{ratio_b:.2f})")
    if not out:
        out.append("the data-driven and method answers agree within a factor of 0.7-1.43")
    return out
