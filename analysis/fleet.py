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
stops the others. Memory per task is one vehicle's readings (a vehicle-year at 1 Hz on three
channels is ~95 M readings, ~2.5 GB as float32 in the report's frame), so a worker needs about
4 GB for a year at 1 Hz.
"""

from __future__ import annotations

import math
import traceback
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
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
                "error": 6.0}


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
                    sizing: Callable[[pd.DataFrame, System], Any] | None = None) -> VehicleFigures:
    """The fleet figures of one vehicle from its report (and its readings for the days parked)."""
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
    if readings is not None:
        try:
            run = sizing or _present_autonomy
            parked50, parked90 = run(readings, system)
        except Exception as exc:  # noqa: BLE001 - one answer missing, the vehicle still reported
            parked_why = f"days parked not computed: {exc}"
    flags: list[str] = []
    reasons: dict[str, str] = {}
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
        usable_Ah_ci95=tuple(cap.ci95_Ah) if cap is not None and cap.ci95_Ah else None,  # type: ignore[arg-type]
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
        flags=flags, flag_reasons=reasons, urgency=urgency)


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
        reason = f"{type(exc).__name__}: {exc}"
        return {"vehicle": name, "figures": VehicleFigures(vehicle=name, error=reason, flags=["error"],
                                                           urgency=FLAG_WEIGHTS["error"]).to_json(),
                "report": None, "traceback": traceback.format_exc(limit=4)}


def sort_by_urgency(rows: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """Most urgent first: flags' weight, then the lowest capacity share, then the name."""
    def key(r: dict[str, Any]) -> tuple[float, float, str]:
        f = r["figures"]
        share = (f["usable_Ah"] / f["rated_Ah"]) if f.get("usable_Ah") and f.get("rated_Ah") else 1.0
        return (-float(f.get("urgency") or 0.0), share, str(r["vehicle"]))
    return sorted(rows, key=key)


def fleet_report(dataset: str, vehicles: list[str] | None = None, *, scheduler: str | None = None,
                 n_workers: int = 2, memory_limit: str = "4GB", retries: int = 2,
                 progress: Callable[[int, int], None] | None = None) -> dict[str, Any]:
    """Run :func:`analyse_vehicle` for every vehicle as Dask tasks and collect the fleet table.

    ``scheduler``: the address of a running ``dask.distributed`` scheduler (``tcp://host:8786``);
    None starts a LocalCluster of ``n_workers`` single-threaded worker processes with
    ``memory_limit`` each. A task lost with its worker is run again (``retries``).
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
    try:
        futures = [client.submit(analyse_vehicle, dataset, n, key=f"vehicle-{n}", retries=retries, pure=False)
                   for n in names]
        rows = []
        for k, fut in enumerate(as_completed(futures), start=1):
            try:
                rows.append(fut.result())
            except Exception as exc:  # noqa: BLE001 - a task that failed on every retry (a worker killed each time)
                name = str(fut.key).removeprefix("vehicle-")
                rows.append({"vehicle": name, "report": None,
                             "figures": VehicleFigures(vehicle=name, error=f"task failed: {exc}", flags=["error"],
                                                       urgency=FLAG_WEIGHTS["error"]).to_json()})
            if progress is not None:
                progress(k, len(futures))
        workers = len(client.scheduler_info().get("workers", {}))
    finally:
        client.close()
        if cluster is not None:
            cluster.close()
    rows = sort_by_urgency(rows)
    return {"dataset": str(dataset), "vehicles": len(names), "workers": workers,
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
