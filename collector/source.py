"""The small interface every live source implements.

A live source (serial line, Bluetooth LE notifications, MQTT subscription)
turns what a device sends into :class:`Reading` objects and hands them to a
:class:`Sink`. The sink -- in production :class:`collector.writer.BatchWriter`
-- batches them into the store; the source never touches the store itself, so
tests and the benchmark can plug in any sink.

A source owns its own connection management: :meth:`Source.run` blocks until
``stop`` is set, reconnects with :class:`Backoff` after a drop and reports the
time it was disconnected with :meth:`Sink.outage`. It raises
:class:`SourceUnavailable` only for problems retrying cannot fix (no Bluetooth
stack on this computer, an unusable URL); the command line turns that into
exit code 2 with the message.

Times are UTC epoch seconds (float) inside the collector. A reading the device
did not time-stamp carries the host clock's time of arrival and
``host_stamped=True`` so that a clock jump can be corrected for it
(:mod:`collector.clock`).
"""

from __future__ import annotations

import math
import threading
from abc import ABC, abstractmethod
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Protocol

NAN = math.nan


@dataclass(slots=True)
class Reading:
    """One canonical reading of one channel (docs/contracts.md#canonical-reading).

    Attributes
    ----------
    t_s
        UTC time [s since 1970].
    channel
        Channel name (``battery``, ``solar``, ... or a user name).
    voltage_V, current_A, temperature_C, soc_pct
        Values in canonical units; NaN when not measured. ``current_A`` is
        positive into the bank.
    host_stamped
        True when ``t_s`` is the host clock's time of arrival (the device sent
        no time); such readings are shifted when the host clock jumps.
    """

    t_s: float
    channel: str
    voltage_V: float = NAN
    current_A: float = NAN
    temperature_C: float = NAN
    soc_pct: float = NAN
    host_stamped: bool = True

    def has_values(self) -> bool:
        """True when at least one value is present (not NaN)."""
        return not (math.isnan(self.voltage_V) and math.isnan(self.current_A)
                    and math.isnan(self.temperature_C) and math.isnan(self.soc_pct))


class Sink(Protocol):
    """Where a source delivers readings, rejected input and outages."""

    def put(self, readings: Sequence[Reading]) -> None:
        """Accept readings (called from the source's thread)."""

    def reject(self, text: str, reason: str, t_s: float) -> None:
        """Count and quarantine one malformed input (a line, a payload)."""

    def outage(self, start_s: float, end_s: float, reason: str) -> None:
        """The source was disconnected from ``start_s`` to ``end_s`` [UTC s]."""

    def note(self, message: str) -> None:
        """A human-readable progress or warning message (goes to stderr)."""


class SourceUnavailable(RuntimeError):
    """A source cannot run on this computer; the message says what is missing and the fix."""


class Source(ABC):
    """A live source of readings.

    Subclasses set :attr:`name` (used for the quarantine file
    ``collect-<name>.csv`` and in events) and implement :meth:`run`.
    """

    name: str = "source"

    @abstractmethod
    def run(self, sink: Sink, stop: threading.Event) -> None:
        """Deliver readings to ``sink`` until ``stop`` is set, reconnecting as needed.

        Raises
        ------
        SourceUnavailable
            When the source cannot work on this computer at all.
        """


class Backoff:
    """Reconnect delays: doubling from ``first_s`` up to ``cap_s``; reset after success.

    Parameters
    ----------
    first_s
        First delay [s].
    cap_s
        Largest delay [s]; a few seconds so a replugged adapter is picked up
        quickly (the issue asks for resuming within 5 s).
    """

    def __init__(self, *, first_s: float = 0.1, cap_s: float = 2.0):
        self.first_s = first_s
        self.cap_s = cap_s
        self._next = first_s

    def next_delay(self) -> float:
        """The delay to wait now [s]; the following one doubles (up to the cap)."""
        delay = self._next
        self._next = min(self._next * 2.0, self.cap_s)
        return delay

    def reset(self) -> None:
        self._next = self.first_s

    def wait(self, stop: threading.Event) -> bool:
        """Sleep the next delay unless stopped; True when ``stop`` was set."""
        return stop.wait(self.next_delay())


class ListSink:
    """A sink that keeps everything in lists (tests, benchmarks, dry runs)."""

    def __init__(self) -> None:
        self.readings: list[Reading] = []
        self.rejects: list[tuple[str, str, float]] = []
        self.outages: list[tuple[float, float, str]] = []
        self.notes: list[str] = []
        self._lock = threading.Lock()

    def put(self, readings: Sequence[Reading]) -> None:
        with self._lock:
            self.readings.extend(readings)

    def reject(self, text: str, reason: str, t_s: float) -> None:
        with self._lock:
            self.rejects.append((text, reason, t_s))

    def outage(self, start_s: float, end_s: float, reason: str) -> None:
        with self._lock:
            self.outages.append((start_s, end_s, reason))

    def note(self, message: str) -> None:
        with self._lock:
            self.notes.append(message)
