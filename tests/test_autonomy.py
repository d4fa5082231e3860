"""Block-bootstrap autonomy simulation: the day-by-day bank balance and the resampling."""

from __future__ import annotations

import numpy as np
import pytest

from drawdown.analysis import autonomy as au


def test_constant_drain_without_sun_lasts_usable_over_daily_use():
    # Energy balance (no charge): days = usable energy / daily use exactly, interpolated within the day.
    cons = np.full((5, 20), 300.0)
    sol = np.zeros((5, 20))
    days = au.days_to_reserve(np.array([1000.0, 1500.0]), np.array([0.0, 0.0]), cons, sol)
    assert days[0] == pytest.approx(1000 / 300)
    assert days[1] == pytest.approx(5.0)


def test_solar_above_use_never_reaches_the_floor_and_is_censored():
    cons = np.full((3, 15), 300.0)
    sol = np.full((3, 15), 2.0)  # Wh per W per day
    days = au.days_to_reserve(np.array([500.0]), np.array([200.0]), cons, sol)
    assert np.all(days == 15)
    s = au.summarise(days[0], target_days=3, percentile=90, horizon_days=15)
    assert s.censored_fraction == 1.0 and s.meets_target


def test_bank_cannot_store_more_than_its_usable_energy():
    # A sunny day cannot bank energy beyond "full": after a huge surplus the next deficit starts from full.
    cons = np.array([[0.0, 600.0, 600.0]])
    sol = np.array([[100.0, 0.0, 0.0]])
    days = au.days_to_reserve(np.array([1000.0]), np.array([100.0]), cons, sol)
    assert days[0, 0] == pytest.approx(1 + 1000 / 600)


def test_charge_efficiency_scales_the_solar_credit():
    cons = np.full((1, 10), 500.0)
    sol = np.full((1, 10), 1.0)
    d_full = au.days_to_reserve(np.array([1000.0]), np.array([250.0]), cons, sol, charge_efficiency=1.0)
    d_half = au.days_to_reserve(np.array([1000.0]), np.array([250.0]), cons, sol, charge_efficiency=0.5)
    assert d_full[0, 0] == pytest.approx(1000 / 250)
    assert d_half[0, 0] == pytest.approx(1000 / 375)


def test_more_usable_energy_never_gives_fewer_days():
    rng = np.random.default_rng(3)
    cons = rng.uniform(200, 900, (200, 40))
    sol = rng.uniform(0, 4, (200, 40))
    u = np.array([500.0, 800.0, 1200.0, 2000.0, 4000.0])
    days = au.days_to_reserve(u, np.full(5, 150.0), cons, sol)
    assert np.all(np.diff(days, axis=0) >= -1e-12)


def test_bootstrap_blocks_are_consecutive_days_wrapping_around():
    idx = au.block_bootstrap_indices(10, 12, 50, block_days=4, seed=1)
    assert idx.shape == (50, 12)
    blocks = idx.reshape(50, 3, 4)
    assert np.all((np.diff(blocks, axis=2) % 10) == 1)


def test_bootstrap_is_reproducible_with_its_seed():
    a = au.block_bootstrap_indices(30, 20, 10, seed=7)
    b = au.block_bootstrap_indices(30, 20, 10, seed=7)
    assert np.array_equal(a, b)


def test_resampling_pairs_keeps_the_consumption_solar_correlation():
    # Resampling day indices (not each series separately) keeps each day's pair together, so the
    # correlation of the resampled pairs equals the observed one (block bootstrap property).
    rng = np.random.default_rng(5)
    sol = rng.uniform(0, 5, 60)
    cons = 900 - 100 * sol + rng.normal(0, 30, 60)
    idx = au.block_bootstrap_indices(60, 60, 500, seed=2)
    r_obs = np.corrcoef(cons, sol)[0, 1]
    r_res = np.corrcoef(cons[idx].ravel(), sol[idx].ravel())[0, 1]
    assert r_obs < -0.9
    assert r_res == pytest.approx(r_obs, abs=0.02)


def test_summary_p90_is_the_days_ninety_percent_of_sequences_reach():
    days = np.arange(1, 101, dtype=float)  # 1..100 days
    s = au.summarise(days, target_days=11, percentile=90, horizon_days=200)
    assert s.days_p90 == pytest.approx(np.quantile(days, 0.1))
    assert s.days_p50 == pytest.approx(50.5)
    assert s.chance_reserve_within_target == pytest.approx(0.10)  # 1..10 days fall short of 11
    assert not s.meets_target  # p90 = 10.9 < 11


def test_no_observed_days_is_rejected():
    with pytest.raises(ValueError, match="at least one observed day"):
        au.block_bootstrap_indices(0, 10, 10)
