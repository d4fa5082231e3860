"""Progress bars: drawn on stderr only when it is a terminal (a real pseudo-terminal here), never on stdout,
and not at all with ``--quiet``."""

from __future__ import annotations

import fcntl
import json
import os
import pty
import subprocess
import struct
import sys
import tempfile
import termios
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def small_store(tmp_path_factory):
    folder = tmp_path_factory.mktemp("progress")
    store, system, log = folder / "s.sqlite", folder / "system.toml", folder / "trip.csv"
    base = [sys.executable, "-m", "drawdown", "--store", str(store), "--system", str(system)]
    subprocess.run([*base, "simulate", "--scenario", "autumn-van", "--days", "2", "--out", str(log)],
                   check=True, capture_output=True)
    assert system.is_file()  # simulate writes the scenario's system.toml beside the log
    subprocess.run([*base, "import", str(log)], check=True, capture_output=True)
    return base


def _run_with_terminal_stderr(argv: list[str]) -> tuple[int, str, str]:
    """Run with stderr on a pseudo-terminal and stdout to a file; (exit code, stdout, terminal text).

    stdout goes to a file, not a pipe: a report's JSON fills a pipe while this reads the terminal.
    """
    master, slave = pty.openpty()
    fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 24, 100, 0, 0))  # a terminal 100 columns wide
    out_file = tempfile.TemporaryFile()
    proc = subprocess.Popen(argv, stdout=out_file, stderr=slave, cwd=ROOT)
    os.close(slave)
    chunks = []
    while True:
        try:
            data = os.read(master, 65536)
        except OSError:  # the child closed its side
            break
        if not data:
            break
        chunks.append(data)
    proc.wait(timeout=120)
    os.close(master)
    out_file.seek(0)
    out = out_file.read().decode()
    return proc.returncode, out, b"".join(chunks).decode(errors="replace")


def test_report_draws_its_steps_on_a_terminal_and_keeps_stdout_clean(small_store):
    rc, out, term = _run_with_terminal_stderr([*small_store, "report", "--json"])
    assert rc == 0, term
    assert "analysing" in term and "step" in term  # tqdm's bar with its unit
    assert "ledger" in term  # the step named as it runs
    json.loads(out)  # stdout is the one JSON object, untouched by the bar


def test_quiet_draws_no_bar(small_store):
    python, m, drawdown, *options = small_store
    rc, out, term = _run_with_terminal_stderr([python, m, drawdown, "--quiet", *options, "report", "--json"])
    assert rc == 0, term
    assert "analysing" not in term
    json.loads(out)


def test_no_bar_when_stderr_is_not_a_terminal(small_store):
    r = subprocess.run([*small_store, "report"], capture_output=True, text=True, cwd=ROOT)
    assert r.returncode == 0 and "analysing" not in r.stderr and "\r" not in r.stderr


def test_a_big_import_draws_a_byte_bar_and_quiet_silences_it(tmp_path):
    from drawdown.cli.commands.import_logs import PROGRESS_MIN_BYTES

    log = tmp_path / "big.csv"
    n = PROGRESS_MIN_BYTES // 23 + 1000  # 24 bytes a line: just over the size that gets a bar
    t0 = 1_780_000_000
    with open(log, "w") as f:
        f.write("time,battery_voltage_V,battery_current_A\n")
        f.writelines(f"{t0 + 2 * k},{13.0 + (k % 7) * 0.01:.3f},{-3.0 - (k % 5) * 0.1:.2f}\n" for k in range(n))
    assert log.stat().st_size >= PROGRESS_MIN_BYTES
    base = [sys.executable, "-m", "drawdown"]
    rc, out, term = _run_with_terminal_stderr([*base, "--store", str(tmp_path / "a.sqlite"), "import", str(log)])
    assert rc == 0, term
    assert "big.csv" in term and "B/s" in term  # tqdm's byte bar with its rate
    rc, out, term = _run_with_terminal_stderr([*base, "--quiet", "--store", str(tmp_path / "b.sqlite"), "import",
                                               str(log)])
    assert rc == 0 and "B/s" not in term
