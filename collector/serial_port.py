"""Serial-line source (pyserial): a USB-serial adapter or a monitor's UART.

The port is opened by path (``/dev/ttyUSB0``, or better a stable
``/dev/serial/by-id/...`` link). When the adapter is unplugged the read fails
with an I/O error; the source closes the port, retries the *same path* with
:class:`collector.source.Backoff` (capped at 2 s) and, once it reads again,
reports the time it was gone as a gap.

Line handling: any of CR, LF or CR LF ends a line (``line_ending`` can force
one). After every (re)open the bytes before the first line end are dropped
unless they are a line that marks its own start (NMEA, JSON, a header): the
device was most likely in the middle of a line, and a cut line can look like a
valid one with wrong values (``2.85`` from ``12.85``). Bytes that are
not UTF-8 are rejected as "not text" (a wrong baud rate shows up as a
quarantine full of these).
"""

from __future__ import annotations

import threading
from collections.abc import Callable

import serial

from drawdown.collector.clock import HostClock
from drawdown.collector.lines import MAX_LINE_CHARS, LineParser, first_line_is_whole
from drawdown.collector.source import Backoff, Sink, Source


class LineSplitter:
    """Turns a byte stream into lines; the first fragment after a reset is dropped.

    Parameters
    ----------
    line_ending
        ``None``: CR, LF and CR LF all end a line; otherwise the exact bytes.
    """

    def __init__(self, *, line_ending: bytes | None = None):
        self.line_ending = line_ending
        self._buf = b""
        self._synced = False

    def reset(self) -> None:
        """Forget partial data (after a reopen): the next fragment is checked (see feed)."""
        self._buf = b""
        self._synced = False

    def feed(self, data: bytes) -> list[bytes]:
        """Add bytes; return the complete lines (without terminators, may be empty).

        The first line after a reset is kept only when
        :func:`collector.lines.first_line_is_whole` says it cannot be a cut
        line; otherwise it is dropped (not counted as rejected).
        """
        buf = self._buf + data
        if self.line_ending is None:
            buf = buf.replace(b"\r\n", b"\n").replace(b"\r", b"\n")
            sep = b"\n"
        else:
            sep = self.line_ending
        parts = buf.split(sep)
        self._buf = parts.pop()
        if len(self._buf) > 4 * MAX_LINE_CHARS:  # a stream with no line ends: keep memory bounded
            parts.append(self._buf)
            self._buf = b""
        if not self._synced and parts:
            try:
                whole = first_line_is_whole(parts[0].decode("utf-8"))
            except UnicodeDecodeError:
                whole = False
            if not whole:
                parts = parts[1:]
            self._synced = True
        return parts


class Stamper:
    """Host times for lines that arrive together: strictly increasing by at least 2 us.

    Several lines often come in one read; stamping them all with the same time
    would make them one reading in the store (one reading per channel and
    time), so each line gets the arrival time or 2 us after the previous
    line's, whichever is later. Two, not one: the store keeps whole
    microseconds, and a float epoch near 1.8e9 s has a resolution of 0.24 us,
    so stamps 1 us apart can round to the same microsecond.
    """

    STEP_S = 2e-6

    def __init__(self) -> None:
        self.last_s = 0.0

    def __call__(self, now_s: float) -> float:
        t = now_s if now_s > self.last_s + self.STEP_S else self.last_s + self.STEP_S
        self.last_s = t
        return t


def deliver_lines(lines: list[bytes], parser: LineParser, sink: Sink, t_host_s: float,
                  stamper: Stamper | None = None) -> None:
    """Decode and parse lines, sending readings and rejects to the sink.

    ``t_host_s`` is the arrival time; with a ``stamper`` each line gets its own
    (strictly increasing) host time.
    """
    readings = []
    for raw in lines:
        if stamper is not None:
            t_host_s = stamper(t_host_s)
        try:
            text = raw.decode("utf-8")
        except UnicodeDecodeError:
            sink.reject(raw[:200].decode("utf-8", errors="replace"), "not text (check the baud rate)", t_host_s)
            continue
        got, rejects = parser.feed(text, t_host_s)
        readings.extend(got)
        for text_bad, reason in rejects:
            sink.reject(text_bad, reason, t_host_s)
    if readings:
        sink.put(readings)


class SerialSource(Source):
    """Lines from a serial port, parsed by a :class:`collector.lines.LineParser`.

    Parameters
    ----------
    port
        Device path (reopened by the same path after an unplug).
    parser
        Line parser (``make_parser(...)`` or an ``AutoParser``).
    baud
        Baud rate [bit/s].
    clock
        Stamps lines that carry no time.
    line_ending
        See :class:`LineSplitter`.
    open_port
        Opens the port (``serial.Serial`` by default; replaceable in tests).
    """

    name = "serial"

    def __init__(self, port: str, parser: LineParser, *, baud: int = 9600, clock: HostClock | None = None,
                 line_ending: bytes | None = None, backoff: Backoff | None = None,
                 open_port: Callable[..., serial.Serial] | None = None):
        self.port = port
        self.parser = parser
        self.baud = baud
        self.clock = clock or HostClock()
        self.splitter = LineSplitter(line_ending=line_ending)
        self.backoff = backoff or Backoff(first_s=0.1, cap_s=2.0)
        self._open = open_port or (lambda p, b: serial.Serial(p, b, timeout=0.2))
        self.connected = threading.Event()
        self._stamper = Stamper()

    def run(self, sink: Sink, stop: threading.Event) -> None:
        lost_at: float | None = None
        lost_reason = ""
        warned = False
        while not stop.is_set():
            try:
                ser = self._open(self.port, self.baud)
            except (serial.SerialException, OSError, ValueError) as exc:
                if lost_at is None:
                    lost_at, lost_reason = self.clock.now(), f"cannot open {self.port}: {exc}"
                if not warned:
                    sink.note(f"serial: cannot open {self.port} ({exc}); retrying")
                    warned = True
                if self.backoff.wait(stop):
                    break
                continue
            self.splitter.reset()
            self.connected.set()
            sink.note(f"serial: reading {self.port} at {self.baud} baud")
            warned = False
            first_data = True
            try:
                while not stop.is_set():
                    data = ser.read(max(1, ser.in_waiting))
                    if not data:
                        continue
                    now = self.clock.now()
                    if first_data:
                        self.backoff.reset()
                        if lost_at is not None:
                            sink.outage(lost_at, now, lost_reason)
                            lost_at = None
                        first_data = False
                    deliver_lines(self.splitter.feed(data), self.parser, sink, now, self._stamper)
            except (serial.SerialException, OSError) as exc:
                lost_at, lost_reason = self.clock.now(), f"{self.port}: {exc}"
                sink.note(f"serial: lost {self.port} ({exc}); reconnecting")
            finally:
                self.connected.clear()
                try:
                    ser.close()
                except (serial.SerialException, OSError):
                    pass
            if not stop.is_set() and self.backoff.wait(stop):
                break
        if lost_at is not None:
            sink.outage(lost_at, self.clock.now(), lost_reason + " (still disconnected when stopped)")
