"""Long-term storage: full resolution for a recent window, per-interval summaries before it.

Why: a year of 10 Hz logging is 315 million readings per channel; at 24 bytes
each in the store's chunks (int64 time + four float32 values) that is ~7.6 GB a
channel -- too much for the SD card of a small computer in a van. Keeping the
last 7 days at full resolution (~145 MB) and one-minute summaries before that
(525,600 rows a year, ~100 bytes each, ~55 MB) fits in a few hundred MB.

Where the summaries live
------------------------
A table of their own, created by this module through :meth:`Store.execute`
(no change to ``collector/store.py``)::

    summaries (channel, interval_s, t_start_us, n, covered_s,
               voltage_V_mean, voltage_V_min, voltage_V_max,
               current_A_mean, current_A_min, current_A_max,
               temperature_C_mean, temperature_C_min, temperature_C_max,
               soc_pct_mean, soc_pct_min, soc_pct_max,
               charge_Ah, charge_in_Ah, charge_out_Ah,
               PRIMARY KEY (channel, interval_s, t_start_us))

``t_start_us`` is the interval's start (UTC, multiple of ``interval_s``);
``n`` the readings in it; ``covered_s`` the seconds integrated; ``charge_Ah``
the current integrated over the interval (trapezoid rule, docs/soc.md#the-update; a
step between readings longer than ``max_gap_s`` is a gap and not integrated),
split into ``charge_in_Ah`` (positive, into the bank) and ``charge_out_Ah``
(negative). A step is credited to the interval its first reading lies in.
Summing ``charge_Ah`` over intervals gives the same Ah as integrating the raw
readings (tested). A later pass over the same interval *merges* into the
existing summary (n-weighted means, min of mins, sums of Ah).

Only collector-written chunks (``import_id IS NULL``) are downsampled:
imported logs are the analysis' raw material and stay as imported. Readings in
summaries are no longer returned by :meth:`Store.read`; read them with
:func:`read_summaries`.

:func:`compact` is the other maintenance job: the live writer commits a small
chunk four times a second (345,600 chunks a day), and a read over 28,800 such
chunks (2 h at 100 Hz) takes ~1.4 s against ~0.06 s once merged, so live
chunks older than two minutes are merged into chunks of up to
:data:`collector.store.MAX_CHUNK` samples.
"""

from __future__ import annotations

import time
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from drawdown.collector.canonical import VALUE_COLUMNS, from_epoch_us
from drawdown.collector.store import MAX_CHUNK, decode_times

_SUMMARY_SCHEMA = """
CREATE TABLE IF NOT EXISTS summaries (
    channel TEXT NOT NULL,
    interval_s INTEGER NOT NULL,
    t_start_us INTEGER NOT NULL,
    n INTEGER NOT NULL,
    covered_s REAL NOT NULL,
    voltage_V_mean REAL, voltage_V_min REAL, voltage_V_max REAL,
    current_A_mean REAL, current_A_min REAL, current_A_max REAL,
    temperature_C_mean REAL, temperature_C_min REAL, temperature_C_max REAL,
    soc_pct_mean REAL, soc_pct_min REAL, soc_pct_max REAL,
    charge_Ah REAL NOT NULL, charge_in_Ah REAL NOT NULL, charge_out_Ah REAL NOT NULL,
    PRIMARY KEY (channel, interval_s, t_start_us)
) WITHOUT ROWID
"""

SUMMARY_COLUMNS: tuple[str, ...] = (
    "n", "covered_s",
    *[f"{c}_{s}" for c in VALUE_COLUMNS for s in ("mean", "min", "max")],
    "charge_Ah", "charge_in_Ah", "charge_out_Ah",
)


def ensure_schema(store: Any) -> None:
    """Create the ``summaries`` table when missing (idempotent)."""
    store.execute(_SUMMARY_SCHEMA)


def summarise(t_us: np.ndarray, values: dict[str, np.ndarray], *, interval_s: int = 60,
              max_gap_s: float = 60.0, next_t_us: int | None = None,
              next_current_A: float | None = None) -> pd.DataFrame:
    """Per-interval summaries of one channel's sorted readings (pure, vectorised).

    Parameters
    ----------
    t_us
        Sorted UTC times [us since 1970], int64.
    values
        ``voltage_V``, ``current_A``, ``temperature_C``, ``soc_pct`` arrays
        (NaN = missing) aligned with ``t_us``.
    interval_s
        Summary interval [s].
    max_gap_s
        A step between readings longer than this is not integrated [s].
    next_t_us, next_current_A
        The reading that follows the last one (outside this batch), so the
        step to it is integrated too; None when there is none.

    Returns
    -------
    pandas.DataFrame
        One row per interval that holds readings: ``t_start_us`` and
        :data:`SUMMARY_COLUMNS`.
    """
    n = len(t_us)
    if n == 0:
        return pd.DataFrame(columns=["t_start_us", *SUMMARY_COLUMNS])
    step_us = np.int64(interval_s) * 1_000_000
    bins = t_us // step_us
    starts = np.flatnonzero(np.r_[True, bins[1:] != bins[:-1]])
    counts = np.diff(np.r_[starts, n])
    out: dict[str, np.ndarray] = {"t_start_us": bins[starts] * step_us, "n": counts}
    for col in VALUE_COLUMNS:
        v = np.asarray(values.get(col, np.full(n, np.nan)), dtype=np.float64)
        ok = ~np.isnan(v)
        cnt = np.add.reduceat(ok.astype(np.int64), starts)
        total = np.add.reduceat(np.where(ok, v, 0.0), starts)
        with np.errstate(invalid="ignore", divide="ignore"):
            out[f"{col}_mean"] = np.where(cnt > 0, total / np.maximum(cnt, 1), np.nan)
        out[f"{col}_min"] = np.where(cnt > 0, np.fmin.reduceat(np.where(ok, v, np.inf), starts), np.nan)
        out[f"{col}_max"] = np.where(cnt > 0, np.fmax.reduceat(np.where(ok, v, -np.inf), starts), np.nan)
    # trapezoid steps: reading k to reading k+1, credited to reading k's interval
    i = np.asarray(values.get("current_A", np.full(n, np.nan)), dtype=np.float64)
    t_next = np.r_[t_us[1:], next_t_us if next_t_us is not None else t_us[-1]]
    i_next = np.r_[i[1:], next_current_A if next_current_A is not None else np.nan]
    dt_s = (t_next - t_us) / 1e6
    usable = (dt_s > 0) & (dt_s <= max_gap_s) & ~np.isnan(i) & ~np.isnan(i_next)
    area_Ah = np.where(usable, 0.5 * (i + i_next) * dt_s / 3600.0, 0.0)
    out["covered_s"] = np.add.reduceat(np.where(usable, dt_s, 0.0), starts)
    out["charge_Ah"] = np.add.reduceat(area_Ah, starts)
    out["charge_in_Ah"] = np.add.reduceat(np.where(area_Ah > 0, area_Ah, 0.0), starts)
    out["charge_out_Ah"] = np.add.reduceat(np.where(area_Ah < 0, area_Ah, 0.0), starts)
    return pd.DataFrame(out)


def _decode(rows: list[tuple]) -> tuple[np.ndarray, dict[str, np.ndarray]]:
    """Chunks (n, t, v, i, temp, soc blobs) in id order -> sorted, de-duplicated arrays."""
    t = np.concatenate([decode_times(r[1], r[0]) for r in rows])
    vals = {}
    for j, col in enumerate(VALUE_COLUMNS):
        vals[col] = np.concatenate([np.frombuffer(r[2 + j], dtype="<f4").astype(np.float64)
                                    if r[2 + j] is not None else np.full(r[0], np.nan) for r in rows])
    order = np.argsort(t, kind="stable")
    t = t[order]
    keep = np.ones(len(t), dtype=bool)
    keep[:-1] = t[1:] != t[:-1]  # the last written wins, as in Store.read
    idx = order[keep]
    return t[keep], {k: v[idx] for k, v in vals.items()}


_UPSERT = """
INSERT INTO summaries (channel, interval_s, t_start_us, {cols}) VALUES (?, ?, ?, {qs})
ON CONFLICT (channel, interval_s, t_start_us) DO UPDATE SET
    {means},
    {mins},
    {maxs},
    covered_s = covered_s + excluded.covered_s,
    charge_Ah = charge_Ah + excluded.charge_Ah,
    charge_in_Ah = charge_in_Ah + excluded.charge_in_Ah,
    charge_out_Ah = charge_out_Ah + excluded.charge_out_Ah,
    n = n + excluded.n
"""


def _upsert_sql() -> str:
    cols = ", ".join(SUMMARY_COLUMNS)
    qs = ", ".join("?" * len(SUMMARY_COLUMNS))
    means = ",\n    ".join(
        f"{c}_mean = CASE WHEN {c}_mean IS NULL THEN excluded.{c}_mean WHEN excluded.{c}_mean IS NULL"
        f" THEN {c}_mean ELSE ({c}_mean * n + excluded.{c}_mean * excluded.n) / (n + excluded.n) END"
        for c in VALUE_COLUMNS)
    mins = ",\n    ".join(f"{c}_min = COALESCE(MIN({c}_min, excluded.{c}_min), {c}_min, excluded.{c}_min)"
                          for c in VALUE_COLUMNS)
    maxs = ",\n    ".join(f"{c}_max = COALESCE(MAX({c}_max, excluded.{c}_max), {c}_max, excluded.{c}_max)"
                          for c in VALUE_COLUMNS)
    return _UPSERT.format(cols=cols, qs=qs, means=means, mins=mins, maxs=maxs)


def _none(x: Any) -> Any:
    if isinstance(x, (float, np.floating)) and not np.isfinite(x):
        return None
    return x.item() if hasattr(x, "item") else x


@dataclass(frozen=True)
class DownsampleResult:
    """What one :func:`downsample` pass did."""

    rows_summarised: int
    intervals_written: int
    chunks_removed: int
    cutoff: pd.Timestamp | None


def downsample(store: Any, *, keep_full_s: float, interval_s: int = 60, max_gap_s: float = 60.0,
               now_s: float | None = None, piece_s: float = 86_400.0) -> DownsampleResult:
    """Summarise collector readings older than ``keep_full_s`` and remove their raw rows.

    Parameters
    ----------
    store
        An open :class:`collector.store.Store`.
    keep_full_s
        Window kept at full resolution, back from ``now_s`` [s].
    interval_s
        Summary interval [s] (a divisor of a day is sensible: 60, 300, 3600).
    max_gap_s
        Longest step between readings that is integrated [s].
    now_s
        "Now" [UTC s]; ``time.time()`` by default.
    piece_s
        Raw data are processed in pieces of this span [s] to bound memory.

    Returns
    -------
    DownsampleResult
    """
    ensure_schema(store)
    now_s = time.time() if now_s is None else now_s
    step_us = int(interval_s) * 1_000_000
    cutoff_us = (int((now_s - keep_full_s) * 1e6) // step_us) * step_us
    sql = _upsert_sql()
    summarised = intervals = removed = 0
    channels = [r[0] for r in store.execute(
        "SELECT DISTINCT channel FROM chunks WHERE import_id IS NULL AND t_first_us < ?", (cutoff_us,))]
    for channel in channels:
        while True:
            first = store.execute(
                "SELECT MIN(t_first_us) FROM chunks WHERE channel = ? AND import_id IS NULL AND t_first_us < ?",
                (channel, cutoff_us)).fetchone()[0]
            if first is None:
                break
            piece_end = min(cutoff_us, int(first + piece_s * 1e6))
            piece_end = max(piece_end, first + 1)
            with store.transaction():
                rows = store.execute(
                    "SELECT id, n, t, voltage_V, current_A, temperature_C, soc_pct FROM chunks"
                    " WHERE channel = ? AND import_id IS NULL AND t_first_us < ? ORDER BY id",
                    (channel, piece_end)).fetchall()
                t, vals = _decode([r[1:] for r in rows])
                old = t < piece_end
                # the reading after this piece, so the step to it is integrated
                nxt = store.execute(
                    "SELECT t_first_us, current_A FROM chunks WHERE channel = ? AND import_id IS NULL"
                    " AND t_first_us >= ? ORDER BY t_first_us, id LIMIT 1", (channel, piece_end)).fetchone()
                next_t = next_i = None
                if (~old).any():
                    k = int(np.argmax(~old))
                    next_t, next_i = int(t[k]), float(vals["current_A"][k])
                elif nxt is not None:
                    next_t = int(nxt[0])  # a chunk's first time
                    next_i = float(np.frombuffer(nxt[1], dtype="<f4")[0]) if nxt[1] is not None else None
                # the step into the kept window is credited to the last summarised interval;
                # integrating the kept raw readings starts at their first one: nothing counted twice
                summary = summarise(t[old], {k: v[old] for k, v in vals.items()}, interval_s=interval_s,
                                    max_gap_s=max_gap_s, next_t_us=next_t, next_current_A=next_i)
                params = [(channel, int(interval_s), int(row.t_start_us),
                           *[_none(getattr(row, c)) for c in SUMMARY_COLUMNS])
                          for row in summary.itertuples(index=False)]
                for p in params:  # one statement per interval (a minute), not per reading
                    store.execute(sql, p)
                ids = [r[0] for r in rows]
                store.execute(f"DELETE FROM chunks WHERE id IN ({','.join('?' * len(ids))})", tuple(ids))
                if (~old).any():
                    store.append_arrays(channel, t[~old], {k: v[~old] for k, v in vals.items()})
            summarised += int(old.sum())
            intervals += len(summary)
            removed += len(rows)
    return DownsampleResult(summarised, intervals, removed,
                            from_epoch_us(np.array([cutoff_us]))[0] if channels else None)


def compact(store: Any, *, older_than_s: float = 120.0, now_s: float | None = None,
            exclude_id_ranges: list[tuple[int, int]] | None = None,
            only_id_ranges: list[tuple[int, int]] | None = None, small_n: int = 20_000) -> list[int]:
    """Merge small collector chunks older than ``older_than_s`` into large ones.

    Within each channel, consecutive small chunks (fewer than ``small_n``
    samples, ``import_id IS NULL``) are merged up to
    :data:`collector.store.MAX_CHUNK` samples each, the newest write winning
    on a repeated time. ``exclude_id_ranges`` leaves chunks alone;
    ``only_id_ranges`` merges only those chunks (the live writer uses the two
    to keep its clock-correctable chunks apart from the rest).

    Returns
    -------
    list of int
        Ids of the new, merged chunks (the writer adopts those it must still
        be able to correct).
    """
    now_s = time.time() if now_s is None else now_s
    cutoff_us = int((now_s - older_than_s) * 1e6)
    excl = exclude_id_ranges or []
    only = only_id_ranges
    meta = store.execute(
        "SELECT id, channel, n FROM chunks WHERE import_id IS NULL AND t_last_us < ? AND n < ?"
        " ORDER BY channel, t_first_us, id", (cutoff_us, small_n)).fetchall()
    groups: list[list[Any]] = []  # [channel, ids, samples]
    for cid, channel, n in meta:
        if any(lo <= cid <= hi for lo, hi in excl):
            continue
        if only is not None and not any(lo <= cid <= hi for lo, hi in only):
            continue
        if groups and groups[-1][0] == channel and groups[-1][2] + n <= MAX_CHUNK:
            groups[-1][1].append(cid)
            groups[-1][2] += n
        else:
            groups.append([channel, [cid], n])
    new_ids: list[int] = []
    for channel, ids, _n in groups:
        if len(ids) < 2:
            continue
        with store.transaction():
            q = ",".join("?" * len(ids))
            rows = store.execute(f"SELECT n, t, voltage_V, current_A, temperature_C, soc_pct FROM chunks"
                                 f" WHERE id IN ({q}) ORDER BY id", tuple(ids)).fetchall()
            t, vals = _decode(rows)
            store.execute(f"DELETE FROM chunks WHERE id IN ({q})", tuple(ids))
            before = int(store.execute("SELECT COALESCE(MAX(id), 0) FROM chunks").fetchone()[0])
            store.append_arrays(channel, t, vals)
            after = int(store.execute("SELECT COALESCE(MAX(id), 0) FROM chunks").fetchone()[0])
        new_ids.extend(range(before + 1, after + 1))
    return new_ids


def read_summaries(store: Any, start: Any = None, end: Any = None, *, channels: list[str] | None = None,
                   interval_s: int | None = None) -> pd.DataFrame:
    """Summaries with ``start <= t_start < end`` as a frame (``t`` UTC, ``channel``, ``interval_s`` ...)."""
    ensure_schema(store)
    sql = f"SELECT channel, interval_s, t_start_us, {', '.join(SUMMARY_COLUMNS)} FROM summaries WHERE 1=1"
    args: list[Any] = []
    for bound, op in ((start, ">="), (end, "<")):
        if bound is not None:
            ts = pd.Timestamp(bound)
            ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
            sql += f" AND t_start_us {op} ?"
            args.append(int(ts.value // 1000) if ts.unit == "ns" else int(ts.as_unit("us").value))
    if channels is not None:
        sql += f" AND channel IN ({','.join('?' * len(channels))})"
        args.extend(channels)
    if interval_s is not None:
        sql += " AND interval_s = ?"
        args.append(int(interval_s))
    rows = store.execute(sql + " ORDER BY channel, t_start_us", tuple(args)).fetchall()
    cols = ["channel", "interval_s", "t_start_us", *SUMMARY_COLUMNS]
    df = pd.DataFrame(rows, columns=cols)
    df.insert(0, "t", from_epoch_us(df["t_start_us"].to_numpy(dtype=np.int64)))
    return df.drop(columns="t_start_us").astype({c: "float64" for c in SUMMARY_COLUMNS if c != "n"})
