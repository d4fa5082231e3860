"""Power-cut survival: the collector SIGKILLed mid-stream, again and again.

Real parts: the command-line collector in a subprocess reading a pty at 100 Hz,
a real SQLite store. SIGKILL is the closest a test gets to pulling the power:
no handler runs, no flush. (A real power cut also loses what the OS had not
written; ``synchronous=FULL`` makes each commit durable, which a process kill
cannot exercise -- the kernel still writes the page cache.)

What "lost" means here: readings the collector had *received* but not
committed when it was killed. Lines sent while no collector is running are
lost at the port, as with a real device (pyserial clears the input on open),
and are not counted against the collector. For each kill we check that the
newest stored reading is at most 1 s older than the kill, and that every line
between the first and the last reading stored in that run is there.
"""

from __future__ import annotations

import json
import os
import random
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from conftest_collector import ROOT, Pty, Sender, integrity_ok, start_collector, wait_for
from drawdown.collector.store import Store

KILLS = 20


def _max_t(store_path) -> float:
    import sqlite3

    try:
        db = sqlite3.connect(store_path, timeout=5)
        row = db.execute("SELECT MAX(t_last_us) FROM chunks").fetchone()
        db.close()
        return (row[0] or 0) / 1e6
    except sqlite3.Error:
        return 0.0


@pytest.mark.slow
def test_sigkill_20_times_loses_at_most_1_s_each_and_the_store_stays_intact(tmp_path, record_property):
    kill_mid_stream(tmp_path, record_property, kills=KILLS, seed=7, alive_s=(0.3, 1.0))


@pytest.mark.slow
def test_sigkill_50_times_mid_stream_loses_at_most_1_s_each_and_the_store_stays_intact(tmp_path, record_property):
    # Each collector is forked from one process that has already imported it (as the command line
    # would, without paying Python's start-up 50 times), so the test stays short; what runs and is
    # killed is the same `drawdown collect` on the same pty and store.
    with _Forker() as forker:
        kill_mid_stream(tmp_path, record_property, kills=50, seed=50, alive_s=(0.2, 0.9), start=forker.start)


_FORKER = r"""
import importlib, json, os, sys
import drawdown.cli as cli
importlib.import_module("drawdown.cli.commands.collect")
import drawdown.collector.collect, drawdown.collector.serial_port, drawdown.collector.store  # noqa: F401 - warm the imports
print("ready", flush=True)
for line in sys.stdin:
    what, arg = json.loads(line)
    if what == "start":
        pid = os.fork()
        if pid == 0:
            os.dup2(os.open(os.devnull, os.O_RDWR), 0)
            os.dup2(os.open(os.devnull, os.O_WRONLY), 1)
            try:
                code = cli.main(arg)
            except SystemExit as exc:
                code = exc.code
            os._exit(code if isinstance(code, int) else 1)
        print(pid, flush=True)
    elif what == "wait":
        print(os.waitpid(arg, 0)[1], flush=True)
"""


class _Forked:
    """The part of :class:`subprocess.Popen` the kill loop uses, for a collector forked by :class:`_Forker`."""

    def __init__(self, forker: _Forker, pid: int):
        self.forker, self.pid = forker, pid

    def send_signal(self, sig: int) -> None:
        os.kill(self.pid, sig)

    def wait(self, timeout: float | None = None) -> int:
        return self.forker.ask("wait", self.pid)


class _Forker:
    def __enter__(self) -> _Forker:
        self.proc = subprocess.Popen([sys.executable, "-c", _FORKER], cwd=ROOT, stdin=subprocess.PIPE,
                                     stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True)
        assert self.proc.stdout.readline().strip() == "ready"
        return self

    def ask(self, what: str, arg) -> int:
        self.proc.stdin.write(json.dumps([what, arg]) + "\n")
        self.proc.stdin.flush()
        return int(self.proc.stdout.readline())

    def start(self, store_path, *args: str) -> _Forked:
        return _Forked(self, self.ask("start", ["--store", str(store_path), "collect", *args]))

    def __exit__(self, *exc) -> None:
        self.proc.stdin.close()
        self.proc.wait(10)


def kill_mid_stream(tmp_path, record_property, *, kills: int, seed: int, alive_s: tuple[float, float],
                    start=start_collector) -> None:
    """Start the collector on a pty, SIGKILL it ``kills`` times at random moments, check every run."""
    store_path = tmp_path / "s.sqlite"
    pty = Pty()
    sender = Sender(pty, "jsonl", rate_hz=100.0, with_time=True, garbage_every=40)
    sender.start()
    rng = random.Random(seed)
    runs: list[tuple[float, float]] = []  # (newest stored time before the run, kill time)
    try:
        for _ in range(kills):
            before = _max_t(store_path)
            proc = start(store_path, "--serial", pty.path, "--format", "jsonl", "--baud", "115200")
            assert wait_for(lambda: _max_t(store_path) > before, 20.0), "collector stored nothing"
            time.sleep(rng.uniform(*alive_s))  # kill at a random point of the commit cycle
            t_kill = time.time()
            proc.send_signal(signal.SIGKILL)
            proc.wait(10)
            runs.append((before, t_kill))
            # the store opens cleanly after every kill (WAL recovery is SQLite's)
            assert integrity_ok(store_path)
            with Store(store_path) as store:
                assert store.read().shape[0] > 0
    finally:
        sender.stop.set()
        sender.join()
        pty.close()

    with Store(store_path) as store:
        df = store.read(channels=["battery"])
    t = df["t"].astype("int64").to_numpy() / 1e6
    sent = np.array([(ts, ok) for _, ts, ok in sender.sent])
    sent_t = np.round(sent[:, 0], 6)
    losses = []
    for before, t_kill in runs:
        in_run = t[(t > before) & (t <= t_kill)]
        last = in_run.max()
        losses.append(t_kill - last)
        assert t_kill - last <= 1.0, f"lost {t_kill - last:.2f} s of readings at a kill"
        first = in_run.min()
        expected = sent_t[(sent_t >= first - 2e-6) & (sent_t <= last + 2e-6) & (sent[:, 1] == 1)]
        stored = np.round(in_run[(in_run >= first) & (in_run <= last)], 6)
        assert len(stored) == len(expected), "a hole inside a run's stored readings"
    assert len(runs) == kills
    record_property("worst_loss_s", round(max(losses), 3))
    record_property("median_loss_s", round(float(np.median(losses)), 3))
