"""Import delimited text logs (CSV, semicolon, tab) written by battery monitors and home-made loggers.

What it copes with
------------------
* delimiter ``,`` ``;`` tab or ``|``; decimal comma; UTF-8 (with or without BOM), Latin-1 or
  UTF-16 (with or without BOM); line ends LF, CR LF or CR alone (an old spreadsheet's export);
* a preamble before the header row, and the header repeated mid-file after a logger restart
  (a header line is neither a data line nor rejected);
* time as ISO 8601 with an offset (read straight to UTC), local wall-clock time
  (``YYYY-MM-DD HH:MM:SS``, ``DD.MM.YYYY HH:MM:SS`` ...; placed with ``tz`` or the site
  timezone, DST-ambiguous and non-existent times handled explicitly), separate date and time
  columns, or a Unix epoch in seconds, milliseconds or microseconds (told apart by magnitude);
* quantity columns by name and unit (see :mod:`collector.columns`), several channels per file;
* a reversed current sign, detected from the data (see :func:`detect_sign_inversion`);
* out-of-order rows (sorted), duplicates (rejected, see below), gaps (reported).

Counting (docs/contracts.md#import): ``rows_stored`` and ``rows_rejected`` count *data lines* of the file,
and ``rows_stored + rows_rejected == data_lines``. A data line is any line after the first
header row that is not blank and not a repeat of the header. A duplicate line (same time as an
earlier line: ``duplicate`` when its values are also equal, ``duplicate_time`` when they differ;
the first one is kept) is counted as *rejected* and quarantined like every other rejected line.
A stored line whose readings the store already holds (same channel, time and values: the same
data imported before from another file) is not written again; ``rows_already_held`` counts such
lines and ``rows_added`` the rest of ``rows_stored``. A reading at a held time with another value
is written (the newest write wins when the store is read).
Blank lines and the preamble before the header are reported (``blank_lines``,
``preamble_lines``) but are not data lines. Every rejected line is written, with its line
number and reason, to ``store.quarantine_dir / '<file-stem>-<sha8>.csv'`` (columns
``line,reason,text``; ``line`` is the 1-based physical line of the file; in ``text`` control
characters are written as ``\\xNN``, a run of NUL bytes as ``<N NUL bytes>``, and a line longer
than 2,000 characters is cut and says so).

Reasons: ``wrong_field_count``, ``non_numeric``, ``bad_time``, ``time_without_offset``,
``time_out_of_range`` (before 1980 or after tomorrow, see ``TIME_MIN``), ``ambiguous_local_time``,
``nonexistent_local_time``, ``implausible_voltage`` / ``_current`` / ``_power`` /
``_temperature`` / ``_soc``, ``no_values``, ``binary_garbage``, ``duplicate``, ``duplicate_time``.

Speed
-----
The file is streamed in blocks of ~16 MB cut at line ends. Each block is parsed by
``pyarrow.csv`` with the column types found by the detection on the first lines (the fast
path). A block that does not parse cleanly -- a bad line, a repeated header, a blank line --
is re-parsed by a careful, still vectorised, pandas string path that finds every bad line and
its reason. Values are kept as float32 (what the store keeps), so a year at 1 Hz on three
channels fits in about 1.2 GB.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
import os
import re
import shutil
import tempfile
import time as _time
from collections.abc import Callable, Iterable, Iterator
from dataclasses import dataclass, field
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pcsv

from drawdown.collector.canonical import CHARGE_SOURCES
from drawdown.collector.columns import ColumnSpec, mapped_spec, normalise_channel
from drawdown.collector import import_finish
from drawdown.collector.store import Store

if TYPE_CHECKING:
    import pandas as pd

__all__ = ["UnusableInput", "NothingStored", "ImportResult", "Gap", "import_file", "detect_sign_inversion",
           "sniff_format", "FileFormat", "BLOCK_BYTES"]

BLOCK_BYTES = 16 << 20          # bytes per parsed block
SLOW_PIECE_BYTES = 32 << 10     # a failing piece this small goes to the careful path
HEAD_BYTES = 256 << 10          # bytes read for detection
DETECT_LINES = 100              # lines used for detection
GAP_FACTOR = 5.0                # a gap is longer than this many median sample intervals
MAX_GAPS_LISTED = import_finish.MAX_GAPS_LISTED
SIGN_SAMPLE_ROWS = import_finish.SIGN_SAMPLE_ROWS
NULL_VALUES = ["", "nan", "NaN", "NAN", "NA", "N/A", "n/a", "null", "NULL", "None", "-", "--"]
_DELIMS = ["\t", ";", ",", "|"]
_LOCAL_FORMATS = [  # (strptime format, regex it must match) for local wall-clock text
    ("%d.%m.%Y %H:%M:%S", r"^\d{1,2}\.\d{1,2}\.\d{4} \d{1,2}:\d{2}:\d{2}$"),
    ("%d.%m.%Y %H:%M", r"^\d{1,2}\.\d{1,2}\.\d{4} \d{1,2}:\d{2}$"),
    ("%d/%m/%Y %H:%M:%S", r"^\d{1,2}/\d{1,2}/\d{4} \d{1,2}:\d{2}:\d{2}$"),
    ("%m/%d/%Y %H:%M:%S", r"^\d{1,2}/\d{1,2}/\d{4} \d{1,2}:\d{2}:\d{2}$"),
    ("%Y/%m/%d %H:%M:%S", r"^\d{4}/\d{1,2}/\d{1,2} \d{1,2}:\d{2}:\d{2}$"),
    ("%d/%m/%Y %H:%M", r"^\d{1,2}/\d{1,2}/\d{4} \d{1,2}:\d{2}$"),
]
_ISO = r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(?::\d{2}(?:[.,]\d+)?)?"
_OFFSET = r"(?:Z|z|[+-]\d{2}(?::?\d{2})?)"
_RE_ISO_UTC = re.compile(rf"^{_ISO}\s*{_OFFSET}$")
_RE_ISO_LOCAL = re.compile(rf"^{_ISO}$")
_RE_DATE = re.compile(r"^(\d{4}-\d{2}-\d{2}|\d{1,2}[./]\d{1,2}[./]\d{4}|\d{4}/\d{1,2}/\d{1,2})$")
_RE_CLOCK = re.compile(r"^\d{1,2}:\d{2}(:\d{2}(\.\d+)?)?$")
_NUMBER = re.compile(r"^\s*[+-]?(\d+([.,]\d*)?|[.,]\d+)([eE][+-]?\d+)?\s*$")
# reasons found per line inside a block, as uint8 codes (0 = accepted)
_REASONS = ("", "bad_time", "time_without_offset", "ambiguous_local_time", "nonexistent_local_time",
            "non_numeric", "time_out_of_range", "no_values", "implausible_voltage", "implausible_current",
            "implausible_power", "implausible_temperature", "implausible_soc")
_R = {name: np.uint8(code) for code, name in enumerate(_REASONS)}
_RE_CONTROL = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f]")
#: The earliest time a log line may carry. Old archives are real (a 1980s logger's files
#: copied forward), so the bound is not the age of today's monitors. It is 1980-01-01: the
#: earliest date the FAT file system of an SD card or a DOS-era PC can even stamp, and later
#: than 1970-01-01, the Unix epoch, which is what a logger whose clock was never set (or lost
#: its backup cell) writes. Anything earlier is not a real reading time.
TIME_MIN = datetime(1980, 1, 1, tzinfo=timezone.utc)
_TIME_MIN_US = int(TIME_MIN.timestamp()) * 1_000_000
# pandas is loaded only where a careful (slow) path or local wall-clock times need it: a clean
# file with UTC offsets or epoch times is parsed and stored by pyarrow and numpy alone.


class UnusableInput(ValueError):
    """The file cannot be imported at all (nothing is stored); the message names the file and why.

    ``page_message`` is the same refusal for the dashboard's upload, which has no command-line
    options: it never advises a flag (``--map``, ``--tz``) that the page does not have.
    """

    def __init__(self, message: str, *, page_message: str | None = None):
        super().__init__(message)
        self.page_message = page_message or message


class NothingStored(UnusableInput):
    """Every data line of the file was rejected: nothing is stored.

    ``result`` is the file's summary (rejected lines by reason, the quarantine file that
    holds them); the import is not recorded, so the same file can be imported again once
    the cause (a wrong ``--tz``, a clock that was not set) is fixed.
    """

    def __init__(self, message: str, result: ImportResult, *, page_message: str | None = None):
        super().__init__(message, page_message=page_message)
        self.result = result


@dataclass(frozen=True)
class Gap:
    start: str
    end: str
    seconds: float


@dataclass(frozen=True)
class FileFormat:
    """What the detection found on the first lines of a file."""

    encoding: str
    delimiter: str
    decimal: str
    header_line: int            # 1-based line number of the header
    header: tuple[str, ...]
    data_offset: int            # byte offset of the first line after the header
    columns: dict[int, ColumnSpec]   # field index -> what it measures (channel filled in)
    time_fields: tuple[int, ...]     # one field, or (date, clock)
    time_kind: str              # 'iso_utc' | 'iso_local' | 'strptime' | 'epoch'
    time_format: str | None     # strptime format for 'strptime'
    epoch_scale_s: float        # seconds per raw unit for 'epoch'
    ignored: tuple[str, ...]    # header names not used, with why
    fast_time: bool = True      # False: times not zero-padded, arrow cannot check them; careful path


@dataclass(frozen=True)
class ImportResult:
    """The data-quality summary of importing one file (``to_json`` gives the keys of docs/contracts.md#import)."""

    path: str
    rows_stored: int
    rows_rejected: int
    rejected_by_reason: dict[str, int]
    already_imported: bool
    channels: list[str]
    sign_inverted: list[str]
    sample_interval_s: float | None
    gaps: list[Gap]
    quarantine: str | None
    data_lines: int = 0
    duplicates: int = 0
    header_lines: int = 0
    blank_lines: int = 0
    preamble_lines: int = 0
    out_of_order_rows: int = 0
    gaps_total: int = 0
    time_span: dict[str, str] | None = None
    timezone_used: str | None = None
    timezone_assumed: bool = False
    sign_evidence: dict[str, str] = field(default_factory=dict)
    columns: dict[str, str] = field(default_factory=dict)
    columns_ignored: list[str] = field(default_factory=list)
    delimiter: str | None = None
    encoding: str | None = None     # as read: utf-8, utf-8-sig, latin-1, utf-16-le, utf-16-be
    line_ends: str | None = None    # as read: lf, crlf or cr
    decimal: str | None = None
    sha256: str | None = None
    seconds: float | None = None
    previous_import: dict[str, Any] | None = None  # for already_imported: when, and what it stored
    #: Of ``rows_stored``: lines whose readings (channel, time and values) the store already held,
    #: from an earlier import of another file with the same readings; not written again.
    rows_already_held: int = 0
    #: Of ``rows_stored``: lines written now (``rows_stored - rows_already_held``).
    rows_added: int = 0

    def to_json(self) -> dict[str, Any]:
        out = {k: getattr(self, k) for k in self.__dataclass_fields__}
        out["gaps"] = [{"start": g.start, "end": g.end, "seconds": g.seconds} for g in self.gaps]
        return out


# --------------------------------------------------------------------------------------------
# detection
# --------------------------------------------------------------------------------------------

def _decode_head(raw: bytes, path: Path) -> tuple[str, str]:
    """Decode the head of a file for detection; UnusableInput when it is empty or binary.

    A run of NUL bytes is what an SD-card logger leaves after a power cut: such runs are
    left out of the binary test (the lines holding them are later quarantined as
    ``binary_garbage``). NUL or control bytes spread through the text mean a binary file.
    """
    if not raw.strip():
        raise UnusableInput(f"{path}: the file is empty; nothing to import")
    probe = re.sub(rb"\x00{8,}", b"", raw)
    if not probe.strip():
        raise UnusableInput(f"{path}: the file holds only NUL bytes (a logger that lost power before "
                            "writing?); nothing to import")
    head64 = probe[:65536]
    lines = head64.split(b"\n")
    # Binary formats hold NUL bytes on most "lines"; a stray NUL or two on one line of a short
    # text log is a damaged line (quarantined later), not a binary file.
    if (head64.count(b"\x00") > 0.01 * min(len(probe), 65536)
            and sum(b"\x00" in ln for ln in lines) > 0.25 * len(lines)):
        raise UnusableInput(f"{path}: this is a binary file (NUL bytes), not a text log; "
                            "export the log as CSV from the monitor or logger and import that")
    if raw.startswith(b"\xef\xbb\xbf"):
        enc = "utf-8-sig"
    else:
        enc = "utf-8"
    cut = raw[: raw.rfind(b"\n") + 1] if len(raw) == HEAD_BYTES and b"\n" in raw else raw
    try:
        text = cut.decode(enc)
    except UnicodeDecodeError:
        enc = "latin-1"
        text = cut.decode(enc)
    sample = re.sub("\x00{8,}", "", text)
    bad = len(_RE_CONTROL.findall(sample))
    if bad > 0.02 * max(len(sample), 1):
        raise UnusableInput(f"{path}: this looks like a binary file ({bad} control bytes in the first "
                            f"{len(sample)} characters), not a text log; export it as CSV first")
    return text, enc


def _split(line: str, delim: str) -> list[str]:
    return [f.strip().strip('"').strip("'").strip() for f in line.rstrip("\r").split(delim)]


def _choose_delimiter(lines: list[str]) -> str | None:
    best, best_score = None, 0.0
    for d in _DELIMS:
        counts = np.array([ln.count(d) for ln in lines])
        if counts.size == 0 or counts.max() == 0:
            continue
        mode = np.bincount(counts).argmax()
        if mode == 0:
            continue
        score = float(np.mean(counts == mode))
        # tab and semicolon win ties: in files that use them a comma is usually a decimal comma
        if score > best_score + 0.05:
            best, best_score = d, score
    return best


def _looks_numeric(s: str) -> bool:
    return bool(_NUMBER.match(s))


def _time_kind(samples: list[str], hint_scale: float) -> tuple[str, str | None, float] | None:
    """(kind, strptime format, epoch scale) that fits at least 80 % of the samples, or None."""
    samples = [s for s in samples if s]
    if not samples:
        return None
    need = max(1, math.ceil(0.8 * len(samples)))
    nums = [float(s.replace(",", ".")) for s in samples if _looks_numeric(s)]
    if len(nums) >= need:
        med = float(np.median(np.abs(nums)))
        if hint_scale != 1.0:
            scale = hint_scale
        elif 1e8 <= med < 1e11:
            scale = 1.0
        elif 1e11 <= med < 1e14:
            scale = 1e-3
        elif 1e14 <= med < 1e17:
            scale = 1e-6
        else:
            return None
        return "epoch", None, scale
    n_utc = sum(bool(_RE_ISO_UTC.match(s)) for s in samples)
    n_loc = sum(bool(_RE_ISO_LOCAL.match(s)) for s in samples)
    if n_utc >= need:
        return "iso_utc", None, 1.0
    if n_loc >= need or (n_utc + n_loc >= need and n_loc >= n_utc):
        return "iso_local", None, 1.0
    if n_utc + n_loc >= need:
        return "iso_utc", None, 1.0
    for fmt, rx in _LOCAL_FORMATS:
        rxc = re.compile(rx)
        good = 0
        for s in samples:
            if rxc.match(s):
                try:
                    _time.strptime(s, fmt)
                    good += 1
                except ValueError:
                    pass
        if good >= need:
            return "strptime", fmt, 1.0
    return None


def sniff_format(path: Path, head: bytes, *, channel: str, column_map: dict[str, ColumnSpec]) -> FileFormat:
    """Detect encoding, delimiter, decimal mark, header and column meanings from a file's head.

    Raises
    ------
    UnusableInput
        When there is no header naming a time column and at least one quantity column.
    """
    text, enc = _decode_head(head, path)
    all_lines = text.split("\n")
    if len(head) == HEAD_BYTES:
        all_lines = all_lines[:-1]
    lines = [ln.rstrip("\r") for ln in all_lines[: DETECT_LINES + 20]]
    if not lines:
        raise UnusableInput(f"{path}: no line end in the first {HEAD_BYTES // 1024} kB: not a line-based text log")
    nonblank = [ln for ln in lines if ln.strip()]
    delim = _choose_delimiter(nonblank[1:] or nonblank) or ","
    fields = [_split(ln, delim) if ln.strip() else [] for ln in lines]
    counts = [len(f) for f in fields if f]
    mode = int(np.bincount(counts).argmax()) if counts else 0
    spec_of = mapped_spec(column_map)

    header_idx = None
    for i, f in enumerate(fields):
        if len(f) != mode or not f:
            continue
        non_num = sum(not _looks_numeric(x) for x in f)
        specs = [spec_of(x) for x in f]
        if non_num >= max(1, len(f) // 2) and any(s is not None and s.quantity == "time" for s in specs):
            header_idx = i
            break
    if header_idx is None:
        for i, f in enumerate(fields):  # a header without a recognisable time column
            if f and len(f) == mode and sum(not _looks_numeric(x) for x in f) == len(f):
                if any(spec_of(x) is not None for x in f):
                    names = ", ".join(repr(x) for x in f)
                    what = f"{path}: no time column among the header fields ({names}); name it 'time' or 'timestamp'"
                    raise UnusableInput(f"{what}, or pass --map COLUMN=time (or epoch_s / epoch_ms)",
                                        page_message=f"{what} in the file's header line and upload it again")
        raise UnusableInput(
            f"{path}: no header row naming the columns in the first {len(lines)} lines (expected e.g. "
            "'time,voltage_V,current_A'); add a header line or export the log with column names")
    header = tuple(fields[header_idx])
    hdr_norm = [h.lower() for h in header]
    data_lines = [f for f in fields[header_idx + 1:]
                  if f and len(f) == len(header) and [x.lower() for x in f] != hdr_norm]

    if not data_lines:
        raise UnusableInput(f"{path}: a header ({delim.join(header)!r}) but no data lines after it"
                            + ("" if len(head) < HEAD_BYTES else f" in the first {len(lines)} lines"))
    default = normalise_channel(channel)
    cols: dict[int, ColumnSpec] = {}
    ignored: list[str] = []
    taken: set[tuple[str, str]] = set()
    time_fields: list[int] = []
    for j, name in enumerate(header):
        spec = spec_of(name)
        if spec is None:
            ignored.append(f"{name!r} (not a quantity drawdown stores)" if name else f"column {j + 1} (no name)")
            continue
        if spec.quantity == "ignore":
            ignored.append(f"{name!r} (--map ignore)")
            continue
        if spec.quantity == "time":
            time_fields.append(j)
            cols[j] = spec
            continue
        spec = ColumnSpec(spec.channel or default, spec.quantity, spec.scale)
        key = (str(spec.channel), spec.quantity)
        if key in taken:
            ignored.append(f"{name!r} (a second {spec.channel} {spec.quantity} column)")
            continue
        taken.add(key)
        cols[j] = spec
    if not taken:
        what = (f"{path}: no voltage, current, power, temperature or state-of-charge column among "
                f"{', '.join(repr(h) for h in header)}; name them e.g. 'voltage_V', 'current_A'")
        raise UnusableInput(f"{what}, or pass --map COLUMN=current_A",
                            page_message=f"{what} in the file's header line and upload it again")

    # choose the time field(s): a single full timestamp, else a date column plus a clock column
    kind = None
    chosen: tuple[int, ...] = ()
    for j in time_fields:
        samples = [f[j] for f in data_lines[:DETECT_LINES]]
        k = _time_kind(samples, cols[j].scale)
        if k is not None:
            kind, chosen = k, (j,)
            break
    if kind is None and len(time_fields) >= 2:
        for a in time_fields:
            for b in time_fields:
                if a == b:
                    continue
                da = [f[a] for f in data_lines[:DETECT_LINES]]
                db = [f[b] for f in data_lines[:DETECT_LINES]]
                if da and all(_RE_DATE.match(x) for x in da) and all(_RE_CLOCK.match(x) for x in db):
                    k = _time_kind([f"{x} {y}" for x, y in zip(da, db)], 1.0)
                    if k is not None:
                        kind, chosen = k, (a, b)
                        break
            if kind is not None:
                break
    if kind is None:
        names = ", ".join(repr(header[j]) for j in time_fields)
        sample = data_lines[0][time_fields[0]] if data_lines else "(no data lines)"
        raise UnusableInput(
            f"{path}: the time column {names} holds neither ISO 8601 timestamps, local date-times nor "
            f"Unix epoch times (first value: {sample!r}); relative times cannot be placed on a calendar")
    for j in time_fields:
        if j not in chosen:
            ignored.append(f"{header[j]!r} (a second time column)")
            del cols[j]

    # decimal comma: only when the delimiter is not a comma and values use a comma, never a point
    decimal = "."
    if delim != ",":
        vals = [f[j] for f in data_lines[:DETECT_LINES] for j in cols if j not in chosen]
        if any(re.match(r"^[+-]?\d*,\d+$", v) for v in vals) and not any(
                re.match(r"^[+-]?\d*\.\d+$", v) for v in vals):
            decimal = ","

    # byte offset of the first line after the header
    pos = 0
    raw_lines = head.split(b"\n")
    for i in range(header_idx + 1):
        pos += len(raw_lines[i]) + 1
    fast_time = True
    if kind[0] == "strptime":
        assert kind[1] is not None  # a strptime kind always carries its format
        samples = [" ".join(f[j] for j in chosen) for f in data_lines[:DETECT_LINES]]
        for smp in samples:
            try:
                if _time.strftime(kind[1], _time.strptime(smp, kind[1])) != smp:
                    fast_time = False
                    break
            except ValueError:
                continue
    return FileFormat(encoding=enc, delimiter=delim, decimal=decimal, header_line=header_idx + 1,
                      header=header, data_offset=pos, columns=cols, time_fields=chosen,
                      time_kind=kind[0], time_format=kind[1], epoch_scale_s=kind[2],
                      ignored=tuple(ignored), fast_time=fast_time)


# --------------------------------------------------------------------------------------------
# parsing blocks
# --------------------------------------------------------------------------------------------

@dataclass
class _Block:
    line: np.ndarray                      # int64 1-based line numbers of accepted data lines
    t_us: np.ndarray                      # int64 UTC microseconds
    values: dict[tuple[str, str], np.ndarray]   # (channel, quantity) -> float32 canonical units
    rejects: dict[str, list[np.ndarray]]  # reason -> line numbers
    header_lines: int = 0
    blank_lines: int = 0
    data_lines: int = 0


def _iter_blocks(f: io.BufferedReader, start: int, block_bytes: int) -> Iterator[tuple[int, bytes]]:
    """(byte offset, block) pairs cut just after a newline."""
    f.seek(start)
    carry = b""
    offset = start
    while True:
        chunk = f.read(block_bytes)
        if not chunk:
            if carry:
                yield offset, carry
            return
        buf = carry + chunk
        cut = buf.rfind(b"\n")
        if cut < 0:
            carry = buf
            continue
        yield offset, buf[: cut + 1]
        offset += cut + 1
        carry = buf[cut + 1:]


class _Grow:
    """An append-only numpy array with spare capacity (grown by a quarter when full)."""

    def __init__(self, capacity: int, dtype: Any):
        self.a = np.empty(max(capacity, 16), dtype)
        self.n = 0

    def extend(self, x: np.ndarray) -> None:
        need = self.n + len(x)
        if need > len(self.a):
            new = np.empty(max(need, int(len(self.a) * 1.25)), self.a.dtype)
            new[: self.n] = self.a[: self.n]
            self.a = new
        self.a[self.n:need] = x
        self.n = need

    def view(self) -> np.ndarray:
        return self.a[: self.n]


def _n_lines(block: bytes) -> int:
    return block.count(b"\n") + (0 if block.endswith(b"\n") else 1)


class _Localiser:
    """Local wall-clock microseconds -> UTC, with DST ambiguity handled explicitly.

    A wall time that exists twice (the hour repeated when clocks go back) is placed when the
    log passes through that hour in order and then steps back once: the first pass is summer
    time, the second winter time. Blocks are localised in file order and the state at the end
    of a block carries over, so the repeated hour may straddle a block boundary. Otherwise
    (no step back, several steps, a lone reading in the hour) it cannot be placed and is
    rejected (``ambiguous_local_time``). A wall time that does not exist (the hour skipped when clocks go
    forward) is rejected (``nonexistent_local_time``).
    """

    def __init__(self, tz: str):
        self.tz = tz
        self.last_wall: int | None = None   # wall time of the last row of the previous block
        self.last_state: str | None = None  # 'dst' / 'std' when that row was ambiguous

    def __call__(self, wall_us: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        if len(wall_us) == 0:
            return wall_us.copy(), np.zeros(0, bool), np.zeros(0, bool)
        import pandas as pd

        idx = pd.DatetimeIndex(wall_us.view("M8[us]"))
        try:
            loc = idx.tz_localize(self.tz, ambiguous="raise", nonexistent="raise")
            self.last_wall, self.last_state = int(wall_us[-1]), None
            return loc.asi8, np.zeros(len(wall_us), bool), np.zeros(len(wall_us), bool)
        except Exception:  # noqa: BLE001 - pandas raises several kinds; handled below
            pass
        nat_amb = idx.tz_localize(self.tz, ambiguous="NaT", nonexistent="shift_forward").isna()
        nonexist = idx.tz_localize(self.tz, ambiguous=True, nonexistent="NaT").isna()
        amb = np.asarray(nat_amb) & ~np.asarray(nonexist)
        is_dst = np.zeros(len(wall_us), bool)
        unplaced = np.zeros(len(wall_us), bool)
        where = np.flatnonzero(amb)
        if where.size:
            w = wall_us[where]
            steps = np.flatnonzero(np.diff(w) < 0)
            carried = self.last_state is not None
            if steps.size == 1 and not (self.last_state == "std"):
                is_dst[where[: steps[0] + 1]] = True
            elif steps.size == 0 and carried and (self.last_state == "std" or w[0] < self.last_wall):
                pass  # the second pass began in (or before) the previous block: winter time
            elif steps.size == 0 and carried and self.last_state == "dst":
                is_dst[where] = True  # still the first pass, continued from the previous block
            elif steps.size == 0 and where[-1] == len(wall_us) - 1 and len(where) > 1:
                is_dst[where] = True  # the first pass runs to the end of the block
            else:
                unplaced[where] = True
        loc = idx.tz_localize(self.tz, ambiguous=is_dst, nonexistent="NaT")
        out = loc.asi8.copy()
        last_amb = bool(amb[-1]) and not unplaced[-1]
        self.last_wall = int(wall_us[-1])
        self.last_state = ("dst" if is_dst[-1] else "std") if last_amb else None
        return out, unplaced, np.asarray(nonexist)


class _Parser:
    def __init__(self, fmt: FileFormat, localise: _Localiser | None, bounds: dict[str, tuple[float, float]]):
        self.fmt = fmt
        self.localise = localise
        self.bounds = bounds
        self.n_fields = len(fmt.header)
        self.names = [f"c{j}" for j in range(self.n_fields)]
        self.value_fields = [j for j in fmt.columns if j not in fmt.time_fields]
        types: dict[str, pa.DataType] = {self.names[j]: pa.float64() for j in self.value_fields}
        if fmt.time_kind == "epoch":
            types[self.names[fmt.time_fields[0]]] = pa.float64()
        elif len(fmt.time_fields) == 1:
            if fmt.time_kind == "iso_utc":
                types[self.names[fmt.time_fields[0]]] = pa.timestamp("us", "UTC")
            elif fmt.time_kind == "strptime":
                # read as text: arrow's strptime is lenient (31.02. becomes 02.03.), so the
                # parse is checked by formatting it back (see _strict_strptime)
                types[self.names[fmt.time_fields[0]]] = pa.string()
            else:
                types[self.names[fmt.time_fields[0]]] = pa.timestamp("us")
        else:
            for j in fmt.time_fields:
                types[self.names[j]] = pa.string()
        self.read_opts = pcsv.ReadOptions(column_names=self.names, use_threads=True, block_size=4 << 20)
        # Blank lines are not skipped (arrow reads one as a row of nulls; the fast path hands a
        # block with an empty time to the careful path), and a newline always ends a row: so a
        # block that parses has exactly as many rows as lines, and its line count is the table's
        # row count (no second pass over the bytes to count them).
        self.parse_opts = pcsv.ParseOptions(delimiter=fmt.delimiter, ignore_empty_lines=False,
                                            newlines_in_values=False)
        kw: dict[str, Any] = {}
        self.conv_opts = pcsv.ConvertOptions(
            column_types=types, include_columns=[self.names[j] for j in sorted(fmt.columns)],
            decimal_point=fmt.decimal, null_values=NULL_VALUES, strings_can_be_null=True,
            quoted_strings_can_be_null=True, check_utf8=False, **kw)
        norm = [h.strip().lower() for h in fmt.header]
        self.header_norm = fmt.delimiter.join(norm)

    # -- fast path -----------------------------------------------------------
    def _fast(self, block: bytes, first_line: int) -> _Block | None:
        try:
            table = pcsv.read_csv(io.BytesIO(block), read_options=self.read_opts,
                                  parse_options=self.parse_opts, convert_options=self.conv_opts)
        except (pa.ArrowInvalid, pa.ArrowNotImplementedError, pa.ArrowTypeError):
            return None
        n = table.num_rows  # one row per line (see parse_opts)
        if n == 0 or table.column(self.names[self.fmt.time_fields[0]]).null_count:
            return None  # a blank line (read as a row of nulls) or an empty time: the careful path tells them apart
        fmt = self.fmt
        time_reason = np.zeros(n, np.uint8)
        if fmt.time_kind == "epoch":
            raw = table.column(self.names[fmt.time_fields[0]]).to_numpy(zero_copy_only=False)
            t_us, bad = _epoch_to_us(raw, fmt.epoch_scale_s)
            time_reason[bad] = _R["bad_time"]
        elif len(fmt.time_fields) == 1:
            col = table.column(self.names[fmt.time_fields[0]])
            if fmt.time_kind == "strptime":
                assert fmt.time_format is not None
                col = _strict_strptime(col, fmt.time_format)
                if col is None:
                    return None
            null = col.is_null().to_numpy(zero_copy_only=False)
            t_us = pc.fill_null(col.cast(pa.int64()), 0).to_numpy(zero_copy_only=False).astype(np.int64)
            time_reason[null] = _R["bad_time"]
            if fmt.time_kind != "iso_utc":
                t_us, time_reason = self._localise(t_us, time_reason)
        else:
            # separate date and clock columns: join them as text, then parse
            joined = pc.binary_join_element_wise(table.column(self.names[fmt.time_fields[0]]),
                                                 table.column(self.names[fmt.time_fields[1]]), " ")
            try:
                if fmt.time_kind == "strptime":
                    assert fmt.time_format is not None
                    ts = _strict_strptime(joined, fmt.time_format)
                    if ts is None:
                        return None
                else:
                    ts = joined.cast(pa.timestamp("us", "UTC") if fmt.time_kind == "iso_utc" else pa.timestamp("us"))
            except (pa.ArrowInvalid, pa.ArrowNotImplementedError):
                return None
            null = ts.is_null().to_numpy(zero_copy_only=False)
            t_us = pc.fill_null(ts.cast(pa.int64()), 0).to_numpy(zero_copy_only=False).astype(np.int64)
            time_reason[null] = _R["bad_time"]
            if fmt.time_kind != "iso_utc":
                t_us, time_reason = self._localise(t_us, time_reason)
        vals = {}
        for j in self.value_fields:
            vals[j] = table.column(self.names[j]).to_numpy(zero_copy_only=False).astype(np.float64)
        return self._finish(np.arange(first_line, first_line + n, dtype=np.int64), t_us, time_reason,
                            vals, {}, n, 0, 0)

    def _localise(self, wall_us: np.ndarray, reason: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        ok = reason == 0
        out = wall_us.copy()
        if ok.any():
            assert self.localise is not None  # local times always come with a localiser
            utc, unplaced, nonexist = self.localise(wall_us[ok])
            out[ok] = utc
            sub = reason[ok]
            sub[unplaced] = _R["ambiguous_local_time"]
            sub[nonexist] = _R["nonexistent_local_time"]
            reason[ok] = sub
        return out, reason

    # -- careful path ----------------------------------------------------------
    def _slow(self, block: bytes, first_line: int) -> _Block:
        fmt = self.fmt
        text = block.decode(fmt.encoding if fmt.encoding != "utf-8-sig" else "utf-8", errors="replace")
        lines = text.split("\n")
        if block.endswith(b"\n"):
            lines = lines[:-1]
        import pandas as pd

        s = pd.Series(lines, dtype=object).str.rstrip("\r")
        line_no = np.arange(first_line, first_line + len(s), dtype=np.int64)
        stripped = s.str.strip()
        blank = (stripped == "").to_numpy()
        d = fmt.delimiter
        norm = stripped.str.replace(r"\s*" + re.escape(d) + r"\s*", d, regex=True).str.lower()
        norm = norm.str.replace('"', "", regex=False).str.replace("'", "", regex=False)
        header = (norm == self.header_norm).to_numpy() & ~blank
        data = ~blank & ~header
        reasons: dict[str, list[np.ndarray]] = {}

        def reject(mask: np.ndarray, why: str) -> None:
            if mask.any():
                reasons.setdefault(why, []).append(line_no[mask])

        garbage = data & s.str.contains(r"[\x00-\x08\x0e-\x1f\ufffd]", regex=True).to_numpy()
        reject(garbage, "binary_garbage")
        live = data & ~garbage
        nf = (s.str.count(re.escape(d)) + 1).to_numpy()
        wrong = live & (nf != self.n_fields)
        reject(wrong, "wrong_field_count")
        live &= ~wrong
        sub = s[live]
        n = int(live.sum())
        if n == 0:
            return _Block(np.empty(0, np.int64), np.empty(0, np.int64), {}, reasons,
                          int(header.sum()), int(blank.sum()), int(data.sum()))
        parts = sub.str.split(d, n=self.n_fields - 1, expand=True, regex=False)
        parts.columns = range(parts.shape[1])

        def field_(j: int) -> pd.Series:
            return parts[j].str.strip().str.strip('"').str.strip("'").str.strip()

        time_reason = np.zeros(n, np.uint8)
        if fmt.time_kind == "epoch":
            raw = pd.to_numeric(field_(fmt.time_fields[0]).str.replace(",", ".", regex=False),
                                errors="coerce").to_numpy(dtype=np.float64)
            t_us, bad = _epoch_to_us(raw, fmt.epoch_scale_s)
            time_reason[bad] = _R["bad_time"]
        else:
            ts = field_(fmt.time_fields[0])
            if len(fmt.time_fields) == 2:
                ts = ts + " " + field_(fmt.time_fields[1])
            t_us = np.zeros(n, np.int64)
            has_off = ts.str.match(rf"^{_ISO}\s*{_OFFSET}$").fillna(False).to_numpy(bool)
            # Only text of the expected shape reaches pandas: it reads "15-21:48" as a clock with
            # a -21 h offset and then refuses the whole block ("mixed timezones"). Anything
            # else is a malformed time, rejected as bad_time.
            is_local = ts.str.match(rf"^{_ISO}$").fillna(False).to_numpy(bool)
            if fmt.time_kind == "iso_utc":
                # a time without an offset in a file whose times carry one is not guessed
                parsed = _to_datetime(ts.where(has_off), utc=True, format="ISO8601")
                time_reason[~has_off] = _R["bad_time"]
                time_reason[is_local] = _R["time_without_offset"]
                bad = np.asarray(parsed.isna()) & has_off
                time_reason[bad] = _R["bad_time"]
                t_us = _dt_to_us(parsed)
            else:
                if has_off.any():
                    p_off = _to_datetime(ts.where(has_off), utc=True, format="ISO8601")
                    t_us[has_off] = _dt_to_us(p_off)[has_off]
                    time_reason[has_off & np.asarray(p_off.isna())] = _R["bad_time"]
                naive = ~has_off
                if fmt.time_kind == "iso_local":
                    p = _to_datetime(ts.where(naive & is_local), format="ISO8601")
                else:
                    p = _to_datetime(ts.where(naive), format=fmt.time_format)
                p_bad = np.asarray(p.isna()) & naive
                time_reason[p_bad] = _R["bad_time"]
                wall = _dt_to_us(p)
                todo = naive & ~p_bad
                if todo.any():
                    r_sub = time_reason[todo].copy()
                    utc, r_sub = self._localise(wall[todo], r_sub)
                    t_us[todo] = utc
                    time_reason[todo] = r_sub
        vals = {}
        non_numeric = np.zeros(n, bool)
        for j in self.value_fields:
            f = field_(j)
            if fmt.decimal == ",":
                f = f.str.replace(",", ".", regex=False)
            num = pd.to_numeric(f, errors="coerce").to_numpy(dtype=np.float64)
            missing = f.isin(NULL_VALUES).to_numpy() | f.isna().to_numpy()
            non_numeric |= np.isnan(num) & ~missing
            vals[j] = num
        time_reason[(time_reason == 0) & non_numeric] = _R["non_numeric"]
        return self._finish(line_no[live], t_us, time_reason, vals, reasons, int(data.sum()),
                            int(header.sum()), int(blank.sum()))

    # -- common: bounds, canonical columns -------------------------------------------
    def _finish(self, line: np.ndarray, t_us: np.ndarray, reason: np.ndarray, vals: dict[int, np.ndarray],
                reasons: dict[str, list[np.ndarray]], data_lines: int, header_lines: int,
                blank_lines: int) -> _Block:
        fmt = self.fmt
        now_us = int(_time.time() * 1e6) + 86_400_000_000
        ok = reason == 0
        out_of_range = ok & ((t_us < _TIME_MIN_US) | (t_us > now_us))
        reason[out_of_range] = _R["time_out_of_range"]
        canon: dict[tuple[str, str], np.ndarray] = {}
        any_value = np.zeros(len(line), bool)
        for j in self.value_fields:
            spec = fmt.columns[j]
            v = vals[j] * spec.scale
            lo, hi = self.bounds[spec.quantity]
            if spec.quantity == "voltage_V" and spec.channel == "solar":
                # A solar channel's voltage is the array side of the controller, not the bank:
                # an MPPT array on a 12 V bank sits at 18-40 V, and controllers take up to
                # ~250 V input (common practice), so the bank-scaled bound does not apply.
                lo, hi = self.bounds["array_voltage_V"]
            bad = (reason == 0) & (~np.isnan(v)) & ((v < lo) | (v > hi) | ~np.isfinite(v))
            reason[bad] = _R[f"implausible_{spec.quantity.split('_')[0]}"]
            any_value |= ~np.isnan(v)
            canon[(str(spec.channel), spec.quantity)] = v
        reason[(reason == 0) & ~any_value] = _R["no_values"]
        for code in np.unique(reason[reason != 0]):
            reasons.setdefault(_REASONS[code], []).append(line[reason == code])
        keep = reason == 0
        # power -> current where a channel has power but no current (see collector.columns)
        channels = {ch for ch, _ in canon}
        for ch in channels:
            if (ch, "power_W") in canon and (ch, "current_A") not in canon:
                # Current into the bank is power over the BANK voltage; a solar channel's own
                # voltage is the array side of an MPPT controller, so the battery's comes first.
                v_bank = canon.get(("battery", "voltage_V"), canon.get((ch, "voltage_V")))
                if v_bank is not None:
                    with np.errstate(divide="ignore", invalid="ignore"):
                        cur = np.where(v_bank > 1.0, canon[(ch, "power_W")] / v_bank, np.nan)
                    canon[(ch, "current_A")] = cur
        values = {k: v[keep].astype(np.float32) for k, v in canon.items() if k[1] != "power_W"}
        return _Block(line[keep], t_us[keep], values, reasons, header_lines, blank_lines, data_lines)

    def parse(self, block: bytes, first_line: int) -> _Block:
        """Parse a block: the fast path, else halve it and try again; the careful path for small pieces.

        Halving keeps a few bad lines (a repeated header a day, a truncated line) from sending
        a whole 16 MB block down the careful path, which is ~20x slower.
        """
        if not self.fmt.fast_time:
            return self._slow(block, first_line)
        fast = self._fast(block, first_line)
        if fast is not None:
            return fast
        if len(block) <= SLOW_PIECE_BYTES:
            return self._slow(block, first_line)
        mid = block.rfind(b"\n", 0, len(block) // 2)
        if mid < 0:
            mid = block.find(b"\n", len(block) // 2)
        if mid < 0 or mid >= len(block) - 1:
            return self._slow(block, first_line)
        head, tail = block[: mid + 1], block[mid + 1:]
        a = self.parse(head, first_line)
        b = self.parse(tail, first_line + _n_lines(head))
        return _merge_blocks(a, b)


def _merge_blocks(a: _Block, b: _Block) -> _Block:
    keys = list(dict.fromkeys([*a.values, *b.values]))

    def col(blk: _Block, k: tuple[str, str]) -> np.ndarray:
        v = blk.values.get(k)
        return v if v is not None else np.full(len(blk.line), np.nan, np.float32)

    rejects = {why: list(arrs) for why, arrs in a.rejects.items()}
    for why, arrs in b.rejects.items():
        rejects.setdefault(why, []).extend(arrs)
    return _Block(np.concatenate([a.line, b.line]), np.concatenate([a.t_us, b.t_us]),
                  {k: np.concatenate([col(a, k), col(b, k)]) for k in keys}, rejects,
                  a.header_lines + b.header_lines, a.blank_lines + b.blank_lines,
                  a.data_lines + b.data_lines)


def _strict_strptime(text: pa.ChunkedArray, fmt: str) -> pa.ChunkedArray | None:
    """Parse with arrow's strptime, or None when any value does not format back to itself.

    Arrow normalises impossible dates (31 February becomes 2 March) instead of failing; a
    value that does not survive the round trip -- or one written without zero padding -- sends
    the block to the careful pandas path, which rejects impossible dates.
    """
    ts = pc.strptime(text, format=fmt, unit="us", error_is_null=True)
    back = pc.strftime(ts, format=fmt)
    differs = pc.fill_null(pc.not_equal(back, text), False)
    if pc.any(differs).as_py() or ts.null_count != text.null_count:
        return None
    return ts


def _epoch_to_us(raw: np.ndarray, scale_s: float) -> tuple[np.ndarray, np.ndarray]:
    raw = np.asarray(raw, dtype=np.float64)
    with np.errstate(over="ignore", invalid="ignore"):  # a huge number is a bad time, not a warning
        bad = ~np.isfinite(raw) | (np.abs(raw * scale_s) > 1e11)
        t = np.where(bad, 0.0, raw * (scale_s * 1e6))
    return np.round(t).astype(np.int64), bad


def _to_datetime(text: pd.Series, **kw: Any) -> pd.Series:
    """``pd.to_datetime(..., errors="coerce")`` that never raises: unparsable text becomes NaT.

    pandas still raises on some inputs with ``errors="coerce"`` (a mix of offsets and no
    offsets, a year it cannot hold); then each value is parsed on its own, so one odd line
    is rejected as ``bad_time`` instead of failing the import.
    """
    import pandas as pd

    try:
        return pd.to_datetime(text, errors="coerce", **kw)
    except (ValueError, OverflowError, TypeError):
        pass

    def one(x: Any) -> Any:
        if not isinstance(x, str):
            return pd.NaT
        try:
            v = pd.to_datetime(x, errors="coerce", **kw)
        except (ValueError, OverflowError, TypeError):
            return pd.NaT
        if v is pd.NaT or v is None:
            return pd.NaT
        if not kw.get("utc") and v.tzinfo is not None:
            return pd.NaT  # an offset where wall-clock time was expected: not guessed
        return v

    out = pd.to_datetime(pd.Series([one(x) for x in text], index=text.index, dtype=object),
                         utc=bool(kw.get("utc")), errors="coerce")
    return out


def _dt_to_us(p: pd.DatetimeIndex | pd.Series) -> np.ndarray:
    import pandas as pd

    idx = pd.DatetimeIndex(p)
    if idx.tz is not None:
        idx = idx.tz_convert("UTC").tz_localize(None)
    return idx.as_unit("us").asi8.copy()  # NaT becomes int64 min; callers mask it


# --------------------------------------------------------------------------------------------
# sign
# --------------------------------------------------------------------------------------------

def detect_sign_inversion(channel: str, t_us: np.ndarray, current_A: np.ndarray,
                          voltage_V: np.ndarray | None) -> tuple[bool, str]:
    """Decide whether a channel's current is logged with the sign reversed.

    Parameters
    ----------
    channel
        Channel name; ``solar``/``alternator``/``shore`` are charge sources, ``load`` a load.
    t_us
        Sorted UTC times [us].
    current_A
        The channel's current as logged [A].
    voltage_V
        The bank voltage at the same times [V] (the channel's own, or the battery's), or None.

    Returns
    -------
    (inverted, evidence)

    Notes
    -----
    Rules, in order:

    1. A charge source delivers (positive) or idles; if more than 80 % of its clearly non-zero
       samples (|I| > 0.2 A) are negative, it is reversed. A load channel the other way round.
    2. Otherwise, with a voltage: the bank's terminal voltage follows ``V = OCV + I R``, so a step
       in current moves the voltage the same way at once (a load switching on pulls it down),
       and sustained charging raises it. We take the Pearson correlation of sample-to-sample
       steps dI with dV (consecutive samples no further apart than twice the median interval),
       and of 10-minute mean current with the change over those 10 minutes of the voltage
       corrected for the I R drop (``V - I R``, R fitted from the steps; this tracks the
       open-circuit voltage, which rises while charging). Their sum below -0.2, with at least
       30 steps with |dI| > 1 A or 20 full windows, means reversed.
    3. Otherwise the sign is kept, and the evidence says why.
    """
    i = np.asarray(current_A, dtype=np.float64)
    fin = np.isfinite(i)
    if fin.sum() < 10:
        return False, "too few current readings to judge the sign"
    clear = i[fin & (np.abs(i) > 0.2)]
    if channel in CHARGE_SOURCES or channel == "load":
        if clear.size >= 10:
            neg = float(np.mean(clear < 0))
            if channel == "load":
                if neg < 0.2:
                    return True, f"a load channel that is positive in {100 * (1 - neg):.0f} % of samples"
                return False, f"load channel negative in {100 * neg:.0f} % of samples"
            if neg > 0.8:
                return True, f"a charge source that is negative in {100 * neg:.0f} % of samples"
            return False, f"charge source positive in {100 * (1 - neg):.0f} % of samples"
        return False, "the current is near zero throughout"
    if voltage_V is None:
        return False, "no voltage to compare the current with; sign kept"
    v = np.asarray(voltage_V, dtype=np.float64)
    t = np.asarray(t_us, dtype=np.int64)
    ok = fin & np.isfinite(v)
    t, i, v = t[ok], i[ok], v[ok]
    if len(t) < 30:
        return False, "too few readings with both current and voltage to judge the sign"
    dt = np.diff(t)
    med = float(np.median(dt)) if dt.size else 0.0
    close = (dt > 0) & (dt <= 2 * med)
    di, dv = np.diff(i)[close], np.diff(v)[close]
    steps = np.abs(di) > 1.0
    score, parts = 0.0, []
    n_steps = int(steps.sum())
    r_ohm = 0.0
    if n_steps >= 30 and np.std(dv[steps]) > 0:
        c1 = float(np.corrcoef(di[steps], dv[steps])[0, 1])
        score += c1
        r_ohm = float(np.sum(di[steps] * dv[steps]) / np.sum(di[steps] ** 2))
        parts.append(f"step correlation dI/dV {c1:+.2f} over {n_steps} steps")
    # 10-minute windows: mean current against the change of the IR-corrected voltage
    # (V - I R ~ open-circuit voltage, which rises while charging) across the window
    ocv = v - r_ohm * i
    w = (t // 600_000_000)
    _, start, counts = np.unique(w, return_index=True, return_counts=True)
    full = counts >= 3
    n_windows = int(full.sum())
    if n_windows >= 20:
        sums = np.add.reduceat(i, start)
        mean_i = (sums / counts)[full]
        last = start + counts - 1
        dvw = (ocv[last] - ocv[start])[full]
        if np.std(mean_i) > 0 and np.std(dvw) > 0:
            c2 = float(np.corrcoef(mean_i, dvw)[0, 1])
            score += c2
            parts.append(f"10-minute current vs IR-corrected voltage change {c2:+.2f} over {n_windows} windows")
    if not parts:
        return False, "not enough current changes to judge the sign; kept"
    evidence = "; ".join(parts)
    if score < -0.2 and (n_steps >= 30 or n_windows >= 20):
        return True, f"voltage falls when this current rises ({evidence})"
    return False, f"consistent with current positive into the bank ({evidence})"


# --------------------------------------------------------------------------------------------
# the import
# --------------------------------------------------------------------------------------------

def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        while chunk := f.read(8 << 20):
            h.update(chunk)
    return h.hexdigest()


def _bounds(nominal_voltage_V: float | None) -> dict[str, tuple[float, float]]:
    """Plausibility bounds per quantity; voltage scaled by the bank's nominal voltage when known.

    A 12 V bank never reads above ~16 V (lead-acid equalisation; common practice), so 1.6x
    nominal is generous; without a nominal voltage, 70 V covers a 48 V bank at full charge.
    """
    vmax = 1.6 * nominal_voltage_V if nominal_voltage_V else 70.0
    return {"voltage_V": (-0.5, vmax), "current_A": (-2000.0, 2000.0), "power_W": (-50_000.0, 50_000.0),
            "temperature_C": (-50.0, 100.0), "soc_pct": (-0.5, 100.5), "array_voltage_V": (-0.5, 250.0)}


def _fetch_lines(path: Path, wanted: np.ndarray, encoding: str) -> dict[int, str]:
    """Texts of the given 1-based line numbers, in one streaming pass."""
    out: dict[int, str] = {}
    if wanted.size == 0:
        return out
    wanted = np.unique(wanted)
    enc = "utf-8" if encoding == "utf-8-sig" else encoding
    line0 = 1
    with open(path, "rb") as f:
        for _off, block in _iter_blocks(f, 0, BLOCK_BYTES):
            n = _n_lines(block)
            lo, hi = np.searchsorted(wanted, [line0, line0 + n])
            if hi > lo:
                arr = np.frombuffer(block, np.uint8)
                nl = np.flatnonzero(arr == 10)
                starts = np.concatenate([[0], nl + 1])
                for ln in wanted[lo:hi]:
                    k = int(ln - line0)
                    end = nl[k] if k < len(nl) else len(block)
                    out[int(ln)] = block[starts[k]:end].decode(enc, errors="replace").rstrip("\r")
            line0 += n
            if line0 > wanted[-1]:
                break
    return out


_SLICE = 1 << 22  # rows per slice for whole-file array passes (bounded temporaries)


def _intervals(t: np.ndarray) -> tuple[float, np.ndarray, np.ndarray]:
    """Median sample interval [us] and the gaps longer than GAP_FACTOR times it.

    The median is the median of per-slice medians (slices of ~4 M samples): exact for one
    slice, and for longer logs equal to the exact median whenever the logger keeps a steady
    rate, at no full-length temporary. Returns (median, index of the sample before each gap,
    gap lengths [us]).
    """
    meds, weights = [], []
    for s0 in range(0, len(t) - 1, _SLICE):
        dt = np.diff(t[s0:s0 + _SLICE + 1])
        meds.append(float(np.median(dt)))
        weights.append(len(dt))
    order = np.argsort(meds)
    cum = np.cumsum(np.asarray(weights)[order])
    med = float(np.asarray(meds)[order][np.searchsorted(cum, cum[-1] / 2)])
    idx, lens = [], []
    if med > 0:
        for s0 in range(0, len(t) - 1, _SLICE):
            dt = np.diff(t[s0:s0 + _SLICE + 1])
            k = np.flatnonzero(dt > GAP_FACTOR * med)
            idx.append(k + s0)
            lens.append(dt[k])
    if not idx:
        return med, np.empty(0, np.int64), np.empty(0, np.int64)
    return med, np.concatenate(idx), np.concatenate(lens)


def _iso(us: int) -> str:
    """ISO 8601 UTC text of epoch microseconds, as pandas.Timestamp.isoformat writes it."""
    return (datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(microseconds=int(us))).isoformat()


def already_imported_result(path: Path, sha: str, previous: dict[str, Any], t0: float) -> ImportResult:
    """The result for a file whose content (``sha``) the store already holds: nothing added,
    the earlier import's summary repeated (any importer: text or Parquet)."""
    s = previous["summary"] or {}
    return ImportResult(
        path=str(path), rows_stored=0, rows_rejected=0, rejected_by_reason={}, already_imported=True,
        channels=list(s.get("channels", [])), sign_inverted=list(s.get("sign_inverted", [])),
        sample_interval_s=s.get("sample_interval_s"), gaps=[], quarantine=s.get("quarantine"),
        data_lines=int(s.get("data_lines", 0)), time_span=s.get("time_span"), sha256=sha,
        timezone_used=s.get("timezone_used"), seconds=_time.perf_counter() - t0,
        rows_already_held=int(previous["rows_stored"]), rows_added=0,
        previous_import={"path": previous["path"], "imported_at": previous["imported_at"],
                         "rows_stored": previous["rows_stored"], "rows_rejected": previous["rows_rejected"]})


def import_file(path: Path, store: Store, *, tz: str | None = None, channel: str | None = None,
                column_map: dict[str, ColumnSpec] | None = None, invert: Iterable[str] = (),
                nominal_voltage_V: float | None = None,
                progress: Callable[[int, int], None] | None = None,
                block_bytes: int = BLOCK_BYTES) -> ImportResult:
    """Import one delimited text log into the store, in one transaction.

    Parameters
    ----------
    path
        The log file.
    store
        The open reading store.
    tz
        IANA timezone of local (offset-less) timestamps; None means UTC, and the result says
        the zone was assumed.
    channel
        Channel of columns whose name carries none (default ``battery``).
    column_map
        Header name -> :class:`ColumnSpec`, overriding detection (``--map``).
    invert
        Channels whose current sign is flipped whatever the detection says (``--invert``).
    nominal_voltage_V
        The bank's nominal voltage [V] for plausibility bounds (system.toml), or None.
    progress
        Called as ``progress(bytes_done, bytes_total)`` while parsing.

    Returns
    -------
    ImportResult

    Raises
    ------
    UnusableInput
        The file cannot be imported (binary, empty, no time or quantity column, no data lines);
        nothing is stored.
    NothingStored
        (an :class:`UnusableInput`) Every data line was rejected; its ``result`` counts them
        by reason, and they are kept in the quarantine file.
    """
    t0 = _time.perf_counter()
    path = Path(path)
    begun = import_finish.begin(path, store, t0)  # hashing runs beside the parse
    size = begun.size
    with open(path, "rb") as f:
        head = f.read(HEAD_BYTES)
    encoding, line_ends = _text_shape(head)
    if not (encoding.startswith("utf-16") or line_ends == "cr"):
        return _import_text(path, path, store, head=head, size=size, begun=begun, t0=t0, tz=tz, channel=channel,
                            column_map=column_map, invert=invert, nominal_voltage_V=nominal_voltage_V,
                            progress=progress, block_bytes=block_bytes, encoding=None, line_ends=line_ends)
    # UTF-16, or CR alone ending each line: convert to UTF-8 with LF into a scratch file (the
    # rest of the importer reads bytes split at LF) and import that; line numbers are kept.
    earlier = begun.earlier(store, t0)  # before the copy: the same file again adds nothing
    if earlier is not None:
        return earlier
    scratch = _scratch_dir(store)
    try:
        work = scratch / "converted.csv"
        try:
            _to_utf8_lf(path, work, encoding)
        except OSError as exc:  # the scratch copy needs as much space as the file
            raise UnusableInput(f"{path}: cannot make the converted copy it is read from "
                                f"({exc.strerror or exc}); free some disk space beside the store") from None
        with open(work, "rb") as f:
            head = f.read(HEAD_BYTES)
        return _import_text(path, work, store, head=head, size=work.stat().st_size, begun=begun, t0=t0, tz=tz,
                            channel=channel, column_map=column_map, invert=invert,
                            nominal_voltage_V=nominal_voltage_V, progress=progress, block_bytes=block_bytes,
                            encoding=encoding if encoding != "bytes" else None, line_ends=line_ends)
    finally:
        shutil.rmtree(scratch, ignore_errors=True)


SCRATCH_PREFIX = ".import-"
SCRATCH_OWNER = "owner.pid"
#: The fallback prefix in the system's temporary folder when the store's folder is not writable.
TEMP_SCRATCH_PREFIX = "drawdown-import-"


def _scratch_dir(store: Store) -> Path:
    """A private scratch folder beside the store (else in the system's temporary folder).

    The folder holds the importing process's id; folders left behind by an import that was
    killed (its process gone) are removed first, so a crash leaves no lasting copy of a log.
    """
    for parent, prefix in ((store.path.parent, SCRATCH_PREFIX), (Path(tempfile.gettempdir()), TEMP_SCRATCH_PREFIX)):
        _sweep_orphan_scratch(parent, prefix)
    try:
        folder = Path(tempfile.mkdtemp(prefix=SCRATCH_PREFIX, dir=store.path.parent))
    except OSError:
        folder = Path(tempfile.mkdtemp(prefix=TEMP_SCRATCH_PREFIX))
    try:
        (folder / SCRATCH_OWNER).write_text(str(os.getpid()), encoding="ascii")
    except OSError:
        pass  # no room even for a pid: the folder is still removed when this import ends
    return folder


def _sweep_orphan_scratch(parent: Path, prefix: str) -> int:
    """Remove scratch folders under ``parent`` whose importing process no longer runs; how many."""
    removed = 0
    try:
        candidates = [p for p in parent.iterdir() if p.name.startswith(prefix) and p.is_dir()]
    except OSError:
        return 0
    for folder in candidates:
        try:
            pid = int((folder / SCRATCH_OWNER).read_text(encoding="ascii").strip())
        except (OSError, ValueError):
            # No owner written (killed between the two steps, or a disk full): an hour old is orphaned.
            try:
                if _time.time() - folder.stat().st_mtime < 3600:
                    continue
            except OSError:
                continue
        else:
            if _pid_alive(pid):
                continue
        shutil.rmtree(folder, ignore_errors=True)
        removed += 1
    return removed


def _pid_alive(pid: int) -> bool:
    if pid == os.getpid():
        return True
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:
        return True  # another user's process: not ours to judge
    except OSError:
        return False
    return True


def _text_shape(head: bytes) -> tuple[str, str]:
    """(encoding family, line ends) of a file from its first bytes.

    The encoding is ``utf-16-le`` / ``utf-16-be`` for UTF-16 text -- with a byte-order mark,
    or without one when most bytes in every other position are NUL (ASCII text in UTF-16,
    which a NUL-damaged UTF-8 log is not: its NULs come in runs, at both positions) -- and
    ``bytes`` otherwise (UTF-8 or Latin-1, told apart later). Line ends are ``crlf``,
    ``lf``, or ``cr`` when no LF appears at all.
    """
    encoding = "bytes"
    if head.startswith(b"\xff\xfe"):
        encoding = "utf-16-le"
    elif head.startswith(b"\xfe\xff"):
        encoding = "utf-16-be"
    else:
        probe = head[:8192]
        even, odd = probe[0::2], probe[1::2]
        if len(odd) >= 8:
            z_even, z_odd = even.count(0) / len(even), odd.count(0) / len(odd)
            if z_odd > 0.3 and z_even < 0.05:
                encoding = "utf-16-le"
            elif z_even > 0.3 and z_odd < 0.05:
                encoding = "utf-16-be"
    text = head
    if encoding != "bytes":
        body = head[2:] if head[:2] in (b"\xff\xfe", b"\xfe\xff") else head
        text = body[: len(body) // 2 * 2].decode(encoding, errors="replace").encode("utf-8")
    if b"\r\n" in text:
        return encoding, "crlf"
    if b"\n" not in text and b"\r" in text:
        return encoding, "cr"
    return encoding, "lf"


def _to_utf8_lf(src: Path, dest: Path, encoding: str) -> None:
    """Copy ``src`` to ``dest`` as UTF-8 (when it is UTF-16) with every line ended by LF alone.

    CR LF, and a CR alone, become LF, so a file's n-th line stays its n-th line. Bytes
    that are not valid UTF-16 become U+FFFD, and their lines are rejected as
    ``binary_garbage`` like any other damaged line.
    """
    if encoding.startswith("utf-16"):
        codec = "utf-16" if _has_bom(src) else encoding  # "utf-16" reads and drops the BOM
        with open(src, encoding=codec, errors="replace", newline=None) as fin, \
                open(dest, "w", encoding="utf-8", newline="\n") as fout:
            while chunk := fin.read(4 << 20):
                fout.write(chunk)
        return
    with open(src, "rb") as fbin, open(dest, "wb") as fbout:
        held_cr = False  # a CR at the end of a chunk may be the first half of CR LF
        while raw := fbin.read(8 << 20):
            if held_cr:
                raw = b"\r" + raw
            held_cr = raw.endswith(b"\r")
            if held_cr:
                raw = raw[:-1]
            fbout.write(raw.replace(b"\r\n", b"\n").replace(b"\r", b"\n"))
        if held_cr:
            fbout.write(b"\n")


def _has_bom(path: Path) -> bool:
    with open(path, "rb") as f:
        return f.read(2) in (b"\xff\xfe", b"\xfe\xff")


def _import_text(path: Path, src: Path, store: Store, *, head: bytes, size: int, begun: import_finish.Begun,
                 t0: float,
                 tz: str | None, channel: str | None, column_map: dict[str, ColumnSpec] | None,
                 invert: Iterable[str], nominal_voltage_V: float | None,
                 progress: Callable[[int, int], None] | None, block_bytes: int,
                 encoding: str | None, line_ends: str) -> ImportResult:
    """The import proper of ``src`` (``path`` itself, or its UTF-8 / LF copy); ``path`` names it."""
    fmt = sniff_format(path, head, channel=channel or "battery", column_map=dict(column_map or {}))
    needs_tz = fmt.time_kind in ("iso_local", "strptime")
    tz_used = tz or "UTC"
    localise = _Localiser(tz_used) if needs_tz else None
    parser = _Parser(fmt, localise, _bounds(nominal_voltage_V))

    # Results go straight into arrays sized from the head's bytes per line (untouched pages of
    # an over-estimate cost no memory); concatenating per-block pieces at the end would need
    # twice the memory and fragments the heap.
    head_lines = max(head.count(b"\n") - fmt.header_line, 1)
    per_line = max((min(len(head), size) - fmt.data_offset) / head_lines, 8.0)
    cap = int((size - fmt.data_offset) / per_line * 1.25) + 1024
    # line numbers as int32 (4 bytes a line) unless the file could hold more than 2**31 lines
    lines_g = _Grow(cap, np.int32 if size < (2**31 - 1) * 2 else np.int64)
    t_g = _Grow(cap, np.int64)
    vals_g: dict[tuple[str, str], _Grow] = {}
    rejects: dict[str, list[np.ndarray]] = {}
    header_lines = 1
    blank_lines = data_lines = 0
    first_line = fmt.header_line + 1
    with open(src, "rb") as f:
        for off, block in _iter_blocks(f, fmt.data_offset, block_bytes):
            b = parser.parse(block, first_line)
            first_line += b.data_lines + b.header_lines + b.blank_lines  # every line is one of these
            header_lines += b.header_lines
            blank_lines += b.blank_lines
            data_lines += b.data_lines
            for why, arrs in b.rejects.items():
                rejects.setdefault(why, []).extend(arrs)
            n = len(b.line)
            for k in b.values:
                if k not in vals_g:  # a column first seen now: missing (NaN) before
                    vals_g[k] = _Grow(cap, np.float32)
                    vals_g[k].extend(np.full(t_g.n, np.nan, np.float32))
            lines_g.extend(b.line)
            t_g.extend(b.t_us)
            for k, g in vals_g.items():
                arr = b.values.get(k)
                g.extend(arr if arr is not None else np.full(n, np.nan, np.float32))
            del b
            if progress is not None:
                progress(off + len(block), size)
            earlier = begun.earlier_if_hashed(store, t0)  # the same file imported before: stop here
            if earlier is not None:
                return earlier
    earlier = begun.earlier(store, t0)
    if earlier is not None:
        return earlier
    sha = begun.sha256
    if data_lines == 0:
        raise UnusableInput(f"{path}: a header ({fmt.delimiter.join(fmt.header)!r}) but no data lines")
    t = t_g.view()
    values: dict[tuple[str, str], np.ndarray] = {k: g.view() for k, g in vals_g.items()}
    line = lines_g.view()
    del t_g, vals_g, lines_g

    # order, duplicates; once in time order the line numbers are no longer needed
    t, values, out_of_order = import_finish.order_axis(t, values, line, rejects)
    del line
    by_reason, rows_rejected, duplicates = import_finish.count_rejects(rejects)
    rows_stored = len(t)
    import_finish.check_counts(path, rows_stored, rows_rejected, data_lines)
    if rows_stored == 0:
        _refuse_all_rejected(path, src, store, sha=sha, data_lines=data_lines, by_reason=by_reason,
                             rejects=rejects, fmt=fmt, encoding=encoding, line_ends=line_ends,
                             header_lines=header_lines, blank_lines=blank_lines)

    axes: list[import_finish.Axis] = [(t, values)]
    channels, inverted, evidence = import_finish.settle_signs(axes, invert)
    writes, rows_already_held = import_finish.held_writes(store, axes)
    interval, gaps_total, gaps, span = import_finish.time_facts(axes)

    quarantine = None
    if rows_rejected:
        quarantine = str(store.quarantine_dir / f"{path.stem}-{sha[:8]}.csv")

    result = ImportResult(
        path=str(path), rows_stored=rows_stored, rows_rejected=rows_rejected, rejected_by_reason=by_reason,
        already_imported=False, channels=channels, sign_inverted=inverted,
        sample_interval_s=interval, gaps=gaps, quarantine=quarantine, data_lines=data_lines,
        duplicates=duplicates, header_lines=header_lines, blank_lines=blank_lines,
        preamble_lines=fmt.header_line - 1, out_of_order_rows=out_of_order, gaps_total=gaps_total,
        time_span=span, timezone_used=tz_used if needs_tz else "UTC (offsets in the file)"
        if fmt.time_kind == "iso_utc" else "UTC (Unix epoch)",
        timezone_assumed=needs_tz and tz is None, sign_evidence=evidence,
        columns={fmt.header[j] or f"column {j + 1}": (s.quantity if s.quantity == "time"
                                                     else f"{s.channel}.{s.quantity}")
                 for j, s in fmt.columns.items()},
        columns_ignored=list(fmt.ignored), delimiter=fmt.delimiter,
        decimal=fmt.decimal, encoding=encoding or fmt.encoding, line_ends=line_ends, sha256=sha, seconds=None,
        rows_already_held=rows_already_held, rows_added=rows_stored - rows_already_held)

    return import_finish.store_import(
        store, result, writes, lambda out: _write_quarantine(out, src, rejects, fmt.encoding), t0)


#: What to check when every line of a file was rejected for one of these reasons.
_ALL_REJECTED_HINTS = {
    "time_out_of_range": (f"times before {TIME_MIN:%Y-%m-%d} or after tomorrow: was the logger's clock set? "
                          "(a clock that lost its setting often restarts at 1970 or 2000)"),
    "time_without_offset": "the times carry no UTC offset while the file's first times did",
    "bad_time": "the times are not in a form drawdown reads (ISO 8601, a local date-time or a Unix epoch)",
    "nonexistent_local_time": "every time falls in a skipped daylight-saving hour: is the timezone right?",
    "ambiguous_local_time": "every time falls in a repeated daylight-saving hour: is the timezone right?",
    "wrong_field_count": "the lines do not have as many fields as the header",
    "non_numeric": "the values are not numbers (a different decimal mark or delimiter?)",
    "no_values": "the lines hold a time but no value",
    "binary_garbage": "the lines hold binary bytes, not text",
}


def _refuse_all_rejected(path: Path, src: Path, store: Store, *, sha: str, data_lines: int,
                         by_reason: dict[str, int], rejects: dict[str, list[np.ndarray]], fmt: FileFormat,
                         encoding: str | None, line_ends: str, header_lines: int, blank_lines: int) -> None:
    """Keep the rejected lines aside (quarantine) and raise :class:`NothingStored`."""
    quarantine = store.quarantine_dir / f"{path.stem}-{sha[:8]}.csv"
    try:
        _write_quarantine(quarantine, src, rejects, fmt.encoding)
        kept: str | None = str(quarantine)
    except OSError:
        kept = None
    result = ImportResult(
        path=str(path), rows_stored=0, rows_rejected=data_lines, rejected_by_reason=by_reason,
        already_imported=False, channels=[], sign_inverted=[], sample_interval_s=None, gaps=[],
        quarantine=kept, data_lines=data_lines, header_lines=header_lines, blank_lines=blank_lines,
        preamble_lines=fmt.header_line - 1,
        delimiter=fmt.delimiter, decimal=fmt.decimal, encoding=encoding or fmt.encoding, line_ends=line_ends,
        sha256=sha)
    counted = ", ".join(f"{n} {why}" for why, n in sorted(by_reason.items(), key=lambda kv: -kv[1]))
    top = max(by_reason, key=lambda k: by_reason[k])
    hint = _ALL_REJECTED_HINTS.get(top)
    what = f"{path}: every one of its {data_lines} data lines was rejected ({counted}); nothing stored"
    zone = top in ("nonexistent_local_time", "ambiguous_local_time", "time_without_offset")
    raise NothingStored(what + (f" - {hint}" if hint else "")
                        + (" (--tz ZONE, or the site timezone in system.toml)" if zone else ""), result,
                        page_message=what + (f" - {hint}" if hint else "")
                        + (" (the site timezone on this page's system description)" if zone else ""))


def _replace(r: ImportResult, **kw: Any) -> ImportResult:
    import dataclasses

    return dataclasses.replace(r, **kw)


QUARANTINE_TEXT_MAX = 2000  # characters of a rejected line kept in the quarantine file


def _printable(text: str) -> str:
    """A rejected line as safe text: control characters as \\xNN, runs of NUL counted, long lines cut."""
    text = re.sub("\x00{8,}", lambda m: f"<{len(m.group())} NUL bytes>", text)
    text = _RE_CONTROL.sub(lambda m: f"\\x{ord(m.group()):02x}", text)
    if len(text) > QUARANTINE_TEXT_MAX:
        text = text[:QUARANTINE_TEXT_MAX] + f"...({len(text) - QUARANTINE_TEXT_MAX} more characters)"
    return text


def _write_quarantine(out: Path, src: Path, rejects: dict[str, list[np.ndarray]], encoding: str) -> None:
    """``line,reason,text`` for every rejected line, in line order."""
    lines = np.concatenate([a for arrs in rejects.values() for a in arrs]) if rejects else np.empty(0, np.int64)
    why = np.concatenate([np.full(sum(len(a) for a in arrs), r, dtype=object)
                          for r, arrs in rejects.items()]) if rejects else np.empty(0, object)
    order = np.argsort(lines, kind="stable")
    lines, why = lines[order], why[order]
    texts = _fetch_lines(src, lines, encoding)
    out.parent.mkdir(parents=True, exist_ok=True)
    tmp = out.with_suffix(".csv.part")
    with open(tmp, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f)
        w.writerow(["line", "reason", "text"])
        w.writerows(zip(lines.tolist(), why.tolist(), (_printable(texts.get(int(x), "")) for x in lines)))
    tmp.replace(out)
