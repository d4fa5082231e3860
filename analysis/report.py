"""The analysis of a stored history, as the report object (docs/contracts.md#report-json: a contract).

:func:`build_report` runs the whole chain on a canonical long frame:

1. split into channels, find gaps (analysis.readings);
2. state of charge with full-charge resyncs and OCV anchors (analysis.charge);
3. anchor pairs -> Peukert exponent (fitted when rates differ) -> usable capacity
   and state of health with a 95 % interval (analysis.capacity); the SoC is
   then re-run against the usable capacity;
4. the daily ledger (analysis.ledger), internal resistance per day, runtime left;
5. the solar section (analysis.solar) and the charging diagnostics (analysis.charging).

The :class:`Report` keeps the typed results beside the JSON sections.

Everything that cannot be estimated is ``None`` with a sibling ``*_why``.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from collections.abc import Callable
from typing import Any

import numpy as np
import pandas as pd

from drawdown.analysis.capacity import (
    MIN_DELTA_SOC,
    CapacityEstimate,
    EfficiencyEstimate,
    PeukertEstimate,
    ResistanceEstimate,
    anchor_pairs,
    estimate_capacity,
    estimate_charge_efficiency,
    fit_peukert,
    internal_resistance,
)
from drawdown.analysis.charge import SocResult, state_of_charge
from drawdown.analysis.charging import ChargingAnalysis, analyse_charging
from drawdown.analysis.ledger import SOURCES, LedgerResult, compute_ledger
from drawdown.analysis.readings import US_PER_S, split_channels
from drawdown.analysis.runtime import RuntimeEstimate, runtime_left
from drawdown.analysis.soc_band import capacity_range_Ah, soc_band_pct
from drawdown.analysis.solar import SolarAnalysis, analyse_solar
from drawdown.analysis.json_values import finite, json_ready
from drawdown.analysis.system import System

#: Days whose mean |our SoC - device SoC| exceeds this are flagged [%].
DEVICE_DISAGREEMENT_PCT: float = 5.0
#: A day with more hours than this whose load was inferred (not seen) says so [h].
HIDDEN_NOTE_H: float = 1.0


def hidden_load_note(hours: float) -> str:
    """What a day with inferred load hours says, in every face (report text, Trip page, HTML)."""
    return (f"the load was not seen for {hours:.1f} h of this day (one shunt cannot see it while a source "
            "charges): it was estimated, with a 95 % range that can still miss on a day unlike the others; "
            "logging the charge sources on their own (a second shunt, or the solar controller's output) "
            "removes the doubt")


#: Points kept in the downsampled SoC series for plots.
PLOT_POINTS: int = 2000


#: Decimals the report JSON keeps (values below 10^-(n-1) keep 4 significant digits): analysis.json_values.
JSON_DECIMALS: int = 3


#: A number at full precision, or None where it is not finite (NaN is not JSON); rounding is ``to_json``'s job.
_v = finite


@dataclass(frozen=True)
class Report:
    """The report: contract sections plus extras, and the typed results they were made from.

    ``to_json()`` is the one place the JSON is made; ``soc``, ``ledger`` and the typed
    fields (capacity with its anchor pairs, Peukert, resistance, runtime, the ledger,
    solar and charging analyses) are what the dashboard and the HTML report draw.
    """

    period: dict
    data_quality: dict
    days: list
    battery: dict
    solar: dict
    extras: dict
    soc: pd.Series | None = field(default=None, repr=False)
    ledger: pd.DataFrame | None = field(default=None, repr=False)
    resistance_per_day: pd.DataFrame | None = field(default=None, repr=False)
    #: analysis.solar.SolarAnalysis behind ``solar`` (its plot series), or None.
    solar_analysis: SolarAnalysis | None = field(default=None, repr=False, compare=False)
    # The typed results behind the JSON sections: every face renders these (no look-up by name).
    capacity: CapacityEstimate | None = field(default=None, repr=False, compare=False)
    peukert: PeukertEstimate | None = field(default=None, repr=False, compare=False)
    resistance: ResistanceEstimate | None = field(default=None, repr=False, compare=False)
    runtime: RuntimeEstimate | None = field(default=None, repr=False, compare=False)
    ledger_result: LedgerResult | None = field(default=None, repr=False, compare=False)
    charging: ChargingAnalysis | None = field(default=None, repr=False, compare=False)

    def to_json(self) -> dict:
        """The report JSON object (contract keys first, then extras), rounded here and only here.

        The sections hold full-precision values; JSON keeps :data:`JSON_DECIMALS` decimals.
        """
        return json_ready({"period": self.period, "data_quality": self.data_quality, "days": self.days,
                           "battery": self.battery, "solar": self.solar, **self.extras}, JSON_DECIMALS)


def _rows_stored(channels: dict) -> int:
    ts = [c.t_us for c in channels.values()]
    if not ts:
        return 0
    if all(len(t) == len(ts[0]) for t in ts) and all(np.array_equal(t, ts[0]) for t in ts[1:]):
        return len(ts[0])
    # Common case: slower channels logged on a subset of the fastest channel's time stamps.
    longest = max(ts, key=len)
    extra: list[np.ndarray] = []
    for t in ts:
        if t is longest:
            continue
        pos = np.minimum(np.searchsorted(longest, t), len(longest) - 1)
        miss = longest[pos] != t
        if miss.any():
            extra.append(t[miss])
    if not extra:
        return len(longest)
    others = np.unique(np.concatenate(extra))
    return len(longest) + len(others)


def _downsample(t_us: np.ndarray, y: np.ndarray, n_out: int = PLOT_POINTS) -> np.ndarray:
    if len(y) <= n_out:
        return np.arange(len(y))
    try:
        from tsdownsample import MinMaxLTTBDownsampler

        return np.asarray(MinMaxLTTBDownsampler().downsample(t_us, np.ascontiguousarray(y), n_out=n_out))
    except Exception:  # noqa: BLE001 - plotting aid only; fall back to a stride
        return np.linspace(0, len(y) - 1, n_out).astype(np.int64)


def _iso_us(t: int) -> str:
    return pd.Timestamp(int(t), unit="us", tz="UTC").isoformat()


def _solar_section(readings: pd.DataFrame, system: System, solar_current: pd.Series | None
                   ) -> tuple[dict, SolarAnalysis | None]:
    """The report's ``solar`` object and the analysis behind it (None when it could not run)."""
    try:
        res = analyse_solar(readings, system, solar_current_A=solar_current)
        out = res.to_json()
    except Exception as exc:  # noqa: BLE001 - one section must not sink the whole report
        return ({"performance_ratio": None, "performance_ratio_why": f"solar analysis failed: {exc}", "days": []},
                None)
    out.setdefault("performance_ratio", None)
    out.setdefault("days", [])
    return out, res


#: The steps :func:`build_report` announces through its ``progress`` callback, in order.
REPORT_STEPS: tuple[str, ...] = ("state of charge", "capacity", "ledger", "solar", "charging")


def build_report(readings: pd.DataFrame, system: System, *, rows_rejected: int = 0,
                 start: Any = None, end: Any = None,
                 progress: Callable[[str], None] | None = None) -> Report:
    """Analyse a canonical long frame into a :class:`Report`.

    Parameters
    ----------
    readings : canonical long frame (collector.store.Store.read)
    system : system description
    rows_rejected : input lines rejected at import (from the store's import log)
    start, end : optional UTC bounds (``start <= t < end``); anything pandas.Timestamp accepts
    progress : called with each name of :data:`REPORT_STEPS` as that step starts (a progress bar)

    Raises
    ------
    ValueError
        When the frame holds no usable channel (the message names what is present).
    """
    if start is not None or end is not None:
        t = readings["t"]
        keep = np.ones(len(readings), dtype=bool)
        if start is not None:
            keep &= (t >= pd.Timestamp(start).tz_convert("UTC") if pd.Timestamp(start).tzinfo
                     else t >= pd.Timestamp(start).tz_localize("UTC")).to_numpy()
        if end is not None:
            keep &= (t < pd.Timestamp(end).tz_convert("UTC") if pd.Timestamp(end).tzinfo
                     else t < pd.Timestamp(end).tz_localize("UTC")).to_numpy()
        if not keep.all():
            readings = readings.loc[keep]
    channels = split_channels(readings)
    if not channels:
        raise ValueError("no readings in the selected period; import a log first or widen --from/--to")
    step = progress or (lambda name: None)
    b = system.battery
    bat = channels.get("battery")
    soc: SocResult | None = None
    cap = CapacityEstimate(None, None, "no battery channel: capacity needs the bank's net current", None)
    peuk = PeukertEstimate(b.effective_peukert_k, "system.toml" if b.peukert_k is not None else "chemistry default",
                           "no battery channel")
    eta = EfficiencyEstimate(b.charge_efficiency, 0.0, 0, None) if b.charge_efficiency is not None else None
    step("state of charge")
    if bat is not None and len(bat) > 1:
        soc = state_of_charge(bat, system)
        if eta is None:
            # The charge efficiency from full-to-full cycles, where the log has them; the
            # SoC and capacity then count with it rather than with a chemistry default.
            eta = estimate_charge_efficiency(bat, soc, system, peukert_k=b.effective_peukert_k)
            if eta.eta is not None:
                system = system.model_copy(update={"battery": b.model_copy(update={"charge_efficiency": eta.eta})})
                b = system.battery
                soc = state_of_charge(bat, system)
        eta_sigma = eta.sigma if eta is not None and eta.eta is not None else None
        step("capacity")
        pairs = anchor_pairs(bat, soc, system, peukert_k=b.effective_peukert_k, eta_sigma=eta_sigma)
        peuk = fit_peukert(pairs, system)
        if peuk.source == "fitted" and abs(peuk.k - b.effective_peukert_k) > 1e-6:
            soc = state_of_charge(bat, system, peukert_k=peuk.k)
            pairs = anchor_pairs(bat, soc, system, peukert_k=peuk.k, eta_sigma=eta_sigma)
        span = None
        anchors = soc.capacity_anchors
        span = 0.0
        if len(anchors) >= 2:
            vals = [a.soc_pct for a in anchors]
            span = max(vals) - min(vals)
        cap = estimate_capacity(pairs, system, largest_span_pct=span)
        if cap.usable_Ah is None and len(anchors) < 2:
            cap = CapacityEstimate(None, None, f"fewer than two known-SoC anchors ({len(anchors)}: full-charge "
                                   f"resyncs or rested OCV); need a pair spanning >= {100 * MIN_DELTA_SOC:.0f} % SoC",
                                   None)
        if cap.usable_Ah is not None:
            soc = soc.with_capacity(cap.usable_Ah)
        # The cumulative charge is no longer needed: free it before the ledger (memory at 1 Hz x 1 year).
        soc = replace(soc, charge_Ah=np.zeros(0))
    step("ledger")
    led: LedgerResult = compute_ledger(channels, system, soc=soc)
    ir = (internal_resistance(bat, led.bounds_us, list(led.days["date"])) if bat is not None and len(bat) > 1
          else ResistanceEstimate(None, "no battery channel", pd.DataFrame()))
    rt = _runtime(bat, soc, led, system, cap, peuk)
    step("solar")
    solar, solar_analysis = _solar_section(readings, system,
                                           led.solar_current_A if "solar" not in channels else None)
    report = _assemble(channels, system, rows_rejected, soc, cap, peuk, led, ir, rt, solar, eta)
    report = replace(report, solar_analysis=solar_analysis, capacity=cap, peukert=peuk, resistance=ir,
                     runtime=rt, ledger_result=led)
    step("charging")
    return _with_charging(report, readings, system)


def _with_charging(report: Report, readings: pd.DataFrame, system: System) -> Report:
    """Alternator/DC-DC and shore diagnostics, and the cautions a person must see.

    Lithium charged below 0 degC is a safety finding (docs/chargers.md#safety): it goes to the
    report's top-level ``cautions`` as well as to ``charging.findings``.
    """
    analysis = analyse_charging(readings, system)
    charging = analysis.to_json()
    cautions = [f for f in charging.get("findings", []) if "below 0 degC" in f or "below freezing" in f]
    return replace(report, extras={**report.extras, "charging": charging, "cautions": cautions}, charging=analysis)


#: A day whose lowest SoC is below this [%] says what that figure rests on.
LOW_SOC_NOTE_PCT: float = 10.0


def _low_soc_note(soc: SocResult, bounds_us: np.ndarray, day: int, b: Any, cap: CapacityEstimate) -> str:
    """What a day's lowest SoC below :data:`LOW_SOC_NOTE_PCT` rests on: a knee voltage, or the count."""
    lo, hi = np.searchsorted(soc.t_us, bounds_us[day:day + 2], side="left")
    if hi <= lo:
        return ""
    i_min = lo + int(np.argmin(soc.soc[lo:hi]))
    before = [a for a in soc.anchors if a.index <= i_min]
    last = before[-1] if before else None
    ref = (f"the measured usable capacity ({cap.usable_Ah:.0f} Ah)" if cap.usable_Ah is not None
           else f"the rated capacity ({b.rated_capacity_Ah:.0f} Ah; the usable capacity is not known)")
    if last is not None and last.kind == "ocv" and last.soc_pct < 50:
        return (f"rests on the rested voltage at {last.time.isoformat()} near the bottom knee, read as "
                f"{last.soc_pct:.0f} % +- {200 * last.sigma:.0f} points (95 %): voltage curves differ by maker there")
    since = f"the full charge at {last.time.isoformat()}" if last is not None and last.kind == "full" else \
        "the start of the log"
    return f"counted from {since} against {ref}"


def _soh_note(cap: CapacityEstimate, rated_Ah: float) -> str | None:
    """What a state of health above 100 % means, said beside it."""
    if cap.usable_Ah is None or cap.usable_Ah <= rated_Ah:
        return None
    excess = 100.0 * (cap.usable_Ah / rated_Ah - 1.0)
    if cap.ci95_Ah is not None and cap.ci95_Ah[0] <= rated_Ah:
        return (f"above 100 % by {excess:.0f} points, within the 95 % interval: the bank delivers its rated "
                "capacity, and the data cannot say by how much more")
    return (f"above 100 % by {excess:.0f} points, beyond the 95 % interval: the bank delivers more than its "
            "rating (a rated capacity is a minimum), or the rated capacity in system.toml is too low")


def _runtime(bat, soc, led, system, cap, peuk) -> RuntimeEstimate:
    soc_now = float(soc.soc[-1]) if soc is not None and len(soc.soc) else None
    net = None
    if bat is not None and len(bat) > 1:
        lo = int(np.searchsorted(bat.t_us, bat.t_us[-1] - 3600 * US_PER_S))
        seg = bat.current_A[lo:]
        if np.isfinite(seg).any():
            net = float(np.nanmean(seg))
    return runtime_left(soc_now_pct=soc_now, last_hour_net_A=net, ledger_days=led.days, system=system,
                        capacity_Ah=cap.usable_Ah, peukert_k=peuk.k)


def _assemble(channels, system: System, rows_rejected: int, soc: SocResult | None, cap: CapacityEstimate,
              peuk: PeukertEstimate, led: LedgerResult, ir: ResistanceEstimate, rt: RuntimeEstimate,
              solar: dict, eta: EfficiencyEstimate | None = None) -> Report:
    b = system.battery
    t0 = min(int(c.t_us[0]) for c in channels.values())
    t1 = max(int(c.t_us[-1]) for c in channels.values())
    d = led.days
    period = {"start": _iso_us(t0), "end": _iso_us(t1), "days": len(d),
              "timezone": system.site.timezone}
    gaps = sorted(led.gaps, key=lambda g: g.start_us)
    data_quality = {"rows_stored": _rows_stored(channels), "rows_rejected": int(rows_rejected),
                    "gaps": [g.to_json() for g in gaps],
                    "channels": {name: {"rows": len(c), "first": _iso_us(c.t_us[0]), "last": _iso_us(c.t_us[-1])}
                                 for name, c in channels.items()},
                    "mode": led.mode, "notes": list(led.notes),
                    "complete_days": int(d["complete"].sum()) if len(d) else 0}
    days = []
    for k_day, row in enumerate(d.itertuples(index=False)):  # one row per day
        item = {"date": row.date.isoformat(), "complete": bool(row.complete),
                "consumed_Ah": _v(row.consumed_Ah), "consumed_Wh": _v(row.consumed_Wh),
                "charged_Ah": {s: _v(getattr(row, f"charged_Ah_{s}")) for s in SOURCES},
                "charged_Wh": {s: _v(getattr(row, f"charged_Wh_{s}")) for s in SOURCES},
                "soc_min_pct": _v(row.soc_min_pct), "soc_end_pct": _v(row.soc_end_pct),
                "mean_temperature_C": _v(row.mean_temperature_C), "driving_h": _v(row.driving_h),
                "hidden_load_h": _v(row.hidden_load_h),
                "observed_load_share": _v(row.observed_load_share),
                "device_soc_diff_pct": _v(row.device_soc_diff_pct)}
        if np.isfinite(row.consumed_Ah_pi95_lo):
            item["consumed_Ah_pi95"] = [_v(row.consumed_Ah_pi95_lo), _v(row.consumed_Ah_pi95_hi)]
        if row.hidden_load_h > HIDDEN_NOTE_H:
            item["hidden_load_note"] = hidden_load_note(row.hidden_load_h)
        if not row.complete:
            item["complete_why"] = (f"gap of {row.gap_s:.0f} s in this day: its charge is unknown"
                                    if row.gap_s > 0 else "the log starts or ends within this day")
        if soc is None:
            item["soc_min_pct_why"] = item["soc_end_pct_why"] = "no battery channel"
        elif np.isfinite(row.soc_min_pct) and row.soc_min_pct < LOW_SOC_NOTE_PCT:
            item["soc_min_pct_note"] = _low_soc_note(soc, led.bounds_us, k_day, b, cap)
        days.append(item)
    battery = {"rated_Ah": b.rated_capacity_Ah, "usable_Ah": _v(cap.usable_Ah),
               "usable_Ah_ci95": [_v(cap.ci95_Ah[0]), _v(cap.ci95_Ah[1])] if cap.ci95_Ah else None,
               "state_of_health_pct": _v(cap.state_of_health_pct),
               "peukert_k": _v(peuk.k), "peukert_k_source": peuk.source,
               "internal_resistance_ohm": _v(ir.ohm),
               "chemistry": b.chemistry, "capacity_method": cap.method,
               "anchor_pairs": [p.to_json() for p in cap.pairs],
               "internal_resistance_trend_ohm_per_30d": _v(ir.trend_ohm_per_30d),
               "internal_resistance_steps": ir.steps,
               "internal_resistance_days": [{"date": r.date.isoformat(), "ohm": _v(r.ohm), "steps": int(r.steps)}
                                            for r in ir.per_day.itertuples(index=False)] if len(ir.per_day) else []}
    battery["charge_efficiency"] = _v(b.effective_charge_efficiency)
    if eta is not None and eta.cycles and eta.eta is not None:
        cycles = f"{eta.cycles} full-to-full cycle{'' if eta.cycles == 1 else 's'}"
        battery["charge_efficiency_source"] = (f"measured over {cycles}, weighed "
                                               "against the chemistry default")
        battery["charge_efficiency_sigma"] = _v(eta.sigma)
    elif b.charge_efficiency is not None and (eta is None or not eta.cycles):
        battery["charge_efficiency_source"] = "system.toml"
    else:
        battery["charge_efficiency_source"] = "chemistry default"
        if eta is not None and eta.why:
            battery["charge_efficiency_why"] = f"not measured: {eta.why}"
    soh_note = _soh_note(cap, b.rated_capacity_Ah)
    if soh_note:
        battery["state_of_health_pct_note"] = soh_note
    if cap.usable_Ah is None:
        battery["usable_Ah_why"] = cap.why
        battery["usable_Ah_ci95_why"] = cap.why
        battery["state_of_health_pct_why"] = cap.why
    if peuk.why:
        battery["peukert_k_why"] = peuk.why
    if ir.ohm is None:
        battery["internal_resistance_ohm_why"] = ir.why
    if ir.trend_ohm_per_30d is None:
        battery["internal_resistance_trend_ohm_per_30d_why"] = "needs resistance estimates on >= 3 days"
    extras: dict[str, Any] = {"runtime": rt.to_json()}
    if soc is not None:
        idx = _downsample(soc.t_us, soc.soc)
        c_rng = capacity_range_Ah(b.rated_capacity_Ah, cap.ci95_Ah, cap.range_Ah)
        band_lo, band_hi = soc_band_pct(soc.t_us, soc.soc, soc.capacity_Ah, c_rng,
                                        [(a.index, a.soc_pct, a.sigma) for a in soc.anchors], at=idx)
        extras["soc_series"] = {"t": [_iso_us(t) for t in soc.t_us[idx]],
                                "soc_pct": [float(v) for v in soc.soc[idx]],
                                "soc_pct_lo": [float(v) for v in band_lo],
                                "soc_pct_hi": [float(v) for v in band_hi],
                                "band_capacity_Ah": [_v(c_rng[0]), _v(c_rng[1])],
                                "band_why": ("95 % band: the capacity the count is divided by ("
                                             + (f"measured, {c_rng[0]:.0f}-{c_rng[1]:.0f} Ah" if cap.ci95_Ah else
                                                f"not pinned by the log: {c_rng[0]:.0f}-{c_rng[1]:.0f} Ah")
                                             + "), each reset's own uncertainty and the shunt's zero offset "
                                             "since then (docs/validation.md)")}
        extras["resyncs"] = [a.time.isoformat() for a in soc.anchors if a.kind == "full"]
        extras["ocv_anchors"] = [{"t": a.time.isoformat(), "soc_pct": float(a.soc_pct), "kind": a.kind}
                                 for a in soc.capacity_anchors if a.kind != "full"]
        extras["soc_start"] = soc.start
        extras["soc_capacity_Ah"] = _v(soc.capacity_Ah)
        dis = d[d["device_soc_diff_pct"] > DEVICE_DISAGREEMENT_PCT]
        extras["device_soc_disagreement_days"] = [{"date": r.date.isoformat(),
                                                    "mean_abs_diff_pct": _v(r.device_soc_diff_pct)}
                                                   for r in dis.itertuples(index=False)]
        if not np.isfinite(d["device_soc_diff_pct"]).any():
            extras["device_soc_disagreement_days_why"] = "the log has no device SoC column"
    else:
        extras["soc_series"] = None
        extras["soc_series_why"] = "no battery channel"
    if led.load_model is not None:
        extras["load_model"] = led.load_model.to_json()
    extras["attribution"] = {"mode": led.mode,
                             "method": ("measured on separate shunts" if led.mode != "single-shunt"
                                        else "single-shunt load model and charge signatures")}
    res_days = ir.per_day if len(ir.per_day) else None
    soc_series = soc.soc_pct if soc is not None else None
    return Report(period, data_quality, days, battery, solar, extras, soc_series, d, res_days)
