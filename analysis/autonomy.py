"""Probabilistic autonomy: how many days parked before the bank reaches its reserve.

The observed days are resampled in blocks of consecutive days (a circular
block bootstrap; Kunsch 1989, Politis & Romano 1992 - from memory), keeping
each day's consumption and solar together so their correlation (a dull day
is often a cold day with the heater on) survives. Each resampled sequence is
run through a day-by-day energy balance of the bank, for every candidate bank
and array at once (numpy arrays of shape (candidates, sequences)).

The model works at day resolution: the bank starts full, each day it loses
that day's consumption and gains ``charge_efficiency * solar``, it cannot hold
more than its usable energy, and it "reaches the reserve" (the lowest planned
state of charge, 1 - max DoD) when its usable energy falls below zero. The
crossing day is interpolated linearly, so results are fractional days.
Sequences that never reach the reserve within the horizon are
censored at the horizon (reported as ">= horizon").
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np


def default_block_days(n_days: int) -> int:
    """Block length ~ n^(1/3) days, at least 1 and at most 7 (a common bootstrap choice)."""
    return int(max(1, min(7, round(n_days ** (1.0 / 3.0)))))


def block_bootstrap_indices(n_days: int, horizon_days: int, n_sequences: int, *,
                            block_days: int | None = None, seed: int = 0) -> np.ndarray:
    """Indices into the observed days for resampled sequences, shape (n_sequences, horizon_days).

    Blocks of ``block_days`` consecutive days start at uniformly drawn days and
    wrap around the end of the record (circular block bootstrap).
    """
    if n_days < 1:
        raise ValueError("n_days = 0: need at least one observed day to resample")
    b = block_days or default_block_days(n_days)
    n_blocks = -(-horizon_days // b)
    rng = np.random.default_rng(seed)
    starts = rng.integers(0, n_days, size=(n_sequences, n_blocks))
    idx = (starts[:, :, None] + np.arange(b)[None, None, :]) % n_days
    return idx.reshape(n_sequences, n_blocks * b)[:, :horizon_days]


def days_to_reserve(usable_Wh: np.ndarray, array_W: np.ndarray, consumption_Wh: np.ndarray,
                  solar_Wh_per_W: np.ndarray, *, charge_efficiency: float = 1.0) -> np.ndarray:
    """Days until each candidate bank reaches its reserve, for each sequence.

    Parameters
    ----------
    usable_Wh : array (C,)
        Usable energy of each candidate bank between full and the reserve [Wh].
    array_W : array (C,)
        Array size of each candidate [W].
    consumption_Wh : array (S, H)
        Daily consumption of each resampled sequence [Wh/day].
    solar_Wh_per_W : array (S, H)
        Daily solar energy delivered to the bank per watt of array [Wh/W/day].
    charge_efficiency : float
        Fraction of the delivered energy the bank can give back [-].

    Returns
    -------
    array (C, S)
        Fractional days before the reserve; ``H`` (the horizon) where it was not reached.
    """
    u = np.asarray(usable_Wh, dtype=float)[:, None]
    a = np.asarray(array_W, dtype=float)[:, None]
    s_count, horizon = consumption_Wh.shape
    x = np.broadcast_to(u, (u.shape[0], s_count)).copy()
    days = np.full(x.shape, float(horizon))
    alive = np.ones(x.shape, dtype=bool)
    for d in range(horizon):  # a loop over simulated days, vectorised over candidates x sequences
        net = consumption_Wh[None, :, d] - charge_efficiency * a * solar_Wh_per_W[None, :, d]
        x_end = np.minimum(u, x - net)
        hit = alive & (x_end < 0)
        if hit.any():
            frac = np.where(net > 0, x / np.where(net > 0, net, 1.0), 0.0)
            days[hit] = d + np.clip(frac[hit], 0.0, 1.0)
            alive &= ~hit
        x = x_end
        if not alive.any():
            break
    return days


@dataclass(frozen=True)
class AutonomySummary:
    """Distribution of days parked before the reserve, for one candidate."""

    days_p50: float
    days_p90: float
    days_at_percentile: float
    percentile: float
    chance_reserve_within_target: float   # chance of reaching the reserve before the target
    target_days: float
    horizon_days: int
    censored_fraction: float
    meets_target: bool


def summarise(days: np.ndarray, *, target_days: float, percentile: float, horizon_days: int) -> AutonomySummary:
    """Summarise simulated days for one candidate (1-D array over sequences).

    ``days_pP`` is the number of days that P % of sequences last at least,
    i.e. the (100 - P)th percentile of the simulated days.
    """
    days = np.asarray(days, dtype=float)
    at_p = float(np.quantile(days, 1 - percentile / 100.0))
    return AutonomySummary(
        days_p50=float(np.quantile(days, 0.5)), days_p90=float(np.quantile(days, 0.1)),
        days_at_percentile=at_p, percentile=percentile,
        chance_reserve_within_target=float(np.mean(days < target_days)), target_days=target_days,
        horizon_days=horizon_days, censored_fraction=float(np.mean(days >= horizon_days)),
        meets_target=bool(at_p >= target_days - 1e-9),
    )
