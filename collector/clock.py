"""The host clock, with clock-jump detection.

A small computer without a real-time clock boots with a wrong wall clock (the
time it last shut down, or 1970) and *steps* it when NTP or GPS syncs. The
monotonic clock (``time.monotonic()``) never steps. The collector therefore
stamps readings with ``anchor_wall + (monotonic - anchor_mono)`` -- wall time
carried forward by the monotonic clock -- and compares that prediction with
``time.time()``: a difference larger than ``threshold_s`` is a step of the
wall clock (slewing by NTP moves both clocks, so it is not mistaken for one).

Policy: the **new** wall clock is taken as right (a step is almost always a
sync). Readings stamped by the host since the previous anchor are *corrected*:
shifted by the step, in memory and in the store
(:meth:`collector.writer.BatchWriter.on_clock_jump`), and a ``clock_jump``
event records the step and how many readings moved. Readings that carry the
device's own time are never touched.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass


@dataclass(frozen=True)
class ClockJump:
    """A step of the host wall clock.

    Attributes
    ----------
    delta_s
        New wall clock minus the old one [s]; positive when the clock jumped ahead.
    old_anchor_s
        Host-stamped times at or after this (old-clock) time were stamped with
        the wrong clock [UTC s, old clock].
    detected_at_s
        Time of detection on the new clock [UTC s].
    """

    delta_s: float
    old_anchor_s: float
    detected_at_s: float


class HostClock:
    """Wall time carried by the monotonic clock; detects steps of the wall clock.

    Parameters
    ----------
    threshold_s
        Smallest difference between the wall clock and its monotonic
        prediction counted as a jump [s].
    wall, mono
        Clock functions (``time.time``, ``time.monotonic``); replaceable in tests.
    """

    def __init__(self, *, threshold_s: float = 1.0, wall: Callable[[], float] = time.time,
                 mono: Callable[[], float] = time.monotonic):
        self.threshold_s = threshold_s
        self._wall = wall
        self._mono = mono
        self._anchor_wall = wall()
        self._anchor_mono = mono()
        self.epoch_start_s = self._anchor_wall
        self.jumps: list[ClockJump] = []

    def now(self) -> float:
        """The current time to stamp readings with [UTC s]."""
        return self._anchor_wall + (self._mono() - self._anchor_mono)

    def check(self) -> ClockJump | None:
        """Compare the wall clock with its prediction; re-anchor and report a jump."""
        mono = self._mono()
        wall = self._wall()
        predicted = self._anchor_wall + (mono - self._anchor_mono)
        delta = wall - predicted
        if abs(delta) < self.threshold_s:
            return None
        jump = ClockJump(delta_s=delta, old_anchor_s=self.epoch_start_s, detected_at_s=wall)
        self._anchor_wall, self._anchor_mono = wall, mono
        self.epoch_start_s = wall
        self.jumps.append(jump)
        return jump
