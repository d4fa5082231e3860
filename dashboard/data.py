"""The dashboard's one door to the store and to analysis.

Pages never open the store or call analysis themselves: they ask the
:class:`DataSource` of the running app (:func:`current`), which

* reads the store (:class:`collector.store.Store`) and the system description,
* calls analysis (report, solar, sizing) and caches each result per
  ``(store state, date range, system text)`` with :func:`functools.lru_cache`,
  so a page's several callbacks share one analysis run and a second visit
  costs nothing. The *store state* is the file's modification times plus the
  chunk count and newest chunk id, so an import or a collector write
  invalidates the cache by itself -- there is no cross-page state in module
  globals (the cache only memoises pure results);
* degrades section by section: when an analysis module is not installed yet or
  fails on this data, the section's :class:`Section` carries ``why`` -- a
  plain sentence the page shows -- instead of raising.

Times are UTC inside; a *date range* is a pair of local calendar dates (the
system's timezone), both inclusive, converted to ``[start 00:00, end+1 00:00)``.
"""

from __future__ import annotations

import base64
import binascii
import dataclasses
import functools
import json
import logging
import math
import os
import re
import tempfile
import threading
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Generic, TypeVar, cast

import numpy as np
import pandas as pd

from drawdown.analysis.sizing import SizingInputError
from drawdown.analysis.charge import coulomb_count_Ah
from drawdown.analysis.answers import pair_ci95_Ah, size_with, sizing_inputs
from drawdown.analysis.ledger import compute_ledger
from drawdown.analysis.readings import split_channels
from drawdown.analysis.report import Report, build_report
from drawdown.analysis.runtime import runtime_left
from drawdown.analysis.solar import analyse_solar
from drawdown.analysis.system import System, SystemError_, decode_system_bytes, parse_system
from drawdown.dashboard import figures, labels

log = logging.getLogger(__name__)

T = TypeVar("T")

#: Largest log file accepted by upload [bytes]: 50 MB (50,000,000 bytes), one figure said one way
#: everywhere (see dashboard.security).
from drawdown.dashboard.security import MAX_UPLOAD_BYTES, scrub_paths, upload_refusal  # noqa: E402
#: Ranges longer than this are read from the store in pieces for the screen (bounded memory).
_PIECE = pd.Timedelta(days=7)
#: Most readings one analysis run may load [rows]: ~4 months of 1 Hz logging on three channels,
#: ~1.3 GB as a canonical frame. A longer pick gets a message instead of exhausting memory.
MAX_ANALYSIS_READINGS = 30_000_000
#: The battery-health page looks at this much of the newest history (capacity needs long spans).
HEALTH_DAYS = 120
#: Live view: readings shown and used for "this draw".
LIVE_WINDOW = pd.Timedelta(hours=1)
#: The present draw is the mean battery current over this window (one sample is too noisy).
DRAW_WINDOW = pd.Timedelta(minutes=5)
#: A newest reading older than this is not "now": the live view says it shows the last known state.
STALE_AFTER = pd.Timedelta(minutes=15)
#: The "typical day" of the live view is the median of complete days in this window before the newest reading.
TYPICAL_DAYS = pd.Timedelta(days=14)

#: Low-voltage alarm per 12 V block [V] -- common practice: ~3.0 V/cell for LiFePO4 (12.0 V per 4S);
#: for lead-acid 11.9 V per 12 V block is about empty even at rest (docs/ocv.md OCV table: flooded
#: 0 % = 11.89 V, AGM 0 % = 11.80 V).
LOW_VOLTAGE_PER_BLOCK_V: dict[str, float] = {"lifepo4": 12.0, "agm": 11.9, "gel": 11.9, "flooded": 11.9}
#: Draw is "unusual" when the present draw exceeds this multiple of the 99th-percentile one-minute draw
#: of the previous week (a plain, explainable rule; no product's alarm logic).
UNUSUAL_DRAW_FACTOR = 1.5


@dataclass(frozen=True)
class Section(Generic[T]):
    """One part of a page's data: either a value or the reason there is none.

    Attributes
    ----------
    value : the result, or None
    why : a plain sentence for the page when ``value`` is None
    """

    value: T | None = None
    why: str | None = None

    @property
    def ok(self) -> bool:
        return self.value is not None


def _to_json(obj: Any) -> dict[str, Any]:
    """A result object's JSON dict (``.to_json()`` may give a dict or a string)."""
    if obj is None:
        return {}
    if isinstance(obj, dict):
        return obj
    to_json = getattr(obj, "to_json", None)
    if to_json is not None:
        out = to_json()
        return json.loads(out) if isinstance(out, str) else dict(out)
    if dataclasses.is_dataclass(obj):
        return dataclasses.asdict(cast(Any, obj))  # (a dataclass class, not an instance, fails in there as before)
    raise TypeError(f"cannot turn {type(obj).__name__} into JSON")


def _us(iso: str) -> int:
    """An ISO timestamp (naive = UTC) as int64 microseconds since 1970."""
    ts = pd.Timestamp(iso)
    ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
    # Not Timestamp.value: that is nanoseconds whatever the unit (pandas 3).
    return int((ts - pd.Timestamp(0, tz="UTC")) // pd.Timedelta(microseconds=1))


def as_json(obj: Any) -> dict[str, Any]:
    """A result object's JSON dict (public name of :func:`_to_json` for the pages)."""
    return _to_json(obj)


def _finite(x: Any) -> float | None:
    try:
        f = float(x)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None


# -- cached computations (pure functions of their hashable arguments) ----------------

def _single_flight(maxsize: int) -> Callable[[Callable[..., T]], Callable[..., T]]:
    """``lru_cache`` that also makes concurrent callers with the same arguments wait for one run.

    A page fires several callbacks at once for the same date range; without
    this each would start its own analysis run of the same data.
    """
    def wrap(fn: Callable[..., T]) -> Callable[..., T]:
        cached = functools.lru_cache(maxsize=maxsize)(fn)
        guard = threading.Lock()
        locks: dict[tuple, threading.Lock] = {}

        @functools.wraps(fn)
        def run(*args: Any) -> T:
            with guard:
                lock = locks.setdefault(args, threading.Lock())
            with lock:
                try:
                    return cached(*args)
                finally:
                    with guard:
                        if len(locks) > 4 * maxsize:
                            locks.clear()

        run.cache_clear = cached.cache_clear  # type: ignore[attr-defined]
        run.cache_info = cached.cache_info  # type: ignore[attr-defined]
        return run
    return wrap


def _open_store(path: str):
    from drawdown.collector.store import Store

    return Store(path)


@_single_flight(maxsize=8)
def _report_cached(store_path: str, key: tuple, start_iso: str, end_iso: str, system_text: str
                   ) -> tuple[Any, str | None]:
    system = parse_system(system_text)
    with _open_store(store_path) as store:
        readings = store.read(start_iso, end_iso)
        rejected = sum(int(i.get("rows_rejected") or 0) for i in store.imports())
    if readings.empty:
        return None, "No readings stored in this date range."
    try:
        report = build_report(readings, system, rows_rejected=rejected,
                              start=pd.Timestamp(start_iso), end=pd.Timestamp(end_iso))
    except Exception as exc:  # noqa: BLE001 - a page shows the reason instead of an error
        log.exception("build_report failed")
        return None, f"The analysis could not run on this range: {exc}"
    return report, None


@_single_flight(maxsize=8)
def _ledger_cached(store_path: str, key: tuple, start_iso: str, end_iso: str, system_text: str
                   ) -> tuple[Any, str | None]:
    """The daily ledger (analysis.ledger.LedgerResult): the report's own, else computed directly."""
    report, _why = _report_cached(store_path, key, start_iso, end_iso, system_text)
    if report is not None and report.ledger_result is not None:
        return report.ledger_result, None
    system = parse_system(system_text)
    with _open_store(store_path) as store:
        readings = store.read(start_iso, end_iso)
    if readings.empty:
        return None, "No readings stored in this date range."
    try:
        return compute_ledger(split_channels(readings), system), None
    except Exception as exc:  # noqa: BLE001
        log.exception("compute_ledger failed")
        return None, f"The daily ledger could not be built on this range: {exc}"


@_single_flight(maxsize=8)
def _solar_cached(store_path: str, key: tuple, start_iso: str, end_iso: str, system_text: str
                  ) -> tuple[Any, str | None]:
    system = parse_system(system_text)
    if not system.solar:
        return None, "The system description lists no solar array ([[solar]] in system.toml)."
    with _open_store(store_path) as store:
        readings = store.read(start_iso, end_iso)
    if readings.empty:
        return None, "No readings stored in this date range."
    try:
        return analyse_solar(readings, system), None
    except Exception as exc:  # noqa: BLE001
        log.exception("analyse_solar failed")
        return None, f"The solar analysis could not run on this range: {exc}"


@_single_flight(maxsize=8)
def _sizing_inputs_cached(store_path: str, key: tuple, start_iso: str, end_iso: str, system_text: str
                          ) -> tuple[Any, str | None]:
    """The sizing's measured inputs of a range (:func:`analysis.answers.sizing_inputs`, as ``drawdown size``)."""
    system = parse_system(system_text)
    with _open_store(store_path) as store:
        readings = store.read(start_iso, end_iso)
    try:
        return sizing_inputs(readings, system), None
    except Exception as exc:  # noqa: BLE001 - a page shows the reason instead of an error
        log.exception("sizing_inputs failed")
        return None, f"The sizing inputs could not be measured on this range: {exc}"


@_single_flight(maxsize=32)
def _sizing_cached(store_path: str, key: tuple, start_iso: str, end_iso: str, system_text: str,
                   autonomy_days: float, percentile: float) -> tuple[Any, str | None]:
    """The sizing answer: the same :func:`analysis.answers.size_with` call as ``drawdown size``."""
    inputs, why = _sizing_inputs_cached(store_path, key, start_iso, end_iso, system_text)
    if inputs is None:
        return None, why
    try:
        result = size_with(inputs, parse_system(system_text), autonomy_days=autonomy_days, percentile=percentile)
    except SizingInputError as exc:
        return None, f"The sizing needs more input: {exc}"
    except Exception as exc:  # noqa: BLE001
        log.exception("recommend failed")
        return None, f"The sizing could not run: {exc}"
    return result, None


@_single_flight(maxsize=64)
def _screen_series_cached(store_path: str, key: tuple, channel: str, quantities: tuple[str, ...],
                          start_iso: str | None, end_iso: str | None, n_out: int
                          ) -> dict[str, tuple[pd.DatetimeIndex, np.ndarray, bool]]:
    """Per quantity: (UTC times, values thinned to ~n_out, full resolution?); one store read per piece."""
    empty = {q: (pd.DatetimeIndex([], tz="UTC"), np.array([]), True) for q in quantities}
    with _open_store(store_path) as store:
        span = store.time_span()
        if span is None:
            return empty
        start = pd.Timestamp(start_iso) if start_iso else span[0]
        end = pd.Timestamp(end_iso) if end_iso else span[1] + pd.Timedelta(microseconds=1)
        total = end - start
        if total <= pd.Timedelta(0):
            return empty
        edges = list(pd.date_range(start, end, freq=_PIECE)) if total > _PIECE else [start]
        if edges[-1] < end:
            edges.append(end)
        ts: dict[str, list[pd.DatetimeIndex]] = {q: [] for q in quantities}
        ys: dict[str, list[np.ndarray]] = {q: [] for q in quantities}
        full = dict.fromkeys(quantities, True)
        for lo, hi in zip(edges[:-1], edges[1:]):  # a loop over week-long pieces, not readings
            piece = store.read(lo, hi, channels=[channel])
            if piece.empty:
                continue
            share = max(4, int(round(n_out * ((hi - lo) / total))))
            for q in quantities:
                y = piece[q].to_numpy(dtype="float64")
                full[q] &= bool(np.isfinite(y).sum() <= share)
                t_d, y_d = figures.downsample(piece["t"], y, share)
                ts[q].append(t_d)
                ys[q].append(y_d)
    out = {}
    for q in quantities:
        if not ts[q]:
            out[q] = empty[q]
            continue
        t = ts[q][0].append(ts[q][1:]) if len(ts[q]) > 1 else ts[q][0]
        out[q] = (t, np.concatenate(ys[q]), full[q])
    return out


@_single_flight(maxsize=16)
def _usual_draw_cached(store_path: str, key: tuple, start_iso: str, end_iso: str) -> float | None:
    """99th percentile of the one-minute mean discharge current over ``[start, end)`` [A], or None."""
    with _open_store(store_path) as store:
        week = store.read(start_iso, end_iso, channels=["battery"])
    cur = week["current_A"].to_numpy(dtype=float) if not week.empty else np.array([])
    if cur.size <= 600:
        return None
    minute = pd.Series(cur, index=pd.DatetimeIndex(week["t"])).resample("1min").mean().dropna()
    discharge = -minute[minute < 0].to_numpy()
    return float(np.percentile(discharge, 99)) if discharge.size >= 60 else None


def clear_caches() -> None:
    """Forget every cached result (tests; after writing system.toml)."""
    fn: Any  # each has the cache_clear that _single_flight sets on it
    for fn in (_report_cached, _ledger_cached, _solar_cached, _sizing_inputs_cached, _sizing_cached,
               _screen_series_cached, _usual_draw_cached):
        fn.cache_clear()


# -- adapters from analysis results to what pages draw --------------------------------

_SOURCES = ("solar", "alternator", "shore", "other")


_DAY_COLUMNS = ["date", "complete", "consumed_Ah", "consumed_Wh", "soc_min_pct", "soc_end_pct",
                *[f"charged_{s}_Ah" for s in _SOURCES], "charged_Ah",
                "consumed_Ah_lo", "consumed_Ah_hi",  # the 95 % range of a single shunt's estimate, else NaN
                "hidden_load_h", "observed_load_share"]  # hours whose load was inferred; share of use seen


def _ledger_days(days: pd.DataFrame) -> pd.DataFrame:
    """analysis.ledger's day frame (``charged_Ah_<source>``) in the dashboard's flat form."""
    out = pd.DataFrame({"date": pd.to_datetime(days["date"]).dt.strftime("%Y-%m-%d"),
                        "complete": days["complete"].astype(bool)})
    for col in ("consumed_Ah", "consumed_Wh", "soc_min_pct", "soc_end_pct"):
        out[col] = pd.to_numeric(days[col], errors="coerce") if col in days else np.nan
    for src in _SOURCES:
        col = f"charged_Ah_{src}"
        out[f"charged_{src}_Ah"] = pd.to_numeric(days[col], errors="coerce").fillna(0.0) if col in days else 0.0
    out["charged_Ah"] = out[[f"charged_{s}_Ah" for s in _SOURCES]].sum(axis=1)
    for col, src in (("consumed_Ah_lo", "consumed_Ah_pi95_lo"), ("consumed_Ah_hi", "consumed_Ah_pi95_hi")):
        out[col] = pd.to_numeric(days[src], errors="coerce").to_numpy() if src in days else np.nan
    for col in ("hidden_load_h", "observed_load_share"):
        out[col] = pd.to_numeric(days[col], errors="coerce").to_numpy() if col in days else np.nan
    return out[_DAY_COLUMNS].reset_index(drop=True)


def _report_days(report: Any) -> pd.DataFrame:
    """The report's ``days`` (docs/contracts.md#report contract keys) as a flat DataFrame.

    Columns: date, complete, consumed_Ah, consumed_Wh, charged_<source>_Ah for
    solar/alternator/shore/other, charged_Ah (total), soc_min_pct, soc_end_pct, and
    consumed_Ah_lo/hi (the 95 % range of a single shunt's estimate, else None).
    """
    days = _to_json(report).get("days") or []
    rows = []
    for d in days:
        charged = d.get("charged_Ah") or {}
        row = {"date": d.get("date"), "complete": bool(d.get("complete", True)),
               "consumed_Ah": _finite(d.get("consumed_Ah")), "consumed_Wh": _finite(d.get("consumed_Wh")),
               "soc_min_pct": _finite(d.get("soc_min_pct")), "soc_end_pct": _finite(d.get("soc_end_pct"))}
        for s in _SOURCES:
            row[f"charged_{s}_Ah"] = _finite(charged.get(s)) or 0.0
        row["charged_Ah"] = sum(row[f"charged_{s}_Ah"] for s in _SOURCES)
        lo_hi = d.get("consumed_Ah_pi95") or (None, None)
        row["consumed_Ah_lo"], row["consumed_Ah_hi"] = _finite(lo_hi[0]), _finite(lo_hi[1])
        row["hidden_load_h"] = _finite(d.get("hidden_load_h"))
        row["observed_load_share"] = _finite(d.get("observed_load_share"))
        rows.append(row)
    return pd.DataFrame(rows, columns=_DAY_COLUMNS)


def soc_band_of(report: Any) -> pd.DataFrame | None:
    """The report's 95 % SoC band (``lo``/``hi`` [%] by UTC time), or None."""
    s = (report.extras.get("soc_series") if hasattr(report, "extras") else None) or {}
    if not s.get("soc_pct_lo"):
        return None
    return pd.DataFrame({"lo": s["soc_pct_lo"], "hi": s["soc_pct_hi"]},
                        index=pd.to_datetime(s["t"], utc=True), dtype="float64")


def _soc_of(report: Report) -> tuple[pd.Series | None, list[pd.Timestamp]]:
    """The report's SoC series [%] and its full-charge resync times."""
    resync = list(report.extras.get("resyncs") or [])
    return report.soc, [pd.Timestamp(t) for t in resync]


@dataclass(frozen=True)
class Health:
    """What the battery-health page draws.

    Attributes
    ----------
    battery : the report's ``battery`` JSON (docs/contracts.md#report keys, plus ``..._why`` reasons)
    capacity_points : per anchor pair: t and start (local), usable_Ah, lo_Ah, hi_Ah (its 95 % interval),
        delta_soc_pct, mean_discharge_A, start_kind, end_kind
    resistance_points : per day: t (local date), resistance_ohm, steps
    resistance_trend_ohm_per_30d : linear trend, None when too few days
    peukert_points : (current_A, runtime_h) pairs used in the fit
    peukert_source : 'fitted', 'system.toml' or 'chemistry default'
    rated_Ah, rated_hours : from system.toml
    """

    battery: dict[str, Any]
    capacity_points: pd.DataFrame
    resistance_points: pd.DataFrame
    resistance_trend_ohm_per_30d: float | None
    peukert_points: tuple[tuple[float, float], ...]
    peukert_source: str | None
    rated_Ah: float
    rated_hours: float
    tz: str = "UTC"


def _health_of(report: Report, system: System) -> Health:
    """The health page's pieces from the report's typed capacity, Peukert and resistance results."""
    battery = dict(report.battery)
    cap, pk, res = report.capacity, report.peukert, report.resistance
    tz = system.site.timezone
    rows = []
    for pair in cap.pairs if cap is not None else ():  # a loop over discharges (a handful), not over readings
        lo, hi = pair_ci95_Ah(pair)
        rows.append({"t": pd.Timestamp(pair.end.time).tz_convert(tz), "start": pd.Timestamp(pair.start.time).tz_convert(tz),
                     "usable_Ah": float(pair.capacity_Ah), "lo_Ah": lo, "hi_Ah": hi,
                     "delta_soc_pct": 100 * abs(pair.delta_soc), "mean_discharge_A": float(pair.mean_discharge_A),
                     "start_kind": pair.start.kind, "end_kind": pair.end.kind})
    pts = pd.DataFrame(rows, columns=["t", "start", "usable_Ah", "lo_Ah", "hi_Ah", "delta_soc_pct",
                                      "mean_discharge_A", "start_kind", "end_kind"])
    per_day = res.per_day if res is not None and len(res.per_day) else pd.DataFrame(columns=["date", "ohm", "steps"])
    rpts = pd.DataFrame({"t": pd.to_datetime(per_day["date"]), "resistance_ohm": per_day["ohm"].astype(float),
                         "steps": per_day["steps"] if "steps" in per_day else np.nan})
    trend = _finite(res.trend_ohm_per_30d) if res is not None else None
    # Only the discharges the Peukert fit used are "your discharges": a chemistry default has none.
    peukert_points = tuple(pk.points) if pk is not None and pk.source == "fitted" else ()
    return Health(battery=battery, capacity_points=pts, resistance_points=rpts,
                  resistance_trend_ohm_per_30d=trend, peukert_points=peukert_points,
                  peukert_source=pk.source if pk is not None else battery.get("peukert_k_source"),
                  rated_Ah=system.battery.rated_capacity_Ah, rated_hours=system.battery.rated_hours, tz=tz)


@dataclass(frozen=True)
class LiveSnapshot:
    """What the live view shows: the newest readings and what follows from them.

    Attributes
    ----------
    t : time of the newest battery reading (UTC)
    voltage_V, current_A, power_W : newest battery values (current positive = charging)
    draw_A : mean battery current over the last five minutes [A] (negative = discharging)
    soc_pct, soc_source : state of charge and where it came from
    temperature_C : battery temperature, if measured
    remaining_Ah : charge left above the reserve [Ah]
    runtime_at_draw_h : hours to the reserve at ``draw_A`` (None when charging or unknown)
    typical_day_Ah : median consumption of the recent complete days [Ah]
    runtime_typical_days : days to the reserve at the typical day's use
    alarms : plain sentences (low voltage, unusual draw); empty when all is well
    notes : why a figure is missing
    readings : the last hour, canonical long frame
    low_voltage_V : the alarm level used [V]
    reserve_pct : the reserve, the lowest planned state of charge (1 - max_dod) [%]
    runtime_no_charging_days : days to the reserve at the typical day's use with no charging at all
    runtime_typical_days : (above) days to the reserve when the typical day's charging also continues
    typical_day_charged_Ah : median charge of the recent complete days [Ah]
    age : how old the newest reading is
    stale : the newest reading is older than :data:`STALE_AFTER`: not live, the last known state
    """

    t: pd.Timestamp | None
    voltage_V: float | None
    current_A: float | None
    power_W: float | None
    draw_A: float | None
    soc_pct: float | None
    soc_source: str
    temperature_C: float | None
    remaining_Ah: float | None
    runtime_at_draw_h: float | None
    typical_day_Ah: float | None
    runtime_typical_days: float | None
    alarms: tuple[str, ...]
    notes: tuple[str, ...]
    readings: pd.DataFrame
    low_voltage_V: float | None
    reserve_pct: float | None = None
    runtime_no_charging_days: float | None = None
    typical_day_charged_Ah: float | None = None
    age: pd.Timedelta | None = None
    stale: bool = False


def full_charge_summary(system: System) -> str:
    """One line: the full-charge settings and the reserve in use, each saying where it comes from."""
    b = system.battery

    def origin(value: Any) -> str:
        return "set" if value is not None else "default"

    return (f"Counted as full when, while charging, the bank holds at least {b.effective_full_voltage_V:.2f} V "
            f"(full_voltage_V, {origin(b.full_voltage_V)}) and takes at most {b.effective_full_current_A:.1f} A "
            f"({b.effective_full_current_pct:g} % of {b.rated_capacity_Ah:g} Ah: full_current_pct, "
            f"{origin(b.full_current_pct)}) for {b.full_hold_s:g} s (full_hold_s). Reserve: "
            f"{b.reserve_pct:.0f} % state of charge (1 - max_dod, {origin(b.max_dod)}).")


# -- the data source -------------------------------------------------------------------

class DataSource:
    """The store and system description of one running dashboard.

    Parameters
    ----------
    store_path
        The SQLite reading store.
    system_path
        ``system.toml``; it may not exist yet (the setup page can write it).
    read_only
        When given, the sentence that refuses every write (a fleet vehicle's pages show a copy
        of the fleet dataset: :mod:`dashboard.fleet_source`); the setup page shows it.
    """

    def __init__(self, store_path: str | Path, system_path: str | Path, *, read_only: str | None = None):
        self.store_path = Path(store_path)
        self.system_path = Path(system_path)
        self.read_only = read_only
        self._write_lock = threading.Lock()

    @classmethod
    def from_context(cls, ctx: Any) -> DataSource:
        return cls(ctx.store_path, ctx.system_path)

    # -- store -----------------------------------------------------------------
    def store_key(self, start_iso: str | None = None, end_iso: str | None = None) -> tuple:
        """What changes whenever the store's content changes (cache key).

        With a time range: the count, newest id and readings of the chunks
        overlapping ``[start, end)`` -- chunks are append-only, so a live
        collector writing *now* does not invalidate the analysis of last week.
        Without: the file modification times (main file and write-ahead log)
        plus the same figures over the whole store.
        """
        if start_iso is not None and end_iso is not None:
            if not self.has_store():
                return (None,)
            lo, hi = _us(start_iso), _us(end_iso)
            with _open_store(str(self.store_path)) as store:
                n, last_id, rows = store.execute(
                    "SELECT COUNT(*), MAX(id), SUM(n) FROM chunks WHERE t_last_us >= ? AND t_first_us < ?",
                    (lo, hi)).fetchone()
            return (lo, hi, n, last_id, rows)
        stamps: list[tuple[int, int] | None] = []
        for suffix in ("", "-wal"):
            try:
                st = os.stat(f"{self.store_path}{suffix}")
                stamps.append((st.st_mtime_ns, st.st_size))
            except FileNotFoundError:
                stamps.append(None)
        if stamps[0] is None:
            return (None,)
        with _open_store(str(self.store_path)) as store:
            n, last_id, rows = store.execute("SELECT COUNT(*), MAX(id), SUM(n) FROM chunks").fetchone()
        return (*stamps, n, last_id, rows)

    def has_store(self) -> bool:
        return self.store_path.exists()

    def time_span(self) -> tuple[pd.Timestamp, pd.Timestamp] | None:
        if not self.has_store():
            return None
        with _open_store(str(self.store_path)) as store:
            return store.time_span()

    def channel_summary(self) -> dict[str, dict[str, Any]]:
        if not self.has_store():
            return {}
        with _open_store(str(self.store_path)) as store:
            return store.channel_summary()

    def imports(self) -> list[dict[str, Any]]:
        if not self.has_store():
            return []
        with _open_store(str(self.store_path)) as store:
            return store.imports()

    # -- system ----------------------------------------------------------------
    def system_text(self) -> str | None:
        """The system description's text (UTF-8, or UTF-16 as some editors save it); None when unreadable."""
        try:
            return decode_system_bytes(self.system_path.read_bytes(), source=self.system_path.name)
        except (OSError, SystemError_):
            return None

    def system(self) -> Section[System]:
        try:
            text = decode_system_bytes(self.system_path.read_bytes(), source=self.system_path.name)
        except FileNotFoundError:
            return Section(why=f"No system description at {self.system_path.name}: write one on the System "
                               "setup page.")
        except OSError as exc:
            return Section(why=f"The system description {self.system_path.name} cannot be read "
                               f"({exc.strerror or exc}).")
        except SystemError_ as exc:
            return Section(why=str(exc))
        try:
            return Section(parse_system(text, source=str(self.system_path)))
        except SystemError_ as exc:
            return Section(why=str(exc))

    def timezone(self) -> str:
        s = self.system()
        return s.value.site.timezone if s.value is not None else "UTC"

    @staticmethod
    def validate_system_text(text: str, *, source: str = "system.toml") -> tuple[System | None, str]:
        """Parse edited TOML: (System, 'valid ...') or (None, the validation messages)."""
        try:
            system = parse_system(text, source=source)
        except SystemError_ as exc:
            return None, str(exc)
        b = system.battery
        return system, (f"{source}: valid. Battery {b.rated_capacity_Ah:g} Ah {labels.chemistry(b.chemistry)} at "
                        f"{b.nominal_voltage_V:g} V; {labels.plural(len(system.solar), 'solar array')}, "
                        f"{labels.plural(len(system.charger), 'charger')}, "
                        f"{labels.plural(len(system.load), 'planned load')}.\n"
                        + full_charge_summary(system))

    def save_system_text(self, text: str) -> tuple[bool, str]:
        """Write ``system.toml`` only when the text is valid; (saved, message)."""
        if self.read_only:
            return False, f"{self.read_only}\nNothing was written."
        system, message = self.validate_system_text(text, source=self.system_path.name)  # no server path on a page
        if system is None:
            return False, message + "\nNothing was written."
        with self._write_lock:
            self.system_path.parent.mkdir(parents=True, exist_ok=True)
            tmp = self.system_path.with_suffix(".toml.tmp")
            tmp.write_text(text, encoding="utf-8")
            os.replace(tmp, self.system_path)  # atomic: a crash never leaves half a file
        clear_caches()
        return True, message + f"\nSaved to {self.system_path.name}."

    # -- date ranges ---------------------------------------------------------------
    def default_range(self, days: int = 14) -> tuple[str, str] | None:
        """The last ``days`` local days of the store (or all of it): (start, end) dates."""
        span = self.time_span()
        if span is None:
            return None
        tz = self.timezone()
        first, last = span[0].tz_convert(tz).date(), span[1].tz_convert(tz).date()
        start = max(first, last - pd.Timedelta(days=days - 1))
        return start.isoformat(), last.isoformat()

    def health_range(self) -> tuple[str, str] | None:
        """The newest :data:`HEALTH_DAYS` local days of the store (or all of it)."""
        return self.default_range(days=HEALTH_DAYS)

    def full_range(self) -> tuple[str, str] | None:
        span = self.time_span()
        if span is None:
            return None
        tz = self.timezone()
        return span[0].tz_convert(tz).date().isoformat(), span[1].tz_convert(tz).date().isoformat()

    def utc_bounds(self, start_date: str | None, end_date: str | None) -> tuple[str, str]:
        """Local inclusive dates to UTC ``[start, end)`` ISO strings (the cache's keys)."""
        tz = self.timezone()
        lo = pd.Timestamp(start_date).tz_localize(tz)
        hi = (pd.Timestamp(end_date) + pd.Timedelta(days=1)).tz_localize(tz)
        if hi <= lo:
            raise ValueError(f"date range {start_date} .. {end_date}: the end is before the start")
        return lo.tz_convert("UTC").isoformat(), hi.tz_convert("UTC").isoformat()

    def _keyed(self, start_date: str | None, end_date: str | None, *, utc: tuple[str, str] | None = None
               ) -> tuple[str, tuple, str, str, str] | Section:
        """The cache arguments of a range: local dates, or ``utc=(start, end)`` ISO bounds instead."""
        sys_s = self.system()
        if not sys_s.ok:
            return Section(why=sys_s.why)
        if not self.has_store():
            return Section(why="The store is empty: import a log on the System setup page.")
        if utc is not None:
            lo, hi = utc
        else:
            try:
                lo, hi = self.utc_bounds(start_date, end_date)
            except (ValueError, TypeError) as exc:
                return Section(why=f"Pick a valid date range ({exc}).")
        key = self.store_key(lo, hi)
        if key[-1] is not None and key[-1] > MAX_ANALYSIS_READINGS:
            return Section(why=f"this range holds {key[-1]:,} readings, more than the "
                               f"{MAX_ANALYSIS_READINGS:,} one analysis run loads; pick a shorter range "
                               "(or analyse it with `drawdown report --from ... --to ...`).")
        return str(self.store_path), key, lo, hi, self.system_text() or ""

    # -- analysis sections -------------------------------------------------------------
    def report(self, start_date: str | None = None, end_date: str | None = None, *,
               utc: tuple[str, str] | None = None) -> Section[Any]:
        """The analysis report of a local date range, or of ``utc=(start, end)`` (cached)."""
        k = self._keyed(start_date, end_date, utc=utc)
        if isinstance(k, Section):
            return k
        value, why = _report_cached(*k)
        return Section(value, why)

    def report_json(self, start_date: str, end_date: str) -> Section[dict]:
        s = self.report(start_date, end_date)
        return Section(_to_json(s.value), None) if s.ok else Section(why=s.why)

    def ledger(self, start_date: str | None = None, end_date: str | None = None, *,
               utc: tuple[str, str] | None = None) -> Section[Any]:
        """The analysis.ledger.LedgerResult of a range (the report's, else computed directly; cached)."""
        k = self._keyed(start_date, end_date, utc=utc)
        if isinstance(k, Section):
            return k
        value, why = _ledger_cached(*k)
        return Section(value, why)

    def days(self, start_date: str | None = None, end_date: str | None = None, *,
             utc: tuple[str, str] | None = None) -> Section[pd.DataFrame]:
        """The daily ledger of a range as a flat DataFrame (columns of :func:`_ledger_days`)."""
        led = self.ledger(start_date, end_date, utc=utc)
        if led.ok and isinstance(getattr(led.value, "days", None), pd.DataFrame):
            assert led.value is not None  # ok
            return Section(_ledger_days(led.value.days))
        rep = self.report(start_date, end_date, utc=utc)
        if rep.ok:
            return Section(_report_days(rep.value))
        return Section(why=led.why or rep.why)

    def soc(self, start_date: str | None = None, end_date: str | None = None, *,
            utc: tuple[str, str] | None = None) -> Section[tuple[pd.Series, list[pd.Timestamp]]]:
        """State of charge [%] over the range and its full-charge resync times."""
        rep = self.report(start_date, end_date, utc=utc)
        if rep.ok:
            assert rep.value is not None  # ok
            soc, resync = _soc_of(rep.value)
            if soc is not None:
                return Section((soc, resync))
        led = self.ledger(start_date, end_date, utc=utc)
        if led.ok and getattr(led.value, "soc", None) is not None:
            assert led.value is not None  # ok
            return Section(_soc_of(led.value))
        return Section(why=led.why or rep.why or "No state-of-charge estimate (no battery channel).")

    def soc_band(self, start_date: str | None = None, end_date: str | None = None) -> pd.DataFrame | None:
        """The 95 % band of the SoC estimate over the range, or None."""
        rep = self.report(start_date, end_date)
        return soc_band_of(rep.value) if rep.ok else None

    def health(self, start_date: str, end_date: str) -> Section[Health]:
        """Capacity, internal resistance and Peukert pieces of the report (see :class:`Health`)."""
        s = self.report(start_date, end_date)
        if not s.ok:
            return Section(why=s.why)
        system = self.system().value
        assert s.value is not None and system is not None  # a report needs the system description
        return Section(_health_of(s.value, system))

    def solar(self, start_date: str, end_date: str) -> Section[Any]:
        """The solar analysis of a range: the report's own when it has one, else a direct run (cached)."""
        k = self._keyed(start_date, end_date)
        if isinstance(k, Section):
            return k
        report, _why = _report_cached(*k)
        if report is not None and report.solar_analysis is not None:
            return Section(report.solar_analysis)
        value, why = _solar_cached(*k)
        return Section(value, why)

    def sizing(self, start_date: str | None = None, end_date: str | None = None, *, autonomy_days: float,
               percentile: float) -> Section[Any]:
        """The sizing answer of a range (:func:`analysis.answers.size_with`, as ``drawdown size``; cached).

        Without a range (nothing stored) it sizes from the ``[[load]]`` inventory alone.
        """
        if start_date is None or end_date is None:
            sys_s = self.system()
            if not sys_s.ok:
                return Section(why=sys_s.why)
            assert sys_s.value is not None  # ok
            try:
                return Section(size_with(sizing_inputs(None, sys_s.value), sys_s.value,
                                         autonomy_days=float(autonomy_days), percentile=float(percentile)))
            except SizingInputError as exc:
                return Section(why=f"The sizing needs more input: {exc}")
        k = self._keyed(start_date, end_date)
        if isinstance(k, Section):
            return k
        value, why = _sizing_cached(*k, float(autonomy_days), float(percentile))
        return Section(value, why)

    # -- raw series for the screen ---------------------------------------------------------
    def screen_series(self, channel: str, quantity: str, start: Any = None, end: Any = None, *,
                      n_out: int = figures.SCREEN_POINTS) -> tuple[pd.DatetimeIndex, np.ndarray, bool]:
        """One channel's quantity over ``[start, end)`` thinned to ~``n_out`` points.

        Long ranges are read in week-long pieces so memory stays bounded on a
        year of 1 Hz data. Returns (UTC times, values, full_resolution) where
        ``full_resolution`` says that every stored reading is included.
        """
        return self.screen_multi(channel, (quantity,), start, end, n_out=n_out)[quantity]

    def screen_multi(self, channel: str, quantities: tuple[str, ...], start: Any = None, end: Any = None, *,
                     n_out: int = figures.SCREEN_POINTS) -> dict[str, tuple[pd.DatetimeIndex, np.ndarray, bool]]:
        """Several quantities of one channel from ONE read of the store (see :meth:`screen_series`)."""
        if not self.has_store():
            return {q: (pd.DatetimeIndex([], tz="UTC"), np.array([]), True) for q in quantities}
        s = None if start is None else pd.Timestamp(start).isoformat()
        e = None if end is None else pd.Timestamp(end).isoformat()
        key = self.store_key(s, e) if s is not None and e is not None else self.store_key()
        return _screen_series_cached(str(self.store_path), key, channel, tuple(quantities), s, e, int(n_out))

    # -- live view ------------------------------------------------------------------------
    def live(self, *, now: Any = None) -> LiveSnapshot:
        """The newest stored readings and what they mean (see :class:`LiveSnapshot`).

        ``now`` (UTC; default the clock) decides whether the newest reading is
        still live or :data:`STALE_AFTER` old and shown as the last known state.
        """
        notes: list[str] = []
        empty = LiveSnapshot(None, None, None, None, None, None, "", None, None, None, None, None, (), (),
                             pd.DataFrame(), None)
        span = self.time_span()
        if span is None:
            return dataclasses.replace(empty, notes=("No readings stored yet: import a log on the System setup "
                                                     "page or start `drawdown collect`.",))
        last = span[1]
        with _open_store(str(self.store_path)) as store:
            recent = store.read(last - LIVE_WINDOW, last + pd.Timedelta(microseconds=1))
        bat = recent[recent["channel"].astype(str) == "battery"]
        if bat.empty:
            return dataclasses.replace(empty, readings=recent, notes=("No battery channel in the last hour.",))
        row = bat.iloc[-1]
        v, i = _finite(row["voltage_V"]), _finite(row["current_A"])
        p = v * i if v is not None and i is not None else None
        t_last = pd.Timestamp(row["t"])
        draw_mask = bat["t"] >= t_last - DRAW_WINDOW
        draw = _finite(np.nanmean(bat.loc[draw_mask, "current_A"].to_numpy(dtype=float))) \
            if bat.loc[draw_mask, "current_A"].notna().any() else None
        temp = _finite(row["temperature_C"])

        sys_s = self.system()
        system = sys_s.value
        if system is None:
            notes.append(sys_s.why or "No system description.")
        low_v = None
        if system is not None:
            low_v = LOW_VOLTAGE_PER_BLOCK_V[system.battery.chemistry] * round(system.battery.series_12V_blocks)

        # The analysis context is the fortnight up to the start of the newest reading's hour: its
        # cache stays valid while a live collector appends (store_key is per range), and the
        # state of charge is carried forward from its end by counting the charge since.
        hour = t_last.floor("1h")
        soc, soc_source, usable, typical = None, "", None, None
        ledger_days, peukert_k = None, None
        if system is not None and hour > span[0]:
            tz = system.site.timezone
            lo = (hour - TYPICAL_DAYS).tz_convert(tz).normalize().tz_convert("UTC")
            ctx_utc = (max(lo, span[0].floor("1h")).isoformat(), hour.isoformat())
            rep = self.report(utc=ctx_utc)
            if rep.ok:
                batt = _to_json(rep.value).get("battery", {})
                usable, peukert_k = _finite(batt.get("usable_Ah")), _finite(batt.get("peukert_k"))
            soc_s = self.soc(utc=ctx_utc)
            if soc_s.value is not None and len(soc_s.value[0]):
                series = soc_s.value[0]
                t_soc = series.index[-1]
                since = bat[bat["t"] >= t_soc]
                if t_soc >= t_last - LIVE_WINDOW - pd.Timedelta(hours=1):
                    moved = coulomb_count_Ah(since["t"], since["current_A"].fillna(0.0).to_numpy()) \
                        if len(since) > 1 else 0.0
                    cap = usable or system.battery.rated_capacity_Ah
                    soc = float(np.clip(float(series.iloc[-1]) + 100.0 * moved / cap, 0.0, 100.0))
                    soc_source = "estimated by coulomb counting"
            led = self.ledger(utc=ctx_utc)
            if led.ok:
                ledger_days = getattr(led.value, "days", None)
            days = self.days(utc=ctx_utc)
            if days.ok:
                assert days.value is not None  # ok
                done = days.value[days.value["complete"] & days.value["consumed_Ah"].notna()]
                if len(done):
                    typical = float(np.median(np.abs(done["consumed_Ah"].to_numpy(dtype=float))))
                else:
                    notes.append("Typical day: no whole day in the last fortnight yet.")
            else:
                notes.append(f"Typical day: {days.why}")
        if soc is None and _finite(row["soc_pct"]) is not None:
            soc, soc_source = _finite(row["soc_pct"]), "the monitor's own figure"

        remaining = runtime_h = runtime_days = no_charge_days = typical_charged = None
        if system is not None and soc is not None:
            # analysis.runtime: usable charge above the reserve (1 - max_dod); Peukert-corrected present draw.
            est = runtime_left(soc_now_pct=soc, last_hour_net_A=draw,
                               ledger_days=ledger_days if ledger_days is not None else pd.DataFrame(),
                               system=system, capacity_Ah=usable,
                               peukert_k=peukert_k or system.battery.effective_peukert_k)
            remaining, runtime_h = _finite(est.usable_left_Ah), _finite(est.hours_at_present_draw)
            runtime_days = _finite(est.days_at_typical_day)
            no_charge_days = _finite(est.days_without_charging)
            typical = _finite(est.typical_day_consumed_Ah) or typical
            typical_charged = _finite(est.typical_day_charged_Ah)
            if runtime_days is None and est.days_why:
                notes.append(f"Runtime at a typical day: {est.days_why}.")
        alarms: list[str] = []
        if low_v is not None and v is not None and v < low_v:
            alarms.append(f"Low voltage: {v:.2f} V is below {low_v:.1f} V. Reduce the load or charge soon.")
        if draw is not None and draw < 0:
            w_lo, w_hi = (hour - pd.Timedelta(days=7)).isoformat(), hour.isoformat()
            usual = _usual_draw_cached(str(self.store_path), self.store_key(w_lo, w_hi), w_lo, w_hi)
            if usual is not None and -draw > UNUSUAL_DRAW_FACTOR * usual and -draw > 1.0:
                alarms.append(f"Unusual draw: {-draw:.1f} A is more than {UNUSUAL_DRAW_FACTOR:g}x the "
                              f"heaviest usual draw of the past week ({usual:.1f} A).")
        age = (pd.Timestamp.now(tz="UTC") if now is None else pd.Timestamp(now)) - t_last
        return LiveSnapshot(t_last, v, i, p, draw, soc, soc_source, temp, remaining, runtime_h, typical,
                            runtime_days, tuple(alarms), tuple(notes), recent, low_v,
                            system.battery.reserve_pct if system is not None else None,
                            runtime_no_charging_days=no_charge_days, typical_day_charged_Ah=typical_charged,
                            age=age, stale=age > STALE_AFTER)

    # -- upload -----------------------------------------------------------------------------
    def import_upload(self, filename: str, contents: str) -> dict[str, Any]:
        """Import one uploaded log with the same importer as ``drawdown import``.

        Parameters
        ----------
        filename
            The name the browser gave (only its suffix is kept, for format detection).
        contents
            The ``dcc.Upload`` data URL (``data:<mime>;base64,<payload>``).

        Returns
        -------
        dict
            ``{"ok": True, "summary": <import JSON>}`` or ``{"ok": False, "error": message}``.
            The file is written to a private temporary folder, parsed as data
            (never executed) and deleted.
        """
        from drawdown.collector.importing import import_log

        if self.read_only:
            return {"ok": False, "error": f"{filename}: not imported. {self.read_only}"}
        try:
            _header, payload = contents.split(",", 1)
            raw = base64.b64decode(payload, validate=True)
        except (ValueError, binascii.Error):
            return {"ok": False, "error": f"{filename}: the upload arrived damaged (not base64 data). Try again."}
        if len(raw) > MAX_UPLOAD_BYTES:
            return {"ok": False, "error": upload_refusal(filename, len(raw))}
        suffix = "".join(Path(filename).suffixes[-2:])
        suffix = suffix if re.fullmatch(r"(\.[A-Za-z0-9]{1,8}){1,2}", suffix or "") else ".log"
        stem = re.sub(r"[^A-Za-z0-9._-]+", "_", Path(filename).stem)[:60] or "upload"
        with tempfile.TemporaryDirectory(prefix="drawdown-upload-") as tmp:
            path = Path(tmp) / f"{stem}{suffix}"
            path.write_bytes(raw)
            try:
                with self._write_lock, _open_store(str(self.store_path)) as store:
                    sys_s = self.system()
                    result = import_log(path, store, tz=self.system_timezone_or_none(),
                                        nominal_voltage_V=(sys_s.value.battery.nominal_voltage_V
                                                           if sys_s.value is not None else None))
            except Exception as exc:  # noqa: BLE001 - any importer error is the file's message
                # A page never shows a server path: the scratch copy is the file's own name.
                said = getattr(exc, "page_message", str(exc))  # the page has no command-line flags
                shown = scrub_paths(said, {str(path): filename, tmp: "(upload)",
                                           str(self.store_path.parent): "(store folder)"})
                return {"ok": False, "error": shown if shown.startswith(filename) else f"{filename}: {shown}"}
        clear_caches()
        summary = _to_json(result)
        return {"ok": True, "summary": summary}

    def system_timezone_or_none(self) -> str | None:
        s = self.system()
        return s.value.site.timezone if s.value is not None else None


def current() -> DataSource:
    """The data source of the app handling this request (set by :func:`dashboard.app.create_app`).

    Served with a fleet dataset (``drawdown serve --dataset``), it is the data source of the vehicle
    this browser opened from the Fleet page (its cookie, :mod:`dashboard.fleet_source`) once that
    vehicle's store is ready; otherwise the one of ``--store``.
    """
    import flask

    app = flask.current_app
    fleet = app.config.get("DRAWDOWN_FLEET")
    if fleet is not None and flask.has_request_context():
        view = fleet.view_for_request(flask.request)
        if view is not None:
            return view.source
    return app.config["DRAWDOWN_SOURCE"]


def imports_table(imports: Iterable[dict[str, Any]]) -> list[dict[str, Any]]:
    """Rows for the 'what was imported' table: path, rows stored/rejected, when."""
    return [{"file": Path(i["path"]).name, "rows_stored": i["rows_stored"], "rows_rejected": i["rows_rejected"],
             "imported_at": i["imported_at"]} for i in imports]
