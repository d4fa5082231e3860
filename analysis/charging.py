"""Alternator (DC-DC) and shore charging against the chargers' ratings.

For each logged charge source other than solar (``alternator``, ``shore``) the
channel's current is reduced to 1-minute means and cut into *sessions* (runs
of delivered current, short interruptions merged). Per session: duration, Ah,
Wh at the bank voltage, the plateau current the charger held (90th percentile
of the session), whether it ended with the bank full (taper at the charged
voltage) or stopped with the bank still below it, whether the current sagged
mid-session while the bank was not full (temperature derating or a smart
alternator lowering its voltage), and on/off cycling inside one drive (a
voltage-triggered charger on a smart alternator). Totals: Ah per hour of
driving (alternator) or per hour on hook-up (shore), plateau against
``[[charger]] max_current_A``, and the alternator-side current the DC-DC
charger draws (docs/chargers.md#dc-dc-charger-input-current) against ``alternator_rating_A``.

Lithium charging below 0 degC is flagged for every source (safety, docs/chargers.md#safety).
UTC inside; session times are given in the site's timezone.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from drawdown.analysis.readings import epoch_us
from drawdown.analysis.solar_bins import ChannelBinner, Grid
from drawdown.analysis.json_values import rounded
from drawdown.analysis.system import System

__all__ = ["ChargingAnalysis", "analyse_charging", "dc_dc_input_current_A", "SOURCES"]

SOURCES: tuple[str, ...] = ("alternator", "shore")
#: Width of the averaging interval [min].
BIN_MINUTES: int = 1
#: Interruptions up to this long are merged into one session [min].
MERGE_GAP_MIN: int = 1
#: A gap up to this long between two charging sessions of one drive counts as
#: the charger cycling off and on (longer: a stop with the engine off) [min].
CYCLE_GAP_MAX_MIN: int = 10
#: Sessions separated by at most this are one drive / one hook-up [min] (a
#: fuel stop or a charger cycling on a smart alternator).
DRIVE_GAP_MIN: int = 45
#: A source is delivering above max(this, 3 % of its rating) [A].
MIN_ACTIVE_A: float = 0.5
#: Sessions shorter than this are not analysed for plateau/derating [min].
MIN_SESSION_MIN: int = 5
#: Mid-session sag: below this fraction of the plateau ...
SAG_BELOW: float = 0.75
#: ... for at least this long, with the bank not yet full [min].
SAG_MIN_MINUTES: int = 10
#: Plateau below this fraction of the rating is a finding.
UNDER_RATING: float = 0.8
#: DC-DC conversion efficiency assumed when estimating alternator-side current
#: (docs/chargers.md check values use 0.9).
DC_DC_EFFICIENCY: float = 0.9
#: Alternator-side voltage assumed when the alternator channel logs none, per
#: 12 V block [V] (docs/chargers.md example: 13.2 V).
DEFAULT_ALTERNATOR_V_PER_12V: float = 13.2
#: Continuous draw above this fraction of the alternator's (cold) rating is a
#: finding: hot output is ~60-70 % of rating, keep continuous draw <= 50-70 %
#: (common practice, docs/chargers.md#alternators).
ALTERNATOR_CONTINUOUS_MAX: float = 0.5


def dc_dc_input_current_A(output_A: float | np.ndarray, output_V: float | np.ndarray,
                          input_V: float | np.ndarray, *,
                          efficiency: float = DC_DC_EFFICIENCY) -> np.ndarray:
    """Input (alternator-side) current of a DC-DC charger [A].

    Parameters
    ----------
    output_A : array_like
        Current delivered into the bank [A].
    output_V : array_like
        Bank (output) voltage [V].
    input_V : array_like
        Starter-battery/alternator (input) voltage [V].
    efficiency : float
        Conversion efficiency [-].

    Notes
    -----
    Power balance, docs/chargers.md: I_in = I_out·V_out / (V_in·η).
    """
    if not 0 < efficiency <= 1:
        raise ValueError(f"efficiency must be in (0, 1], got {efficiency}")
    return np.asarray(output_A, dtype=float) * np.asarray(output_V, dtype=float) / (
        np.asarray(input_V, dtype=float) * efficiency)


@dataclass(frozen=True)
class ChargingAnalysis:
    """Result of :func:`analyse_charging`.

    Attributes
    ----------
    sources : dict
        Per source (``alternator``, ``shore``): a summary dict (see :meth:`to_json`).
    sessions : pandas.DataFrame
        One row per session: ``source``, ``start``, ``end`` (UTC), ``hours``,
        ``Ah``, ``Wh``, ``mean_A``, ``plateau_A``, ``max_A``, ``ended``,
        ``sag_minutes``, ``derated``, ``drive`` (drive/hook-up number).
    series : pandas.DataFrame
        1-minute means (UTC index): ``<source>_A``, ``bank_voltage_V``,
        ``temperature_C``, for plots.
    findings : list of str
        Plain-English things to check.
    """

    sources: dict[str, dict[str, Any]]
    sessions: pd.DataFrame
    series: pd.DataFrame
    findings: list[str] = field(default_factory=list)
    cold_charging: dict[str, Any] | None = None

    def to_json(self) -> dict[str, Any]:
        """``{"sources": {"alternator": {...}, "shore": {...}}, "cold_charging", "findings"}``.

        Per logged source: ``rated_current_A``, ``sessions``, ``drives`` /
        ``hook_ups``, ``driving_hours`` / ``hook_up_hours`` (first to last
        delivery, stops up to 45 min included), ``charging_sessions``,
        ``float_sessions`` (bank already full: the charger only fed the loads),
        ``on_off_interruptions``, ``total_Ah``, ``total_Wh``,
        ``Ah_per_hour_of_driving`` / ``Ah_per_hour_on_hook_up``, ``plateau_A``
        (current held while the bank was not full), ``max_A``,
        ``fraction_of_rating``, ``derated_sessions``,
        ``stopped_while_charging``, ``ended_full``, ``session_list``; for the
        alternator also ``alternator_side_A`` and ``alternator_load_fraction``.
        A source without a channel: ``channel_logged`` False and ``why``.
        """
        return {"sources": self.sources, "cold_charging": self.cold_charging, "findings": self.findings}


def _r(x: Any, nd: int = 2) -> Any:
    """This module's JSON rounding (2 decimals unless told): :func:`analysis.json_values.rounded`."""
    return rounded(x, nd)


def _runs(active: np.ndarray, merge_gap: int) -> tuple[np.ndarray, np.ndarray]:
    """Start and end (exclusive) indexes of runs of True, gaps <= merge_gap merged."""
    f = np.concatenate([[False], active.astype(bool), [False]])
    d = np.diff(f.astype(np.int8))
    s = np.flatnonzero(d == 1)
    e = np.flatnonzero(d == -1)
    if len(s) > 1 and merge_gap > 0:
        split = (s[1:] - e[:-1]) > merge_gap
        s = s[np.concatenate([[True], split])]
        e = e[np.concatenate([split, [True]])]
    return s, e


def _rating(system: System, source: str) -> float | None:
    rated = [c.max_current_A for c in system.charger if c.source == source]
    return float(sum(rated)) if rated else None


def analyse_charging(readings: pd.DataFrame, system: System) -> ChargingAnalysis:
    """Sessions, plateau, derating and Ah per hour for the alternator and shore channels.

    Parameters
    ----------
    readings : pandas.DataFrame
        Canonical long frame: the ``alternator`` and ``shore`` channels'
        ``current_A`` [A] (positive delivering), the ``battery`` channel's
        ``voltage_V`` [V] and ``temperature_C`` [degC]; an ``alternator``
        ``voltage_V`` is taken as the charger's input voltage when present.
    system : System
        ``[[charger]]`` ratings, battery chemistry and charged voltage.

    Returns
    -------
    ChargingAnalysis
        A source without a logged channel carries ``channel_logged`` False and
        a ``why``; nothing is guessed from the net battery current.
    """
    tz = system.site.timezone
    empty_sessions = pd.DataFrame(columns=["source", "start", "end", "hours", "Ah", "Wh", "mean_A",
                                           "plateau_A", "max_A", "float", "ended", "sag_minutes", "derated", "drive"])
    if readings is None or readings.empty:
        return ChargingAnalysis(
            sources={s: {"channel_logged": False, "why": "no readings"} for s in SOURCES},
            sessions=empty_sessions, series=pd.DataFrame(), findings=[])
    t_us = epoch_us(readings["t"])
    width = BIN_MINUTES * 60_000_000
    start = int(t_us.min()) - int(t_us.min()) % width
    grid = Grid(start_us=start, width_us=width, n=int((int(t_us.max()) - start) // width) + 1)
    starts = grid.starts
    h = grid.width_h
    bat = system.battery
    blocks = max(1, round(bat.series_12V_blocks))
    charged_V = bat.effective_full_voltage_V
    binner = ChannelBinner(readings, grid, t_us=t_us)
    bank_V, bank_n = binner.mean("battery", "voltage_V")
    temp_C, temp_n = binner.mean("battery", "temperature_C")
    volts = np.where(bank_n > 0, bank_V, bat.nominal_voltage_V)
    series = pd.DataFrame({"bank_voltage_V": bank_V, "temperature_C": temp_C}, index=starts)

    sources: dict[str, dict[str, Any]] = {}
    findings: list[str] = []
    session_frames: list[pd.DataFrame] = []
    any_charge = np.zeros(grid.n, dtype=bool)
    # Held at float: voltage at the float level with the net current within the
    # tail current (the charger only tops up the loads) -- as in the solar analysis.
    float_V = min(charged_V, 13.4 * blocks) if bat.chemistry == "lifepo4" else charged_V
    net_A, net_n = binner.mean("battery", "current_A")
    known = bank_n > 0
    held_float = known & (bank_V >= float_V) & (net_n > 0) & (np.abs(net_A) <= bat.effective_full_current_A)
    for source in SOURCES:
        rated = _rating(system, source)
        cur, n = binner.mean(source, "current_A", clip_min=0.0)
        if n.sum() == 0:
            sources[source] = {"channel_logged": False, "rated_current_A": rated,
                               "why": f"no '{source}' channel in the log (a single shunt cannot separate it)"}
            continue
        series[f"{source}_A"] = cur
        on_A = max(MIN_ACTIVE_A, 0.03 * rated) if rated else MIN_ACTIVE_A
        active = (n > 0) & (cur > on_A)
        any_charge |= active
        s_idx, e_idx = _runs(active, MERGE_GAP_MIN // BIN_MINUTES)
        summary: dict[str, Any] = {"channel_logged": True, "rated_current_A": rated}
        if len(s_idx) == 0:
            key = "Ah_per_hour_of_driving" if source == "alternator" else "Ah_per_hour_on_hook_up"
            summary.update({"sessions": 0, "total_Ah": 0.0, "delivering_hours": 0.0, key: None,
                            f"{key}_why": f"the {source} channel never delivered more than {on_A:.1f} A"})
            sources[source] = summary
            continue
        ns = len(s_idx)
        lengths = e_idx - s_idx
        mark = np.zeros(grid.n + 1, dtype=np.int64)
        np.add.at(mark, s_idx, 1)
        np.add.at(mark, e_idx, -1)
        pos = np.flatnonzero(np.cumsum(mark)[: grid.n] > 0)  # bins inside a session
        sid = np.searchsorted(s_idx, pos, side="right") - 1
        c = np.nan_to_num(cur[pos])
        # Constant-voltage phase (absorption/float): the bank at or above its
        # charged voltage and within 0.15 V per 12 V of the session's highest
        # voltage (the charger's set point), so the current tapers by design.
        v_p = bank_V[pos]
        v_max = pd.Series(v_p).groupby(sid).max().reindex(range(ns)).to_numpy()
        in_cv = known[pos] & (v_p >= charged_V) & (v_p >= v_max[sid] - 0.15 * blocks)
        full_p = in_cv | held_float[pos]
        Ah = np.bincount(sid, weights=c, minlength=ns) * h
        Wh = np.bincount(sid, weights=c * volts[pos], minlength=ns) * h
        bulk_bins = np.bincount(sid, weights=(~full_p).astype(float), minlength=ns)
        # Plateau: 90th percentile of the current while the bank was still
        # accepting (not full); the whole session when it never was.
        use = ~full_p | (bulk_bins[sid] < MIN_SESSION_MIN)
        plateau = pd.Series(c[use]).groupby(sid[use]).quantile(0.9).reindex(range(ns)).to_numpy()
        max_A = pd.Series(c).groupby(sid).max().reindex(range(ns)).to_numpy()
        # A float session: the bank was full for (nearly) all of it; the charger
        # only supplied the loads. Not a charging session for plateau/derating/cycling.
        is_float = bulk_bins * BIN_MINUTES < MIN_SESSION_MIN
        # Mid-session sag with the bank not full (not the normal taper).
        inner = (pos - s_idx[sid] >= 2) & (e_idx[sid] - pos > 2)
        sag = (c < SAG_BELOW * plateau[sid]) & ~full_p & known[pos] & inner
        sag_min = np.bincount(sid, weights=sag.astype(float), minlength=ns) * BIN_MINUTES
        derated = (sag_min >= SAG_MIN_MINUTES) & ~is_float
        # How it ended: the bank over the session's last minutes.
        tail3 = (e_idx[sid] - pos) <= 3
        last_full = (np.bincount(sid, weights=(full_p & tail3).astype(float), minlength=ns)
                     >= 0.5 * np.bincount(sid, weights=tail3.astype(float), minlength=ns))
        ended = np.where(last_full, "bank full (absorption/float)",
                         np.where(known[np.maximum(e_idx - 1, 0)], "stopped with the bank still charging",
                                  "unknown (no bank voltage)"))
        ended = np.where(e_idx >= grid.n, "log ended", ended)
        # Drives / hook-ups: sessions separated by short gaps (a stop, fridge
        # top-ups at float, a charger cycling off and on).
        gaps_min = (s_idx[1:] - e_idx[:-1]) * BIN_MINUTES
        drive = np.concatenate([[0], np.cumsum(gaps_min > DRIVE_GAP_MIN)])
        n_drives = int(drive.max() + 1)
        d_start = pd.Series(s_idx).groupby(drive).min().to_numpy()
        d_end = pd.Series(e_idx).groupby(drive).max().to_numpy()
        drive_h = float((d_end - d_start).sum() * h)
        # Interruptions: a gap inside a drive between two charging sessions
        # while the bank was not full.
        same = drive[1:] == drive[:-1]
        charging_pair = ~is_float[1:] & ~is_float[:-1] & ~last_full[:-1]
        cycles = int(np.sum(same & charging_pair & (gaps_min <= CYCLE_GAP_MAX_MIN)))
        hours = lengths * h
        sess = pd.DataFrame({
            "source": source, "start": starts[s_idx],
            "end": starts[e_idx - 1] + pd.Timedelta(minutes=BIN_MINUTES),
            "hours": hours, "Ah": Ah, "Wh": Wh, "mean_A": Ah / np.maximum(hours, 1e-9),
            "plateau_A": plateau, "max_A": max_A, "float": is_float, "ended": ended,
            "sag_minutes": sag_min, "derated": derated, "drive": drive})
        session_frames.append(sess)
        tot_Ah = float(Ah.sum())
        weights = np.where(~is_float, bulk_bins, 0.0)
        plateau_all = (float(np.average(plateau, weights=weights)) if weights.sum() > 0 else None)
        per_hour_key = "Ah_per_hour_of_driving" if source == "alternator" else "Ah_per_hour_on_hook_up"
        summary.update({
            "sessions": ns,
            ("drives" if source == "alternator" else "hook_ups"): n_drives,
            ("driving_hours" if source == "alternator" else "hook_up_hours"): _r(drive_h, 2),
            "charging_sessions": int((~is_float).sum()),
            "float_sessions": int(is_float.sum()),
            "on_off_interruptions": cycles,
            "total_Ah": _r(tot_Ah, 1), "total_Wh": _r(float(Wh.sum()), 0),
            "delivering_hours": _r(float(hours.sum()), 2),
            per_hour_key: _r(tot_Ah / drive_h, 2) if drive_h > 0 else None,
            "plateau_A": _r(plateau_all, 2),
            "max_A": _r(float(max_A.max()), 2),
            "fraction_of_rating": _r(plateau_all / rated, 3) if rated and plateau_all is not None else None,
            "derated_sessions": int(derated.sum()),
            "stopped_while_charging": int(np.sum(ended == "stopped with the bank still charging")),
            "ended_full": int(np.sum(ended == "bank full (absorption/float)")),
            "session_list": [
                {"start": a.tz_convert(tz).isoformat(), "end": b.tz_convert(tz).isoformat(),
                 "hours": _r(hh, 2), "Ah": _r(ah, 2), "plateau_A": _r(pl, 2), "max_A": _r(mx, 2),
                 "float": bool(fl), "ended": str(en), "derated": bool(dr), "sag_minutes": _r(sm, 0)}
                for a, b, hh, ah, pl, mx, fl, en, dr, sm in zip(
                    sess["start"], sess["end"], hours, Ah, plateau, max_A, is_float, ended, derated,
                    sag_min)][:500],
        })
        if rated is None:
            summary["fraction_of_rating_why"] = f"no [[charger]] with source = \"{source}\" in system.toml"
        elif plateau_all is None:
            summary["fraction_of_rating_why"] = "no charging session of at least 5 min with the bank not full"
        if rated and plateau_all is not None and plateau_all < UNDER_RATING * rated:
            what = "DC-DC" if source == "alternator" else "shore"
            findings.append(
                f"the {what} charger holds about {plateau_all:.1f} A, {100 * plateau_all / rated:.0f} % of its "
                f"{rated:.0f} A rating while the bank is not full: check the input cable's voltage drop, the "
                f"charger's temperature derating, or its current setting")
        if derated.any():
            findings.append(
                f"{source} current sagged mid-session in {int(derated.sum())} of {int((~is_float).sum())} "
                f"charging session{'' if int((~is_float).sum()) == 1 else 's'} while the bank was not full: "
                f"temperature derating of the charger"
                + (", or a smart alternator lowering its voltage" if source == "alternator" else ""))
        if source == "alternator" and cycles >= 2:
            findings.append(
                f"alternator charging stopped and restarted {cycles} times within drives while the bank was "
                f"not full: typical of a voltage-triggered charger on a smart (variable-voltage) alternator; "
                f"use the ignition or D+ trigger (docs/chargers.md#alternators)")
        if source == "alternator" and plateau_all is not None:
            alt_V_bins, alt_Vn = binner.mean("alternator", "voltage_V")
            charging_pos = pos[~full_p]
            has_in = bool(len(charging_pos) and (alt_Vn[charging_pos] > 0).any())
            in_V = (float(np.nanmedian(alt_V_bins[charging_pos])) if has_in
                    else DEFAULT_ALTERNATOR_V_PER_12V * blocks)
            out_V = float(np.nanmedian(volts[charging_pos])) if len(charging_pos) else float(np.nanmedian(volts[pos]))
            i_in = float(dc_dc_input_current_A(plateau_all, out_V, in_V))
            summary["alternator_side_A"] = _r(i_in, 1)
            summary["alternator_side_from"] = (
                "alternator channel voltage, efficiency 0.9" if has_in else
                f"assumed {in_V:.1f} V input, efficiency {DC_DC_EFFICIENCY} (docs/chargers.md)")
            if has_in and in_V < 12.8 * blocks:
                findings.append(f"the alternator side sits at {in_V:.1f} V while charging: a smart alternator "
                                f"(12.2-12.8 V per 12 V is typical, docs/chargers.md#alternators)")
            alt_ratings = [ch.alternator_rating_A for ch in system.charger
                           if ch.source == "alternator" and ch.alternator_rating_A]
            if alt_ratings:
                frac = i_in / float(sum(alt_ratings))
                summary["alternator_load_fraction"] = _r(frac, 3)
                if frac > ALTERNATOR_CONTINUOUS_MAX:
                    findings.append(
                        f"the DC-DC charger draws about {i_in:.0f} A, {100 * frac:.0f} % of the alternator's "
                        f"rating: hot alternators give 60-70 % of rating, keep continuous draw at or below "
                        f"50-70 % (common practice)")
        sources[source] = summary

    # Lithium charging below 0 degC (safety; docs/chargers.md#safety), from every charge source
    # including solar and the net battery current.
    cold = None
    if bat.chemistry == "lifepo4" and temp_n.sum() > 0:
        sol, sn = binner.mean("solar", "current_A", clip_min=0.0)
        net, nn = binner.mean("battery", "current_A")
        charging = any_charge | ((sn > 0) & (sol > MIN_ACTIVE_A)) | ((nn > 0) & (net > MIN_ACTIVE_A))
        freezing = (temp_n > 0) & (temp_C < 0.0) & charging
        minutes = float(freezing.sum() * BIN_MINUTES)
        cold = {"minutes": _r(minutes, 0), "min_temperature_C": _r(float(np.nanmin(temp_C[freezing])), 1)
                if freezing.any() else None}
        if freezing.any():
            findings.append(f"the LiFePO4 bank was charged for {minutes:.0f} min below 0 °C "
                            f"(lowest {np.nanmin(temp_C[freezing]):.1f} °C): lithium must not be charged "
                            f"below freezing; check the BMS low-temperature cut-off or fit a heater")
    sessions = pd.concat(session_frames, ignore_index=True) if session_frames else empty_sessions
    return ChargingAnalysis(sources=sources, sessions=sessions, series=series, findings=findings,
                            cold_charging=cold)
