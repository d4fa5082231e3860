"""Fleet answers: the per-vehicle analysis of ``drawdown report`` over many vehicles, as Dask tasks.

One task per vehicle reads that vehicle's readings from the fleet dataset
(:mod:`collector.fleet_dataset`), runs :func:`analysis.report.build_report` and
:func:`analysis.answers.size_answer` on them -- the very functions ``drawdown report`` and
``drawdown size`` run on one store, no second implementation -- and keeps the figures a fleet
manager sorts by (docs/fleet.md#fleet-report):

* usable capacity with its 95 % interval (the report's), state of health, and the **fade**:
  the report's anchor pairs grouped by calendar month, each month's capacity from the same
  estimator (:func:`analysis.capacity.estimate_capacity`), and a weighted straight line
  through the months (statsmodels WLS, weights 1/sigma^2) whose slope is the fade in % of the
  rated capacity per month, with its 95 % interval;
* median and 90th-percentile daily use of complete days [Ah, Wh];
* charge by source over the period [Ah];
* solar performance ratio (the report's) and its trend (first against last month);
* days parked from full to the reserve at p50 and p90 with the present bank and array
  (``drawdown size``'s present-system autonomy);
* flags (the constants below, docs/fleet.md#fleet-report) and an urgency score to sort by.

A vehicle whose data cannot be analysed is a row with its ``error`` and the reason; it never
stops the others.

**Memory per task is bounded** (docs/fleet.md#memory). A vehicle whose readings fit
:data:`TASK_READINGS` is one task, and its figures are exactly ``drawdown report``'s on its
store. A longer one (a vehicle-year at 1 Hz is ~160 M readings on five channels, ~20 GB to
analyse at once) is split into **parts** of whole local calendar months, each within the
budget, one task each; a last task per vehicle combines them: the days of every part, the
capacity from every part's anchor pairs by the same estimator, the solar ratio as the median of
every part's clear days, the days parked from the last part (the present system). Each part's
days are then those ``drawdown report --from --to`` gives over that part; an anchor pair that
would span a part boundary is not formed.
"""

from __future__ import annotations

import math
import traceback
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field, replace
from typing import TYPE_CHECKING, Any

import numpy as np

if TYPE_CHECKING:
    import pandas as pd

    from drawdown.analysis.report import Report
    from drawdown.analysis.system import System

#: Thresholds of the fleet flags. A bank below 80 % of its rating is at the end-of-life mark the
#: trade uses (IEEE 1188 replaces a VRLA battery at 80 % of rated capacity; LiFePO4 cycle-life
#: ratings are quoted to 80 % -- common practice). The others are this project's choices, said
#: in docs/fleet.md: a fade over 1 % of rated a month (a bank that would lose a fifth in under
#: two years) whose interval excludes no fade; daily use up by 25 % or more on the vehicle's own
#: earlier median (at least 7 complete days each side); the solar ratio down by a fifth from the
#: first month to the last; any charge of a LiFePO4 bank below 0 degC.
CAPACITY_FLAG_SHARE = 0.80
FADE_FLAG_PCT_PER_MONTH = 1.0
USE_UP_FLAG_SHARE = 0.25
USE_MIN_DAYS = 7
SOLAR_DROP_FLAG_SHARE = 0.20
SOLAR_MIN_DAYS = 10  # days with a solar ratio a month needs to be compared

#: Urgency weight per flag (the fleet table sorts by the sum, then by capacity share).
FLAG_WEIGHTS = {"capacity_low": 5.0, "cold_charging": 4.0, "fading_fast": 3.0, "use_up": 2.0, "solar_down": 1.0,
                "part_failed": 6.0, "error": 6.0}

#: Readings one task may analyse at once. Measured (build_report + size_answer in one process,
#: peak RSS): 4.8 M readings (14 days at 1 Hz, four channels) 0.9 GB; 13.4 M (31 days at 1 Hz,
#: five channels) 2.0 GB -- about 130 bytes a reading over a ~0.3 GB start. 15 M readings is
#: ~2.3 GB, inside a 4 GB worker's 80 % pause mark with room for the task's result; a month at
#: 1 Hz on five channels fits one task. A month is the smallest part: a vehicle logging more than
#: this in one month needs bigger workers (docs/fleet.md#memory).
TASK_READINGS = 15_000_000
#: The same measurement as a rule for any worker: a task may take 65 % of the smallest worker's
#: memory limit (under dask's 80 % pause mark, room for the result) at 150 bytes a reading over
#: a 0.3 GB start; 4 GB gives ~15 M (:data:`TASK_READINGS`).
TASK_MEMORY_SHARE = 0.65
TASK_BYTES_PER_READING = 150.0
TASK_BASE_BYTES = 0.3e9


def task_readings_for(memory_limit_bytes: float | None) -> int:
    """Readings one task may take on a worker of ``memory_limit_bytes`` (None or 0: no limit
    known, :data:`TASK_READINGS`); at least 1 M."""
    if not memory_limit_bytes:
        return TASK_READINGS
    budget = (TASK_MEMORY_SHARE * float(memory_limit_bytes) - TASK_BASE_BYTES) / TASK_BYTES_PER_READING
    return max(1_000_000, int(budget))


@dataclass(frozen=True)
class VehicleFigures:
    """One vehicle's fleet figures (``to_json`` is the fleet report's per-vehicle object)."""

    vehicle: str
    period: dict[str, Any] | None = None
    usable_Ah: float | None = None
    usable_Ah_ci95: tuple[float, float] | None = None
    usable_Ah_why: str | None = None
    rated_Ah: float | None = None
    state_of_health_pct: float | None = None
    monthly_capacity: list[dict[str, Any]] = field(default_factory=list)
    fade_pct_per_month: float | None = None
    fade_pct_per_month_ci95: tuple[float, float] | None = None
    fade_why: str | None = None
    daily_use_Ah_p50: float | None = None
    daily_use_Ah_p90: float | None = None
    daily_use_Wh_p50: float | None = None
    daily_use_Wh_p90: float | None = None
    complete_days: int = 0
    charged_Ah: dict[str, float] = field(default_factory=dict)
    solar_performance_ratio: float | None = None
    solar_ratio_first_month: float | None = None
    solar_ratio_last_month: float | None = None
    days_parked_p50: float | None = None
    days_parked_p90: float | None = None
    days_parked_why: str | None = None
    flags: list[str] = field(default_factory=list)
    flag_reasons: dict[str, str] = field(default_factory=dict)
    urgency: float = 0.0
    error: str | None = None
    #: The parts a long vehicle was analysed in (start, end, readings, error); empty when whole.
    parts: list[dict[str, Any]] = field(default_factory=list)

    def to_json(self) -> dict[str, Any]:
        from dataclasses import asdict

        out = asdict(self)
        for k in ("usable_Ah_ci95", "fade_pct_per_month_ci95"):
            if out[k] is not None:
                out[k] = list(out[k])
        return out


def _percentile(values: Iterable[float], q: float) -> float | None:
    arr = np.array([v for v in values if v is not None and math.isfinite(v)], dtype=float)
    return float(np.percentile(arr, q)) if arr.size else None


def monthly_capacity(report: Report, system: System) -> list[dict[str, Any]]:
    """Per calendar month (site time) of the pairs' end: the capacity of that month's anchor pairs,
    by the same estimator as the whole period's (``estimate_capacity``)."""
    import pandas as pd

    from drawdown.analysis.capacity import estimate_capacity

    cap = report.capacity
    if cap is None or not cap.pairs:
        return []
    tz = system.site.timezone
    by_month: dict[str, list[Any]] = {}
    for p in cap.pairs:
        month = pd.Timestamp(p.end.time).tz_convert(tz).strftime("%Y-%m")
        by_month.setdefault(month, []).append(p)
    out = []
    for month in sorted(by_month):
        est = estimate_capacity(by_month[month], system)
        row: dict[str, Any] = {"month": month, "pairs": len(by_month[month]), "usable_Ah": est.usable_Ah,
                               "usable_Ah_ci95": list(est.ci95_Ah) if est.ci95_Ah else None}
        if est.usable_Ah is None:
            row["why"] = est.why
        out.append(row)
    return out


def fade_trend(months: list[dict[str, Any]], rated_Ah: float) -> tuple[float | None, tuple[float, float] | None,
                                                                       str | None]:
    """Fade [% of rated per month] and its 95 % interval from the months with a capacity.

    Weighted least squares (statsmodels) of capacity on month number, weights 1/sigma^2 with
    sigma from each month's 95 % interval; the slope's interval is the WLS standard error with
    the known-variance floor (the months' own intervals), as in ``estimate_capacity``.
    """
    import statsmodels.api as sm

    pts = [(i, m["usable_Ah"], (m["usable_Ah_ci95"][1] - m["usable_Ah_ci95"][0]) / (2 * 1.96))
           for i, m in enumerate(months) if m.get("usable_Ah") is not None and m.get("usable_Ah_ci95")]
    if len(pts) < 2:
        return None, None, (f"a fade needs a capacity in at least two months; {len(pts)} month"
                            f"{'' if len(pts) == 1 else 's'} had one (a month needs a full charge and a deep "
                            "enough discharge)")
    x = np.array([p[0] for p in pts], dtype=float)
    y = np.array([p[1] for p in pts], dtype=float)
    s = np.array([max(p[2], 1e-6) for p in pts], dtype=float)
    w = 1.0 / s**2
    res = sm.WLS(y, sm.add_constant(x), weights=w).fit()
    slope = float(res.params[1])
    xm = float(np.sum(w * x) / np.sum(w))
    se_known = float(np.sqrt(1.0 / np.sum(w * (x - xm) ** 2)))
    se = max(se_known, float(res.bse[1])) if len(pts) >= 3 else se_known
    to_pct = -100.0 / rated_Ah  # a capacity falling over the months is a positive fade
    fade = slope * to_pct
    lo, hi = sorted(((slope - 1.96 * se) * to_pct, (slope + 1.96 * se) * to_pct))
    return fade, (lo, hi), None


def _solar_months(report: Report, system: System) -> tuple[float | None, float | None]:
    """The median solar performance ratio of the first and last month with at least
    :data:`SOLAR_MIN_DAYS` days that have one (the report's own days)."""
    days = (report.solar or {}).get("days") or []
    by_month: dict[str, list[float]] = {}
    for d in days:
        pr = d.get("performance_ratio")
        if pr is None or not math.isfinite(pr):
            continue
        by_month.setdefault(str(d.get("date", ""))[:7], []).append(float(pr))
    # a month counts with enough days to say (a log that starts or ends in a month has a few)
    months = sorted(m for m in by_month if m and len(by_month[m]) >= SOLAR_MIN_DAYS)
    if len(months) < 2:
        return None, None
    return float(np.median(by_month[months[0]])), float(np.median(by_month[months[-1]]))


def _use_flag(days: list[dict[str, Any]]) -> tuple[bool, str | None]:
    used = [d["consumed_Ah"] for d in days if d.get("complete") and d.get("consumed_Ah") is not None]
    if len(used) < 2 * USE_MIN_DAYS:
        return False, None
    half = len(used) // 2
    before, after = float(np.median(used[:half])), float(np.median(used[half:]))
    if before > 0 and after > (1 + USE_UP_FLAG_SHARE) * before:
        return True, (f"daily use rose from a median {before:.1f} Ah to {after:.1f} Ah "
                      f"(+{100 * (after / before - 1):.0f} %, flag at +{100 * USE_UP_FLAG_SHARE:.0f} %)")
    return False, None


def vehicle_figures(name: str, report: Report, system: System, readings: pd.DataFrame | None = None,
                    sizing: Callable[[pd.DataFrame, System], Any] | None = None, *,
                    parked: tuple[float | None, float | None, str | None] | None = None,
                    parts: list[dict[str, Any]] | None = None) -> VehicleFigures:
    """The fleet figures of one vehicle from its report (and its readings for the days parked).

    ``parked``: the days parked (p50, p90, why) already computed (a vehicle analysed in parts:
    on its last part); ``parts``: those parts, each ``{"start", "end", "readings"[, "error"]}``.
    """
    b = system.battery
    cap = report.capacity
    battery = report.battery or {}
    months = monthly_capacity(report, system)
    fade, fade_ci, fade_why = fade_trend(months, b.rated_capacity_Ah)
    days = report.days
    complete = [d for d in days if d.get("complete")]
    charged: dict[str, float] = {}
    for d in days:
        for src, ah in (d.get("charged_Ah") or {}).items():
            if ah is not None and math.isfinite(ah):
                charged[src] = charged.get(src, 0.0) + float(ah)
    pr = (report.solar or {}).get("performance_ratio")
    pr_first, pr_last = _solar_months(report, system)
    parked50 = parked90 = None
    parked_why = None
    if parked is not None:
        parked50, parked90, parked_why = parked
    elif readings is not None:
        parked50, parked90, parked_why = _days_parked(readings, system, sizing)
    flags: list[str] = []
    reasons: dict[str, str] = {}
    failed = [p for p in parts or [] if p.get("error")]
    if failed:
        flags.append("part_failed")
        reasons["part_failed"] = "; ".join(f"{p.get('start') or 'start'} to {p.get('end') or 'end'}: {p['error']}"
                                           for p in failed) + " (the figures are from the other parts)"
    usable = cap.usable_Ah if cap is not None else None
    if usable is not None and usable < CAPACITY_FLAG_SHARE * b.rated_capacity_Ah:
        flags.append("capacity_low")
        reasons["capacity_low"] = (f"usable {usable:.0f} Ah is {100 * usable / b.rated_capacity_Ah:.0f} % of the "
                                   f"rated {b.rated_capacity_Ah:.0f} Ah (flag below {100 * CAPACITY_FLAG_SHARE:.0f} %)")
    if fade is not None and fade_ci is not None and fade > FADE_FLAG_PCT_PER_MONTH and fade_ci[0] > 0:
        flags.append("fading_fast")
        reasons["fading_fast"] = (f"fade {fade:.1f} % of rated a month (95 % {fade_ci[0]:.1f}-{fade_ci[1]:.1f}); "
                                  f"flag above {FADE_FLAG_PCT_PER_MONTH:g} %")
    up, why_up = _use_flag(days)
    if up and why_up:
        flags.append("use_up")
        reasons["use_up"] = why_up
    if pr_first is not None and pr_last is not None and pr_last < (1 - SOLAR_DROP_FLAG_SHARE) * pr_first:
        flags.append("solar_down")
        reasons["solar_down"] = (f"solar performance ratio fell from {pr_first:.2f} (first month) to {pr_last:.2f} "
                                 f"(last month): a shaded, dirty or failing array, or a controller fault")
    cold = (report.extras.get("charging") or {}).get("cold_charging")
    if b.chemistry == "lifepo4" and cold and (cold.get("minutes") or 0) > 0:
        flags.append("cold_charging")
        reasons["cold_charging"] = f"LiFePO4 charged below 0 °C for {cold.get('minutes'):.0f} min"
    share = usable / b.rated_capacity_Ah if usable is not None else 1.0
    urgency = sum(FLAG_WEIGHTS[f] for f in flags) + (1.0 - min(share, 1.0))
    return VehicleFigures(
        vehicle=name, period=report.period, usable_Ah=usable,
        usable_Ah_ci95=(float(cap.ci95_Ah[0]), float(cap.ci95_Ah[1])) if cap is not None and cap.ci95_Ah else None,
        usable_Ah_why=cap.why if cap is not None else battery.get("usable_Ah_why"),
        rated_Ah=b.rated_capacity_Ah,
        state_of_health_pct=cap.state_of_health_pct if cap is not None else None,
        monthly_capacity=months, fade_pct_per_month=fade, fade_pct_per_month_ci95=fade_ci, fade_why=fade_why,
        daily_use_Ah_p50=_percentile((d["consumed_Ah"] for d in complete), 50),
        daily_use_Ah_p90=_percentile((d["consumed_Ah"] for d in complete), 90),
        daily_use_Wh_p50=_percentile((d["consumed_Wh"] for d in complete), 50),
        daily_use_Wh_p90=_percentile((d["consumed_Wh"] for d in complete), 90),
        complete_days=len(complete), charged_Ah=charged,
        solar_performance_ratio=pr if pr is None or math.isfinite(pr) else None,
        solar_ratio_first_month=pr_first, solar_ratio_last_month=pr_last,
        days_parked_p50=parked50, days_parked_p90=parked90, days_parked_why=parked_why,
        flags=flags, flag_reasons=reasons, urgency=urgency, parts=list(parts or []))


def _days_parked(readings: pd.DataFrame, system: System,
                 sizing: Callable[[pd.DataFrame, System], Any] | None = None
                 ) -> tuple[float | None, float | None, str | None]:
    try:
        p50, p90 = (sizing or _present_autonomy)(readings, system)
        return p50, p90, None
    except Exception as exc:  # noqa: BLE001 - one answer missing, the vehicle still reported
        return None, None, f"days parked not computed: {exc}"


def _present_autonomy(readings: pd.DataFrame, system: System) -> tuple[float | None, float | None]:
    """Days parked p50/p90 with the present bank and array: ``drawdown size``'s own answer."""
    from drawdown.analysis.answers import DEFAULT_AUTONOMY_DAYS, DEFAULT_PERCENTILE, size_answer

    res = size_answer(readings, system, autonomy_days=DEFAULT_AUTONOMY_DAYS, percentile=DEFAULT_PERCENTILE)
    au = (res.present or {}).get("autonomy") or {}
    return au.get("days_p50"), au.get("days_p90")


def analyse_vehicle(dataset: str, name: str) -> dict[str, Any]:
    """One Dask task: read one vehicle, build its report and its fleet figures; an error is a row."""
    from drawdown.analysis.report import build_report
    from drawdown.analysis.system import parse_system
    from drawdown.collector import fleet_dataset

    try:
        system = parse_system(fleet_dataset.vehicle_system_text(dataset, name))
        readings = fleet_dataset.read_vehicle(dataset, name)
        if readings.empty:
            raise ValueError("no readings in the dataset for this vehicle")
        report = build_report(readings, system)
        figures = vehicle_figures(name, report, system, readings)
        return {"vehicle": name, "figures": figures.to_json(), "report": report.to_json()}
    except Exception as exc:  # noqa: BLE001 - a vehicle's bad data is its row, never the run's end
        return _error_row(name, f"{type(exc).__name__}: {exc}", traceback.format_exc(limit=4))


def _error_row(name: str, reason: str, tb: str | None = None) -> dict[str, Any]:
    row: dict[str, Any] = {"vehicle": name, "report": None,
                           "figures": VehicleFigures(vehicle=name, error=reason, flags=["error"],
                                                     urgency=FLAG_WEIGHTS["error"]).to_json()}
    if tb:
        row["traceback"] = tb
    return row


def plan_parts(month_readings: dict[str, int], timezone: str, max_readings: int = TASK_READINGS
               ) -> list[tuple[str | None, str | None]]:
    """The parts one vehicle is analysed in: ``[(None, None)]`` (the whole vehicle, one task)
    when its readings fit ``max_readings``, else runs of whole months each within it.

    ``month_readings``: readings per UTC month partition (:func:`collector.fleet_dataset.month_rows`).
    A part's bounds are local midnights of the first of a month in ``timezone`` (ISO, UTC), so
    every local day lies in one part; the first part starts open, the last ends open, and
    consecutive parts share a bound, so each reading is in exactly one part.
    """
    import pandas as pd

    months = sorted(month_readings)
    if sum(month_readings.values()) <= max_readings or len(months) < 2:
        return [(None, None)]
    groups: list[list[str]] = [[]]
    held = 0
    for m in months:
        n = month_readings[m]
        if groups[-1] and held + n > max_readings:
            groups.append([])
            held = 0
        groups[-1].append(m)
        held += n

    def local_start(month: str) -> str:
        ts = pd.Timestamp(f"{month}-01").tz_localize(timezone)
        return ts.tz_convert("UTC").isoformat()

    bounds = [local_start(g[0]) for g in groups[1:]]
    starts: list[str | None] = [None, *bounds]
    ends: list[str | None] = [*bounds, None]
    return list(zip(starts, ends))


def _slim(report: Report) -> Report:
    """The report without its full-resolution series (a part's result travels to the combiner)."""
    return replace(report, soc=None, ledger=None, resistance_per_day=None, solar_analysis=None, ledger_result=None,
                   charging=None)


def analyse_part(dataset: str, name: str, start: str | None, end: str | None, last: bool) -> dict[str, Any]:
    """One Dask task of a vehicle analysed in parts: ``build_report`` over ``start <= t < end``
    (what ``drawdown report --from --to`` runs), and on the last part the days parked."""
    from drawdown.analysis.report import build_report
    from drawdown.analysis.system import parse_system
    from drawdown.collector import fleet_dataset

    out: dict[str, Any] = {"start": start, "end": end, "readings": 0}
    try:
        system = parse_system(fleet_dataset.vehicle_system_text(dataset, name))
        readings = fleet_dataset.read_vehicle(dataset, name, start, end)
        out["readings"] = len(readings)
        if readings.empty:
            raise ValueError("no readings in this part")
        out["report"] = _slim(build_report(readings, system))
        if last:
            out["parked"] = _days_parked(readings, system)
    except Exception as exc:  # noqa: BLE001 - a part's bad data is noted; the vehicle's other parts still count
        out["error"] = f"{type(exc).__name__}: {exc}"
    return out


def combined_report(reports: list[Report], system: System, parts: list[dict[str, Any]]) -> Report:
    """One report from the parts' reports, in time order: their days end to end; the capacity from
    all their anchor pairs (:func:`analysis.capacity.estimate_capacity`, as for one store); the
    solar ratio the median of all parts' clear days (as :mod:`analysis.solar` takes it over one
    period); cold charging summed. ``extras["analysed_in_parts"]`` lists the parts."""
    from drawdown.analysis.capacity import CapacityEstimate, estimate_capacity
    from drawdown.analysis.report import Report as ReportType

    b = system.battery
    pairs = [p for r in reports if r.capacity is not None for p in r.capacity.pairs]
    if pairs:
        cap = estimate_capacity(pairs, system)
    else:
        whys = sorted({r.capacity.why for r in reports if r.capacity is not None and r.capacity.why})
        cap = CapacityEstimate(None, None, "no part of the log holds an anchor pair"
                               + (f" ({'; '.join(whys)})" if whys else ""), None)
    days = [d for r in reports for d in r.days]
    solar_days = [d for r in reports for d in (r.solar or {}).get("days") or []]
    clear = [float(d["performance_ratio"]) for d in solar_days
             if d.get("in_performance_ratio") and d.get("performance_ratio") is not None]
    solar: dict[str, Any] = {"performance_ratio": float(np.median(clear)) if clear else None, "days": solar_days}
    if not clear:
        solar["performance_ratio_why"] = "no clear, unsaturated day in any part of the log"
    colds: list[dict[str, Any]] = [c for r in reports if (c := (r.extras.get("charging") or {}).get("cold_charging"))]
    cold: dict[str, Any] | None = None
    if colds:
        temps = [c["min_temperature_C"] for c in colds if c.get("min_temperature_C") is not None]
        cold = {"minutes": float(sum(float(c.get("minutes") or 0.0) for c in colds)),
                "min_temperature_C": min(temps) if temps else None}
    first, last = reports[0].period, reports[-1].period
    period = {"start": first.get("start"), "end": last.get("end"), "days": len(days),
              "timezone": first.get("timezone")}
    battery: dict[str, Any] = {"rated_Ah": b.rated_capacity_Ah, "usable_Ah": cap.usable_Ah,
                               "usable_Ah_ci95": list(cap.ci95_Ah) if cap.ci95_Ah else None,
                               "state_of_health_pct": cap.state_of_health_pct, "chemistry": b.chemistry,
                               "capacity_method": cap.method, "anchor_pairs": [p.to_json() for p in cap.pairs]}
    if cap.usable_Ah is None:
        battery["usable_Ah_why"] = cap.why
    quality = {"rows_stored": sum(int(r.data_quality.get("rows_stored") or 0) for r in reports),
               "complete_days": sum(1 for d in days if d.get("complete"))}
    extras = {"charging": {"cold_charging": cold}, "analysed_in_parts": parts}
    return ReportType(period=period, data_quality=quality, days=days, battery=battery, solar=solar, extras=extras,
                      capacity=cap)


def combine_parts(name: str, system_text: str, *parts: dict[str, Any]) -> dict[str, Any]:
    """The last Dask task of a vehicle analysed in parts: its fleet row from the parts' results."""
    from drawdown.analysis.system import parse_system

    try:
        system = parse_system(system_text)
        listed = [{"start": p["start"], "end": p["end"], "readings": p["readings"],
                   **({"error": p["error"]} if "error" in p else {})} for p in parts]
        good = [p for p in parts if "report" in p]
        if not good:
            return _error_row(name, "every part failed: " + "; ".join(str(p.get("error")) for p in parts))
        report = combined_report([p["report"] for p in good], system, listed)
        parked = parts[-1].get("parked") or (None, None, "the last part failed: " + str(parts[-1].get("error")))
        figures = vehicle_figures(name, report, system, parked=parked, parts=listed)
        return {"vehicle": name, "figures": figures.to_json(), "report": report.to_json()}
    except Exception as exc:  # noqa: BLE001 - a vehicle's bad data is its row, never the run's end
        return _error_row(name, f"{type(exc).__name__}: {exc}", traceback.format_exc(limit=4))


def sort_by_urgency(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Most urgent first: flags' weight, then the lowest capacity share, then the name."""
    def key(r: dict[str, Any]) -> tuple[float, float, str]:
        f = r["figures"]
        share = (f["usable_Ah"] / f["rated_Ah"]) if f.get("usable_Ah") and f.get("rated_Ah") else 1.0
        return (-float(f.get("urgency") or 0.0), share, str(r["vehicle"]))
    return sorted(rows, key=key)


def plan_vehicle(dataset: str, name: str, max_readings: int = TASK_READINGS
                 ) -> tuple[list[tuple[str | None, str | None]], str | None]:
    """``(parts, system_text)`` of one vehicle (:func:`plan_parts` on its month partitions'
    footers); a vehicle whose plan cannot be made (no system.toml, a bad one) is one task, which
    then reports the reason."""
    from drawdown.analysis.system import parse_system
    from drawdown.collector import fleet_dataset

    try:
        text = fleet_dataset.vehicle_system_text(dataset, name)
        tz = parse_system(text).site.timezone
        return plan_parts(fleet_dataset.month_rows(dataset, name), tz, max_readings), text
    except Exception:  # noqa: BLE001 - the whole-vehicle task names the problem in its row
        return [(None, None)], None


def fleet_report(dataset: str, vehicles: list[str] | None = None, *, scheduler: str | None = None,
                 n_workers: int = 2, memory_limit: str = "4GB", retries: int = 2,
                 max_readings: int | None = None,
                 progress: Callable[[int, int], None] | None = None) -> dict[str, Any]:
    """Run the fleet's analysis as Dask tasks and collect the fleet table.

    Each vehicle is one :func:`analyse_vehicle` task when its readings fit ``max_readings``;
    a longer one is :func:`analyse_part` tasks (:func:`plan_parts`) and one
    :func:`combine_parts` task fed by their futures, so no task holds more than
    ``max_readings`` readings (None: :func:`task_readings_for` the smallest worker's memory
    limit, as the scheduler reports it). ``scheduler``: the address of a running ``dask.distributed``
    scheduler (``tcp://host:8786``); None starts a LocalCluster of ``n_workers``
    single-threaded worker processes with ``memory_limit`` each. A task lost with its worker is
    run again (``retries``). ``progress(done, total)`` counts vehicles.
    """
    from dask.distributed import Client, LocalCluster, as_completed

    from drawdown.collector import fleet_dataset

    names = list(vehicles) if vehicles is not None else fleet_dataset.vehicles(dataset)
    cluster = None
    if scheduler is None:
        cluster = LocalCluster(n_workers=n_workers, threads_per_worker=1, memory_limit=memory_limit,
                               processes=True, dashboard_address=None)
        client = Client(cluster)
    else:
        client = Client(scheduler)
    tasks = 0
    try:
        if max_readings is None:
            limits = [w.get("memory_limit") or 0 for w in client.scheduler_info().get("workers", {}).values()]
            max_readings = task_readings_for(min(limits) if limits and all(limits) else None)
        futures = []
        for n in names:
            parts, text = plan_vehicle(dataset, n, max_readings)
            if len(parts) == 1 or text is None:
                futures.append(client.submit(analyse_vehicle, dataset, n, key=f"vehicle-{n}", retries=retries,
                                             pure=False))
                tasks += 1
                continue
            pieces = [client.submit(analyse_part, dataset, n, lo, hi, k == len(parts) - 1,
                                    key=f"part-{n}-{k:03d}", retries=retries, pure=False)
                      for k, (lo, hi) in enumerate(parts)]
            futures.append(client.submit(combine_parts, n, text, *pieces, key=f"vehicle-{n}", retries=retries,
                                         pure=False))
            tasks += len(pieces) + 1
        rows = []
        for k, fut in enumerate(as_completed(futures), start=1):
            try:
                rows.append(fut.result())
            except Exception as exc:  # noqa: BLE001 - a task that failed on every retry (a worker killed each time)
                rows.append(_error_row(str(fut.key).removeprefix("vehicle-"), f"task failed: {exc}"))
            if progress is not None:
                progress(k, len(futures))
        workers = len(client.scheduler_info().get("workers", {}))
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    rows = sort_by_urgency(rows)
    return {"dataset": str(dataset), "vehicles": len(names), "workers": workers, "tasks": tasks,
            "task_readings": max_readings,
            "scheduler": scheduler or "local", "fleet": [r["figures"] for r in rows],
            "reports": {r["vehicle"]: r["report"] for r in rows}}


def fleet_sql(dataset: str, query: str) -> pd.DataFrame:
    """Run ``query`` with DuckDB over the dataset (docs/fleet.md#sql); returns the rows as a DataFrame.

    Views: ``readings`` -- every reading with the export's columns (``t`` UTC, ``channel``,
    ``voltage_V``, ``current_A``, ``temperature_C``, ``soc_pct``) and the partition keys
    ``vehicle`` and ``month``; ``vehicles`` -- one row per vehicle with its first and last
    reading and row count. A local folder is read directly; another fsspec URL through DuckDB's
    fsspec bridge.
    """
    import duckdb
    import fsspec

    fs, root = fsspec.core.url_to_fs(str(dataset))
    protocol = fs.protocol[0] if isinstance(fs.protocol, (tuple, list)) else fs.protocol
    con = duckdb.connect()
    try:
        if protocol in ("file", "local"):
            base = root
        else:
            con.register_filesystem(fs)
            base = f"{protocol}://{root}"
        glob = f"{base.rstrip('/')}/vehicle=*/month=*/*.parquet"
        if not fs.glob(f"{root.rstrip('/')}/vehicle=*/month=*/*.parquet"):
            raise ValueError(f"--dataset {dataset}: no readings there (expected {glob}); "
                             "ingest some first ('drawdown fleet ingest SRC --dataset DIR')")
        safe = glob.replace("'", "''")
        con.execute(f"CREATE VIEW readings AS SELECT * FROM read_parquet('{safe}', hive_partitioning = true)")
        con.execute("CREATE VIEW vehicles AS SELECT vehicle, min(t) AS first, max(t) AS last, count(*) AS rows "
                    "FROM readings GROUP BY vehicle ORDER BY vehicle")
        try:
            return con.execute(query).df()
        except duckdb.Error as exc:
            raise ValueError(f"the query failed: {exc}") from None
    finally:
        con.close()
