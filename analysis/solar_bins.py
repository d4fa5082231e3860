"""Fixed-interval means of a canonical long frame, vectorised (no per-row Python).

A year of 1 Hz readings is tens of millions of rows; every solar/charging
computation starts by reducing them to 1-, 5- or 10-minute means with
``numpy.bincount`` on integer bin numbers, which takes well under a second.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
import pandas as pd

from drawdown.analysis.readings import epoch_us


@dataclass(frozen=True)
class Grid:
    """A regular UTC grid: bin ``i`` covers ``[start + i·width, start + (i+1)·width)``."""

    start_us: int
    width_us: int
    n: int

    @property
    def width_h(self) -> float:
        return self.width_us / 3.6e9

    @property
    def starts(self) -> pd.DatetimeIndex:
        us = self.start_us + self.width_us * np.arange(self.n, dtype=np.int64)
        return pd.DatetimeIndex(us.view("datetime64[us]")).tz_localize("UTC")

    @property
    def centres(self) -> pd.DatetimeIndex:
        return self.starts + pd.Timedelta(microseconds=self.width_us // 2)

    def index_of(self, t_us: np.ndarray) -> np.ndarray:
        return (t_us - self.start_us) // self.width_us


def channel_mask(readings: pd.DataFrame, channel: str) -> np.ndarray:
    """Boolean mask of the rows of ``channel`` (works for category and object dtypes)."""
    if readings.empty:
        return np.zeros(0, dtype=bool)
    return (readings["channel"] == channel).to_numpy(dtype=bool, na_value=False)


def bin_mean(t_us: np.ndarray, values: np.ndarray, grid: Grid, *,
             clip_min: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Mean of ``values`` in each bin of ``grid`` and the number of samples.

    NaN values and samples outside the grid are ignored; an empty bin's mean
    is NaN. ``clip_min`` clips each sample before averaging.
    """
    v = np.asarray(values, dtype=float)
    if clip_min is not None:
        v = np.maximum(v, clip_min)  # NaN stays NaN
    idx = grid.index_of(np.asarray(t_us, dtype=np.int64))
    ok = np.isfinite(v) & (idx >= 0) & (idx < grid.n)
    counts = np.bincount(idx[ok], minlength=grid.n)[: grid.n]
    sums = np.bincount(idx[ok], weights=v[ok], minlength=grid.n)[: grid.n]
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
    return mean, counts


def channel_bin_mean(readings: pd.DataFrame, channel: str, column: str, grid: Grid, *,
                     t_us: np.ndarray | None = None,
                     clip_min: float | None = None) -> tuple[np.ndarray, np.ndarray]:
    """:func:`bin_mean` of one column of one channel of a canonical long frame."""
    if readings.empty or column not in readings:
        return np.full(grid.n, np.nan), np.zeros(grid.n, dtype=np.int64)
    mask = channel_mask(readings, channel)
    if not mask.any():
        return np.full(grid.n, np.nan), np.zeros(grid.n, dtype=np.int64)
    if t_us is None:
        t_us = epoch_us(readings["t"])
    return bin_mean(t_us[mask], readings[column].to_numpy()[mask].astype(float), grid,
                    clip_min=clip_min)


_BLOCK = 2_000_000  # samples per pass: bounds the float64 temporaries (~16 MB each)


def _channel_rows(readings: pd.DataFrame, channel: str) -> slice | np.ndarray | None:
    """The rows of one channel: a slice when they are contiguous (the store's order), else indices."""
    col = readings["channel"]
    if isinstance(col.dtype, pd.CategoricalDtype):
        if channel not in col.cat.categories:
            return None
        codes = col.cat.codes.to_numpy()  # a view: int8/int16, no copy of the frame
        mask = codes == col.cat.categories.get_loc(channel)
    else:
        mask = channel_mask(readings, channel)
    count = int(np.count_nonzero(mask))
    if count == 0:
        return None
    first = int(np.argmax(mask))
    if mask[first:first + count].all():
        return slice(first, first + count)
    return np.flatnonzero(mask)


class ChannelBinner:
    """Interval means of several columns of a long frame, finding each channel's rows once.

    The store returns rows ordered by channel then time, so a channel is one
    contiguous block: it is sliced (no copy) rather than masked when it is. Means
    are accumulated in blocks of ``_BLOCK`` samples so that a year at 1 Hz never
    needs a float64 copy of a whole column.
    """

    def __init__(self, readings: pd.DataFrame, grid: Grid, *, t_us: np.ndarray | None = None) -> None:
        self.readings = readings
        self.grid = grid
        self.t_us: np.ndarray = (epoch_us(readings["t"]) if t_us is None and not readings.empty
                                 else t_us if t_us is not None else np.zeros(0, dtype=np.int64))
        self._rows: dict[str, slice | np.ndarray | None] = {}

    def _channel(self, channel: str) -> slice | np.ndarray | None:
        if channel not in self._rows:
            self._rows[channel] = None if self.readings.empty else _channel_rows(self.readings, channel)
        return self._rows[channel]

    def has(self, channel: str) -> bool:
        return self._channel(channel) is not None

    def mean(self, channel: str, column: str, *, clip_min: float | None = None) -> tuple[np.ndarray, np.ndarray]:
        """Mean of ``column`` of ``channel`` per interval, and the sample count."""
        n = self.grid.n
        rows = self._channel(channel)
        if rows is None or column not in self.readings:
            return np.full(n, np.nan), np.zeros(n, dtype=np.int64)
        values = self.readings[column].to_numpy()
        pieces: Iterator[slice | np.ndarray]
        if isinstance(rows, slice):
            lo, hi = rows.start, rows.stop
            pieces = ((slice(a, min(a + _BLOCK, hi))) for a in range(lo, hi, _BLOCK))
        else:
            pieces = (rows[a:a + _BLOCK] for a in range(0, len(rows), _BLOCK))
        counts = np.zeros(n, dtype=np.int64)
        sums = np.zeros(n, dtype=np.float64)
        for piece in pieces:
            v = values[piece].astype(np.float64)
            if clip_min is not None:
                v = np.maximum(v, clip_min)
            idx = self.grid.index_of(self.t_us[piece])
            ok = (idx >= 0) & (idx < n) & np.isfinite(v)
            counts += np.bincount(idx[ok], minlength=n)[:n]
            sums += np.bincount(idx[ok], weights=v[ok], minlength=n)[:n]
        with np.errstate(invalid="ignore", divide="ignore"):
            mean = np.where(counts > 0, sums / np.maximum(counts, 1), np.nan)
        return mean, counts
