"""Per-channel arrays out of the canonical long frame; sample interval; gaps.

The canonical frame (collector.canonical) is *long*: one row per (time,
channel), ordered by channel then time when it comes from the store. Analysis
works on one channel at a time as plain numpy arrays (time as int64
microseconds since 1970, UTC), which keeps a year at 1 Hz within memory: a
channel's arrays are views of the frame's columns whenever the frame is
ordered, never copies.

A *gap* is a sampling interval longer than ``GAP_FACTOR`` times the channel's
median interval (and at least ``MIN_GAP_S``). Nothing is integrated across a
gap: its energy is unknown, it is reported, and a local day that contains one
is not *complete*.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd

GAP_FACTOR: float = 5.0
MIN_GAP_S: float = 5.0
#: Samples per block for long running passes (bounded temporaries on a year at 1 Hz).
BLOCK: int = 1_000_000
US_PER_S: float = 1e6


@dataclass(frozen=True)
class Channel:
    """One channel's readings as arrays (all the same length, sorted by time).

    Attributes
    ----------
    name : channel name
    t_us : UTC time [int64 microseconds since 1970]
    current_A, voltage_V, temperature_C, soc_pct : float arrays, NaN when not measured
    """

    name: str
    t_us: np.ndarray
    current_A: np.ndarray
    voltage_V: np.ndarray
    temperature_C: np.ndarray
    soc_pct: np.ndarray

    def __len__(self) -> int:
        return len(self.t_us)

    @cached_property
    def dt_h(self) -> np.ndarray:
        """Sampling intervals [h] (float32, length n-1), computed once per channel."""
        out = np.empty(max(len(self.t_us) - 1, 0), dtype=np.float32)
        for lo in range(0, len(out), BLOCK):  # blocks: no full-length int64 temporary
            hi = min(lo + BLOCK, len(out))
            out[lo:hi] = (self.t_us[lo + 1:hi + 1] - self.t_us[lo:hi]) * (1.0 / (US_PER_S * 3600.0))
        return out

    def has(self, column: str) -> bool:
        """True when the column holds at least one value."""
        arr = getattr(self, column)
        return bool(len(arr)) and bool(np.isfinite(arr).any())

    def frame(self) -> pd.DataFrame:
        """The channel as a small wide frame indexed by UTC time (for plots and tests)."""
        idx = pd.DatetimeIndex(self.t_us.view("M8[us]")).tz_localize("UTC")
        return pd.DataFrame({"current_A": self.current_A, "voltage_V": self.voltage_V,
                             "temperature_C": self.temperature_C, "soc_pct": self.soc_pct}, index=idx)


@dataclass(frozen=True)
class Gap:
    """An interval with no readings longer than the gap threshold."""

    channel: str
    start_us: int
    end_us: int

    @property
    def seconds(self) -> float:
        return (self.end_us - self.start_us) / US_PER_S

    def to_json(self) -> dict:
        ts = pd.to_datetime(np.array([self.start_us, self.end_us]), unit="us", utc=True)
        return {"start": ts[0].isoformat(), "end": ts[1].isoformat(), "seconds": round(self.seconds, 3),
                "channel": self.channel}


def epoch_us(t: pd.Series | pd.Index) -> np.ndarray:
    """Timezone-aware times as int64 microseconds since 1970 UTC.

    A view of the times' own buffer when they are already in microseconds (the
    store's unit), so a year at 1 Hz costs no 250 MB copy; ``as_unit`` would copy
    even when the unit is already ``us``.
    """
    values = t.array
    if not isinstance(values.dtype, pd.DatetimeTZDtype):
        raise ValueError("timestamps must be timezone-aware datetimes (UTC inside, local only at the edges), "
                         f"got dtype {values.dtype}")
    if values.unit != "us":
        values = values.as_unit("us")
    raw = getattr(values, "_ndarray", None)  # the datetime64[us] buffer (UTC inside a tz-aware array)
    if isinstance(raw, np.ndarray) and raw.dtype == np.dtype("M8[us]"):
        return raw.view(np.int64)
    return np.asarray(values.asi8)


def split_channels(readings: pd.DataFrame) -> dict[str, Channel]:
    """Split a canonical long frame into one :class:`Channel` per channel name.

    Rows with a missing time are dropped; each channel is sorted by time (a
    no-op, and no copy, for frames read from the store) and repeated
    timestamps keep their last reading.

    Parameters
    ----------
    readings : canonical long frame (columns t, channel, voltage_V, current_A,
        temperature_C, soc_pct; missing value columns are treated as NaN)
    """
    missing = {"t", "channel"} - set(readings.columns)
    if missing:
        raise ValueError(f"readings frame lacks column(s) {sorted(missing)}; expected the canonical "
                         "columns t, channel, voltage_V, current_A, temperature_C, soc_pct")
    n = len(readings)
    if n == 0:
        return {}
    t_all = epoch_us(readings["t"])
    ch = readings["channel"]
    if isinstance(ch.dtype, pd.CategoricalDtype):
        codes = ch.cat.codes.to_numpy()
        names = [str(c) for c in ch.cat.categories]
    else:
        codes_, uniques = pd.factorize(ch.astype(str), sort=True)
        codes, names = codes_, [str(u) for u in uniques]
    cols = {}
    for c in ("current_A", "voltage_V", "temperature_C", "soc_pct"):
        if c not in readings.columns:
            cols[c] = np.full(n, np.nan, dtype=np.float32)
        elif readings[c].dtype in (np.float32, np.float64):
            cols[c] = readings[c].to_numpy()  # float32 (as stored) or float64: no copy
        else:
            cols[c] = readings[c].to_numpy(dtype=float, na_value=np.nan)
    out: dict[str, Channel] = {}
    # Blocks: contiguous runs of one channel code (store order) give views, not copies.
    change = np.flatnonzero(codes[1:] != codes[:-1]) + 1
    starts = np.concatenate(([0], change))
    ends = np.concatenate((change, [n]))
    block_codes = codes[starts]
    contiguous = len(np.unique(block_codes)) == len(block_codes)
    for code in np.unique(block_codes):
        if code < 0:
            continue
        if contiguous:
            b = int(np.flatnonzero(block_codes == code)[0])
            sel: slice | np.ndarray = slice(int(starts[b]), int(ends[b]))
        else:
            sel = np.flatnonzero(codes == code)
        t = t_all[sel]
        arrays = {c: v[sel] for c, v in cols.items()}
        ok = t != np.iinfo(np.int64).min  # NaT
        if len(t) > 1 and (not ok.all() or (np.diff(t) <= 0).any()):
            t, arrays = t[ok], {c: v[ok] for c, v in arrays.items()}
            order = np.argsort(t, kind="stable")
            t = t[order]
            arrays = {c: v[order] for c, v in arrays.items()}
            keep = np.ones(len(t), dtype=bool)
            keep[:-1] = t[1:] != t[:-1]
            t, arrays = t[keep], {c: v[keep] for c, v in arrays.items()}
        if len(t) == 0:
            continue
        out[names[code]] = Channel(names[code], t, **arrays)
    return out


def median_interval_s(t_us: np.ndarray) -> float:
    """Median sampling interval [s] (NaN with fewer than two samples).

    Long channels use the intervals of up to 40 windows of 10 000 samples spread
    over the record (exact for regular logs, a close estimate otherwise) to
    keep memory flat on a year at 1 Hz.
    """
    n = len(t_us)
    if n < 2:
        return float("nan")
    if n <= 400_000:
        return float(np.median(np.diff(t_us))) / US_PER_S
    starts = np.linspace(0, n - 10_001, 40).astype(np.int64)
    d = np.concatenate([np.diff(t_us[s:s + 10_001]) for s in starts])
    return float(np.median(d)) / US_PER_S


def gap_threshold_s(t_us: np.ndarray, *, factor: float = GAP_FACTOR) -> float:
    """The longest interval that is still integrated [s]: ``factor`` median intervals."""
    med = median_interval_s(t_us)
    if not np.isfinite(med):
        return float("inf")
    return max(factor * med, MIN_GAP_S)


def gap_mask(t_us: np.ndarray, *, threshold_s: float | None = None) -> np.ndarray:
    """Boolean per interval (length ``n - 1``): True where the interval is a gap.

    Computed in blocks of 4 M intervals so no full-length int64 temporary is made.
    """
    if threshold_s is None:
        threshold_s = gap_threshold_s(t_us)
    n = len(t_us)
    out = np.zeros(max(n - 1, 0), dtype=bool)
    lim = threshold_s * US_PER_S
    block = BLOCK
    for lo in range(0, n - 1, block):  # a loop over blocks, not rows
        hi = min(lo + block, n - 1)
        np.greater(t_us[lo + 1:hi + 1] - t_us[lo:hi], lim, out=out[lo:hi])
    return out


def find_gaps(channel: Channel, *, threshold_s: float | None = None) -> list[Gap]:
    """Every gap in a channel's sampling, as :class:`Gap` records."""
    mask = gap_mask(channel.t_us, threshold_s=threshold_s)
    idx = np.flatnonzero(mask)
    return [Gap(channel.name, int(channel.t_us[i]), int(channel.t_us[i + 1])) for i in idx]


def local_day_bounds(t_first_us: int, t_last_us: int, timezone: str) -> tuple[np.ndarray, list]:
    """UTC microsecond boundaries of the local calendar days covering a span.

    Returns ``(bounds_us, dates)``: ``bounds_us[i]`` is local midnight starting
    ``dates[i]`` and ``bounds_us[-1]`` the midnight ending the last date, so a
    sample at ``t`` belongs to ``dates[searchsorted(bounds_us, t, 'right') - 1]``.
    Days are 23 or 25 hours long across daylight-saving changes.
    """
    first = pd.Timestamp(int(t_first_us), unit="us", tz="UTC").tz_convert(timezone).normalize()
    last = pd.Timestamp(int(t_last_us), unit="us", tz="UTC").tz_convert(timezone).normalize()
    days = pd.date_range(first.tz_localize(None), last.tz_localize(None) + pd.Timedelta(days=1), freq="D")
    local = days.tz_localize(timezone, ambiguous=True, nonexistent="shift_forward")
    bounds = local.tz_convert("UTC").as_unit("us").asi8.astype(np.int64)
    return bounds, [d.date() for d in days[:-1]]


def day_index(t_us: np.ndarray, bounds_us: np.ndarray) -> np.ndarray:
    """Index of the local day each time falls in (see :func:`local_day_bounds`).

    ``t_us`` must be sorted (every channel is). For long inputs this marks the
    day starts and takes a cumulative sum, O(n) instead of a binary search per sample.
    """
    n = len(t_us)
    if n > 10_000:
        marks = np.zeros(n + 1, dtype=np.int32)
        np.add.at(marks, np.searchsorted(t_us, bounds_us, side="left"), 1)
        out = np.cumsum(marks[:n], dtype=np.int32)
        out -= 1
        return out
    return np.searchsorted(bounds_us, t_us, side="right").astype(np.int32) - 1


def per_day_mean(t_us: np.ndarray, values: np.ndarray, bounds_us: np.ndarray, *,
                 minus: np.ndarray | None = None) -> np.ndarray:
    """Mean of the finite ``values`` (or of ``|values - minus|``) in each local day.

    Works one day at a time on slices of the sorted ``t_us``, so a year at 1 Hz
    never needs a float64 copy of a whole column. NaN for a day with no value.
    """
    pos = np.searchsorted(t_us, bounds_us, side="left")
    out = np.full(len(bounds_us) - 1, np.nan)
    for d in range(len(out)):  # a loop over days, not rows
        seg = values[pos[d]:pos[d + 1]]
        ok = np.isfinite(seg)
        if not ok.any():
            continue
        x = seg[ok].astype(np.float64)
        if minus is not None:
            x = np.abs(x - minus[pos[d]:pos[d + 1]][ok])
        out[d] = float(x.mean())
    return out


def fill0(values: np.ndarray) -> np.ndarray:
    """``values`` with NaN as 0 (no copy when there is no NaN)."""
    if np.isnan(values).any():
        return np.where(np.isnan(values), 0.0, values)
    return values
