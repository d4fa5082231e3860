"""The reading store (collector.store): WAL, concurrent readers, range reads, re-import."""

from __future__ import annotations

import subprocess
import sys
import textwrap
import threading
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from drawdown.collector.csv_file import import_file
from drawdown.collector.store import Store

ROOT = Path(__file__).resolve().parent.parent
LOGS = ROOT / "fixtures" / "logs"
T0 = pd.Timestamp("2024-06-01T00:00:00Z")


def _frame(start_s: int, n: int, channel: str = "battery", volts: float = 12.5) -> pd.DataFrame:
    t = T0 + pd.to_timedelta(np.arange(start_s, start_s + n), unit="s")
    return pd.DataFrame({"t": t, "channel": channel, "voltage_V": volts, "current_A": -1.0,
                         "temperature_C": np.nan, "soc_pct": np.nan})


def _count_in_other_process(path: Path) -> int:
    code = textwrap.dedent(f"""
        import sys
        sys.path.insert(0, {str(ROOT)!r})
        from drawdown.collector.store import Store
        with Store({str(path)!r}, timeout_s=2.0) as st:
            print(len(st.read()))
    """)
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=60, check=True)
    return int(out.stdout.strip())


def test_store_uses_wal_journal(tmp_path):
    with Store(tmp_path / "s.sqlite") as st:
        assert st.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


def test_reader_in_another_process_is_not_blocked_by_an_open_write(tmp_path):
    path = tmp_path / "s.sqlite"
    with Store(path) as st:
        st.append(_frame(0, 100))
        with st.transaction():
            st.append(_frame(100, 50))
            # WAL: the other process reads the last committed state at once, without waiting
            assert _count_in_other_process(path) == 100
        assert _count_in_other_process(path) == 150


def test_reader_thread_sees_only_whole_batches_while_writer_appends(tmp_path):
    path = tmp_path / "s.sqlite"
    batches, size = 30, 1000
    with Store(path) as writer_store:
        writer_store.append(_frame(0, 1))  # create the schema before the reader opens
        seen: list[int] = []
        errors: list[BaseException] = []

        def writer() -> None:
            try:
                for b in range(batches):
                    writer_store.append(_frame(1 + b * size, size))
            except BaseException as exc:  # noqa: BLE001 - reported below
                errors.append(exc)

        th = threading.Thread(target=writer)
        with Store(path) as reader:
            th.start()
            while th.is_alive():
                seen.append(len(reader.read()))
            th.join()
            seen.append(len(reader.read()))
    assert not errors
    assert all((n - 1) % size == 0 for n in seen)  # never half a batch
    assert seen == sorted(seen) and seen[-1] == 1 + batches * size


def test_range_read_is_start_inclusive_end_exclusive(tmp_path):
    with Store(tmp_path / "s.sqlite") as st:
        st.append(_frame(0, 3600))
        df = st.read(T0 + pd.Timedelta(seconds=10), T0 + pd.Timedelta(seconds=20))
    assert len(df) == 10
    assert df["t"].iloc[0] == T0 + pd.Timedelta(seconds=10)
    assert df["t"].iloc[-1] == T0 + pd.Timedelta(seconds=19)


def test_range_read_filters_channels_and_naive_means_utc(tmp_path):
    with Store(tmp_path / "s.sqlite") as st:
        st.append(pd.concat([_frame(0, 60), _frame(0, 60, channel="solar")]))
        df = st.read("2024-06-01 00:00:30", None, channels=["solar"])
    assert set(df["channel"]) == {"solar"} and len(df) == 30


def test_overlapping_writes_return_each_time_once_newest_winning(tmp_path):
    with Store(tmp_path / "s.sqlite") as st:
        st.append(_frame(0, 100, volts=12.0))
        st.append(_frame(50, 100, volts=13.0))
        df = st.read()
        summary = st.channel_summary()
    assert len(df) == 150 and df["t"].is_monotonic_increasing
    assert df["voltage_V"].iloc[60] == pytest.approx(13.0)
    assert summary["battery"]["rows"] == 150


def test_reimport_of_identical_content_under_another_name_adds_nothing(tmp_path):
    copy = tmp_path / "renamed.csv"
    copy.write_bytes((LOGS / "epoch_ms.csv").read_bytes())
    with Store(tmp_path / "s.sqlite") as st:
        first = import_file(LOGS / "epoch_ms.csv", st)
        again = import_file(copy, st)
        assert st.find_import(first.sha256)["rows_stored"] == 5
        assert again.already_imported and len(st.read()) == 5 and len(st.imports()) == 1


# -- the time codec (store schema version 2) ----------------------------------------------------

_T0_US = 1_717_200_000_000_000  # 2024-06-01T00:00:00Z


def _time_cases() -> dict[str, np.ndarray]:
    rng = np.random.default_rng(7)
    even = _T0_US + np.arange(86_400, dtype=np.int64) * 1_000_000
    gaps = np.delete(even, np.r_[100:160, 5000:5003, 70_000:70_400])     # a logger that lost a few minutes
    odd = even.copy()
    odd[::997] += 250_000                                                 # a few late stamps
    jitter = even + rng.integers(-40_000, 40_000, even.size)              # a host clock stamping at 1 Hz
    irregular = _T0_US + np.cumsum(rng.integers(2_000_000, 60_000_000, 5000))  # 2-60 s, as some loggers
    return {"even": even, "gaps": gaps, "odd": np.sort(odd), "jitter": np.sort(jitter),
            "irregular": irregular, "one": even[:1], "two": even[:2], "three uneven": np.array([0, 5, 6]) + _T0_US}


@pytest.mark.parametrize("name", list(_time_cases()))
def test_time_blobs_decode_to_the_same_microseconds(name):
    from drawdown.collector.store import decode_times, encode_times

    t = _time_cases()[name]
    blob = encode_times(t)
    back = decode_times(blob, len(t))
    assert back.dtype == np.int64 and np.array_equal(back, t)
    if name == "even":
        assert len(blob) == 16           # first time and step, not 691 kB
    if name == "gaps":
        assert len(blob) < 8 * len(t) / 20
    if name in ("jitter", "irregular", "one", "two"):
        assert len(blob) == 8 * len(t)   # the raw layout of schema version 1


def test_a_version_1_store_with_raw_time_blobs_still_reads_and_takes_new_chunks(tmp_path):
    import sqlite3

    path = tmp_path / "v1.sqlite"
    with Store(path) as st:
        st.append(_frame(0, 10))
    t_raw = (_T0_US + np.arange(10, 20, dtype=np.int64) * 1_000_000).astype("<i8").tobytes()
    with sqlite3.connect(path) as db:    # what a version-1 store holds: raw times, version 1
        db.execute("DELETE FROM chunks")
        db.execute("INSERT INTO chunks (channel, t_first_us, t_last_us, n, t, voltage_V, current_A)"
                   " VALUES ('battery', ?, ?, 10, ?, ?, ?)",
                   (_T0_US + 10_000_000, _T0_US + 19_000_000, t_raw, np.full(10, 12.5, "<f4").tobytes(),
                    np.full(10, -1.0, "<f4").tobytes()))
        db.execute("UPDATE meta SET value = '1' WHERE key = 'schema_version'")
    with Store(path) as st:
        st.append(_frame(20, 10))
        got = st.read()
    assert list(got["t"]) == list(T0 + pd.to_timedelta(np.arange(10, 30), unit="s"))
    with sqlite3.connect(path) as db:
        assert db.execute("SELECT value FROM meta WHERE key = 'schema_version'").fetchone()[0] == "2"
        assert sorted(len(r[0]) for r in db.execute("SELECT t FROM chunks")) == [16, 80]
