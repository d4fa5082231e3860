"""Live collector benchmark: sustained line rate through a pty, and CPU use at 50 Hz.

Runs the real command line (``python -m drawdown.cli collect --serial``) in a
subprocess against a pseudo-terminal and a fresh SQLite store, so the figures
include pyserial, parsing, batching and ``synchronous=FULL`` commits.

1. **Sustained rate**: lines are offered at each rate of ``--rates`` (in
   batches every 10 ms) for ``10 x scale`` seconds; the rate the collector
   *held* is readings stored per second with no loss (stored == offered).
   Target (issue 7): >= 1000 lines/s.
2. **CPU at 50 Hz**: 50 lines/s for ``20 x scale`` seconds; the collector
   process's user+system CPU time over the wall time (psutil), after start-up.
   Target: <= 5 % of one core.
3. **Naive baseline** (same pty, same lines, same machine, same run): the way a
   home-made logger does it -- ``serial.Serial(...).readline()``, a straightforward
   per-line Python parser (split on spaces, split on ``=``, ``float``), and one
   ``INSERT`` per reading into a plain SQLite table with ``commit()`` after every
   line (Python's ``sqlite3`` defaults: rollback journal, ``synchronous=FULL``).
   Its line rate is measured by *flooding* the pty for ``5 x scale`` seconds
   (writes block while the logger is behind, so nothing is lost) and dividing the
   lines stored by the time until the last one was stored; its CPU at 50 Hz is
   measured like ours for ``10 x scale`` seconds. Printed beside ours:
   ``ratio_lines_per_s_ours_over_baseline`` (ours = the highest offered rate we
   held, so when we held the top rate of ``--rates`` the ratio is a lower bound)
   and ``ratio_cpu_ours_over_baseline`` (below 1 = we use less CPU per line).
   ``--no-baseline`` skips it.

Usage::

    .venv/bin/python benchmarks/collect_bench.py --scale 0.25   # a quick check
    .venv/bin/python benchmarks/collect_bench.py                # full figures (a quiet machine)

Prints one JSON object on stdout.
"""

from __future__ import annotations

import argparse
import json
import os
import signal
import sqlite3
import subprocess
import sys
import tempfile
import threading
import time
import tty
from pathlib import Path

import psutil

ROOT = Path(__file__).resolve().parents[1]


class _Pty:
    def __init__(self) -> None:
        self.master, slave = os.openpty()
        tty.setraw(slave)
        self.path = os.ttyname(slave)
        os.close(slave)

    def close(self) -> None:
        os.close(self.master)


def _stored(path: Path, query: str = "SELECT COALESCE(SUM(n), 0) FROM chunks") -> int:
    if not path.exists():
        return 0
    try:
        db = sqlite3.connect(path, timeout=5)
        n = db.execute(query).fetchone()[0]
        db.close()
        return int(n)
    except sqlite3.Error:
        return 0


def _line(k: int) -> bytes:
    return f"V={11.0 + (k % 4000) * 0.001:.3f} I={-5.0 + (k % 100) * 0.1:.1f} T={15 + k % 10}\n".encode()


def _send(pty: _Pty, rate_hz: float, seconds: float, stop: threading.Event) -> int:
    """Offer ``rate_hz`` lines/s for ``seconds`` (batches every 10 ms); returns lines written."""
    k = 0
    t0 = time.monotonic()
    while not stop.is_set():
        elapsed = time.monotonic() - t0
        if elapsed >= seconds:
            break
        due = int(elapsed * rate_hz) + 1
        if due > k:
            os.write(pty.master, b"".join(_line(j) for j in range(k, due)))  # blocking: no loss in the pty
            k = due
        time.sleep(0.01 if rate_hz >= 100 else 0.5 / rate_hz)
    return k


def _start(store: Path, port: str) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "drawdown", "--store", str(store), "collect",
                             "--serial", port, "--format", "keyvalue", "--baud", "115200"],
                            cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _wait_ready(store: Path, pty: _Pty, timeout_s: float = 30.0, count=_stored) -> int:
    """Poke lines until the collector stores some; returns the rows stored so far."""
    end = time.monotonic() + timeout_s
    k = 10_000_000
    while time.monotonic() < end:
        os.write(pty.master, _line(k))
        k += 1
        time.sleep(0.05)
        n = count(store)
        if n > 5:
            time.sleep(1.0)  # let the poke lines finish committing
            return count(store)
    raise RuntimeError("the collector stored nothing; is the pty readable?")


def sustained_rate(rate_hz: float, seconds: float, folder: Path) -> dict:
    store = folder / f"rate-{int(rate_hz)}.sqlite"
    pty = _Pty()
    proc = _start(store, pty.path)
    try:
        base = _wait_ready(store, pty)
        t0 = time.monotonic()
        sent = _send(pty, rate_hz, seconds, threading.Event())
        send_s = time.monotonic() - t0
        deadline = time.monotonic() + 10.0
        while _stored(store) - base < sent and time.monotonic() < deadline:
            time.sleep(0.1)
        drain_s = time.monotonic() - t0
        stored = _stored(store) - base
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(30)
        pty.close()
    return {"offered_lines_per_s": rate_hz, "seconds": round(send_s, 2), "sent": sent, "stored": stored,
            "lost": sent - stored, "all_stored_after_s": round(drain_s, 2),
            # held = the offered rate when every line was stored within 2 s of the last one sent
            # (the last commit comes up to 0.5 s later); otherwise what was stored per second
            "kept_up": stored == sent and drain_s < send_s + 2.0,
            "held_lines_per_s": round(stored / (send_s if stored == sent and drain_s < send_s + 2.0
                                                else drain_s), 1)}


def cpu_at(rate_hz: float, seconds: float, folder: Path, *, baseline: bool = False) -> dict:
    store = folder / ("cpu-baseline.sqlite" if baseline else "cpu.sqlite")
    pty = _Pty()
    proc = (_start_baseline if baseline else _start)(store, pty.path)
    try:
        _wait_ready(store, pty, count=_stored_baseline if baseline else _stored)
        ps = psutil.Process(proc.pid)
        c0 = ps.cpu_times()
        t0 = time.monotonic()
        _send(pty, rate_hz, seconds, threading.Event())
        c1 = ps.cpu_times()
        wall = time.monotonic() - t0
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(30)
        pty.close()
    cpu_s = (c1.user - c0.user) + (c1.system - c0.system)
    return {"rate_hz": rate_hz, "seconds": round(wall, 1), "cpu_s": round(cpu_s, 3),
            "cpu_pct_of_one_core": round(100.0 * cpu_s / wall, 2)}


# -- the naive baseline: a home-made logger ------------------------------------------------------

def naive_parse(text: str) -> dict[str, float] | None:
    """The per-line parser a home-made logger writes: ``V=12.8 I=-4.2 T=18`` -> {"V": 12.8, ...}."""
    fields = {}
    for pair in text.strip().split(" "):
        if "=" not in pair:
            continue
        key, value = pair.split("=", 1)
        try:
            fields[key] = float(value)
        except ValueError:
            return None
    return fields or None


def naive_logger(port: str, db_path: str) -> None:
    """Read lines from ``port`` for ever; one INSERT and one commit per reading (runs in a subprocess)."""
    import serial

    ser = serial.Serial(port, 115200, timeout=1)
    db = sqlite3.connect(db_path)
    db.execute("CREATE TABLE IF NOT EXISTS readings (t REAL, channel TEXT, voltage_V REAL, current_A REAL,"
               " temperature_C REAL)")
    db.commit()
    while True:
        raw = ser.readline()
        if not raw:
            continue
        fields = naive_parse(raw.decode("ascii", errors="replace"))
        if fields is None:
            continue
        db.execute("INSERT INTO readings VALUES (?, ?, ?, ?, ?)",
                   (time.time(), "battery", fields.get("V"), fields.get("I"), fields.get("T")))
        db.commit()


def _stored_baseline(path: Path) -> int:
    return _stored(path, "SELECT COUNT(*) FROM readings")


def _start_baseline(store: Path, port: str) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, str(Path(__file__).resolve()), "--baseline-worker", port, str(store)],
                            cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)


def _flood(pty: _Pty, seconds: float) -> int:
    """Write lines as fast as the reader takes them (blocking writes, 20 lines a write); returns lines written."""
    k = 0
    t0 = time.monotonic()
    while time.monotonic() - t0 < seconds:
        os.write(pty.master, b"".join(_line(j) for j in range(k, k + 20)))
        k += 20
    return k


def baseline_rate(seconds: float, folder: Path) -> dict:
    """The naive logger's sustained line rate: flood the pty, count what it stored and when."""
    store = folder / "rate-baseline.sqlite"
    pty = _Pty()
    proc = _start_baseline(store, pty.path)
    try:
        base = _wait_ready(store, pty, count=_stored_baseline)
        t0 = time.monotonic()
        sent = _flood(pty, seconds)
        send_s = time.monotonic() - t0
        deadline = time.monotonic() + 30.0
        stored = _stored_baseline(store) - base
        while stored < sent and time.monotonic() < deadline:
            time.sleep(0.05)
            stored = _stored_baseline(store) - base
        drain_s = time.monotonic() - t0
    finally:
        proc.send_signal(signal.SIGTERM)
        proc.wait(30)
        pty.close()
    return {"method": "flood (blocking writes to the pty)", "seconds": round(send_s, 2), "sent": sent,
            "stored": stored, "lost": sent - stored, "all_stored_after_s": round(drain_s, 2),
            "held_lines_per_s": round(stored / drain_s, 1)}


def main(argv: list[str] | None = None) -> int:
    p = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    p.add_argument("--scale", type=float, default=1.0, help="duration scale (1 = 10 s per rate, 20 s CPU)")
    p.add_argument("--rates", default="1000,2000,4000", help="offered line rates [lines/s]")
    p.add_argument("--no-baseline", action="store_true", help="skip the naive per-line INSERT + commit logger")
    p.add_argument("--baseline-worker", nargs=2, help=argparse.SUPPRESS)
    args = p.parse_args(argv)
    if args.baseline_worker:
        naive_logger(*args.baseline_worker)
        return 0
    with tempfile.TemporaryDirectory(prefix="drawdown-collect-bench-") as tmp:
        folder = Path(tmp)
        rates = [sustained_rate(float(r), 10.0 * args.scale, folder) for r in args.rates.split(",")]
        cpu = cpu_at(50.0, 20.0 * args.scale, folder)
        if not args.no_baseline:
            base_rate = baseline_rate(5.0 * args.scale, folder)
            base_cpu = cpu_at(50.0, 10.0 * args.scale, folder, baseline=True)
    held = max((r["offered_lines_per_s"] for r in rates if r["kept_up"]), default=0.0)
    out = {"sustained": rates, "highest_rate_held_lines_per_s": held, "cpu_50hz": cpu,
           "targets": {"lines_per_s_min": 1000, "cpu_pct_max_at_50hz": 5.0},
           "meets_targets": held >= 1000 and cpu["cpu_pct_of_one_core"] <= 5.0,
           "load_average_1min": os.getloadavg()[0], "cpus": os.cpu_count()}
    if not args.no_baseline:
        top = max(float(r) for r in args.rates.split(","))
        b_cpu = base_cpu["cpu_pct_of_one_core"]
        out["baseline"] = {
            "what": "pyserial readline + per-line Python parser + one INSERT and one commit per line into a "
                    "plain SQLite table (sqlite3 defaults: rollback journal, synchronous=FULL)",
            "sustained": base_rate, "held_lines_per_s": base_rate["held_lines_per_s"], "cpu_50hz": base_cpu}
        out["ratio_lines_per_s_ours_over_baseline"] = (round(held / base_rate["held_lines_per_s"], 1)
                                                       if base_rate["held_lines_per_s"] > 0 else None)
        # ours held every offered rate up to the top one: its real ceiling is higher, so the ratio is a floor
        out["ratio_lines_per_s_is_lower_bound"] = held >= top
        out["ratio_cpu_ours_over_baseline"] = (round(cpu["cpu_pct_of_one_core"] / b_cpu, 2) if b_cpu > 0
                                               else None)
    json.dump(out, sys.stdout, indent=2)
    sys.stdout.write("\n")
    return 0


if __name__ == "__main__":
    sys.exit(main())
