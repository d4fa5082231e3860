"""The steps every file importer shares once its rows are parsed (collector.csv_file, collector.parquet_file).

An importer turns a file into one or more *time axes*: sorted-or-not int64 UTC microseconds
and the columns read at those times, keyed ``(channel, quantity)`` (a wide log has one axis; a
long Parquet file one per channel). From there the steps are the same for every format, and
live here once:

1. :func:`begin` -- the file can be read and is not a folder; its sha256 is computed beside the
   parse, and an importer returns the earlier result, adding nothing, when the store's import
   log has it (:class:`Begun`);
2. :func:`order_axis` -- rows out of time order are sorted; a repeated time with the same
   values is a ``duplicate``, with other values a ``duplicate_time`` (both rejected, counted);
3. :func:`count_rejects` and :func:`check_counts` -- ``stored + rejected == data lines``, always;
4. :func:`settle_signs` -- each channel's current sign, detected or forced (``--invert``);
5. :func:`held_writes` -- readings the store already holds are kept out of the write, counted;
6. :func:`time_facts` -- the median sample interval, the gaps and the span;
7. :func:`store_import` -- one transaction: the import record, the readings, the quarantine
   file of rejected lines, the summary.
"""

from __future__ import annotations

import dataclasses
import time as _time
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from drawdown.collector.canonical import VALUE_COLUMNS
from drawdown.collector.columns import normalise_channel
from drawdown.collector.store import Store

if TYPE_CHECKING:
    from drawdown.collector.csv_file import Gap, ImportResult

Columns = dict[tuple[str, str], np.ndarray]
#: One time axis: times [us, UTC] and the columns read at them, keyed (channel, quantity).
Axis = tuple[np.ndarray, Columns]
#: One write: channel, times, quantity -> values, and which rows are new to the store.
Write = tuple[str, np.ndarray, dict[str, np.ndarray], np.ndarray]

MAX_GAPS_LISTED = 500
SIGN_SAMPLE_ROWS = 1_000_000    # rows used to decide a channel's sign
_SLICE = 1 << 22                # rows per slice for whole-axis checks (bounded temporaries)


class Begun:
    """A file found readable, its size, and its sha256 being computed in a thread beside the parse.

    Hashing a year's log (1.5 GB) takes over a second; the parse does not need the hash, only
    the check "was this file imported before" does, so it runs alongside: :meth:`earlier` asks
    the store once the hash is known (an importer checks between blocks, and always before it
    writes anything).
    """

    def __init__(self, path: Path, size: int):
        from concurrent.futures import ThreadPoolExecutor

        from drawdown.collector.csv_file import _sha256

        self.path = path
        self.size = size
        self._pool = ThreadPoolExecutor(max_workers=1, thread_name_prefix="sha256")
        self._sha = self._pool.submit(_sha256, path)
        self._pool.shutdown(wait=False)
        self._asked = False
        self._earlier: ImportResult | None = None

    @property
    def sha256(self) -> str:
        """The file's sha256 (waits for the hash)."""
        return self._sha.result()

    def hashed(self) -> bool:
        return self._sha.done()

    def earlier(self, store: Store, t0: float) -> ImportResult | None:
        """The result of an earlier import of the same bytes, or None (waits for the hash)."""
        from drawdown.collector.csv_file import already_imported_result

        if not self._asked:
            previous = store.find_import(self.sha256)
            self._earlier = already_imported_result(self.path, self.sha256, previous, t0) if previous else None
            self._asked = True
        return self._earlier

    def earlier_if_hashed(self, store: Store, t0: float) -> ImportResult | None:
        """:meth:`earlier` when the hash is ready, else None without waiting."""
        return self.earlier(store, t0) if self.hashed() else None


def begin(path: Path, store: Store, t0: float) -> Begun:
    """Check ``path`` can be read and is a file; start hashing it (see :class:`Begun`)."""
    from drawdown.collector.csv_file import UnusableInput

    try:
        size = path.stat().st_size
    except OSError as exc:
        raise UnusableInput(f"{path}: cannot read the file ({exc.strerror or exc})") from None
    if path.is_dir():
        raise UnusableInput(f"{path}: is a folder, not a log file")
    return Begun(path, size)


def _strictly_increasing(t: np.ndarray) -> bool:
    """All times strictly increasing, checked in slices so no full-length temporary is made."""
    for s0 in range(0, len(t) - 1, _SLICE):
        seg = t[s0:s0 + _SLICE + 1]
        if not bool(np.all(seg[1:] > seg[:-1])):
            return False
    return True


def order_axis(t: np.ndarray, cols: Columns, line: np.ndarray,
               rejects: dict[str, list[np.ndarray]]) -> tuple[np.ndarray, Columns, int]:
    """Sort one axis by time and drop repeated times; returns (times, columns, rows out of order).

    ``line`` numbers the rows (file line or row number) so that rejected repeats can be named
    in ``rejects``: an exact repeat of the first row at that time is ``duplicate``, a row with
    the same time and other values ``duplicate_time``. The first row at a time is kept.
    """
    if len(t) <= 1 or _strictly_increasing(t):
        return t, cols, 0
    out_of_order = int(np.sum(t[1:] < np.maximum.accumulate(t)[:-1]))
    order = np.argsort(t, kind="stable")
    ts = t[order]
    same = np.zeros(len(ts), bool)
    same[1:] = ts[1:] == ts[:-1]
    if same.any():
        exact = same.copy()
        for arr in cols.values():
            a = arr[order]
            eq = np.zeros(len(a), bool)
            eq[1:] = (a[1:] == a[:-1]) | (np.isnan(a[1:]) & np.isnan(a[:-1]))
            exact &= eq
        lines = line[order]
        if (same & exact).any():
            rejects.setdefault("duplicate", []).append(lines[same & exact])
        if (same & ~exact).any():
            rejects.setdefault("duplicate_time", []).append(lines[same & ~exact])
    keep_idx = order[~same]
    return ts[~same], {k: v[keep_idx] for k, v in cols.items()}, out_of_order


def count_rejects(rejects: dict[str, list[np.ndarray]]) -> tuple[dict[str, int], int, int]:
    """(rows rejected by reason, rows rejected in all, of which repeated times)."""
    by_reason = {why: int(sum(len(a) for a in arrs)) for why, arrs in sorted(rejects.items())}
    by_reason = {k: v for k, v in by_reason.items() if v}
    duplicates = by_reason.get("duplicate", 0) + by_reason.get("duplicate_time", 0)
    return by_reason, sum(by_reason.values()), duplicates


def check_counts(path: Path, rows_stored: int, rows_rejected: int, data_lines: int, what: str = "data lines") -> None:
    """Every data line is stored or rejected, once; a mismatch is a bug, said loudly, never a mis-count."""
    if rows_stored + rows_rejected != data_lines:
        raise RuntimeError(f"{path}: internal count mismatch: stored {rows_stored} + rejected "
                           f"{rows_rejected} != {what} {data_lines}")


def bank_voltage(axes: Iterable[Axis], t: np.ndarray) -> np.ndarray | None:
    """The battery channel's voltage at exactly the times ``t`` (NaN where it has none), or None."""
    for tb, cb in axes:
        vb = cb.get(("battery", "voltage_V"))
        if vb is None:
            continue
        if tb is t:
            return vb
        if not len(tb):
            return None
        pos = np.minimum(np.searchsorted(tb, t), len(tb) - 1)
        return np.where(tb[pos] == t, vb[pos], np.nan).astype(np.float32)
    return None


def settle_signs(axes: list[Axis], invert: Iterable[str], *, own: bool = False
                 ) -> tuple[list[str], list[str], dict[str, str]]:
    """Detect (or force, ``--invert``) each channel's current sign and flip it in place in ``axes``.

    ``own``: the file is a drawdown readings export, already in drawdown's sign convention, so
    only ``--invert`` applies. Returns (channels, channels inverted, the evidence per channel).
    """
    from drawdown.collector.csv_file import detect_sign_inversion

    channels = sorted({ch for _, cols in axes for ch, _ in cols})
    forced = {normalise_channel(c) for c in invert}
    inverted: list[str] = []
    evidence: dict[str, str] = {}
    for t, cols in axes:
        for ch in sorted({c for c, _ in cols}):
            cur = cols.get((ch, "current_A"))
            if cur is None:
                continue
            if ch in forced:
                inverted.append(ch)
                evidence[ch] = "inverted on request (--invert)"
                continue
            if own:
                evidence[ch] = "a drawdown readings export is already in drawdown's sign convention"
                continue
            volt = cols.get((ch, "voltage_V"))
            if volt is None:
                volt = bank_voltage(axes, t)
            k = min(len(t), SIGN_SAMPLE_ROWS)
            flip, why = detect_sign_inversion(ch, t[:k], cur[:k], None if volt is None else volt[:k])
            evidence[ch] = why
            if flip:
                inverted.append(ch)
    for _, cols in axes:
        for ch in inverted:
            if (ch, "current_A") in cols:
                cols[(ch, "current_A")] = -cols[(ch, "current_A")]
    for ch in sorted(forced - set(channels)):
        evidence[ch] = f"--invert {ch}: no such channel in this file (channels: {', '.join(channels)})"
    return channels, sorted(set(inverted)), evidence


def _already_held(store: Store, channel: str, t: np.ndarray, cols: dict[str, np.ndarray],
                  has: np.ndarray) -> np.ndarray:
    """Per row of ``t`` (sorted): True when the store already holds this channel's reading at that
    time with every value the row has (a value the store lacks, or holds differently, is new)."""
    out = np.zeros(len(t), bool)
    if not has.any():
        return out
    held_t, held_v = store.held(channel, int(t[0]), int(t[-1]))
    if held_t.size == 0:
        return out
    pos = np.minimum(np.searchsorted(held_t, t), held_t.size - 1)
    out = (held_t[pos] == t) & has
    for q, c in cols.items():
        h = held_v[VALUE_COLUMNS.index(q)][pos]
        out &= np.isnan(c) | (h == c)
    return out


def held_writes(store: Store, axes: list[Axis]) -> tuple[list[Write], int]:
    """What to write per channel (rows the store does not hold yet) and how many rows it already held.

    The same readings imported before from another file (a copy that differs only in line
    ends, an export of this store) are kept out of the write and counted.
    """
    writes: list[Write] = []
    rows_already_held = 0
    for t, cols in axes:
        held_line = np.ones(len(t), bool)
        any_value = np.zeros(len(t), bool)
        for ch in sorted({c for c, _ in cols}):
            qcols = {q: cols[(ch, q)] for q in VALUE_COLUMNS if (ch, q) in cols}
            has = np.zeros(len(t), bool)
            for c in qcols.values():
                has |= ~np.isnan(c)
            held = _already_held(store, ch, t, qcols, has)
            writes.append((ch, t, qcols, has & ~held))
            held_line &= held | ~has
            any_value |= has
        rows_already_held += int(np.count_nonzero(held_line & any_value))
    return writes, rows_already_held


def time_facts(axes: list[Axis]) -> tuple[float | None, int, list[Gap], dict[str, str] | None]:
    """(median sample interval [s], gaps in all, the first gaps listed, the time span) over every axis."""
    from drawdown.collector.csv_file import Gap, _intervals, _iso

    t_all = axes[0][0] if len(axes) == 1 else np.unique(np.concatenate([t for t, _ in axes]))
    interval = None
    gaps_total = 0
    gaps: list[Gap] = []
    if len(t_all) > 1:
        med, big, big_dt = _intervals(t_all)
        interval = med / 1e6
        gaps_total = int(big.size)
        for k, d in zip(big[:MAX_GAPS_LISTED], big_dt[:MAX_GAPS_LISTED]):
            gaps.append(Gap(_iso(int(t_all[k])), _iso(int(t_all[k + 1])), float(d) / 1e6))
    span = {"start": _iso(int(t_all[0])), "end": _iso(int(t_all[-1]))} if len(t_all) else None
    return interval, gaps_total, gaps, span


def store_import(store: Store, result: ImportResult, writes: list[Write],
                 write_quarantine: Callable[[Path], None] | None, t0: float) -> ImportResult:
    """Write the import in one transaction: its record, the new readings, the quarantine, the summary."""
    with store.transaction():
        import_id = store.record_import(path=result.path, sha256=result.sha256 or "", rows_stored=result.rows_stored,
                                        rows_rejected=result.rows_rejected, summary={})
        for ch, t, qcols, new in writes:
            if new.all():
                store.append_arrays(ch, t, qcols, import_id=import_id)
            elif new.any():
                store.append_arrays(ch, t[new], {q: c[new] for q, c in qcols.items()}, import_id=import_id)
        if result.quarantine is not None and write_quarantine is not None:
            write_quarantine(Path(result.quarantine))
        final = dataclasses.replace(result, seconds=round(_time.perf_counter() - t0, 3))
        store.update_import(import_id, rows_stored=result.rows_stored, rows_rejected=result.rows_rejected,
                            summary=final.to_json())
    return final
