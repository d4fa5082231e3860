"""The batching writer between live sources and the store.

Survival rules it implements (issue 7):

* **Short commits.** Pending readings are committed every ``flush_interval_s``
  (0.25 s by default), so each commit holds about a quarter of a second of data
  and a power cut loses at most the last commit's worth (the collector opens
  the store with ``synchronous=FULL``, so a committed batch is on the disk).
* **Bounded memory.** When the store is briefly locked or unavailable (a long
  read holding it, a full disk, a slow SD card) readings wait in memory, at
  most ``max_pending`` of them; beyond that the *oldest* are dropped and
  counted, and a ``dropped`` event is written when the store is back.
* **Malformed input is never fatal.** Rejected lines are counted and appended
  to ``<store folder>/quarantine/collect-<source>.csv`` (columns ``time``,
  ``reason``, ``text``).
* **Outages become gap events** (``kind="gap"``: ``start``, ``end``,
  ``seconds``, ``reason``, ``source``) so the report can show where data is
  missing and why.
* **Clock jumps are corrected** for host-stamped readings (see
  :mod:`collector.clock`): pending readings are shifted in memory, committed
  ones are shifted in the store -- only chunks this writer wrote since the last
  jump and at most ``correct_window_s`` (2 h) back, found by their chunk ids;
  older host-stamped rows stay as they are, flagged by the ``clock_jump`` event.
"""

from __future__ import annotations

import csv
import logging
import math
import sqlite3
import threading
import time
from collections import deque
from collections.abc import Sequence
from dataclasses import dataclass, field
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import numpy as np

from drawdown.collector.clock import ClockJump, HostClock
from drawdown.collector.source import Reading
from drawdown.collector.store import decode_times, encode_times

log = logging.getLogger(__name__)


def utc(t_s: float) -> datetime:
    """UTC epoch seconds as an aware datetime (what Store.add_event expects)."""
    return datetime.fromtimestamp(t_s, timezone.utc)


@dataclass
class WriterStats:
    """Counters of a running writer (all since start)."""

    rows_written: int = 0
    rows_rejected: int = 0
    rows_dropped: int = 0
    commits: int = 0
    failed_commits: int = 0
    gaps: int = 0
    clock_jumps: int = 0
    rows_time_corrected: int = 0
    last_commit_s: float | None = None
    channels: set[str] = field(default_factory=set)

    def as_dict(self) -> dict[str, Any]:
        d = dict(self.__dict__)
        d["channels"] = sorted(self.channels)
        return d


class BatchWriter:
    """Collects readings from sources and commits them to a store in short transactions.

    Parameters
    ----------
    store
        An open :class:`collector.store.Store` (``synchronous="FULL"`` for
        the live collector).
    source_name
        Names the quarantine file and appears in events.
    clock
        The host clock the sources stamp with; checked for jumps at every flush.
    flush_interval_s
        Time between commits [s]; keep it below 1 s (issue 7: at most 1 s of
        data per commit).
    max_pending
        Largest number of readings held in memory while the store is unavailable.
    correct_window_s
        How far back a clock jump correction reaches into committed data [s].
    """

    def __init__(self, store: Any, *, source_name: str, clock: HostClock | None = None,
                 flush_interval_s: float = 0.25, max_pending: int = 200_000,
                 correct_window_s: float = 2 * 3600.0):
        self.store = store
        self.source_name = source_name
        self.clock = clock or HostClock()
        self.flush_interval_s = flush_interval_s
        self.max_pending = max_pending
        self.correct_window_s = correct_window_s
        self.stats = WriterStats()
        self._lock = threading.Lock()
        self._pending: deque[Reading] = deque()
        self._rejects: list[tuple[float, str, str]] = []
        self._events: list[tuple[str, dict[str, Any], float]] = []
        self._dropped_unreported = 0
        # [lo, hi, monotonic time started]: chunk ids holding host-stamped rows, last correct_window_s
        self._host_chunk_ranges: list[list[Any]] = []
        self._store_error: str | None = None
        self.notes: deque[str] = deque(maxlen=100)

    def _drop_beyond_bound(self) -> None:
        """Drop the oldest pending readings beyond ``max_pending``, counted (call with the lock held)."""
        over = len(self._pending) - self.max_pending
        if over > 0:
            for _ in range(over):
                self._pending.popleft()
            self.stats.rows_dropped += over
            self._dropped_unreported += over

    # -- the Sink interface ------------------------------------------------
    def put(self, readings: Sequence[Reading]) -> None:
        if not readings:
            return
        with self._lock:
            self._pending.extend(readings)
            self._drop_beyond_bound()

    def reject(self, text: str, reason: str, t_s: float) -> None:
        with self._lock:
            self.stats.rows_rejected += 1
            if len(self._rejects) < 10_000:  # bounded as well: a stream of noise must not grow memory
                self._rejects.append((t_s, reason, text[:500]))

    def outage(self, start_s: float, end_s: float, reason: str) -> None:
        detail = {"start": utc(start_s).isoformat(), "end": utc(end_s).isoformat(),
                  "seconds": round(end_s - start_s, 3), "reason": reason, "source": self.source_name}
        with self._lock:
            self.stats.gaps += 1
            self._events.append(("gap", detail, start_s))

    def note(self, message: str) -> None:
        self.notes.append(message)
        log.warning("%s", message)

    # -- committing --------------------------------------------------------
    @property
    def pending(self) -> int:
        return len(self._pending)

    @property
    def quarantine_path(self) -> Path:
        return Path(self.store.quarantine_dir) / f"collect-{self.source_name}.csv"

    def flush(self) -> int:
        """Commit what is pending (one transaction); returns readings written.

        A store error keeps the readings pending (bounded) and returns 0.
        """
        jump = self.clock.check()
        if jump is not None:
            self.on_clock_jump(jump)
        with self._lock:
            batch = list(self._pending)
            self._pending.clear()
            events = self._events
            self._events = []
            rejects = self._rejects
            self._rejects = []
            dropped = self._dropped_unreported
            self._dropped_unreported = 0
        if rejects:
            self._quarantine(rejects)
        if dropped:
            events.append(("dropped", {"rows": dropped, "source": self.source_name,
                                       "reason": "store unavailable and the in-memory queue was full"},
                           time.time()))
        if not batch and not events:
            return 0
        try:
            written = self._commit(batch, events)
        except sqlite3.Error as exc:
            self.stats.failed_commits += 1
            msg = f"store {self.store.path} unavailable ({exc}); holding {len(batch)} readings in memory"
            if self._store_error != str(exc):
                self.note(msg)
            self._store_error = str(exc)
            with self._lock:
                self._pending.extendleft(reversed(batch))
                self._events = events + self._events
                self._drop_beyond_bound()
            return 0
        if self._store_error is not None:
            self.note(f"store {self.store.path} available again")
            self._store_error = None
        return written

    def _commit(self, batch: list[Reading], events: list[tuple[str, dict[str, Any], float]]) -> int:
        groups: dict[tuple[str, bool], list[Reading]] = {}
        for r in batch:
            groups.setdefault((r.channel, r.host_stamped), []).append(r)
        # host-stamped groups first, so their chunk ids form one range per commit
        keys = sorted(groups, key=lambda k: (not k[1], k[0]))
        written = 0
        host_lo = host_hi = None
        with self.store.transaction():
            if any(k[1] for k in keys):
                host_lo = int(self.store.execute("SELECT COALESCE(MAX(id), 0) FROM chunks").fetchone()[0]) + 1
            for key in keys:
                rows = groups[key]
                t_us = np.fromiter((round(r.t_s * 1e6) for r in rows), dtype=np.int64, count=len(rows))
                vals = {
                    "voltage_V": np.fromiter((r.voltage_V for r in rows), dtype=np.float64, count=len(rows)),
                    "current_A": np.fromiter((r.current_A for r in rows), dtype=np.float64, count=len(rows)),
                    "temperature_C": np.fromiter((r.temperature_C for r in rows), dtype=np.float64,
                                                 count=len(rows)),
                    "soc_pct": np.fromiter((r.soc_pct for r in rows), dtype=np.float64, count=len(rows)),
                }
                order = np.argsort(t_us, kind="stable")
                t_us = t_us[order]
                # one reading per (channel, time): the last one received wins
                keep = np.ones(len(t_us), dtype=bool)
                keep[:-1] = t_us[1:] != t_us[:-1]
                t_us = t_us[keep]
                vals = {k: v[order][keep] for k, v in vals.items()}
                written += self.store.append_arrays(key[0], t_us, vals)
                if key[1]:
                    host_hi = int(self.store.execute("SELECT last_insert_rowid()").fetchone()[0])
            for kind, detail, t_s in events:
                self.store.add_event(kind, detail, t=utc(t_s))
        mono = time.monotonic()
        if host_lo is not None and host_hi is not None and host_hi >= host_lo:
            last = self._host_chunk_ranges[-1] if self._host_chunk_ranges else None
            # extend the current range; start a new one every 10 minutes so old ones can be pruned
            if last is not None and last[1] == host_lo - 1 and mono - last[2] < 600.0:
                last[1] = host_hi
            else:
                self._host_chunk_ranges.append([host_lo, host_hi, mono])
        # ranges older than the correction window are no longer corrected (compaction may merge them)
        while self._host_chunk_ranges and mono - self._host_chunk_ranges[0][2] > self.correct_window_s:
            self._host_chunk_ranges.pop(0)
        self.stats.rows_written += written
        self.stats.commits += 1
        self.stats.last_commit_s = time.time()
        self.stats.channels.update(k[0] for k in keys)
        return written

    @property
    def correctable_chunk_ids(self) -> list[tuple[int, int]]:
        """Chunk id ranges a clock jump would still correct (maintenance must not rewrite them)."""
        return [(r[0], r[1]) for r in self._host_chunk_ranges]

    def adopt_chunks(self, ids: list[int]) -> None:
        """Track chunks made by compacting correctable ones (so a clock jump still shifts them)."""
        mono = time.monotonic()
        for cid in ids:
            self._host_chunk_ranges.append([cid, cid, mono])
        self._host_chunk_ranges.sort(key=lambda r: r[2])

    def _quarantine(self, rejects: list[tuple[float, str, str]]) -> None:
        path = self.quarantine_path
        try:
            path.parent.mkdir(parents=True, exist_ok=True)
            new = not path.exists()
            with path.open("a", newline="", encoding="utf-8") as fh:
                w = csv.writer(fh)
                if new:
                    w.writerow(["time", "reason", "text"])
                w.writerows([(utc(t).isoformat(), reason, text) for t, reason, text in rejects])
        except OSError as exc:
            self.note(f"cannot write the quarantine file {path} ({exc}); {len(rejects)} rejected lines counted only")

    # -- clock jumps -------------------------------------------------------
    def on_clock_jump(self, jump: ClockJump) -> None:
        """Shift host-stamped readings stamped with the old clock by ``jump.delta_s``."""
        old_now = jump.detected_at_s - jump.delta_s
        moved = 0
        with self._lock:
            for r in self._pending:
                # stamped with the old clock when closer to the old 'now' than to the new one
                if r.host_stamped and abs(r.t_s - old_now) < abs(r.t_s - jump.detected_at_s):
                    r.t_s += jump.delta_s
                    moved += 1
        delta_us = int(round(jump.delta_s * 1e6))
        ranges = self._host_chunk_ranges
        self._host_chunk_ranges = []
        moved_store = 0
        if ranges:
            try:
                with self.store.transaction():
                    for lo, hi, _started in ranges:
                        rows = self.store.execute(
                            "SELECT id, n, t FROM chunks WHERE id BETWEEN ? AND ? AND import_id IS NULL",
                            (lo, hi)).fetchall()
                        for cid, n, blob in rows:
                            t = decode_times(blob, n) + delta_us
                            self.store.execute(
                                "UPDATE chunks SET t = ?, t_first_us = ?, t_last_us = ? WHERE id = ?",
                                (encode_times(t), int(t[0]), int(t[-1]), cid))
                            moved_store += len(t)
            except sqlite3.Error as exc:
                self.note(f"clock jump of {jump.delta_s:+.1f} s: could not correct stored readings ({exc});"
                          " they stay flagged by the clock_jump event")
        self.stats.clock_jumps += 1
        self.stats.rows_time_corrected += moved + moved_store
        detail = {"delta_s": round(jump.delta_s, 3), "source": self.source_name,
                  "corrected_rows": moved + moved_store, "policy": "host-stamped readings since the "
                  "previous jump shifted by delta_s (the new clock is taken as right)",
                  "old_clock_from": utc(jump.old_anchor_s).isoformat() if math.isfinite(jump.old_anchor_s)
                  else None}
        with self._lock:
            self._events.append(("clock_jump", detail, jump.detected_at_s))
        self.note(f"host clock jumped {jump.delta_s:+.1f} s; corrected {moved + moved_store} readings")

    # -- the thread --------------------------------------------------------
    def run(self, stop: threading.Event) -> None:
        """Flush every ``flush_interval_s`` until ``stop`` is set, then flush once more."""
        while not stop.wait(self.flush_interval_s):
            self.flush()
        self.flush()
