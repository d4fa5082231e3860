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

import random
import signal
import time

import numpy as np
import pytest

from conftest_collector import Pty, Sender, integrity_ok, start_collector, wait_for
from collector.store import Store

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
    store_path = tmp_path / "s.sqlite"
    pty = Pty()
    sender = Sender(pty, "jsonl", rate_hz=100.0, with_time=True, garbage_every=40)
    sender.start()
    rng = random.Random(7)
    runs: list[tuple[float, float]] = []  # (newest stored time before the run, kill time)
    try:
        for _ in range(KILLS):
            before = _max_t(store_path)
            proc = start_collector(store_path, "--serial", pty.path, "--format", "jsonl", "--baud", "115200")
            assert wait_for(lambda: _max_t(store_path) > before, 20.0), "collector stored nothing"
            time.sleep(rng.uniform(0.3, 1.0))  # kill at a random point of the commit cycle
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
    assert len(runs) == KILLS
    record_property("worst_loss_s", round(max(losses), 3))
    record_property("median_loss_s", round(float(np.median(losses)), 3))
