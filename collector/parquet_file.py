"""Import Parquet files: drawdown's own readings exports, and any Parquet log with a time column.

Two layouts are read (docs/export.md):

* **long** -- a ``channel`` text column beside the time and quantity columns, one row per
  (time, channel): what ``drawdown export readings --format parquet`` writes (columns ``t``,
  ``channel``, ``voltage_V``, ``current_A``, ``temperature_C``, ``soc_pct``). Such an export
  round-trips exactly: imported into another store and exported again it gives the same rows.
* **wide** -- one row per time, a column per channel and quantity, named as in a CSV log
  (``battery_current_A``, ``Current (A)``, ``volts``, ``PV W`` ...; see
  :mod:`collector.columns`); ``--map``, ``--channel`` and ``--invert`` work as for CSV.

The time column is the one whose name says time (``time``, ``timestamp``, ``t`` ...; ``--map
COLUMN=time`` to name it), else the only timestamp-typed column. It may be a Parquet timestamp
with a UTC adjustment (an instant: read straight to UTC), a timestamp without one (local
wall-clock time: placed with ``tz``, the same DST rules as CSV), a number (Unix epoch in s, ms
or us, told apart by magnitude, or as ``--map COLUMN=epoch_ms`` says) or text (ISO 8601 with or
without an offset, local date-times: read as the CSV importer reads them). Times finer than a
microsecond are cut to the microsecond the store keeps.

Counting follows the CSV importer (collector.csv_file): a *data line* is a row of the file,
``rows_stored + rows_rejected == data_lines``, rejected rows are counted by reason and kept in
``store.quarantine_dir / '<file-stem>-<sha8>.csv'`` (``line,reason,text``; for a Parquet file
``line`` is the 1-based row number and ``text`` the row as a JSON object). Reasons are those of
the CSV importer that apply to typed columns (``bad_time``, ``time_without_offset``,
``time_out_of_range``, ``ambiguous_local_time``, ``nonexistent_local_time``, ``non_numeric``,
``implausible_*``, ``no_values``, ``duplicate``, ``duplicate_time``) and ``bad_channel`` (a
long file's row whose channel is empty or not a usable name).

The same file imported twice adds nothing (its sha256 is in the store's import log), and rows
the store already holds (same channel, time and values) are not written again.

A file that carries drawdown's readings-export metadata (``drawdown.kind = readings``) was
made from a store: its currents are already in drawdown's sign convention, so the sign check
is skipped (``--invert`` still applies), and its values are taken as they were stored -- only
non-finite values are refused -- since a store also holds live readings that never went
through the CSV importer's plausibility bounds. Every other file gets the CSV importer's
sign check and bounds.
"""

from __future__ import annotations

import csv
import json
import math
import re
import time as _time
from collections.abc import Callable, Iterable
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.parquet as pq

from drawdown.collector.columns import ColumnSpec, mapped_spec, normalise_channel
from drawdown.collector.csv_file import (
    _ISO,
    _OFFSET,
    _REASONS,
    NULL_VALUES,
    _TIME_MIN_US,
    ImportResult,
    NothingStored,
    UnusableInput,
    _bounds,
    _dt_to_us,
    _epoch_to_us,
    _Grow,
    _Localiser,
    _printable,
    _time_kind,
    _to_datetime,
)
from drawdown.collector import import_finish
from drawdown.collector.store import Store

if TYPE_CHECKING:  # pandas loads only for text times or text values, not for typed columns
    import pandas as pd

__all__ = ["MAGIC", "META_KIND", "META_PRODUCER", "META_SCHEMA_VERSION", "META_TIMEZONE", "import_parquet",
           "is_parquet"]

#: The four bytes a Parquet file begins (and ends) with.
MAGIC = b"PAR1"
#: File-level metadata keys drawdown writes into its exports (docs/export.md).
META_PRODUCER = "drawdown.producer"
META_SCHEMA_VERSION = "drawdown.schema_version"
META_KIND = "drawdown.kind"
META_TIMEZONE = "drawdown.timezone"

BATCH_ROWS = 1 << 20            # rows read and checked at a time
DETECT_ROWS = 100               # non-null values used to tell a time column's kind
#: Reasons as uint8 codes, the CSV importer's first (same codes), then this importer's own.
_PQ_REASONS = (*_REASONS, "bad_channel")
_R = {name: np.uint8(code) for code, name in enumerate(_PQ_REASONS)}
_RE_HAS_OFFSET = re.compile(rf"^{_ISO}\s*{_OFFSET}$")


def is_parquet(path: Path) -> bool:
    """True when ``path`` is named ``*.parquet`` or begins with the Parquet magic bytes."""
    if Path(path).suffix.lower() in (".parquet", ".pq"):
        return True
    try:
        with open(path, "rb") as f:
            return f.read(4) == MAGIC
    except OSError:
        return False


# --------------------------------------------------------------------------------------------
# detection
# --------------------------------------------------------------------------------------------

def _is_numeric(t: pa.DataType) -> bool:
    return pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t)


def _is_text(t: pa.DataType) -> bool:
    if pa.types.is_dictionary(t):
        t = t.value_type
    return pa.types.is_string(t) or pa.types.is_large_string(t)


class _Layout:
    """What the columns of a Parquet file mean."""

    def __init__(self) -> None:
        self.time_col: str = ""
        self.time_kind: str = ""          # ts_utc | ts_local | epoch | text
        self.time_scale: float = 1.0      # seconds per raw unit (epoch); us per raw unit (timestamps)
        self.text_kind: tuple[str, str | None, float] | None = None  # csv_file._time_kind for text
        self.channel_col: str | None = None
        self.values: dict[str, ColumnSpec] = {}   # column -> spec (channel None in a long file)
        self.ignored: list[str] = []
        self.own: bool = False            # a drawdown readings export


def _detect(path: Path, pf: pq.ParquetFile, *, channel: str, column_map: dict[str, ColumnSpec],
            own: bool) -> _Layout:
    schema = pf.schema_arrow
    names = list(schema.names)
    spec_of = mapped_spec(column_map)

    lay = _Layout()
    lay.own = own
    listed = ", ".join(repr(n) for n in names)
    chan = [n for n in names if n.strip().lower() == "channel" and n not in column_map]
    if chan:
        if not _is_text(schema.field(chan[0]).type):
            raise UnusableInput(f"{path}: the column {chan[0]!r} holds {schema.field(chan[0]).type}, not channel "
                                "names (text such as 'battery', 'solar')")
        lay.channel_col = chan[0]
    default = normalise_channel(channel)
    named: list[str] = []      # columns whose name (or --map) says time
    by_type: list[str] = []    # other timestamp-typed columns: the time when nothing is named so
    taken: set[tuple[str | None, str]] = set()
    for name in names:
        if name == lay.channel_col:
            continue
        ftype = schema.field(name).type
        spec = spec_of(name)
        if spec is None and name.strip().lower() == "t" and pa.types.is_timestamp(ftype):
            spec = ColumnSpec(None, "time", 1.0)  # drawdown's own name for the time column
        if spec is None:
            if pa.types.is_timestamp(ftype):
                by_type.append(name)
                continue
            why = "an index pandas wrote" if name.startswith("__index_level_") else "not a quantity drawdown stores"
            lay.ignored.append(f"{name!r} ({why})")
            continue
        if spec.quantity == "ignore":
            lay.ignored.append(f"{name!r} (--map ignore)")
            continue
        if spec.quantity == "time":
            named.append(name)
            continue
        if not (_is_numeric(ftype) or _is_text(ftype)):
            lay.ignored.append(f"{name!r} (holds {ftype}, not numbers)")
            continue
        if lay.channel_col is not None:
            if spec.channel is not None and name not in column_map:
                lay.ignored.append(f"{name!r} (names a channel, but this file has a {lay.channel_col!r} column)")
                continue
            spec = ColumnSpec(None, spec.quantity, spec.scale)
            key: tuple[str | None, str] = (None, spec.quantity)
        else:
            spec = ColumnSpec(spec.channel or default, spec.quantity, spec.scale)
            key = (spec.channel, spec.quantity)
        if key in taken:
            what = f"{spec.channel} {spec.quantity}" if key[0] else spec.quantity
            lay.ignored.append(f"{name!r} (a second {what} column)")
            continue
        taken.add(key)
        lay.values[name] = spec
    if not lay.values:
        what = (f"{path}: no voltage, current, power, temperature or state-of-charge column among {listed}; "
                "name them e.g. 'voltage_V', 'current_A'")
        raise UnusableInput(f"{what}, or pass --map COLUMN=current_A",
                            page_message=f"{what} and upload the file again")
    candidates = named or (by_type if len(by_type) == 1 else [])
    if not candidates:
        what = f"{path}: no time column among {listed}; name it 'time' or 'timestamp'"
        if len(by_type) > 1:
            what = (f"{path}: several timestamp columns ({', '.join(repr(n) for n in by_type)}) and none is "
                    "named as the time")
        raise UnusableInput(f"{what}, or pass --map COLUMN=time (or epoch_s / epoch_ms)",
                            page_message=f"{what} and upload the file again")
    errors = []
    for name in candidates:
        try:
            _time_column(path, pf, lay, name, spec_of(name) or ColumnSpec(None, "time", 1.0))
            break
        except UnusableInput as exc:
            errors.append(str(exc))
    else:
        raise UnusableInput(errors[0])
    for name in candidates:
        if name != lay.time_col:
            lay.ignored.append(f"{name!r} (a second time column)")
    for name in by_type:
        if name not in candidates:
            lay.ignored.append(f"{name!r} (a timestamp column that is not the time)")
    return lay


def _first_values(pf: pq.ParquetFile, name: str, n: int) -> list[Any]:
    out: list[Any] = []
    for batch in pf.iter_batches(batch_size=max(n, 1024), columns=[name]):
        out.extend(v for v in batch.column(0).to_pylist() if v is not None)
        if len(out) >= n:
            break
    return out[:n]


def _time_column(path: Path, pf: pq.ParquetFile, lay: _Layout, name: str, spec: ColumnSpec) -> None:
    """Decide how the time column ``name`` is read; UnusableInput when it cannot be."""
    ftype = pf.schema_arrow.field(name).type
    if pa.types.is_dictionary(ftype):
        ftype = ftype.value_type
    if pa.types.is_timestamp(ftype):
        lay.time_kind = "ts_utc" if ftype.tz is not None else "ts_local"
        lay.time_scale = {"s": 1e6, "ms": 1e3, "us": 1.0, "ns": 1e-3}[ftype.unit]
    elif pa.types.is_integer(ftype) or pa.types.is_floating(ftype) or pa.types.is_decimal(ftype):
        lay.time_kind = "epoch"
        if spec.scale != 1.0:
            lay.time_scale = spec.scale
        else:
            sample = [float(v) for v in _first_values(pf, name, DETECT_ROWS)]
            finite = [abs(v) for v in sample if math.isfinite(v)]
            med = float(np.median(finite)) if finite else 0.0
            if 1e8 <= med < 1e11:
                lay.time_scale = 1.0
            elif 1e11 <= med < 1e14:
                lay.time_scale = 1e-3
            elif 1e14 <= med < 1e17:
                lay.time_scale = 1e-6
            else:
                raise UnusableInput(f"{path}: the time column {name!r} holds numbers that are not Unix epoch "
                                    f"times in s, ms or us (first value: {sample[0] if sample else None!r}); "
                                    "relative times cannot be placed on a calendar")
    elif _is_text(ftype):
        texts = [str(v).strip() for v in _first_values(pf, name, DETECT_ROWS)]
        kind = _time_kind(texts, spec.scale)
        if kind is None:
            raise UnusableInput(f"{path}: the time column {name!r} holds neither ISO 8601 timestamps, local "
                                f"date-times nor Unix epoch times (first value: {texts[0] if texts else None!r})")
        lay.time_kind, lay.text_kind = "text", kind
    elif pa.types.is_date(ftype):
        raise UnusableInput(f"{path}: the time column {name!r} holds dates without a time of day; readings need "
                            "their time (a timestamp column)")
    else:
        raise UnusableInput(f"{path}: the time column {name!r} holds {ftype}, not times (expected a timestamp, "
                            "a Unix epoch number or ISO 8601 text)")
    lay.time_col = name


# --------------------------------------------------------------------------------------------
# reading a batch
# --------------------------------------------------------------------------------------------

def _plain(col: pa.Array | pa.ChunkedArray) -> pa.Array:
    if isinstance(col, pa.ChunkedArray):
        col = col.combine_chunks()
    if pa.types.is_dictionary(col.type):
        col = col.dictionary_decode()
    return col


def _text_series(col: pa.Array) -> pd.Series:
    """A text column as a pandas object Series of stripped strings (None where null)."""
    import pandas as pd

    return pd.Series([None if v is None else str(v).strip() for v in _plain(col).to_pylist()], dtype=object)


def _batch_times(lay: _Layout, col: pa.Array, localise: _Localisers | None, groups: np.ndarray | None = None
                 ) -> tuple[np.ndarray, np.ndarray]:
    """UTC microseconds and a reason code per row of one batch's time column."""
    col = _plain(col)
    n = len(col)
    reason = np.zeros(n, np.uint8)
    if lay.time_kind in ("ts_utc", "ts_local"):
        null = col.is_null().to_numpy(zero_copy_only=False)
        raw = pc.fill_null(col.cast(pa.int64()), 0).to_numpy(zero_copy_only=False).astype(np.int64)
        if lay.time_scale >= 1.0:
            with np.errstate(over="ignore"):
                t_us = raw * np.int64(lay.time_scale)
            # a value so far out that it overflows is a bad time, not a wrapped one
            big = np.abs(raw) > (np.iinfo(np.int64).max // max(int(lay.time_scale), 1))
            null = null | big
        else:
            t_us = np.floor_divide(raw, np.int64(round(1.0 / lay.time_scale)))
        reason[null] = _R["bad_time"]
        t_us[null] = 0
        if lay.time_kind == "ts_local":
            t_us, reason = _localise(localise, t_us, reason, groups)
        return t_us, reason
    if lay.time_kind == "epoch":
        raw = pc.cast(col, pa.float64()).to_numpy(zero_copy_only=False)
        t_us, bad = _epoch_to_us(raw, lay.time_scale)
        reason[bad] = _R["bad_time"]
        return t_us, reason
    # text, read as the CSV importer's careful path reads it
    kind, fmt, scale = lay.text_kind  # type: ignore[misc]
    ts = _text_series(col)
    import pandas as pd

    if kind == "epoch":
        raw = pd.to_numeric(ts.str.replace(",", ".", regex=False), errors="coerce").to_numpy(dtype=np.float64)
        t_us, bad = _epoch_to_us(raw, scale)
        reason[bad] = _R["bad_time"]
        return t_us, reason
    t_us = np.zeros(n, np.int64)
    has_off = ts.str.match(_RE_HAS_OFFSET.pattern).fillna(False).to_numpy(bool)
    is_local = ts.str.match(rf"^{_ISO}$").fillna(False).to_numpy(bool)
    if kind == "iso_utc":
        parsed = _to_datetime(ts.where(has_off), utc=True, format="ISO8601")
        reason[~has_off] = _R["bad_time"]
        reason[is_local] = _R["time_without_offset"]
        reason[np.asarray(parsed.isna()) & has_off] = _R["bad_time"]
        t_us = _dt_to_us(parsed)
        t_us[reason != 0] = 0
        return t_us, reason
    if has_off.any():
        p_off = _to_datetime(ts.where(has_off), utc=True, format="ISO8601")
        t_us[has_off] = _dt_to_us(p_off)[has_off]
        reason[has_off & np.asarray(p_off.isna())] = _R["bad_time"]
    naive = ~has_off
    if kind == "iso_local":
        p = _to_datetime(ts.where(naive & is_local), format="ISO8601")
    else:
        p = _to_datetime(ts.where(naive), format=fmt)
    p_bad = np.asarray(p.isna()) & naive
    reason[p_bad] = _R["bad_time"]
    wall = _dt_to_us(p)
    todo = naive & ~p_bad
    if todo.any():
        sub_t, sub_r = _localise(localise, wall[todo], reason[todo].copy(), None if groups is None else groups[todo])
        t_us[todo] = sub_t
        reason[todo] = sub_r
    t_us[reason != 0] = 0
    return t_us, reason


class _Localisers:
    """Local wall-clock time -> UTC with csv_file._Localiser, one per channel of a long file.

    The repeated hour when clocks go back is placed from the order of the times; in a long file
    each channel passes through it on its own (the battery's rows, then the solar's), so each
    channel's rows are placed in their own order.
    """

    def __init__(self, tz: str):
        self.tz = tz
        self.by_group: dict[str, _Localiser] = {}

    def place(self, wall_us: np.ndarray, reason: np.ndarray, groups: np.ndarray | None
              ) -> tuple[np.ndarray, np.ndarray]:
        ok = reason == 0
        out = wall_us.copy()
        keys = [""] if groups is None else [str(g) for g in dict.fromkeys(groups[ok].tolist())]
        for key in keys:
            m = ok if groups is None else ok & (groups == key)
            if not m.any():
                continue
            loc = self.by_group.setdefault(key, _Localiser(self.tz))
            utc, unplaced, nonexist = loc(wall_us[m])
            out[m] = utc
            sub = reason[m]
            sub[unplaced] = _R["ambiguous_local_time"]
            sub[nonexist] = _R["nonexistent_local_time"]
            reason[m] = sub
        return out, reason


def _localise(localise: _Localisers | None, wall_us: np.ndarray, reason: np.ndarray, groups: np.ndarray | None
              ) -> tuple[np.ndarray, np.ndarray]:
    if localise is None:
        return wall_us.copy(), reason
    return localise.place(wall_us, reason, groups)


def _batch_values(col: pa.Array) -> tuple[np.ndarray, np.ndarray]:
    """A quantity column as float64 (NaN where missing) and a mask of text that is not a number."""
    col = _plain(col)
    if _is_numeric(col.type):
        v = pc.cast(col, pa.float64()).to_numpy(zero_copy_only=False).astype(np.float64, copy=False)
        return v, np.zeros(len(v), bool)
    import pandas as pd

    s = _text_series(col)
    missing = s.isna().to_numpy() | s.isin(NULL_VALUES).to_numpy()
    text = s.where(~missing)
    num = pd.to_numeric(text, errors="coerce").to_numpy(dtype=np.float64)
    comma = np.isnan(num) & ~missing
    if comma.any():  # a decimal comma (no point in the value)
        alt = text[comma].str.replace(",", ".", regex=False).where(~text[comma].str.contains(".", regex=False))
        num[comma] = pd.to_numeric(alt, errors="coerce").to_numpy(dtype=np.float64)
    return num, np.isnan(num) & ~missing


# --------------------------------------------------------------------------------------------
# the import
# --------------------------------------------------------------------------------------------

class _Set:
    """Accepted rows that share a time axis: a wide file's rows, or one channel's rows of a long file."""

    def __init__(self, cap: int):
        self.rows = _Grow(cap, np.int64)
        self.t = _Grow(cap, np.int64)
        self.cols: dict[tuple[str, str], _Grow] = {}

    def add(self, rows: np.ndarray, t: np.ndarray, values: dict[tuple[str, str], np.ndarray]) -> None:
        for k, v in values.items():
            if k not in self.cols:
                g = _Grow(len(self.rows.a), np.float64 if k[1] == "power_W" else np.float32)
                g.extend(np.full(self.rows.n, np.nan, g.a.dtype))
                self.cols[k] = g
        n = len(rows)
        self.rows.extend(rows)
        self.t.extend(t)
        for k, g in self.cols.items():
            arr = values.get(k)
            g.extend(arr.astype(g.a.dtype, copy=False) if arr is not None else np.full(n, np.nan, g.a.dtype))


def _metadata(pf: pq.ParquetFile) -> dict[str, str]:
    raw = pf.schema_arrow.metadata or {}
    out = {}
    for k, v in raw.items():
        try:
            out[k.decode("utf-8")] = v.decode("utf-8")
        except UnicodeDecodeError:
            continue
    return out


def _open(path: Path) -> pq.ParquetFile:
    try:
        return pq.ParquetFile(path)
    except (pa.ArrowInvalid, pa.ArrowException, OSError, ValueError) as exc:
        with open(path, "rb") as f:
            head = f.read(4)
        what = ("it does not begin with the Parquet magic bytes 'PAR1'" if head != MAGIC
                else f"it is damaged or cut short ({exc})")
        raise UnusableInput(f"{path}: not a readable Parquet file: {what}") from None


def import_parquet(path: Path, store: Store, *, tz: str | None = None, channel: str | None = None,
                   column_map: dict[str, ColumnSpec] | None = None, invert: Iterable[str] = (),
                   nominal_voltage_V: float | None = None,
                   progress: Callable[[int, int], None] | None = None,
                   batch_rows: int = BATCH_ROWS) -> ImportResult:
    """Import one Parquet file into the store, in one transaction (the parameters of
    :func:`collector.csv_file.import_file`, which this mirrors).

    Raises
    ------
    UnusableInput
        Not a Parquet file, damaged, no rows, no time or quantity column, or another drawdown
        export (ledger, soc, events) that holds no readings; nothing is stored.
    NothingStored
        Every row was rejected; its ``result`` counts them by reason (kept in quarantine).
    """
    try:
        return _import_parquet(Path(path), store, tz=tz, channel=channel, column_map=column_map, invert=invert,
                               nominal_voltage_V=nominal_voltage_V, progress=progress, batch_rows=batch_rows)
    except pa.ArrowException as exc:  # a damaged page or footer: the file's fault, nothing was stored
        raise UnusableInput(f"{path}: the Parquet file cannot be read: it is damaged or cut short ({exc})") from None


def _import_parquet(path: Path, store: Store, *, tz: str | None, channel: str | None,
                    column_map: dict[str, ColumnSpec] | None, invert: Iterable[str],
                    nominal_voltage_V: float | None, progress: Callable[[int, int], None] | None,
                    batch_rows: int) -> ImportResult:
    t0 = _time.perf_counter()
    path = Path(path)
    begun = import_finish.begin(path, store, t0)
    earlier = begun.earlier(store, t0)
    if earlier is not None:
        return earlier
    size, sha = begun.size, begun.sha256
    if size == 0:
        raise UnusableInput(f"{path}: the file is empty; nothing to import")
    pf = _open(path)
    meta = _metadata(pf)
    kind = meta.get(META_KIND)
    if kind is not None and kind != "readings":
        raise UnusableInput(f"{path}: a drawdown {kind} export, which holds no readings; import a readings "
                            "export ('drawdown export readings') or the original logs")
    own = kind == "readings"
    data_lines = int(pf.metadata.num_rows)
    if data_lines == 0:
        raise UnusableInput(f"{path}: a Parquet file with columns "
                            f"({', '.join(pf.schema_arrow.names)}) but no rows; nothing to import")
    lay = _detect(path, pf, channel=channel or "battery", column_map=dict(column_map or {}), own=own)
    needs_tz = lay.time_kind == "ts_local" or (lay.time_kind == "text" and lay.text_kind is not None
                                               and lay.text_kind[0] in ("iso_local", "strptime"))
    tz_used = tz or "UTC"
    localise = _Localisers(tz_used) if needs_tz else None
    bounds = _bounds(nominal_voltage_V)
    now_us = int(_time.time() * 1e6) + 86_400_000_000

    wide = lay.channel_col is None
    sets: dict[str, _Set] = {}          # '' for a wide file, else channel name
    chan_codes: dict[str, str | None] = {}  # raw channel text -> normalised name, None if unusable
    rejects: dict[str, list[np.ndarray]] = {}
    columns = [lay.time_col, *([lay.channel_col] if lay.channel_col else []), *lay.values]
    cap = min(data_lines, batch_rows) + 16
    done = 0
    for batch in pf.iter_batches(batch_size=batch_rows, columns=columns):
        n = batch.num_rows
        rows = np.arange(done + 1, done + n + 1, dtype=np.int64)
        ch_rows: np.ndarray | None = None
        if not wide:
            # a handful of distinct names over millions of rows: normalise each distinct text once
            coded = pc.dictionary_encode(_plain(batch.column(lay.channel_col)))
            uniq = []
            for x in coded.dictionary.to_pylist():
                if x not in chan_codes:
                    try:
                        chan_codes[x] = normalise_channel(str(x)) if x is not None and str(x).strip() else None
                    except ValueError:
                        chan_codes[x] = None
                uniq.append(chan_codes[x] or "")
            idx = coded.indices.to_numpy(zero_copy_only=False)
            if coded.indices.null_count:  # a null channel: no name
                uniq.append("")
                idx = np.where(coded.indices.is_null().to_numpy(zero_copy_only=False), len(uniq) - 1, idx)
            ch_rows = np.asarray(uniq, dtype=object)[np.asarray(idx, dtype=np.int64)]
        t_us, reason = _batch_times(lay, batch.column(lay.time_col), localise, ch_rows)
        if ch_rows is not None:
            reason[(reason == 0) & (ch_rows == "")] = _R["bad_channel"]
        ok = reason == 0
        reason[ok & ((t_us < _TIME_MIN_US) | (t_us > now_us))] = _R["time_out_of_range"]
        vals: dict[str, np.ndarray] = {}
        non_numeric = np.zeros(n, bool)
        for name in lay.values:
            v, bad = _batch_values(batch.column(name))
            non_numeric |= bad
            vals[name] = v
        reason[(reason == 0) & non_numeric] = _R["non_numeric"]
        any_value = np.zeros(n, bool)
        canon: dict[str, np.ndarray] = {}
        for name, spec in lay.values.items():
            v = vals[name] * spec.scale if spec.scale != 1.0 else vals[name]
            if own:
                lo, hi = -np.inf, np.inf
            else:
                lo, hi = bounds[spec.quantity]
            with np.errstate(invalid="ignore"):
                if spec.quantity == "voltage_V" and not own and (spec.channel == "solar" or not wide):
                    # a solar channel's voltage is the array side of its controller (csv_file._finish)
                    alo, ahi = bounds["array_voltage_V"]
                    solar = (ch_rows == "solar") if not wide else np.ones(n, bool)
                    lo_a = np.where(solar, alo, lo)
                    hi_a = np.where(solar, ahi, hi)
                    out = (v < lo_a) | (v > hi_a)
                else:
                    out = (v < lo) | (v > hi)
                bad = (reason == 0) & ~np.isnan(v) & (out | ~np.isfinite(v))
            reason[bad] = _R[f"implausible_{spec.quantity.split('_')[0]}"]
            any_value |= ~np.isnan(v)
            canon[name] = v
        reason[(reason == 0) & ~any_value] = _R["no_values"]
        for code in np.unique(reason[reason != 0]):
            rejects.setdefault(_PQ_REASONS[code], []).append(rows[reason == code])
        keep = reason == 0
        if wide:
            st = sets.setdefault("", _Set(cap))
            st.add(rows[keep], t_us[keep], {(spec.channel, spec.quantity): canon[name][keep]  # type: ignore[misc]
                                            for name, spec in lay.values.items()})
        else:
            kept_ch = ch_rows[keep]  # type: ignore[index]
            for ch in dict.fromkeys(kept_ch.tolist()):  # first-seen order
                m = np.flatnonzero(keep)[kept_ch == ch]
                st = sets.setdefault(ch, _Set(min(cap, len(m) + 16)))
                st.add(rows[m], t_us[m], {(ch, spec.quantity): canon[name][m] for name, spec in lay.values.items()})
        done += n
        if progress is not None:
            progress(int(size * done / max(data_lines, 1)), size)
    if done != data_lines:  # a bug or a damaged footer, never silently short
        raise UnusableInput(f"{path}: the file says it holds {data_lines} rows but {done} could be read; "
                            "it is damaged or cut short")

    # order and duplicates, per time axis
    out_of_order = 0
    final: dict[str, import_finish.Axis] = {}
    for key, st in sets.items():
        t, cols, late = import_finish.order_axis(st.t.view(), {k: g.view() for k, g in st.cols.items()},
                                                 st.rows.view(), rejects)
        out_of_order += late
        final[key] = (t, cols)
    del sets
    by_reason, rows_rejected, duplicates = import_finish.count_rejects(rejects)
    rows_stored = sum(len(t) for t, _ in final.values())
    import_finish.check_counts(path, rows_stored, rows_rejected, data_lines, "rows")
    if rows_stored == 0:
        _refuse_all_rejected(path, pf, store, sha=sha, data_lines=data_lines, by_reason=by_reason, rejects=rejects)
    axes = list(final.values())

    # power -> current where a channel has power but no current (collector.columns)
    for t, cols in axes:
        for ch in sorted({c for c, q in cols if q == "power_W"}):
            if (ch, "current_A") in cols:
                continue
            v_bank = import_finish.bank_voltage(axes, t)
            if v_bank is None or not np.isfinite(v_bank).any():
                v_bank = cols.get((ch, "voltage_V"))
            elif (ch, "voltage_V") in cols:
                v_bank = np.where(np.isnan(v_bank), cols[(ch, "voltage_V")], v_bank)
            if v_bank is not None:
                vv = v_bank.astype(np.float64)
                with np.errstate(divide="ignore", invalid="ignore"):
                    cols[(ch, "current_A")] = np.where(vv > 1.0, cols[(ch, "power_W")] / vv, np.nan).astype(np.float32)
        for k in [k for k in cols if k[1] == "power_W"]:
            del cols[k]

    channels, inverted, evidence = import_finish.settle_signs(axes, invert, own=own)
    writes, rows_already_held = import_finish.held_writes(store, axes)
    # intervals and gaps on the file's time axis (every channel's times together)
    interval, gaps_total, gaps, span = import_finish.time_facts(axes)
    quarantine = str(store.quarantine_dir / f"{path.stem}-{sha[:8]}.csv") if rows_rejected else None

    if lay.time_kind == "ts_utc" or (lay.time_kind == "text" and lay.text_kind and lay.text_kind[0] == "iso_utc"):
        tz_label = "UTC (offsets in the file)"
    elif lay.time_kind == "epoch" or (lay.time_kind == "text" and lay.text_kind and lay.text_kind[0] == "epoch"):
        tz_label = "UTC (Unix epoch)"
    else:
        tz_label = tz_used
    described = {lay.time_col: "time"}
    if lay.channel_col:
        described[lay.channel_col] = "channel (per row)"
    for name, spec in lay.values.items():
        described[name] = f"{spec.channel}.{spec.quantity}" if spec.channel else f"<channel>.{spec.quantity}"
    result = ImportResult(
        path=str(path), rows_stored=rows_stored, rows_rejected=rows_rejected, rejected_by_reason=by_reason,
        already_imported=False, channels=channels, sign_inverted=inverted,
        sample_interval_s=interval, gaps=gaps, quarantine=quarantine, data_lines=data_lines,
        duplicates=duplicates, header_lines=0, blank_lines=0, preamble_lines=0, out_of_order_rows=out_of_order,
        gaps_total=gaps_total, time_span=span, timezone_used=tz_label, timezone_assumed=needs_tz and tz is None,
        sign_evidence=evidence, columns=described, columns_ignored=list(lay.ignored), sha256=sha, seconds=None,
        rows_already_held=rows_already_held, rows_added=rows_stored - rows_already_held)

    return import_finish.store_import(store, result, writes, lambda out: _write_quarantine(out, pf, rejects), t0)


def _refuse_all_rejected(path: Path, pf: pq.ParquetFile, store: Store, *, sha: str, data_lines: int,
                         by_reason: dict[str, int], rejects: dict[str, list[np.ndarray]]) -> None:
    """Keep the rejected rows aside (quarantine) and raise :class:`NothingStored`."""
    from drawdown.collector.csv_file import _ALL_REJECTED_HINTS

    quarantine = store.quarantine_dir / f"{path.stem}-{sha[:8]}.csv"
    try:
        _write_quarantine(quarantine, pf, rejects)
        kept: str | None = str(quarantine)
    except OSError:
        kept = None
    result = ImportResult(
        path=str(path), rows_stored=0, rows_rejected=data_lines, rejected_by_reason=by_reason,
        already_imported=False, channels=[], sign_inverted=[], sample_interval_s=None, gaps=[],
        quarantine=kept, data_lines=data_lines, sha256=sha)
    counted = ", ".join(f"{n} {why}" for why, n in sorted(by_reason.items(), key=lambda kv: -kv[1]))
    top = max(by_reason, key=lambda k: by_reason[k])
    hint = {**_ALL_REJECTED_HINTS, "no_values": "the rows hold a time but no value",
            "bad_channel": "the channel column is empty or holds names drawdown cannot use"}.get(top)
    what = f"{path}: every one of its {data_lines} rows was rejected ({counted}); nothing stored"
    zone = top in ("nonexistent_local_time", "ambiguous_local_time", "time_without_offset")
    raise NothingStored(what + (f" - {hint}" if hint else "")
                        + (" (--tz ZONE, or the site timezone in system.toml)" if zone else ""), result,
                        page_message=what + (f" - {hint}" if hint else ""))


def _row_text(row: dict[str, Any]) -> str:
    def plain(v: Any) -> Any:
        if isinstance(v, float) and not math.isfinite(v):
            return str(v)
        if hasattr(v, "isoformat"):
            return v.isoformat()
        if isinstance(v, bytes):
            return v.decode("utf-8", errors="replace")
        return v

    return json.dumps({k: plain(v) for k, v in row.items()}, ensure_ascii=False, default=str, allow_nan=False)


def _write_quarantine(out: Path, pf: pq.ParquetFile, rejects: dict[str, list[np.ndarray]]) -> None:
    """``line,reason,text`` for every rejected row, in row order (line = 1-based row number)."""
    rows = np.concatenate([a for arrs in rejects.values() for a in arrs]) if rejects else np.empty(0, np.int64)
    why = np.concatenate([np.full(sum(len(a) for a in arrs), r, dtype=object)
                          for r, arrs in rejects.items()]) if rejects else np.empty(0, object)
    order = np.argsort(rows, kind="stable")
    rows, why = rows[order], why[order]
    texts: dict[int, str] = {}
    if rows.size:
        wanted = np.unique(rows)
        first = 1
        for batch in pf.iter_batches(batch_size=BATCH_ROWS):
            n = batch.num_rows
            lo, hi = np.searchsorted(wanted, [first, first + n])
            if hi > lo:
                picked = batch.take(pa.array(wanted[lo:hi] - first))
                for r, row in zip(wanted[lo:hi].tolist(), picked.to_pylist()):
                    texts[int(r)] = _row_text(row)
            first += n
            if first > wanted[-1]:
                break
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_suffix(".csv.part")
    with open(tmp, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["line", "reason", "text"])
        w.writerows(zip(rows.tolist(), why.tolist(), (_printable(texts.get(int(x), "")) for x in rows)))
    tmp.replace(out)
