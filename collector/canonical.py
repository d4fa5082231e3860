"""The canonical reading every source is normalised to (docs/contracts.md#canonical-reading, a contract).

A canonical frame is a *long* pandas DataFrame with one row per (time, channel):

========== ================================================================
column      meaning
========== ================================================================
t           UTC timestamp, ``datetime64[us, UTC]``
channel     text: battery, solar, alternator, shore, load, or a user name
voltage_V   terminal voltage [V], NaN when not measured
current_A   current [A]; **positive into the bank (charging)**, negative out.
            A charge-source channel (solar, alternator, shore) is positive
            when it delivers; a load channel is negative.
temperature_C  [degC], NaN when not measured (value columns are float32, as stored)
soc_pct     the device's own state of charge [%], never trusted as truth
========== ================================================================
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:  # pandas loads on first use: an import that only parses and stores never needs it
    import pandas as pd

VALUE_COLUMNS: tuple[str, ...] = ("voltage_V", "current_A", "temperature_C", "soc_pct")
COLUMNS: tuple[str, ...] = ("t", "channel", *VALUE_COLUMNS)
KNOWN_CHANNELS: tuple[str, ...] = ("battery", "solar", "alternator", "shore", "load")
CHARGE_SOURCES: tuple[str, ...] = ("solar", "alternator", "shore")


def empty_frame() -> pd.DataFrame:
    """A canonical frame with no rows but the right dtypes."""
    import pandas as pd

    return pd.DataFrame(
        {
            "t": pd.Series([], dtype="datetime64[us, UTC]"),
            "channel": pd.Series([], dtype="object"),
            **{c: pd.Series([], dtype="float32") for c in VALUE_COLUMNS},
        }
    )


def to_epoch_us(t: pd.Series | pd.DatetimeIndex | np.ndarray) -> np.ndarray:
    """UTC timestamps as int64 microseconds since 1970 (unit-safe under pandas 2 and 3)."""
    import pandas as pd

    idx = pd.DatetimeIndex(t)
    if idx.tz is None:
        raise ValueError("timestamps must be timezone-aware (UTC inside, local only at the edges)")
    return idx.tz_convert("UTC").as_unit("us").asi8.astype(np.int64, copy=False)


def from_epoch_us(us: np.ndarray) -> pd.DatetimeIndex:
    import pandas as pd

    return pd.DatetimeIndex(np.asarray(us, dtype="int64").view("datetime64[us]")).tz_localize("UTC")
