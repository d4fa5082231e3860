"""Long-term storage: summaries of old live readings, compaction of small live chunks.

Integration reference: the trapezoid rule (docs/soc.md#check-values: (0 s, -10 A),
(1800 s, -10 A), (3600 s, -20 A) -> -12.5 Ah) and numpy.trapezoid run in the
test as an independent implementation.
"""

from __future__ import annotations

import numpy as np
import pytest

from drawdown.collector import downsample
from drawdown.collector.store import Store

T0_US = 1_767_225_600 * 1_000_000  # 2026-01-01T00:00:00Z


def _vals(i, v=None):
    n = len(i)
    return {"voltage_V": np.full(n, 12.8) if v is None else v, "current_A": np.asarray(i, dtype=float),
            "temperature_C": np.full(n, np.nan), "soc_pct": np.full(n, np.nan)}


def test_summary_integrates_the_docs_trapezoid_check():
    # docs/soc.md#check-values: samples (0 s, -10 A), (1800 s, -10 A), (3600 s, -20 A) -> -12.5 Ah
    t = T0_US + np.array([0, 1800, 3600], dtype=np.int64) * 1_000_000
    s = downsample.summarise(t, _vals([-10.0, -10.0, -20.0]), interval_s=3600, max_gap_s=3600)
    assert s["charge_Ah"].sum() == pytest.approx(-12.5)
    assert s["charge_out_Ah"].sum() == pytest.approx(-12.5) and s["charge_in_Ah"].sum() == 0.0


def test_summary_mean_min_max_and_counts_per_interval():
    t = T0_US + np.arange(120, dtype=np.int64) * 1_000_000
    v = np.r_[np.full(60, 12.0), np.full(60, 13.0)]
    v[10] = 11.5
    s = downsample.summarise(t, _vals(np.zeros(120), v), interval_s=60)
    assert list(s["n"]) == [60, 60]
    assert s["voltage_V_min"].iloc[0] == 11.5 and s["voltage_V_max"].iloc[1] == 13.0
    assert s["voltage_V_mean"].iloc[0] == pytest.approx((59 * 12.0 + 11.5) / 60)
    assert np.isnan(s["soc_pct_mean"]).all()


def test_step_longer_than_max_gap_is_not_integrated():
    t = T0_US + np.array([0, 1, 500, 501], dtype=np.int64) * 1_000_000
    s = downsample.summarise(t, _vals([-10.0] * 4), interval_s=3600, max_gap_s=60)
    assert s["charge_Ah"].sum() == pytest.approx(-20.0 / 3600)  # two 1 s steps only
    assert s["covered_s"].sum() == pytest.approx(2.0)


def test_downsample_keeps_the_recent_window_and_preserves_total_ah(tmp_path):
    """3 h of 1 Hz live readings, keep the last hour: 120 minute summaries + 3600 raw readings,
    and the Ah of summaries plus raw equals numpy.trapezoid over the original readings."""
    rng = np.random.default_rng(3)
    n = 3 * 3600
    t = T0_US + np.arange(n, dtype=np.int64) * 1_000_000
    i = rng.normal(-3.0, 2.0, n)
    with Store(tmp_path / "s.sqlite") as store:
        for start in range(0, n, 500):  # as the live writer writes: many small chunks
            sl = slice(start, start + 500)
            store.append_arrays("battery", t[sl], {k: v[sl] for k, v in _vals(i).items()})
        now_s = (T0_US + n * 1_000_000) / 1e6
        res = downsample.downsample(store, keep_full_s=3600, interval_s=60, now_s=now_s, piece_s=2000)
        raw = store.read()
        summ = downsample.read_summaries(store, channels=["battery"])
    assert res.rows_summarised == 2 * 3600
    assert len(summ) == 120 and (summ["n"] == 60).all()
    assert len(raw) == 3600
    assert raw["t"].iloc[0].value // 1000 == T0_US + 2 * 3600 * 1_000_000
    t_h = (t - t[0]) / 3.6e9
    total_ref = np.trapezoid(i.astype(np.float32).astype(float), t_h)  # the store keeps float32
    raw_i = raw["current_A"].to_numpy()
    raw_t = (raw["t"].astype("int64").to_numpy() - raw["t"].astype("int64").to_numpy()[0]) / 3.6e9
    assert summ["charge_Ah"].sum() + np.trapezoid(raw_i, raw_t) == pytest.approx(total_ref, rel=1e-6)


def test_downsample_leaves_imported_chunks_alone(tmp_path):
    with Store(tmp_path / "s.sqlite") as store:
        iid = store.record_import(path="x.csv", sha256="0" * 64, rows_stored=10, rows_rejected=0, summary={})
        t = T0_US + np.arange(10, dtype=np.int64) * 1_000_000
        store.append_arrays("battery", t, _vals(np.zeros(10)), import_id=iid)
        res = downsample.downsample(store, keep_full_s=60, now_s=T0_US / 1e6 + 86_400)
        assert res.rows_summarised == 0 and len(store.read()) == 10


def test_second_pass_over_the_same_interval_merges_into_the_summary(tmp_path):
    with Store(tmp_path / "s.sqlite") as store:
        t = T0_US + np.arange(30, dtype=np.int64) * 1_000_000
        store.append_arrays("battery", t, _vals(np.full(30, 2.0), np.full(30, 12.0)))
        downsample.downsample(store, keep_full_s=60, now_s=T0_US / 1e6 + 3600)
        store.append_arrays("battery", t + 30_000_000, _vals(np.full(30, 2.0), np.full(30, 14.0)))
        downsample.downsample(store, keep_full_s=60, now_s=T0_US / 1e6 + 3600)
        (row,) = downsample.read_summaries(store).itertuples()
    assert row.n == 60
    assert row.voltage_V_mean == pytest.approx(13.0)
    assert (row.voltage_V_min, row.voltage_V_max) == (12.0, 14.0)


def test_compact_merges_small_live_chunks_and_keeps_every_reading(tmp_path):
    with Store(tmp_path / "s.sqlite") as store:
        t = T0_US + np.arange(1000, dtype=np.int64) * 10_000
        for start in range(0, 1000, 25):
            sl = slice(start, start + 25)
            store.append_arrays("battery", t[sl], {k: v[sl] for k, v in _vals(np.arange(1000.0)).items()})
        before = store.read()
        new_ids = downsample.compact(store, older_than_s=0, now_s=T0_US / 1e6 + 10_000)
        after = store.read()
        chunks = store.execute("SELECT id FROM chunks").fetchall()
    assert [c[0] for c in chunks] == new_ids and len(new_ids) == 1
    assert after.equals(before)


def test_compact_leaves_the_writers_correctable_chunks_alone(tmp_path):
    with Store(tmp_path / "s.sqlite") as store:
        for k in range(4):
            t = T0_US + np.arange(k * 10, k * 10 + 10, dtype=np.int64) * 1_000_000
            store.append_arrays("battery", t, _vals(np.zeros(10)))
        downsample.compact(store, older_than_s=0, now_s=T0_US / 1e6 + 10_000, exclude_id_ranges=[(3, 4)])
        ids = [r[0] for r in store.execute("SELECT id FROM chunks ORDER BY id")]
        assert ids == [3, 4, 5]  # 1 and 2 merged into 5; 3 and 4 left alone
