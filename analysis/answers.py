"""One function per answer: everything a face needs, gathered once from readings and a system.

Every face (``drawdown size``, the Upgrade planner page) calls these, so the same
store and the same targets give the same answer everywhere. They take a
canonical long frame (what :meth:`collector.store.Store.read` returns) and a
:class:`~analysis.system.System`; they never open a file or a database.

* :func:`sizing_inputs` -- the measured inputs of the sizing: the daily ledger,
  the array's performance ratio, the lowest logged temperature and the peak DC
  load current (:class:`SizingInputs`);
* :func:`size_with` -- :func:`analysis.sizing.recommend` on those inputs and a
  set of targets (cheap: faces that change targets often keep the inputs);
* :func:`size_answer` -- both in one call.

The report's answer is :func:`analysis.report.build_report`.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass

import numpy as np
import pandas as pd

from drawdown.analysis.system import System

#: The sizing targets every face starts from: days parked from full to the reserve, and the share
#: of parked spells covered [%] (``drawdown size`` defaults, the Upgrade planner's first view and
#: the HTML report's sizing section).
DEFAULT_AUTONOMY_DAYS: float = 3.0
DEFAULT_PERCENTILE: float = 90.0

#: Quantile of the load current taken as the peak DC load of the distribution feeder [-].
PEAK_LOAD_QUANTILE: float = 0.995
#: Fewest load readings the peak is taken from (fewer: the inventory or a stated default is used).
PEAK_LOAD_MIN_READINGS: int = 100


@dataclass(frozen=True)
class SizingInputs:
    """What the sizing takes from the logs.

    Attributes
    ----------
    days : the daily ledger (analysis.ledger), or None without usable readings
    performance_ratio : measured array output / clear-sky expectation [-], or None (a stated default is used)
    min_temperature_C : lowest logged temperature [degC], or None
    peak_dc_load_A : 99.5th percentile of the load channel's current [A], or None
    notes : plain sentences: what could not be measured and what is used instead
    """

    days: pd.DataFrame | None
    performance_ratio: float | None
    min_temperature_C: float | None
    peak_dc_load_A: float | None
    notes: tuple[str, ...] = ()


def _ledger_days(readings: pd.DataFrame, system: System, notes: list[str]) -> pd.DataFrame | None:
    from drawdown.analysis.ledger import daily_ledger

    try:
        return daily_ledger(readings, system)
    except ValueError as exc:  # the stored data cannot make a ledger (no usable channel): say so
        notes.append(f"the daily ledger could not be built ({exc}); sizing from the [[load]] inventory instead")
        return None


def _performance_ratio(readings: pd.DataFrame, system: System, notes: list[str]) -> float | None:
    if not system.solar:
        return None
    from drawdown.analysis.solar import analyse_solar

    try:
        pr = analyse_solar(readings, system).performance_ratio
    except ValueError as exc:  # not measurable from these data: fall back to the stated default
        notes.append(f"performance ratio not measured ({exc}); using the stated default")
        return None
    if pr is None or not math.isfinite(pr) or not 0.05 <= pr <= 1.2:
        return None
    return float(pr)


def _temperature_and_peak(readings: pd.DataFrame) -> tuple[float | None, float | None]:
    """Lowest logged temperature [degC] and the 99.5th percentile load current [A]."""
    t = readings["temperature_C"].to_numpy(dtype=float)
    t_min = float(np.nanmin(t)) if np.isfinite(t).any() else None
    load = readings.loc[readings["channel"].astype(str) == "load", "current_A"].to_numpy(dtype=float)
    load = np.abs(load[np.isfinite(load)])
    peak = float(np.quantile(load, PEAK_LOAD_QUANTILE)) if load.size >= PEAK_LOAD_MIN_READINGS else None
    return t_min, peak


def sizing_inputs(readings: pd.DataFrame | None, system: System) -> SizingInputs:
    """The sizing's measured inputs from a canonical long frame (None or empty: none measured).

    Parameters
    ----------
    readings : canonical long frame (t, channel, voltage_V, current_A, temperature_C, soc_pct)
    system : system description
    """
    if readings is None or len(readings) == 0:
        return SizingInputs(None, None, None, None)
    notes: list[str] = []
    days = _ledger_days(readings, system, notes)
    pr = _performance_ratio(readings, system, notes)
    t_min, peak = _temperature_and_peak(readings)
    return SizingInputs(days, pr, t_min, peak, tuple(notes))


def size_with(inputs: SizingInputs, system: System, *, autonomy_days: float, percentile: float):
    """:func:`analysis.sizing.recommend` on gathered inputs; the input notes lead the result's notes.

    Raises
    ------
    analysis.sizing.SizingInputError
        No logs and no inventory, or a target out of range (the message names it).
    """
    from drawdown.analysis.sizing import recommend

    result = recommend(system, inputs.days, autonomy_days=autonomy_days, percentile=percentile,
                       performance_ratio=inputs.performance_ratio, min_temperature_C=inputs.min_temperature_C,
                       peak_dc_load_A=inputs.peak_dc_load_A)
    result = dataclasses.replace(result, notes=[*inputs.notes, *result.notes], verdict=sizing_verdict(result))
    return result


def size_answer(readings: pd.DataFrame | None, system: System, *, autonomy_days: float, percentile: float):
    """The sizing answer of a store's readings: :func:`sizing_inputs` then :func:`size_with`."""
    return size_with(sizing_inputs(readings, system), system, autonomy_days=autonomy_days, percentile=percentile)


def pair_ci95_Ah(pair) -> tuple[float, float]:
    """95 % interval of one anchor pair's capacity ``Q = y / x`` [Ah].

    The relative errors of the charge moved (``sigma_y``) and of the SoC change
    (``sigma_x``) add in quadrature (first-order propagation for a ratio), and
    the interval is ``Q (1 -+ 1.96 rel)``.

    Parameters
    ----------
    pair : analysis.capacity.AnchorPair
    """
    q = float(pair.capacity_Ah)
    rel = math.hypot(pair.sigma_y / max(abs(pair.ah_moved), 1e-9), pair.sigma_x / max(abs(pair.delta_soc), 1e-9))
    return q * (1.0 - 1.96 * rel), q * (1.0 + 1.96 * rel)


def _days_text(x: float, horizon: float) -> str:
    return f"at least {horizon:g}" if x >= horizon else f"{x:.1f}"


def sizing_verdict(result) -> list[str]:
    """What a sizing answer means against the present system, in plain sentences (every face shows them).

    The battery, the array and the DC-DC charger answer different aims: the battery
    (with the present array) lasts the days-parked target; the array refills one
    design day from the sun alone in the design month; the charger puts one design
    day back during a typical day's driving. Each sentence says which aim a size
    serves and how it compares with what is installed, so "the present system
    already meets the target" never stands beside a bigger array without its reason.

    Parameters
    ----------
    result : analysis.sizing.SizingResult
    """
    from drawdown.analysis.sizing import MONTH_NAMES

    b, s, dc, au, pres = result.battery, result.solar, result.dc_dc_charger, result.autonomy, result.present
    p, target, horizon = au["percentile"], au["target_days"], au["horizon_days"]
    pa = pres["autonomy"]
    present_days = pa[f"days_p{p:g}"]
    month = MONTH_NAMES[int(s["design_month"]) - 1]
    design_Wh = result.assumptions["design_Wh_per_day"]
    out = []
    spells = ("parked spells" if au.get("sequences") else "days (no logs: counted with no charge at all)")
    if pa["meets_target"]:
        out.append(f"Your present system ({pres['battery_Ah']:.0f} Ah, {pres['array_W']:.0f} W) already lasts the "
                   f"{target:g}-day target in {p:g} % of {spells} ({_days_text(present_days, horizon)} days): "
                   "nothing has to change for that target.")
    else:
        out.append(f"Your present system ({pres['battery_Ah']:.0f} Ah, {pres['array_W']:.0f} W) lasts "
                   f"{_days_text(present_days, horizon)} days in {p:g} % of {spells}, short of the {target:g}-day "
                   "target.")
    cap, now = b["capacity_Ah"], b["present_Ah"]
    if cap < now:
        out.append(f"Battery: {cap:.0f} Ah would be enough for this target, less than the {now:.0f} Ah you have: "
                   "keep your bank (a smaller one is only worth choosing when the present one needs replacing).")
    elif cap == now:
        out.append(f"Battery: your {now:.0f} Ah bank is the smallest that lasts this target.")
    else:
        out.append(f"Battery: {cap:.0f} Ah ({cap - now:.0f} Ah more than you have) is the smallest bank that lasts "
                   "this target" + ("." if b["meets_target"] else f"; even so: {b.get('meets_target_why', '')}"))
    if s.get("array_W") is None:
        out.append(f"Solar: no array size - {s.get('array_W_why')}.")
    elif s["array_W"] > s["present_W"]:
        out.append(f"Solar: {s['array_W']:.0f} W ({s['array_W'] - s['present_W']:.0f} W more than you have) refills "
                   f"one design day ({design_Wh:.0f} Wh) from the sun alone in {month}, "
                   + ("the darkest month an array can cover. " if s.get("months_not_covered") else
                      "the month of use with the least sun. ")
                   + "That is a separate aim from the days parked"
                   + (", which the present system already meets" if pa["meets_target"] else "")
                   + ": without it, top up by driving or on hook-up.")
    else:
        out.append(f"Solar: your {s['present_W']:.0f} W array already refills one design day from the sun in {month}.")
    if dc.get("current_A") is not None:
        have = dc.get("present_A")
        aim = (f"puts one design day back in {dc['driving_h_per_day']:.1f} h of driving "
               f"({dc['driving_h_source']})")
        if have is not None and dc["current_A"] > have:
            out.append(f"DC-DC charger: {dc['current_A']:.0f} A (you have {have:.0f} A) {aim}; a separate aim from "
                       "the days parked.")
        elif have is not None:
            out.append(f"DC-DC charger: your {have:.0f} A charger already {aim}.")
        else:
            out.append(f"DC-DC charger: {dc['current_A']:.0f} A {aim}.")
    return out
