"""The fleet dataset: many vehicles' readings in one Parquet dataset (docs/fleet.md).

Layout (``DIR`` a local folder or any fsspec URL)::

    DIR/vehicle=<name>/month=YYYY-MM/part-<content-hash>.parquet   one vehicle's readings of one UTC month
    DIR/vehicle=<name>/system.toml                                  the vehicle's system description
    DIR/_fleet.json                                                 what was ingested, per vehicle

A part file is a readings export of schema v1 (docs/export.md): the same columns, types, encodings
and file metadata as ``drawdown export readings --format parquet``, plus the ``drawdown.fleet.*``
keys below. A month holds each reading (channel, t) once; its part holds the *whole* month, so a
month is rewritten, never appended to:

1. the month's live part is read and merged with the new readings (the newest ingest wins a
   (channel, t) both hold);
2. the merged month is written under a hidden temporary name in the month's folder;
3. it is renamed to ``part-<sha256 of its readings>.parquet``; its metadata
   ``drawdown.fleet.supersedes`` lists every part the folder held, and
   ``drawdown.fleet.generation`` is one more than theirs;
4. the superseded parts are removed.

A reader (:func:`read_vehicle`) reads, per month, only the parts no other part supersedes, so a
run stopped between 3 and 4 leaves the month readable and whole (the next ingest removes the
leftover); one stopped before 3 leaves only a hidden temporary file readers never list.
``_fleet.json`` records each source's sha256: the same file ingested again is skipped, and a
changed file of the same vehicle is merged reading by reading (overlapping exports never
duplicate a reading). One ingest at a time may write a dataset.

Memory is bounded by one vehicle-month when ingesting (a store is read a month at a time, a
Parquet export a row group at a time) and by one vehicle when reading (month partitions, never
the whole dataset): the fleet report reads one vehicle per task.
"""

from __future__ import annotations

import hashlib
import json
import os
import re
import tempfile
import time
import tomllib
import uuid
from collections.abc import Iterable, Iterator
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from drawdown.collector.canonical import VALUE_COLUMNS, empty_frame, from_epoch_us

if TYPE_CHECKING:  # pandas, pyarrow and fsspec load when a dataset is used, not on import
    import pandas as pd

__all__ = ["FleetInputError", "IngestResult", "LEDGER", "SourceResult", "check_vehicle_name", "ingest",
           "read_vehicle", "vehicle_system_text", "vehicles"]

#: The dataset's record of what was ingested (docs/fleet.md#the-ingest-record).
LEDGER = "_fleet.json"
LEDGER_FORMAT = "drawdown fleet dataset"
LEDGER_VERSION = 1
#: Part-file metadata keys of the dataset (beside the export's own, docs/export.md).
META_VEHICLE = "drawdown.fleet.vehicle"
META_MONTH = "drawdown.fleet.month"
META_GENERATION = "drawdown.fleet.generation"
META_SUPERSEDES = "drawdown.fleet.supersedes"
#: The manifest a folder of vehicles carries (``drawdown simulate --fleet N --out DIR`` writes it).
MANIFEST = "fleet.json"
SYSTEM = "system.toml"
#: Readings file names inside a vehicle folder, in the order they are looked for.
READINGS_NAMES = ("readings.parquet", "readings.sqlite")
#: File stems that say nothing of the vehicle: such a file is named after its folder.
GENERIC_STEMS = frozenset({"readings", "store", "export", "data", "log", "readings-export"})
_NAME = re.compile(r"^[A-Za-z0-9][A-Za-z0-9._-]{0,79}$")
_MONTH = re.compile(r"^month=(\d{4}-\d{2})$")
_PART = re.compile(r"^part-([0-9a-f]{8,64})\.parquet$")
_SQLITE_MAGIC = b"SQLite format 3\x00"
_PARQUET_MAGIC = b"PAR1"
ROW_GROUP_ROWS = 1 << 20  # rows per row group in a part, as the readings export


class FleetInputError(ValueError):
    """A source cannot be ingested; the message names it and says why."""


def check_vehicle_name(name: str) -> str:
    """``name`` when it is a safe path component for ``vehicle=<name>``; FleetInputError otherwise."""
    if not isinstance(name, str) or not _NAME.match(name) or name in (".", ".."):
        raise FleetInputError(f"vehicle name {name!r}: use 1-80 letters, digits, '-', '_' or '.', starting with a "
                              "letter or digit (e.g. van-001); it becomes a folder name in the dataset")
    return name


# --------------------------------------------------------------------------------------------
# results
# --------------------------------------------------------------------------------------------

@dataclass
class SourceResult:
    """What one source gave the dataset (one vehicle; a folder of vehicles gives one per vehicle)."""

    source: str
    vehicle: str | None = None
    kind: str | None = None              # store | parquet
    sha256: str | None = None
    rows: int = 0                        # readings the source holds
    rows_added: int = 0                  # (channel, t) the dataset did not hold before
    rows_already_held: int = 0           # held before with the same values
    rows_replaced: int = 0               # held before with other values: this source's values now
    months: list[str] = field(default_factory=list)            # UTC months the source has readings in
    months_rewritten: list[str] = field(default_factory=list)  # month partitions written anew
    already_ingested: bool = False       # this file (sha256) was ingested for this vehicle before
    system: str | None = None            # new | changed | unchanged | None (no system.toml beside it)
    system_source: str | None = None
    error: str | None = None

    def to_json(self) -> dict[str, Any]:
        return {k: getattr(self, k) for k in self.__dataclass_fields__}


@dataclass
class IngestResult:
    """Every source's result, in the order they were ingested."""

    dataset: str
    sources: list[SourceResult] = field(default_factory=list)

    @property
    def ingested(self) -> int:
        """Sources read without an error (a file already ingested counts)."""
        return sum(1 for s in self.sources if s.error is None)

    @property
    def failed(self) -> int:
        return sum(1 for s in self.sources if s.error is not None)

    @property
    def rows_added(self) -> int:
        return sum(s.rows_added for s in self.sources)

    def to_json(self) -> dict[str, Any]:
        names = sorted({s.vehicle for s in self.sources if s.vehicle and s.error is None})
        return {"dataset": self.dataset, "ingested": self.ingested, "failed": self.failed,
                "rows_added": self.rows_added, "vehicles": names,
                "sources": [s.to_json() for s in self.sources]}


# --------------------------------------------------------------------------------------------
# file systems
# --------------------------------------------------------------------------------------------

class _FS:
    """An fsspec file system and pyarrow's view of it, rooted at one path."""

    def __init__(self, url: str | os.PathLike[str]):
        import fsspec
        import pyarrow.fs as pafs

        text = os.fspath(url)
        try:
            self.fs, root = fsspec.core.url_to_fs(text)
        except ImportError as exc:  # a protocol whose fsspec driver is not installed (s3fs, gcsfs ...)
            raise FleetInputError(f"{text}: cannot open this URL ({exc})") from None
        except ValueError as exc:
            raise FleetInputError(f"{text}: not a path or URL fsspec knows ({exc})") from None
        self.url = text
        self.root = str(root).rstrip("/") or "/"
        self.local = "file" in _protocols(self.fs)
        self.arrow: Any = pafs.LocalFileSystem() if self.local else pafs.PyFileSystem(pafs.FSSpecHandler(self.fs))

    def join(self, *parts: str) -> str:
        return "/".join([self.root.rstrip("/"), *parts]) if self.root != "/" else "/" + "/".join(parts)

    def names(self, path: str) -> list[str]:
        """Entry names (not paths) in the folder ``path``; [] when it does not exist."""
        try:
            self.fs.invalidate_cache(path)
            entries = self.fs.ls(path, detail=False)
        except (FileNotFoundError, NotADirectoryError):
            return []
        return sorted({str(e).rstrip("/").rsplit("/", 1)[-1] for e in entries})

    def isdir(self, path: str) -> bool:
        return bool(self.fs.isdir(path))

    def isfile(self, path: str) -> bool:
        return bool(self.fs.isfile(path))

    def read_bytes(self, path: str) -> bytes:
        with self.fs.open(path, "rb") as f:
            return bytes(f.read())

    def write_atomic(self, path: str, data: bytes) -> None:
        """Write ``data`` to a hidden name beside ``path``, then rename it there."""
        folder, name = path.rsplit("/", 1)
        self.fs.makedirs(folder, exist_ok=True)
        tmp = f"{folder}/.{name}.tmp-{uuid.uuid4().hex[:12]}"
        try:
            with self.fs.open(tmp, "wb") as f:
                f.write(data)
            self._rename(tmp, path)
        finally:
            if self.fs.exists(tmp):
                self.fs.rm(tmp)

    def _rename(self, src: str, dst: str) -> None:
        if self.local:
            os.replace(src, dst)  # atomic on one file system
        else:
            self.fs.mv(src, dst)


def _protocols(fs: Any) -> tuple[str, ...]:
    p = fs.protocol
    return (p,) if isinstance(p, str) else tuple(p)


# --------------------------------------------------------------------------------------------
# a month of readings as arrays
# --------------------------------------------------------------------------------------------

@dataclass
class _Block:
    """Readings sorted by channel (``names`` sorted, ``codes`` into it) then time, (channel, t) unique."""

    names: list[str]
    codes: np.ndarray          # int32
    t: np.ndarray              # int64 us UTC
    values: list[np.ndarray]   # float32, VALUE_COLUMNS order, NaN where missing

    def __len__(self) -> int:
        return len(self.t)

    @staticmethod
    def empty() -> _Block:
        return _Block([], np.empty(0, np.int32), np.empty(0, np.int64), [np.empty(0, np.float32) for _ in VALUE_COLUMNS])

    def content_hash(self) -> str:
        """sha256 of the readings themselves (not of the file's bytes): the part's name."""
        h = hashlib.sha256()
        h.update(json.dumps(self.names).encode())
        for a in (self.codes.astype("<i4"), self.t.astype("<i8"), *(v.astype("<f4") for v in self.values)):
            h.update(np.ascontiguousarray(a).tobytes())
        return h.hexdigest()[:32]


def _block_from_pieces(names: list[str], codes: np.ndarray, t: np.ndarray, values: list[np.ndarray]) -> _Block:
    """Sort by (channel name, t) and keep the last row of each repeated (channel, t)."""
    order_names = sorted(set(names[c] for c in np.unique(codes))) if len(codes) else []
    remap = np.full(max(len(names), 1), -1, np.int32)
    for i, n in enumerate(names):
        if n in order_names:
            remap[i] = order_names.index(n)
    new_codes = remap[codes] if len(codes) else np.empty(0, np.int32)
    pos = np.arange(len(t))
    order = np.lexsort((pos, t, new_codes))
    c, tt = new_codes[order], t[order]
    keep = np.ones(len(tt), dtype=bool)
    if len(tt) > 1:
        keep[:-1] = (c[1:] != c[:-1]) | (tt[1:] != tt[:-1])  # the last of a run is the latest row
    idx = order[keep]
    return _Block(order_names, new_codes[idx].astype(np.int32), t[idx].astype(np.int64),
                  [np.asarray(v, dtype=np.float32)[idx] for v in values])


@dataclass
class _Merge:
    block: _Block
    added: int
    held: int
    replaced: int


def _merge(old: _Block, new: _Block) -> _Merge:
    """``old`` and ``new`` as one block, ``new`` winning a (channel, t) both hold."""
    if not len(old):
        return _Merge(new, len(new), 0, 0)
    names = sorted(set(old.names) | set(new.names))
    index = {n: i for i, n in enumerate(names)}
    o_map = np.array([index[n] for n in old.names] or [0], np.int32)
    n_map = np.array([index[n] for n in new.names] or [0], np.int32)
    codes = np.concatenate([o_map[old.codes], n_map[new.codes]]) if len(new) else o_map[old.codes]
    t = np.concatenate([old.t, new.t])
    is_new = np.concatenate([np.zeros(len(old), np.int8), np.ones(len(new), np.int8)])
    vals = [np.concatenate([a, b]) for a, b in zip(old.values, new.values)]
    order = np.lexsort((is_new, t, codes))
    codes, t, is_new = codes[order], t[order], is_new[order]
    vals = [v[order] for v in vals]
    pair = (codes[1:] == codes[:-1]) & (t[1:] == t[:-1])  # (old, new) of one reading; each side is unique
    keep = np.ones(len(t), dtype=bool)
    keep[:-1] = ~pair
    first = np.flatnonzero(pair)
    same = np.ones(len(first), dtype=bool)
    for v in vals:
        a, b = v[first], v[first + 1]
        same &= (a == b) | (np.isnan(a) & np.isnan(b))
    held = int(np.count_nonzero(same))
    block = _Block(names, codes[keep].astype(np.int32), t[keep], [v[keep] for v in vals])
    return _Merge(block, len(new) - len(first), held, len(first) - held)


def _month_of(t_us: np.ndarray) -> np.ndarray:
    """UTC calendar month of each time, as numpy months (datetime64[M])."""
    return np.asarray(t_us, dtype=np.int64).view("M8[us]").astype("M8[M]")


def _month_bounds(month: str) -> tuple[int, int]:
    m = np.datetime64(month, "M")
    return int(m.astype("M8[us]").astype(np.int64)), int((m + 1).astype("M8[us]").astype(np.int64))


def _month_text(m: np.datetime64) -> str:
    return str(np.datetime_as_string(m, unit="M"))


# --------------------------------------------------------------------------------------------
# reading sources: each yields (month, block) a month at a time
# --------------------------------------------------------------------------------------------

class _Source:
    """One vehicle's readings file (a store or a Parquet readings export) on some file system."""

    kind: str = ""

    def __init__(self, fs: _FS, path: str, label: str):
        self.fs, self.path, self.label = fs, path, label

    def rows(self) -> int:
        raise NotImplementedError

    def months(self) -> list[str]:
        raise NotImplementedError

    def month(self, month: str) -> _Block:
        raise NotImplementedError

    def close(self) -> None:
        pass


class _StoreSource(_Source):
    kind = "store"

    def __init__(self, fs: _FS, path: str, label: str):
        super().__init__(fs, path, label)
        from drawdown.collector.store import Store, StoreError

        self._tmp: tempfile.TemporaryDirectory[str] | None = None
        local = path
        if not fs.local:  # SQLite reads a local file: copy the store (and its WAL) down first
            self._tmp = tempfile.TemporaryDirectory(prefix="drawdown-fleet-")
            local = str(Path(self._tmp.name) / "readings.sqlite")
            fs.fs.get_file(path, local)
            if fs.isfile(path + "-wal"):
                fs.fs.get_file(path + "-wal", local + "-wal")
        try:
            self.store = Store(local, read_only=True)
        except StoreError as exc:
            self.close()
            raise FleetInputError(f"{label}: {exc}") from None

    def rows(self) -> int:
        return sum(int(c["rows"]) for c in self.store.channel_summary().values())

    def months(self) -> list[str]:
        span = self.store.time_span()
        if span is None:
            return []
        ends = _month_of(np.array([int(span[0].value) // 1000, int(span[1].value) // 1000], dtype=np.int64))
        first, last = ends.astype(np.int64)  # months since 1970-01
        return [_month_text(np.datetime64(int(m), "M")) for m in range(int(first), int(last) + 1)]

    def month(self, month: str) -> _Block:
        lo, hi = _month_bounds(month)
        names: list[str] = []
        codes: list[np.ndarray] = []
        ts: list[np.ndarray] = []
        vals: list[list[np.ndarray]] = [[] for _ in VALUE_COLUMNS]
        for name, t, v in self.store.iter_pieces(from_epoch_us(np.array([lo]))[0], from_epoch_us(np.array([hi]))[0]):
            if name not in names:
                names.append(name)
            codes.append(np.full(len(t), names.index(name), np.int32))
            ts.append(np.asarray(t, np.int64))
            for j, a in enumerate(v):
                vals[j].append(np.full(len(t), np.nan, np.float32) if a is None else np.asarray(a, np.float32))
        if not ts:
            return _Block.empty()
        return _block_from_pieces(names, np.concatenate(codes), np.concatenate(ts),
                                  [np.concatenate(x) for x in vals])

    def close(self) -> None:
        store = getattr(self, "store", None)
        if store is not None:
            store.close()
        if self._tmp is not None:
            self._tmp.cleanup()
            self._tmp = None


class _ParquetSource(_Source):
    kind = "parquet"

    def __init__(self, fs: _FS, path: str, label: str):
        super().__init__(fs, path, label)
        import pyarrow as pa
        import pyarrow.parquet as pq

        from drawdown.cli.commands.export import SCHEMA_VERSION
        from drawdown.collector.parquet_file import META_KIND, META_SCHEMA_VERSION

        try:
            self.pf = pq.ParquetFile(path, filesystem=fs.arrow)
        except (pa.ArrowException, OSError) as exc:
            raise FleetInputError(f"{label}: cannot read it as Parquet ({exc})") from None
        schema = self.pf.schema_arrow
        meta = {k.decode(errors="replace"): v.decode(errors="replace") for k, v in (schema.metadata or {}).items()}
        kind = meta.get(META_KIND)
        if kind is not None and kind != "readings":
            raise FleetInputError(f"{label}: a drawdown {kind} export holds no readings; ingest a readings export "
                                  "('drawdown export readings --format parquet') or the vehicle's store")
        version = meta.get(META_SCHEMA_VERSION)
        if version is not None and version != str(SCHEMA_VERSION):
            raise FleetInputError(f"{label}: a readings export of schema version {version}; this drawdown reads "
                                  f"version {SCHEMA_VERSION} (docs/export.md)")
        problems = []
        if "t" not in schema.names or not pa.types.is_timestamp(schema.field("t").type) \
                or schema.field("t").type.tz is None:
            problems.append("no UTC timestamp column 't'")
        if "channel" not in schema.names or not _is_text(schema.field("channel").type):
            problems.append("no text column 'channel'")
        for c in VALUE_COLUMNS:
            if c not in schema.names or not pa.types.is_floating(schema.field(c).type):
                problems.append(f"no number column {c!r}")
        if problems:
            what = "a drawdown readings export" if kind == "readings" else "a Parquet file but not a drawdown readings export"
            raise FleetInputError(f"{label}: {what} ({'; '.join(problems)}). Import it into a store with "
                                  "'drawdown import FILE' and ingest the store, or export readings from it")
        self._groups: dict[str, list[int]] | None = None

    def rows(self) -> int:
        return int(self.pf.metadata.num_rows)

    def _month_groups(self) -> dict[str, list[int]]:
        """Month -> the row groups holding readings of it (from the time column alone)."""
        if self._groups is None:
            groups: dict[str, list[int]] = {}
            for g in range(self.pf.num_row_groups):
                t = self._times(self.pf.read_row_group(g, columns=["t"]).column("t"))
                for m in np.unique(_month_of(t)):
                    groups.setdefault(_month_text(m), []).append(g)
            self._groups = groups
        return self._groups

    def _times(self, col: Any) -> np.ndarray:
        import pyarrow as pa
        import pyarrow.compute as pc

        if col.null_count:
            raise FleetInputError(f"{self.label}: {col.null_count} readings without a time")
        return np.asarray(pc.cast(col, pa.timestamp("us", tz="UTC")).cast(pa.int64()).to_numpy(), dtype=np.int64)

    def months(self) -> list[str]:
        return sorted(self._month_groups())

    def month(self, month: str) -> _Block:
        import pyarrow as pa
        import pyarrow.compute as pc

        lo, hi = _month_bounds(month)
        names: list[str] = []
        codes: list[np.ndarray] = []
        ts: list[np.ndarray] = []
        vals: list[list[np.ndarray]] = [[] for _ in VALUE_COLUMNS]
        for g in self._month_groups().get(month, []):
            tab = self.pf.read_row_group(g, columns=["t", "channel", *VALUE_COLUMNS])
            t = self._times(tab.column("t"))
            inside = (t >= lo) & (t < hi)
            if not inside.any():
                continue
            ch = tab.column("channel").combine_chunks()
            if pa.types.is_dictionary(ch.type):
                ch = ch.dictionary_decode()
            if ch.null_count:
                raise FleetInputError(f"{self.label}: {ch.null_count} readings without a channel")
            enc = pc.dictionary_encode(ch)
            local_names = [str(x) for x in enc.dictionary.to_pylist()]
            remap = np.array([_intern(names, n) for n in local_names] or [0], np.int32)
            codes.append(remap[np.asarray(enc.indices.to_numpy(zero_copy_only=False), np.int32)][inside])
            ts.append(t[inside])
            for j, c in enumerate(VALUE_COLUMNS):
                col = pc.fill_null(pc.cast(tab.column(c), pa.float32()), float("nan"))
                vals[j].append(np.asarray(col.to_numpy(), np.float32)[inside])
        if not ts:
            return _Block.empty()
        return _block_from_pieces(names, np.concatenate(codes), np.concatenate(ts),
                                  [np.concatenate(x) for x in vals])


def _intern(names: list[str], name: str) -> int:
    if name not in names:
        names.append(name)
    return names.index(name)


def _is_text(t: Any) -> bool:
    import pyarrow as pa

    if pa.types.is_dictionary(t):
        t = t.value_type
    return bool(pa.types.is_string(t) or pa.types.is_large_string(t))


def _open_source(fs: _FS, path: str, label: str) -> _Source:
    try:
        with fs.fs.open(path, "rb") as f:
            head = bytes(f.read(16))
    except IsADirectoryError:
        raise FleetInputError(f"{label}: is a folder with no vehicles") from None
    except FileNotFoundError:
        raise FleetInputError(f"{label}: no such file") from None
    except PermissionError:
        raise FleetInputError(f"{label}: this user may not read it") from None
    if head.startswith(_SQLITE_MAGIC):
        return _StoreSource(fs, path, label)
    if head.startswith(_PARQUET_MAGIC):
        return _ParquetSource(fs, path, label)
    what = "an empty file" if not head else "neither a drawdown store (SQLite) nor a Parquet readings export"
    raise FleetInputError(f"{label}: {what}. A log file is imported into a store first "
                          "('drawdown --store van.sqlite import LOG'), then the store is ingested")


def _sha256(fs: _FS, path: str) -> str:
    h = hashlib.sha256()
    paths = [path]
    if fs.isfile(path + "-wal"):  # a store's readings may sit in its WAL until a checkpoint
        paths.append(path + "-wal")
    for p in paths:
        with fs.fs.open(p, "rb") as f:
            while block := f.read(1 << 20):
                h.update(block)
    return h.hexdigest()


# --------------------------------------------------------------------------------------------
# what a source argument names: one or more (vehicle, readings path, system.toml path)
# --------------------------------------------------------------------------------------------

@dataclass
class _Item:
    label: str
    path: str
    vehicle: str | None
    system: str | None
    error: str | None = None
    system_label: str | None = None


def _parent(path: str) -> str:
    return path.rstrip("/").rsplit("/", 1)[0] if "/" in path.rstrip("/") else ""


def _base(path: str) -> str:
    return path.rstrip("/").rsplit("/", 1)[-1]


def _label(fs: _FS, source: str, path: str) -> str:
    """How a person sees a file found inside a source (the source's own spelling first)."""
    if path == fs.root:
        return source
    return source.rstrip("/") + path[len(fs.root):] if path.startswith(fs.root) else path


def _readings_in(fs: _FS, folder: str) -> str | None:
    names = fs.names(folder)
    for n in READINGS_NAMES:
        if n in names and fs.isfile(f"{folder}/{n}"):
            return f"{folder}/{n}"
    return None


def _system_in(fs: _FS, folder: str) -> str | None:
    p = f"{folder}/{SYSTEM}" if folder else SYSTEM
    return p if fs.isfile(p) else None


def _manifest_name(fs: _FS, folder: str) -> str | None:
    """The vehicle name a ``fleet.json`` one folder up gives ``folder``, if any."""
    up = _parent(folder)
    path = f"{up}/{MANIFEST}"
    if not fs.isfile(path):
        return None
    try:
        entries = _manifest_entries(fs, up)
    except FleetInputError:
        return None
    for name, sub in entries:
        if sub.strip("/") == _base(folder):
            return name
    return None


def _manifest_entries(fs: _FS, folder: str) -> list[tuple[str, str]]:
    path = f"{folder}/{MANIFEST}"
    try:
        doc = json.loads(fs.read_bytes(path).decode("utf-8"))
        rows = doc["vehicles"]
        out = [(str(r["name"]), str(r.get("path") or r["name"])) for r in rows]
    except (ValueError, KeyError, TypeError, AttributeError, UnicodeDecodeError) as exc:
        raise FleetInputError(f"{path}: not a fleet manifest ({type(exc).__name__}: {exc}); expected "
                              '{"vehicles": [{"name": "van-001", "path": "van-001"}, ...]}') from None
    return out


def _items(fs: _FS, source: str, vehicle: str | None) -> list[_Item]:
    """What ``source`` holds: one item per vehicle (a file, a vehicle folder, or a folder of vehicles)."""
    path = fs.root
    if not fs.isdir(path):
        if not fs.fs.exists(path):
            raise FleetInputError(f"{source}: no such file or folder")
        folder = _parent(path)
        if vehicle is None:
            vehicle = _manifest_name(fs, folder)
        if vehicle is None:
            stem = _base(path).rsplit(".", 1)[0]
            use_folder = folder and (stem.lower() in GENERIC_STEMS or _system_in(fs, folder) is not None)
            vehicle = _base(folder) if use_folder else stem
        system = _system_in(fs, folder) if folder else None
        beside = source.rstrip("/").rsplit("/", 1)[0] + "/" if "/" in source.rstrip("/") else ""
        return [_Item(source, path, vehicle, system, system_label=beside + SYSTEM if system else None)]
    if fs.isfile(f"{path}/{MANIFEST}"):
        if vehicle is not None:
            raise FleetInputError(f"{source}: a folder of vehicles names its own vehicles (fleet.json); "
                                  "--vehicle is for one store or export")
        items = []
        for name, sub in _manifest_entries(fs, path):
            folder = f"{path}/{sub.strip('/')}"
            label = _label(fs, source, folder)
            found = _readings_in(fs, folder) if fs.isdir(folder) else None
            if found is None:
                items.append(_Item(label, folder, name, None,
                                   error=f"{label}: the manifest lists vehicle {name!r} here, but there is no "
                                         f"{' or '.join(READINGS_NAMES)}"))
                continue
            items.append(_Item(_label(fs, source, found), found, name, _system_in(fs, folder)))
        if not items:
            raise FleetInputError(f"{source}: its {MANIFEST} lists no vehicles")
        return items
    own = _readings_in(fs, path)
    if own is not None:  # the folder of one vehicle
        name = vehicle or _manifest_name(fs, path) or _base(path)
        return [_Item(_label(fs, source, own), own, name, _system_in(fs, path))]
    if vehicle is not None:
        raise FleetInputError(f"{source}: a folder of vehicles names its own vehicles (its subfolders); "
                              "--vehicle is for one store or export")
    items = []
    for sub in fs.names(path):
        folder = f"{path}/{sub}"
        if sub.startswith((".", "_")) or not fs.isdir(folder):
            continue
        found = _readings_in(fs, folder)
        system = _system_in(fs, folder)
        if found is None and system is None:
            continue  # not a vehicle folder
        label = _label(fs, source, found or folder)
        if found is None:
            items.append(_Item(label, folder, sub, system, error=f"{label}: a {SYSTEM} but no "
                                                                  f"{' or '.join(READINGS_NAMES)}"))
            continue
        items.append(_Item(label, found, sub, system))
    if not items:
        raise FleetInputError(f"{source}: a folder with no vehicles: expected a {MANIFEST}, or subfolders each "
                              f"with a {SYSTEM} and {' or '.join(READINGS_NAMES)}")
    return items


# --------------------------------------------------------------------------------------------
# the dataset: month partitions
# --------------------------------------------------------------------------------------------

def _vehicle_dir(ds: _FS, name: str) -> str:
    return ds.join(f"vehicle={check_vehicle_name(name)}")


def _month_dir(ds: _FS, name: str, month: str) -> str:
    return f"{_vehicle_dir(ds, name)}/month={month}"


def _part_meta(ds: _FS, path: str) -> dict[str, str]:
    import pyarrow.parquet as pq

    md = pq.read_metadata(path, filesystem=ds.arrow).metadata or {}
    return {k.decode(errors="replace"): v.decode(errors="replace") for k, v in md.items()}


@dataclass
class _Parts:
    all: list[str]        # every part file's name in the month folder
    live: list[str]       # those no other part supersedes, oldest generation first
    generation: int       # the highest generation present


def _parts(ds: _FS, folder: str) -> _Parts:
    names = [n for n in ds.names(folder) if _PART.match(n)]
    if not names:
        return _Parts([], [], 0)
    if len(names) == 1:  # the usual case: no footer to read
        return _Parts(names, names, _generation(_part_meta(ds, f"{folder}/{names[0]}")))
    metas = {n: _part_meta(ds, f"{folder}/{n}") for n in names}
    superseded: set[str] = set()
    for m in metas.values():
        try:
            superseded.update(json.loads(m.get(META_SUPERSEDES, "[]")))
        except ValueError:
            pass
    live = [n for n in names if n not in superseded] or names
    live.sort(key=lambda n: (_generation(metas[n]), n))
    return _Parts(names, live, max(_generation(m) for m in metas.values()))


def _generation(meta: dict[str, str]) -> int:
    try:
        return int(meta.get(META_GENERATION, "0"))
    except ValueError:
        return 0


def _read_part(ds: _FS, path: str, lo: int | None = None, hi: int | None = None) -> _Block:
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    tab = pq.read_table(path, filesystem=ds.arrow, columns=["t", "channel", *VALUE_COLUMNS])
    t = np.asarray(pc.cast(tab.column("t"), pa.timestamp("us", tz="UTC")).cast(pa.int64()).to_numpy(), np.int64)
    ch = tab.column("channel").combine_chunks()
    if pa.types.is_dictionary(ch.type):
        ch = ch.dictionary_decode()
    enc = pc.dictionary_encode(ch)
    names = [str(x) for x in enc.dictionary.to_pylist()]
    codes = np.asarray(enc.indices.to_numpy(zero_copy_only=False), np.int32)
    vals = [np.asarray(pc.fill_null(pc.cast(tab.column(c), pa.float32()), float("nan")).to_numpy(), np.float32)
            for c in VALUE_COLUMNS]
    del tab
    if lo is not None or hi is not None:
        inside = np.ones(len(t), dtype=bool)
        if lo is not None:
            inside &= t >= lo
        if hi is not None:
            inside &= t < hi
        if not inside.all():
            t, codes, vals = t[inside], codes[inside], [v[inside] for v in vals]
    if sorted(names) == names and _sorted(codes, t):
        return _Block(names, codes, t, vals)  # as written: sorted, unique
    return _block_from_pieces(names, codes, t, vals)


def _sorted(codes: np.ndarray, t: np.ndarray) -> bool:
    if len(t) < 2:
        return True
    dc = np.diff(codes)
    return bool(((dc > 0) | ((dc == 0) & (np.diff(t) > 0))).all())


def _read_month(ds: _FS, folder: str, lo: int | None = None, hi: int | None = None) -> tuple[_Block, _Parts]:
    parts = _parts(ds, folder)
    block = _Block.empty()
    for k, name in enumerate(parts.live):  # normally one; several only if a foreign writer added one
        part = _read_part(ds, f"{folder}/{name}", lo, hi)
        block = part if k == 0 else _merge(block, part).block
    return block, parts


def _write_part(ds: _FS, folder: str, vehicle: str, month: str, block: _Block, parts: _Parts,
                timezone: str) -> str:
    """Write ``block`` as the month's one part (temporary name, rename, then remove the parts it
    supersedes); returns the part's name."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    from drawdown import __version__
    from drawdown.cli.commands.export import PARQUET_OPTIONS, SCHEMA_VERSION, SCHEMAS, Channels, _arrow_column, \
        _arrow_schema
    from drawdown.collector.parquet_file import META_KIND, META_PRODUCER, META_SCHEMA_VERSION, META_TIMEZONE

    name = f"part-{block.content_hash()}.parquet"
    meta = {META_PRODUCER: f"drawdown {__version__}", META_SCHEMA_VERSION: str(SCHEMA_VERSION),
            META_KIND: "readings", META_TIMEZONE: timezone, "drawdown.from": "", "drawdown.to": "",
            META_VEHICLE: vehicle, META_MONTH: month, META_GENERATION: str(parts.generation + 1),
            META_SUPERSEDES: json.dumps(sorted(n for n in parts.all if n != name))}
    schema = _arrow_schema("readings", meta)
    ds.fs.makedirs(folder, exist_ok=True)
    tmp = f"{folder}/.{name}.tmp-{uuid.uuid4().hex[:12]}"
    try:
        with pq.ParquetWriter(tmp, schema, filesystem=ds.arrow, **PARQUET_OPTIONS) as writer:
            for s0 in range(0, len(block), ROW_GROUP_ROWS):
                sl = slice(s0, s0 + ROW_GROUP_ROWS)
                data: dict[str, Any] = {"t": block.t[sl], "channel": Channels(block.codes[sl], list(block.names))}
                for j, c in enumerate(VALUE_COLUMNS):
                    data[c] = block.values[j][sl]
                writer.write_batch(pa.record_batch([_arrow_column("readings", col, data[col.name])
                                                    for col in SCHEMAS["readings"]], schema=schema))
        ds._rename(tmp, f"{folder}/{name}")
    finally:
        if ds.fs.exists(tmp):
            ds.fs.rm(tmp)
    for old in parts.all:  # only now: a reader saw the old month whole until the rename
        if old != name:
            ds.fs.rm(f"{folder}/{old}")
    return name


# --------------------------------------------------------------------------------------------
# the ingest record
# --------------------------------------------------------------------------------------------

def _load_ledger(ds: _FS) -> dict[str, Any]:
    path = ds.join(LEDGER)
    if not ds.isfile(path):
        return {"format": LEDGER_FORMAT, "version": LEDGER_VERSION, "vehicles": {}}
    try:
        doc = json.loads(ds.read_bytes(path).decode("utf-8"))
    except (ValueError, UnicodeDecodeError) as exc:
        raise FleetInputError(f"{ds.url}: its {LEDGER} is damaged ({exc}); move it aside to start a new record "
                              "(the readings themselves are in the month partitions)") from None
    if not isinstance(doc, dict) or not isinstance(doc.get("vehicles"), dict):
        raise FleetInputError(f"{ds.url}: its {LEDGER} is not a fleet dataset record")
    if int(doc.get("version", 0)) > LEDGER_VERSION:
        raise FleetInputError(f"{ds.url}: its {LEDGER} is version {doc.get('version')}, newer than this drawdown "
                              f"reads ({LEDGER_VERSION})")
    return doc


def _save_ledger(ds: _FS, doc: dict[str, Any]) -> None:
    ds.write_atomic(ds.join(LEDGER), (json.dumps(doc, indent=1, sort_keys=True) + "\n").encode("utf-8"))


def _now() -> str:
    return time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())


def _timezone(text: str | None) -> str:
    """The site timezone a system description names (for the part's metadata), else UTC."""
    if not text:
        return "UTC"
    try:
        tz = tomllib.loads(text).get("site", {}).get("timezone")
    except (tomllib.TOMLDecodeError, AttributeError):
        return "UTC"
    return tz if isinstance(tz, str) and tz else "UTC"


# --------------------------------------------------------------------------------------------
# ingest
# --------------------------------------------------------------------------------------------

def ingest(sources: Iterable[str | os.PathLike[str]], dataset: str | os.PathLike[str],
           vehicle: str | None = None) -> IngestResult:
    """Ingest vehicles' stores or Parquet readings exports (or folders of vehicles) into ``dataset``.

    ``vehicle`` names the vehicle of a single store or export (else: a manifest one folder up,
    the folder's name when it holds a system.toml or the file's name says nothing, else the
    file's stem; docs/fleet.md#vehicle-names). Sources are ingested in order, so a later one wins
    a reading two hold with different values. A source that cannot be read is a result with its
    ``error``; it never stops the others. FleetInputError only for a bad ``vehicle`` name or a
    dataset that cannot be used at all.
    """
    srcs = [os.fspath(s) for s in sources]
    if vehicle is not None:
        check_vehicle_name(vehicle)
        if len(srcs) > 1:
            raise FleetInputError("--vehicle names the vehicle of one store or export; give one SRC with it")
    ds = _FS(dataset)
    try:
        if ds.fs.exists(ds.root) and not ds.isdir(ds.root):
            raise FleetInputError(f"{ds.url}: is a file; the dataset is a folder")
        ds.fs.makedirs(ds.root, exist_ok=True)
        ledger = _load_ledger(ds)
    except OSError as exc:
        raise FleetInputError(f"{ds.url}: cannot use it as the dataset ({exc.strerror or exc})") from None
    result = IngestResult(dataset=ds.url)
    for source in srcs:
        try:
            fs = _FS(source)
            items = _items(fs, source, vehicle)
        except FleetInputError as exc:
            result.sources.append(SourceResult(source=source, error=str(exc)))
            continue
        except OSError as exc:
            result.sources.append(SourceResult(source=source, error=f"{source}: cannot read it ({exc})"))
            continue
        for item in items:
            result.sources.append(_ingest_one(ds, fs, item, ledger))
    return result


def _ingest_one(ds: _FS, fs: _FS, item: _Item, ledger: dict[str, Any]) -> SourceResult:
    import pyarrow as pa

    from drawdown.collector.store import StoreError

    res = SourceResult(source=item.label, vehicle=item.vehicle)
    if item.error is not None:
        res.error = item.error
        return res
    src: _Source | None = None
    try:
        assert item.vehicle is not None  # every item without an error names its vehicle
        name = check_vehicle_name(item.vehicle)
        res.sha256 = _sha256(fs, item.path)
        src = _open_source(fs, item.path, item.label)
        res.kind = src.kind
        system_text = _read_system(fs, item)
        entry = ledger["vehicles"].setdefault(name, {"sources": []})
        earlier = next((s for s in entry["sources"] if s.get("sha256") == res.sha256), None)
        if earlier is not None:  # the very same file: nothing to read
            res.already_ingested = True
            res.rows = int(earlier.get("rows", 0))
            res.rows_already_held = res.rows
            res.months = list(earlier.get("months", []))
        else:
            res.rows = src.rows()
            res.months = src.months()
            if not res.months:
                raise FleetInputError(f"{item.label}: holds no readings")
            tz = _timezone(system_text if system_text is not None else _dataset_system(ds, name))
            for month in res.months:
                folder = _month_dir(ds, name, month)
                new = src.month(month)
                if not len(new):
                    continue
                old, parts = _read_month(ds, folder)
                merged = _merge(old, new)
                del old, new
                res.rows_added += merged.added
                res.rows_already_held += merged.held
                res.rows_replaced += merged.replaced
                if merged.added or merged.replaced or len(parts.all) != 1:
                    _write_part(ds, folder, name, month, merged.block, parts, tz)
                    res.months_rewritten.append(month)
            entry["sources"].append({"source": item.label, "sha256": res.sha256, "kind": res.kind,
                                     "ingested_at": _now(), "rows": res.rows, "rows_added": res.rows_added,
                                     "rows_already_held": res.rows_already_held, "rows_replaced": res.rows_replaced,
                                     "months": res.months})
        if system_text is not None:  # after the readings: a source that fails leaves the system as it was
            _put_system(ds, fs, item, system_text, res)
            entry["system_sha256"] = hashlib.sha256(system_text.encode("utf-8")).hexdigest()
            entry["system_source"] = res.system_source
        _save_ledger(ds, ledger)
    except FleetInputError as exc:
        res.error = str(exc)
    except (StoreError, pa.ArrowException) as exc:
        res.error = f"{item.label}: cannot read it ({exc})"
    except OSError as exc:
        res.error = f"{item.label}: {exc.strerror or exc}"
    finally:
        if src is not None:
            src.close()
    if res.error is not None and item.vehicle in ledger["vehicles"] and not ledger["vehicles"][item.vehicle]["sources"]:
        del ledger["vehicles"][item.vehicle]  # nothing of this vehicle was ingested
    return res


def _dataset_system(ds: _FS, name: str) -> str | None:
    path = f"{_vehicle_dir(ds, name)}/{SYSTEM}"
    return ds.read_bytes(path).decode("utf-8", errors="replace") if ds.isfile(path) else None


def _read_system(fs: _FS, item: _Item) -> str | None:
    """The text of the system.toml beside the source, or None when there is none."""
    if item.system is None:
        return None
    try:
        return fs.read_bytes(item.system).decode("utf-8-sig")
    except UnicodeDecodeError:
        raise FleetInputError(f"{item.system}: the system description is not UTF-8 text") from None


def _put_system(ds: _FS, fs: _FS, item: _Item, text: str, res: SourceResult) -> None:
    """Keep ``text`` as the vehicle's system.toml beside its partitions (the latest ingested wins)."""
    assert item.vehicle is not None and item.system is not None
    before = _dataset_system(ds, item.vehicle)
    res.system_source = item.system_label or _label(fs, fs.url, item.system)
    if before == text:
        res.system = "unchanged"
        return
    ds.write_atomic(f"{_vehicle_dir(ds, item.vehicle)}/{SYSTEM}", text.encode("utf-8"))
    res.system = "new" if before is None else "changed"


# --------------------------------------------------------------------------------------------
# reading the dataset
# --------------------------------------------------------------------------------------------

def vehicles(dataset: str | os.PathLike[str]) -> list[str]:
    """The vehicles the dataset holds, sorted by name."""
    ds = _FS(dataset)
    out = []
    for n in ds.names(ds.root):
        if n.startswith("vehicle=") and _NAME.match(n[len("vehicle="):]) and ds.isdir(ds.join(n)):
            out.append(n[len("vehicle="):])
    return out


def vehicle_system_text(dataset: str | os.PathLike[str], name: str) -> str:
    """The vehicle's system description (the last ingested); FileNotFoundError when none was."""
    ds = _FS(dataset)
    text = _dataset_system(ds, name)
    if text is None:
        raise FileNotFoundError(f"{ds.url}: vehicle {name!r} has no {SYSTEM} in the dataset (ingest it from a "
                                f"folder holding one beside the readings)")
    return text


def vehicle_months(dataset: str | os.PathLike[str], name: str) -> list[str]:
    """The UTC months (YYYY-MM) the dataset holds readings of for this vehicle."""
    ds = _FS(dataset)
    return _months(ds, name)


def month_rows(dataset: str | os.PathLike[str], name: str) -> dict[str, int]:
    """Readings per UTC month (YYYY-MM) of one vehicle, from the live parts' Parquet footers
    (no data read): what a task reading those months will hold in memory. Several live parts
    of one month (a foreign writer's) count in full, an upper bound."""
    import pyarrow.parquet as pq

    ds = _FS(dataset)
    out: dict[str, int] = {}
    for month in _months(ds, name):
        folder = _month_dir(ds, name, month)
        out[month] = sum(pq.read_metadata(f"{folder}/{n}", filesystem=ds.arrow).num_rows
                         for n in _parts(ds, folder).live)
    return out


def _months(ds: _FS, name: str) -> list[str]:
    out = []
    for n in ds.names(_vehicle_dir(ds, name)):
        m = _MONTH.match(n)
        if m:
            out.append(m.group(1))
    return sorted(out)


def _bound_us(value: Any) -> int | None:
    if value is None:
        return None
    import pandas as pd

    ts = pd.Timestamp(value)
    ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
    return int((ts - pd.Timestamp(0, tz="UTC")) // pd.Timedelta(microseconds=1))


def iter_vehicle_months(dataset: str | os.PathLike[str], name: str, start: Any = None, end: Any = None
                        ) -> Iterator[tuple[str, list[str], np.ndarray, np.ndarray, list[np.ndarray]]]:
    """One vehicle's readings a month at a time: ``(month, names, codes, t_us, values)`` (sorted by
    channel then time within the month; ``values`` float32 in VALUE_COLUMNS order)."""
    ds = _FS(dataset)
    lo, hi = _bound_us(start), _bound_us(end)
    for month in _months(ds, name):
        m0, m1 = _month_bounds(month)
        if (hi is not None and m0 >= hi) or (lo is not None and m1 <= lo):
            continue
        block, _ = _read_month(ds, _month_dir(ds, name, month), lo, hi)
        if len(block):
            yield month, block.names, block.codes, block.t, block.values


def read_vehicle(dataset: str | os.PathLike[str], name: str, start: Any = None, end: Any = None) -> pd.DataFrame:
    """One vehicle's readings with ``start <= t < end`` as the canonical long frame of
    :meth:`collector.store.Store.read`: columns t (datetime64[us, UTC]), channel (categorical),
    float32 values, ordered by channel then time. ``start``/``end``: anything pandas.Timestamp
    accepts (naive is UTC) or None. Reads the vehicle's month partitions only."""
    check_vehicle_name(name)
    pieces: dict[str, list[tuple[np.ndarray, list[np.ndarray]]]] = {}
    for _month, names, codes, t, values in iter_vehicle_months(dataset, name, start, end):
        bounds = np.flatnonzero(np.diff(codes)) + 1
        for s, e in zip(np.concatenate([[0], bounds]), np.concatenate([bounds, [len(codes)]])):
            pieces.setdefault(names[int(codes[s])], []).append((t[s:e], [v[s:e] for v in values]))
    if not pieces:
        return empty_frame()
    import pandas as pd

    channels = sorted(pieces)
    total = sum(len(p[0]) for ch in channels for p in pieces[ch])
    t_out = np.empty(total, dtype=np.int64)
    codes_out = np.empty(total, dtype=np.int16)
    block = np.empty((len(VALUE_COLUMNS), total), dtype=np.float32)
    pos = 0
    for code, ch in enumerate(channels):
        for t, vals in pieces.pop(ch):  # months in time order: each channel's block stays sorted by time
            k = len(t)
            t_out[pos:pos + k] = t
            codes_out[pos:pos + k] = code
            for j, v in enumerate(vals):
                block[j, pos:pos + k] = v
            pos += k
    out = pd.DataFrame(block.T, columns=list(VALUE_COLUMNS), copy=False)
    out.insert(0, "channel", pd.Categorical.from_codes(codes_out, categories=channels))
    out.insert(0, "t", from_epoch_us(t_out))
    return out
