"""The live collector's run loop: one source, one batching writer, clean stop.

:func:`run_collector` starts the source in a thread of its own, flushes the
writer every half second in another, and returns when ``stop`` is set (the
command line sets it on SIGTERM/SIGINT), ``duration_s`` has passed, or the
source fails for good (:class:`collector.source.SourceUnavailable`, re-raised
here). A source that crashes on a bug is logged and restarted after a pause:
the collector runs unattended for weeks.

Maintenance runs in the writer's thread (the store connection is used by one
thread at a time): every ``maintain_every_s`` (2 min) live chunks older than
two minutes are compacted and, when ``keep_full_s`` is set, readings older than that are
downsampled to one-minute summaries (:mod:`collector.downsample`).
"""

from __future__ import annotations

import logging
import threading
import time
import traceback
from collections.abc import Callable
from dataclasses import dataclass

from drawdown.collector import downsample
from drawdown.collector.source import Source, SourceUnavailable
from drawdown.collector.writer import BatchWriter, WriterStats

log = logging.getLogger(__name__)


@dataclass
class CollectResult:
    """How a collector run ended."""

    stats: WriterStats
    seconds: float
    error: str | None = None


def run_collector(source: Source, writer: BatchWriter, *, stop: threading.Event | None = None,
                  duration_s: float | None = None, keep_full_s: float | None = None,
                  maintain_every_s: float = 120.0, summary_interval_s: int = 60,
                  on_note: Callable[[str], None] | None = None) -> CollectResult:
    """Run ``source`` into ``writer`` until stopped; flush and return the counters.

    Parameters
    ----------
    source
        The live source.
    writer
        The batching writer (it is also the source's sink).
    stop
        Set it to stop (from a signal handler or another thread).
    duration_s
        Stop after this many seconds [s]; None runs until stopped.
    keep_full_s
        Full-resolution window [s]; older live readings become summaries.
        None keeps everything.
    maintain_every_s
        Interval of the maintenance jobs [s].

    Raises
    ------
    SourceUnavailable
        When the source cannot run on this computer (after flushing).
    """
    stop = stop or threading.Event()
    t0 = time.monotonic()
    failure: list[BaseException] = []

    def source_thread() -> None:
        while not stop.is_set():
            try:
                source.run(writer, stop)
                return
            except SourceUnavailable as exc:
                failure.append(exc)
                stop.set()
                return
            except Exception:  # noqa: BLE001 - keep collecting; the trace says what to report
                writer.note(f"{source.name}: source crashed, restarting in 2 s:\n{traceback.format_exc()}")
                if stop.wait(2.0):
                    return

    last_maint = time.monotonic()

    def writer_thread() -> None:
        nonlocal last_maint
        while not stop.wait(writer.flush_interval_s):
            writer.flush()
            if time.monotonic() - last_maint >= maintain_every_s:
                last_maint = time.monotonic()
                try:
                    maintain(writer, keep_full_s=keep_full_s, summary_interval_s=summary_interval_s)
                except Exception:  # noqa: BLE001 - maintenance must never stop collection
                    writer.note(f"maintenance failed (collection continues):\n{traceback.format_exc()}")

    src = threading.Thread(target=source_thread, name=f"drawdown-{source.name}", daemon=True)
    wrt = threading.Thread(target=writer_thread, name="drawdown-writer", daemon=True)
    src.start()
    wrt.start()
    try:
        while not stop.is_set():
            remaining = None if duration_s is None else duration_s - (time.monotonic() - t0)
            if remaining is not None and remaining <= 0:
                break
            stop.wait(0.5 if remaining is None else min(0.5, remaining))
    finally:
        stop.set()
        src.join(timeout=5.0)
        wrt.join(timeout=10.0)
        writer.flush()
    if failure:
        raise failure[0]
    return CollectResult(stats=writer.stats, seconds=time.monotonic() - t0)


def maintain(writer: BatchWriter, *, keep_full_s: float | None, summary_interval_s: int = 60) -> None:
    """Compact older live chunks; downsample beyond ``keep_full_s`` (called from the writer thread)."""
    store = writer.store
    ranges = writer.correctable_chunk_ids
    # chunks the writer may still have to shift after a clock jump are merged among themselves,
    # and the writer adopts the merged ones; all other live chunks are merged freely
    downsample.compact(store, older_than_s=120.0, exclude_id_ranges=ranges)
    if ranges:
        writer.adopt_chunks(downsample.compact(store, older_than_s=120.0, only_id_ranges=ranges))
    if keep_full_s is not None:
        res = downsample.downsample(store, keep_full_s=keep_full_s, interval_s=summary_interval_s)
        if res.rows_summarised:
            log.info("downsampled %d readings into %d summaries", res.rows_summarised, res.intervals_written)
