"""The reading store: SQLite in WAL mode, readings kept as columnar chunks.

Why chunks and not one SQL row per reading: a year of 1 Hz logging on three
channels is ~95 million readings. As SQL rows that is tens of GB and minutes to
read a month back; as per-channel chunks of numpy arrays (time as int64
microseconds, values as float32, an all-missing column stored as NULL) a month
reads back in a fraction of a second and a year fits in ~2 GB. SQLite still
gives us what matters: atomic transactions, crash safety, WAL so the dashboard
reads while the collector writes, and one file a user can copy.

Tables
------
chunks   (channel, t_first_us, t_last_us, n, t, voltage_V, current_A,
          temperature_C, soc_pct, import_id)   -- append-only
imports  (path, sha256, rows_stored, rows_rejected, imported_at, summary_json)
events   (t_us, kind, detail_json)  -- collector outages, clock jumps, notes

A reading repeated in several chunks (the same channel and timestamp, e.g. two
overlapping logs) is returned once, the newest write winning.
"""

from __future__ import annotations

import contextlib
import errno
import json
import os
import shutil
import sqlite3
import time
from collections.abc import Iterable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Any

import numpy as np

from drawdown.collector.canonical import VALUE_COLUMNS, empty_frame, from_epoch_us, to_epoch_us

if TYPE_CHECKING:  # pandas loads on first use (reading a frame back), not to open a store and write
    import pandas as pd

#: 1: times as raw int64 blobs. 2: a chunk's times may also be encoded (see encode_times); a
#: store of either version is read by this code, and opening a version-1 store to write marks it 2.
SCHEMA_VERSION = 2
MAX_CHUNK = 86_400  # samples per chunk: one day at 1 Hz

_SCHEMA = """
CREATE TABLE IF NOT EXISTS meta (key TEXT PRIMARY KEY, value TEXT NOT NULL);
CREATE TABLE IF NOT EXISTS imports (
    id INTEGER PRIMARY KEY,
    path TEXT NOT NULL,
    sha256 TEXT NOT NULL,
    rows_stored INTEGER NOT NULL,
    rows_rejected INTEGER NOT NULL,
    imported_at TEXT NOT NULL,
    summary_json TEXT NOT NULL
);
CREATE INDEX IF NOT EXISTS imports_sha ON imports (sha256);
CREATE TABLE IF NOT EXISTS chunks (
    id INTEGER PRIMARY KEY,
    channel TEXT NOT NULL,
    t_first_us INTEGER NOT NULL,
    t_last_us INTEGER NOT NULL,
    n INTEGER NOT NULL,
    t BLOB NOT NULL,
    voltage_V BLOB,
    current_A BLOB,
    temperature_C BLOB,
    soc_pct BLOB,
    import_id INTEGER REFERENCES imports (id)
);
CREATE INDEX IF NOT EXISTS chunks_span ON chunks (channel, t_first_us, t_last_us);
CREATE INDEX IF NOT EXISTS chunks_last ON chunks (t_last_us);
CREATE TABLE IF NOT EXISTS events (
    id INTEGER PRIMARY KEY,
    t_us INTEGER NOT NULL,
    kind TEXT NOT NULL,
    detail_json TEXT NOT NULL
);
"""


def encode_times(t: np.ndarray) -> bytes:
    """A chunk's sorted times [int64 us] as a blob: most loggers sample on a fixed step, and the
    times were half the bytes written (and fsynced) per reading.

    * evenly spaced (every step the same): 16 bytes, the first time and the step;
    * nearly even (a few gaps or odd steps): zlib (level 1) of the steps, when that is shorter;
    * otherwise the raw little-endian int64 array (``8 * n`` bytes, the version-1 layout).

    :func:`decode_times` tells them apart by length, so the layouts never collide.
    """
    import zlib

    t = np.ascontiguousarray(t, dtype="<i8")
    n = len(t)
    raw_len = 8 * n
    if n > 2:
        d = np.diff(t)
        if bool((d == d[0]).all()):
            return np.array([t[0], d[0]], dtype="<i8").tobytes()
        if np.count_nonzero(d != np.median(d)) * 64 < n:  # zlib is fast only on such runs
            z = zlib.compress(np.concatenate([t[:1], d]).astype("<i8").tobytes(), 1)
            if len(z) < raw_len - 16 and len(z) != 16:
                return z
    return t.tobytes()


def decode_times(blob: bytes, n: int) -> np.ndarray:
    """The ``n`` times [int64 us] of a chunk's time blob, whichever layout :func:`encode_times` chose."""
    if len(blob) == 8 * n:
        return np.frombuffer(blob, dtype="<i8")
    if len(blob) == 16:
        t0, step = np.frombuffer(blob, dtype="<i8")
        return t0 + step * np.arange(n, dtype=np.int64)
    import zlib

    t = np.cumsum(np.frombuffer(zlib.decompress(blob), dtype="<i8"))
    if len(t) != n:
        raise ValueError(f"a chunk's time blob holds {len(t)} times, its row says {n}")
    return t


def _utc_array(t_us: np.ndarray) -> pd.arrays.DatetimeArray:
    """int64 microseconds to a tz-aware array without a copy (0.4 ms vs 0.3 s for 8 M)."""
    import pandas as pd

    return pd.arrays.DatetimeArray._simple_new(t_us.view("M8[us]"), dtype=pd.DatetimeTZDtype("us", "UTC"))


def _merge_overlapping(rows: list[tuple], s_us: int | None, e_us: int | None
                       ) -> tuple[np.ndarray, list[np.ndarray]]:
    """One channel's chunks that overlap in time: sort, newest write wins per time."""
    t = np.concatenate([decode_times(r[3], r[0]) for r in rows])
    vals = [np.concatenate([np.frombuffer(r[4 + j], dtype="<f4") if r[4 + j] is not None
                            else np.full(r[0], np.nan, dtype="<f4") for r in rows])
            for j in range(len(VALUE_COLUMNS))]
    order = np.argsort(t, kind="stable")
    t = t[order]
    keep = np.ones(len(t), dtype=bool)
    keep[:-1] = t[1:] != t[:-1]  # last of each run of equal times = newest chunk
    if s_us is not None:
        keep &= t >= s_us
    if e_us is not None:
        keep &= t < e_us
    idx = order[keep]
    return t[keep], [v[idx] for v in vals]


class StoreError(RuntimeError):
    """The store file cannot be opened or used; the message names the file."""


def _is_full(exc: BaseException) -> bool:
    code = getattr(exc, "sqlite_errorcode", None)
    return code == getattr(sqlite3, "SQLITE_FULL", 13) or "disk is full" in str(exc).lower() or \
        getattr(exc, "errno", None) == errno.ENOSPC


def _is_read_only(exc: BaseException) -> bool:
    code = getattr(exc, "sqlite_errorcode", None)
    base = code & 0xFF if isinstance(code, int) else None
    text = str(exc).lower()
    return base == getattr(sqlite3, "SQLITE_READONLY", 8) or "readonly" in text or "read-only" in text or \
        getattr(exc, "errno", None) in (errno.EROFS, errno.EACCES, errno.EPERM)


def describe_store_error(path: Path, exc: BaseException, *, doing: str = "open the store") -> str:
    """A plain-words message for a store that cannot be used: read-only, disk full, or not a store."""
    # SQLite often says only "unable to open database file" (it cannot make its -wal/-shm files):
    # look at the file system to say why.
    folder = path.parent if str(path.parent) else Path(".")
    try:
        full = shutil.disk_usage(folder if folder.exists() else Path(".")).free < (1 << 20)
    except OSError:
        full = False
    cannot_write = (path.exists() and not os.access(path, os.W_OK)) or \
        (folder.exists() and not os.access(folder, os.W_OK))
    if _is_full(exc) or (full and not _is_read_only(exc)):
        return (f"{path}: cannot {doing}: the disk is full ({exc}). Free some space on "
                f"{path.parent} (or move the store with --store) and try again; nothing was changed.")
    if _is_read_only(exc) or cannot_write:
        return (f"{path}: cannot {doing}: the store is read-only here (a read-only file system, or "
                f"another user's file) ({exc}). Reading commands such as 'drawdown status' still work; "
                f"to change it, copy the store somewhere writable and use --store.")
    text = str(exc).lower()
    if "not a database" in text or "malformed" in text:
        return f"{path}: cannot {doing} ({exc}): it is not a drawdown store, or it is damaged"
    return f"{path}: cannot {doing} ({exc}); is it a drawdown store?"


def _ro_uri(path: Path, *, immutable: bool = False) -> str:
    from urllib.parse import quote

    return f"file:{quote(str(path.resolve()))}?{'immutable=1' if immutable else 'mode=ro'}"


def _ts_us(value: Any) -> int | None:
    if value is None:
        return None
    import pandas as pd

    ts = pd.Timestamp(value)
    if ts.tzinfo is None:
        ts = ts.tz_localize("UTC")
    return int((ts.tz_convert("UTC") - pd.Timestamp(0, tz="UTC")) // pd.Timedelta(microseconds=1))


class Store:
    """A drawdown reading store in one SQLite file.

    Parameters
    ----------
    path
        The database file; created (with its folder) when missing.
    synchronous
        SQLite ``synchronous`` pragma. ``"NORMAL"`` (default) is safe against
        a crashed process in WAL mode; ``"FULL"`` also makes every commit
        durable across a power cut (the live collector uses it).
    read_only
        Open an existing store for reading only (``mode=ro``): nothing is created or written, so
        it works on a read-only file system or another user's file. Where SQLite cannot even
        make its shared-memory file beside the store (a read-only folder) the file is opened
        ``immutable``, which is right because then nobody can be writing it either.
    """

    def __init__(self, path: str | Path, *, synchronous: str = "NORMAL", timeout_s: float = 30.0,
                 read_only: bool = False):
        self.path = Path(path)
        self.read_only = read_only
        self._depth = 0
        if read_only:
            self._db = self._open_read_only(timeout_s)
            return
        try:
            self.path.parent.mkdir(parents=True, exist_ok=True)
            self._db = sqlite3.connect(self.path, timeout=timeout_s, isolation_level=None,
                                       check_same_thread=False)
            self._db.execute("PRAGMA journal_mode=WAL")
            self._db.execute(f"PRAGMA synchronous={synchronous}")
            self._db.execute(f"PRAGMA busy_timeout={int(timeout_s * 1000)}")
            self._db.executescript(_SCHEMA)
            # Write only when missing: an INSERT needs the write lock, so opening a second
            # connection (a reader) while an import holds a transaction would wait and fail.
            row = self._db.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()
            if row is None or row[0] != str(SCHEMA_VERSION):  # new, or version 1: chunks written now may encode times
                self._db.execute("INSERT OR REPLACE INTO meta VALUES ('schema_version', ?)", (str(SCHEMA_VERSION),))
        except (sqlite3.DatabaseError, OSError) as exc:
            raise StoreError(describe_store_error(self.path, exc)) from exc

    def _open_read_only(self, timeout_s: float) -> sqlite3.Connection:
        if not self.path.is_file():
            raise StoreError(f"{self.path}: no store there (nothing imported yet?)")
        last: BaseException | None = None
        for immutable in (False, True):
            try:
                db = sqlite3.connect(_ro_uri(self.path, immutable=immutable), uri=True, timeout=timeout_s,
                                     isolation_level=None, check_same_thread=False)
                db.execute(f"PRAGMA busy_timeout={int(timeout_s * 1000)}")
                tables = {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type='table'")}
            except sqlite3.DatabaseError as exc:
                last = exc
                text = str(exc).lower()
                if "not a database" in text or "malformed" in text:
                    break
                continue
            if not {"chunks", "imports"} <= tables:
                db.close()
                raise StoreError(f"{self.path}: it is an SQLite file but not a drawdown store "
                                 f"(no readings tables)")
            return db
        raise StoreError(describe_store_error(self.path, last or OSError("cannot open"))) from last

    # -- lifecycle ---------------------------------------------------------
    def close(self) -> None:
        self._db.close()

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    @property
    def quarantine_dir(self) -> Path:
        """Where rejected input lines are kept, beside the store."""
        return self.path.parent / "quarantine"

    @contextlib.contextmanager
    def transaction(self) -> Iterator[None]:
        """Group writes atomically; nested use joins the outer transaction."""
        if self._depth == 0:
            self._db.execute("BEGIN IMMEDIATE")
        self._depth += 1
        try:
            yield
        except BaseException:
            self._depth -= 1
            if self._depth == 0:
                self._db.execute("ROLLBACK")
            raise
        else:
            self._depth -= 1
            if self._depth == 0:
                self._db.execute("COMMIT")

    # -- writing -----------------------------------------------------------
    def append(self, frame: pd.DataFrame, *, import_id: int | None = None) -> int:
        """Append a canonical frame (see collector.canonical); returns rows written.

        Rows are grouped by channel, sorted by time and written as chunks in
        one transaction.
        """
        if frame.empty:
            return 0
        t_all = to_epoch_us(frame["t"])
        channels = frame["channel"].astype(str).to_numpy()
        written = 0
        with self.transaction():
            for name in dict.fromkeys(channels.tolist()):  # first-seen order, as pandas.unique
                mask = channels == name
                t = t_all[mask]
                order = np.argsort(t, kind="stable")
                t = t[order]
                cols = {}
                for col in VALUE_COLUMNS:
                    if col in frame.columns:
                        cols[col] = frame[col].to_numpy(dtype="float64", na_value=np.nan)[mask][order]
                for start in range(0, len(t), MAX_CHUNK):
                    sl = slice(start, start + MAX_CHUNK)
                    self._write_chunk(str(name), t[sl], {k: v[sl] for k, v in cols.items()}, import_id)
                written += len(t)
        return written

    def append_arrays(self, channel: str, t_us: np.ndarray, values: dict[str, np.ndarray], *,
                      import_id: int | None = None) -> int:
        """Fast path: one channel's sorted int64-microsecond times and value arrays."""
        with self.transaction():
            for start in range(0, len(t_us), MAX_CHUNK):
                sl = slice(start, start + MAX_CHUNK)
                self._write_chunk(channel, t_us[sl], {k: v[sl] for k, v in values.items()}, import_id)
        return len(t_us)

    def _write_chunk(self, channel: str, t: np.ndarray, cols: dict[str, np.ndarray],
                     import_id: int | None) -> None:
        if len(t) == 0:
            return
        blobs: dict[str, bytes | None] = {}
        for col in VALUE_COLUMNS:
            arr = cols.get(col)
            if arr is None or np.isnan(arr).all():
                blobs[col] = None
            else:
                blobs[col] = np.ascontiguousarray(arr, dtype="<f4").tobytes()
        self._db.execute(
            "INSERT INTO chunks (channel, t_first_us, t_last_us, n, t, voltage_V, current_A,"
            " temperature_C, soc_pct, import_id) VALUES (?,?,?,?,?,?,?,?,?,?)",
            (channel, int(t[0]), int(t[-1]), len(t), encode_times(t),
             blobs["voltage_V"], blobs["current_A"], blobs["temperature_C"], blobs["soc_pct"], import_id),
        )

    # -- reading -----------------------------------------------------------
    def iter_pieces(self, start: Any = None, end: Any = None, *, channels: Iterable[str] | None = None
                    ) -> Iterator[tuple[str, np.ndarray, list[np.ndarray | None]]]:
        """The readings of :meth:`read` as pieces, without building a frame: ``(channel, times, values)``
        in channel then time order, times int64 UTC microseconds, ``values`` float32 arrays in
        ``VALUE_COLUMNS`` order (None where the piece has no such value). One channel's chunks
        are read at a time, so memory stays at about one channel's blobs (an export streams these)."""
        s_us, e_us = _ts_us(start), _ts_us(end)
        where = ""
        args: list[Any] = []
        if s_us is not None:
            where += " AND t_last_us >= ?"
            args.append(s_us)
        if e_us is not None:
            where += " AND t_first_us < ?"
            args.append(e_us)
        names = [r[0] for r in self._db.execute(f"SELECT DISTINCT channel FROM chunks WHERE 1=1{where}", args)]
        if channels is not None:
            wanted = set(channels)
            names = [n for n in names if n in wanted]
        for name in sorted(names):
            rows = self._db.execute(
                "SELECT n, t_first_us, t_last_us, t, voltage_V, current_A, temperature_C, soc_pct FROM chunks"
                f" WHERE channel = ?{where} ORDER BY t_first_us, id", [name, *args]).fetchall()
            overlapping = any(rows[i][1] <= rows[i - 1][2] for i in range(1, len(rows)))
            if overlapping:
                t, merged = _merge_overlapping(rows, s_us, e_us)
                if len(t):
                    yield name, t, list[np.ndarray | None](merged)
                continue
            for n, _first, _last, tb, *vb in rows:
                t = decode_times(tb, n)
                lo = 0 if s_us is None else int(np.searchsorted(t, s_us, side="left"))
                hi = n if e_us is None else int(np.searchsorted(t, e_us, side="left"))
                if hi <= lo:
                    continue
                yield name, t[lo:hi], [None if b is None else np.frombuffer(b, dtype="<f4")[lo:hi] for b in vb]

    def read(self, start: Any = None, end: Any = None, *,
             channels: Iterable[str] | None = None) -> pd.DataFrame:
        """Readings with ``start <= t < end`` as a canonical long frame.

        Rows come ordered by channel, then time (each channel's block is sorted
        by time). ``start``/``end`` are anything :class:`pandas.Timestamp`
        accepts (naive means UTC) or None for open ends.
        """
        names: list[str] = []
        # pieces: (code, t array, [value arrays or None]) already cut to the range
        pieces: list[tuple[int, np.ndarray, list[np.ndarray | None]]] = []
        for name, t, vals in self.iter_pieces(start, end, channels=channels):
            if not names or names[-1] != name:
                names.append(name)
            pieces.append((len(names) - 1, t, vals))
        if not pieces:
            return empty_frame()
        total = sum(len(p[1]) for p in pieces)
        t_out = np.empty(total, dtype=np.int64)
        codes = np.empty(total, dtype=np.int16)
        # float32: what the store holds (no invented precision), and half the memory of a
        # float64 frame on a year at 1 Hz. Analysis widens per slice where it needs to.
        block = np.empty((len(VALUE_COLUMNS), total), dtype=np.float32)
        pos = 0
        for code, t, vals in pieces:
            k = len(t)
            t_out[pos:pos + k] = t
            codes[pos:pos + k] = code
            for j, v in enumerate(vals):
                block[j, pos:pos + k] = np.nan if v is None else v
            pos += k
        # Build the frame around the arrays without copying them again.
        import pandas as pd

        out = pd.DataFrame(block.T, columns=list(VALUE_COLUMNS), copy=False)
        out.insert(0, "channel", pd.Categorical.from_codes(codes, categories=names))
        out.insert(0, "t", _utc_array(t_out))
        return out

    def held(self, channel: str, t_min_us: int, t_max_us: int) -> tuple[np.ndarray, list[np.ndarray]]:
        """One channel's readings held with ``t_min_us <= t <= t_max_us``: sorted distinct times
        (int64 microseconds) and the value arrays (float32, ``VALUE_COLUMNS`` order, NaN where
        missing), the newest write winning where chunks overlap."""
        rows = self._db.execute(
            "SELECT n, t_first_us, t_last_us, t, voltage_V, current_A, temperature_C, soc_pct FROM chunks"
            " WHERE channel = ? AND t_last_us >= ? AND t_first_us <= ? ORDER BY t_first_us, id",
            (channel, int(t_min_us), int(t_max_us))).fetchall()
        if not rows:
            return np.empty(0, np.int64), [np.empty(0, np.float32) for _ in VALUE_COLUMNS]
        return _merge_overlapping(rows, int(t_min_us), int(t_max_us) + 1)

    def channel_summary(self) -> dict[str, dict[str, Any]]:
        """Per channel: rows (distinct readings), first and last time (ISO 8601 UTC)."""
        meta: dict[str, list[tuple[int, int, int]]] = {}
        for name, first, last, n in self._db.execute(
                "SELECT channel, t_first_us, t_last_us, n FROM chunks ORDER BY channel, t_first_us"):
            meta.setdefault(name, []).append((first, last, n))
        out: dict[str, dict[str, Any]] = {}
        for name, chunks in meta.items():
            count = sum(c[2] for c in chunks)
            running_last = None
            overlapping = False
            for first, last, _n in chunks:
                if running_last is not None and first <= running_last:
                    overlapping = True
                    break
                running_last = last if running_last is None else max(running_last, last)
            if overlapping:
                # Overlapping chunks may repeat readings; count distinct times.
                count = len(self.read(channels=[name]))
            span = from_epoch_us(np.array([min(c[0] for c in chunks), max(c[1] for c in chunks)]))
            out[name] = {"rows": count, "first": span[0].isoformat(), "last": span[1].isoformat()}
        return out

    def time_span(self) -> tuple[pd.Timestamp, pd.Timestamp] | None:
        first, last = self._db.execute("SELECT MIN(t_first_us), MAX(t_last_us) FROM chunks").fetchone()
        if first is None:
            return None
        idx = from_epoch_us(np.array([first, last]))
        return idx[0], idx[1]

    # -- import log --------------------------------------------------------
    def find_import(self, sha256: str) -> dict[str, Any] | None:
        row = self._db.execute(
            "SELECT id, path, rows_stored, rows_rejected, imported_at, summary_json FROM imports"
            " WHERE sha256 = ? ORDER BY id LIMIT 1", (sha256,)).fetchone()
        if row is None:
            return None
        return {"id": row[0], "path": row[1], "rows_stored": row[2], "rows_rejected": row[3],
                "imported_at": row[4], "summary": json.loads(row[5])}

    def record_import(self, *, path: str, sha256: str, rows_stored: int, rows_rejected: int,
                      summary: dict[str, Any]) -> int:
        cur = self._db.execute(
            "INSERT INTO imports (path, sha256, rows_stored, rows_rejected, imported_at, summary_json)"
            " VALUES (?,?,?,?,?,?)",
            (path, sha256, int(rows_stored), int(rows_rejected),
             time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()), json.dumps(summary, default=str)))
        assert cur.lastrowid is not None  # an INSERT always sets it
        return int(cur.lastrowid)

    def update_import(self, import_id: int, *, rows_stored: int, rows_rejected: int,
                      summary: dict[str, Any]) -> None:
        self._db.execute("UPDATE imports SET rows_stored=?, rows_rejected=?, summary_json=? WHERE id=?",
                         (int(rows_stored), int(rows_rejected), json.dumps(summary, default=str), import_id))

    def imports(self) -> list[dict[str, Any]]:
        rows = self._db.execute(
            "SELECT id, path, sha256, rows_stored, rows_rejected, imported_at, summary_json FROM imports"
            " ORDER BY id").fetchall()
        return [{"id": r[0], "path": r[1], "sha256": r[2], "rows_stored": r[3], "rows_rejected": r[4],
                 "imported_at": r[5], "summary": json.loads(r[6])} for r in rows]

    # -- events (collector outages, clock jumps) ----------------------------
    def add_event(self, kind: str, detail: dict[str, Any], *, t: Any = None) -> None:
        t_us = _ts_us(t) if t is not None else int(time.time() * 1e6)
        self._db.execute("INSERT INTO events (t_us, kind, detail_json) VALUES (?,?,?)",
                         (t_us, kind, json.dumps(detail, default=str)))

    def events(self, kind: str | None = None) -> list[dict[str, Any]]:
        sql, args = "SELECT t_us, kind, detail_json FROM events", []
        if kind is not None:
            sql += " WHERE kind = ?"
            args.append(kind)
        rows = self._db.execute(sql + " ORDER BY t_us", args).fetchall()
        return [{"t": from_epoch_us(np.array([r[0]]))[0], "kind": r[1], "detail": json.loads(r[2])}
                for r in rows]

    def execute(self, sql: str, args: tuple = ()) -> sqlite3.Cursor:
        """Raw access for maintenance code in collector/ (downsampling, compaction)."""
        return self._db.execute(sql, args)
