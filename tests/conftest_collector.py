"""Shared helpers for the live-collector tests: real pseudo-terminals, a line sender, the CLI.

Imported by the collector test modules (not a conftest.py: the lead owns that).

Unplugging, honestly: a pseudo-terminal cannot be re-opened at the same
``/dev/pts/N`` after its master side is closed, so :class:`PlugPort` gives
the collector a *symlink* (like ``/dev/serial/by-id/...`` on a real system) to
the current pty's slave. ``unplug()`` closes the master -- the collector's
read fails with an I/O error, as when a USB adapter is pulled -- and
``replug()`` makes a new pty and atomically re-points the symlink to it, as
udev does when the adapter comes back.
"""

from __future__ import annotations

import json
import os
import random
import signal
import sqlite3
import subprocess
import sys
import threading
import time
import tty
from collections.abc import Callable
from pathlib import Path

from drawdown.collector.nmea import with_checksum

ROOT = Path(__file__).resolve().parents[1]
PYTHON = sys.executable


class Pty:
    """A pseudo-terminal pair whose slave is the 'serial port' the collector opens."""

    def __init__(self) -> None:
        self.master, slave = os.openpty()
        tty.setraw(slave)  # no echo / line editing before pyserial configures it
        self.path = os.ttyname(slave)
        os.close(slave)  # the collector opens it by path, like a device node
        os.set_blocking(self.master, False)
        self.closed = False

    def write(self, data: bytes, timeout_s: float = 0.05) -> bool:
        """Write to the device side; False when the buffer stayed full (nobody reads: data lost).

        Non-blocking with a short retry, like a UART that keeps sending whether
        or not anyone listens; a partial write is finished within ``timeout_s``.
        """
        if self.closed:
            return False
        end = time.monotonic() + timeout_s
        view = memoryview(data)
        while view:
            try:
                n = os.write(self.master, view)
                view = view[n:]
            except BlockingIOError:
                if time.monotonic() > end:
                    return False
                time.sleep(0.001)
            except OSError:
                return False
        return True

    def close(self) -> None:
        if not self.closed:
            self.closed = True
            os.close(self.master)


class PlugPort:
    """A stable symlink path to a pty that can be unplugged and replugged (see the module notes)."""

    def __init__(self, folder: Path):
        self.link = folder / "ttyUSB-test"
        self.pty = Pty()
        self._point(self.pty.path)

    def _point(self, target: str) -> None:
        tmp = self.link.with_suffix(".new")
        if tmp.is_symlink():
            tmp.unlink()
        os.symlink(target, tmp)
        os.replace(tmp, self.link)  # atomic, as udev re-creates a by-id link

    def write(self, data: bytes) -> bool:
        return self.pty.write(data)

    def unplug(self) -> None:
        self.pty.close()

    def replug(self) -> None:
        self.pty = Pty()
        self._point(self.pty.path)

    def close(self) -> None:
        self.pty.close()
        if self.link.is_symlink():
            self.link.unlink()


# -- what the sender writes --------------------------------------------------
def values(k: int) -> tuple[float, float, float]:
    """The k-th reading's voltage [V], current [A], temperature [degC]: k is recoverable from the voltage."""
    return round(11.0 + (k % 4000) * 0.001, 3), round(-5.0 + (k % 100) * 0.1, 1), float(15 + k % 10)


def line_for(fmt: str, k: int, t_s: float | None = None) -> bytes:
    """The k-th line in ``fmt``; ``t_s`` is included as the device time where the format allows."""
    v, i, temp = values(k)
    if fmt == "csv":
        return f"{t_s:.6f},{v:.3f},{i:.1f},{temp:.1f}\r\n".encode() if t_s is not None else \
            f"{v:.3f},{i:.1f},{temp:.1f}\r\n".encode()
    if fmt == "keyvalue":
        return f"V={v:.3f} I={i:.1f} T={temp:.1f}\r\n".encode()
    if fmt == "jsonl":
        obj = {"voltage_V": v, "current_A": i, "temperature_C": temp}
        if t_s is not None:
            obj["t"] = round(t_s, 6)
        return (json.dumps(obj) + "\n").encode()
    if fmt == "nmea":
        return (with_checksum(f"IIXDR,U,{v:.3f},V,BATT1,I,{i:.1f},A,BATT1,C,{temp:.1f},C,BATT1") + "\r\n").encode()
    raise ValueError(fmt)


CSV_HEADER = b"time,Battery Voltage (V),Battery Current (A),Temp (degC)\r\n"
CSV_HEADER_NO_TIME = b"Battery Voltage (V),Battery Current (A),Temp (degC)\r\n"

GARBAGE: list[bytes] = [
    b"\xff\xfe\x00garbage\xc3\x28\r\n",        # not UTF-8 (wrong baud rate)
    b"!!!@@@###\r\n",                          # noise
    b"12.5,abc,def\r\n",                       # wrong fields
    b'{"voltage_V": 12.\r\n',                 # a cut JSON line
    b"$IIXDR,U,12.85,V,BATT1*00\r\n",          # NMEA with a wrong checksum
]


class Sender(threading.Thread):
    """Writes lines at ``rate_hz`` to a port-like object; remembers what it sent and when.

    Every ``garbage_every``-th line is followed by one garbage line; a csv
    header is repeated every ``header_every`` lines (a device that prints it at
    boot and periodically).
    """

    def __init__(self, port: object, fmt: str, *, rate_hz: float = 100.0, with_time: bool = True,
                 garbage_every: int = 25, header_every: int = 50, seed: int = 1):
        super().__init__(daemon=True)
        self.port = port
        self.fmt = fmt
        self.period = 1.0 / rate_hz
        self.with_time = with_time
        self.garbage_every = garbage_every
        self.header_every = header_every
        self.rng = random.Random(seed)
        self.sent: list[tuple[int, float, bool]] = []  # (k, t_s, delivered to the pty buffer)
        self.garbage_sent = 0
        self.stop = threading.Event()
        self.paused = threading.Event()
        self.k = 0

    def run(self) -> None:
        next_t = time.monotonic()
        while not self.stop.is_set():
            if self.paused.is_set():
                time.sleep(0.005)
                next_t = time.monotonic()
                continue
            k = self.k
            if self.fmt == "csv" and k % self.header_every == 0:
                self.port.write(CSV_HEADER if self.with_time else CSV_HEADER_NO_TIME)
            t = time.time()
            ok = self.port.write(line_for(self.fmt, k, t if self.with_time else None))
            self.sent.append((k, t, ok))
            if self.garbage_every and k % self.garbage_every == self.garbage_every - 1:
                if self.port.write(self.rng.choice(GARBAGE)):
                    self.garbage_sent += 1
            self.k += 1
            next_t += self.period
            delay = next_t - time.monotonic()
            if delay > 0:
                time.sleep(delay)
            else:
                next_t = time.monotonic()


def k_from_voltage(v: float) -> int:
    return int(round((v - 11.0) / 0.001))


# -- the collector as a user runs it -------------------------------------------
def collector_cmd(store: Path, *args: str) -> list[str]:
    return [PYTHON, "-m", "drawdown", "--store", str(store), "collect", *args]


def start_collector(store: Path, *args: str) -> subprocess.Popen:
    return subprocess.Popen(collector_cmd(store, *args), cwd=ROOT, stdout=subprocess.PIPE,
                            stderr=subprocess.PIPE, text=True)


def stop_collector(proc: subprocess.Popen, timeout_s: float = 15.0) -> tuple[int, str, str]:
    """SIGTERM and wait: the collector flushes its last batch and exits 0."""
    if proc.poll() is None:
        proc.send_signal(signal.SIGTERM)
    out, err = proc.communicate(timeout=timeout_s)
    return proc.returncode, out, err


def integrity_ok(path: Path) -> bool:
    db = sqlite3.connect(path)
    try:
        return db.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
    finally:
        db.close()


def wait_for(cond: Callable[[], bool], timeout_s: float, step_s: float = 0.05) -> bool:
    end = time.monotonic() + timeout_s
    while time.monotonic() < end:
        if cond():
            return True
        time.sleep(step_s)
    return cond()


def stored_count(path: Path) -> int:
    """Readings stored so far, read by a separate connection (as the dashboard reads)."""
    if not path.exists():
        return 0
    db = sqlite3.connect(path, timeout=5)
    try:
        row = db.execute("SELECT COALESCE(SUM(n), 0) FROM chunks").fetchone()
        return int(row[0])
    except sqlite3.OperationalError:
        return 0
    finally:
        db.close()
