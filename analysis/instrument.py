"""What the shunts themselves leave unknown: zero offset and gain, as Ah per day.

A shunt monitor's reading is ``gain x (true current + offset)``. The gain error
scales with what flowed; the zero offset adds the same current every hour, whether
anything flows or not, so over a 24 h day a 50 mA offset is 1.2 Ah - 4 % of a
30 Ah day. A charge source's offset can be read off its idle hours (a solar
controller at night: :func:`analysis.ledger.idle_offset_A`), but the battery
shunt never idles while anything is connected, so its offset is not observable
from the log; zeroing the monitor with every load and charger off removes it
(common practice in the monitor's set-up).

The gain bound is from memory of shunt data sheets (shunts are sold at
+-0.25..0.5 % resistance tolerance; the amplifier adds about as much). The zero
offset bound cannot be learned from a log: 75 mA was chosen on the tune half of
the independent test family (its loggers draw offsets of 10-60 mA; 50 mA held
the truth on 91 % of those days, 75 mA on all), not from a standard. A monitor
zeroed at installation does far better. Where a log's measured idle offsets are
larger, those are taken instead (same maker, same kind of error). See
docs/validation.md for what the bounds give on the report half.
"""

from __future__ import annotations

import numpy as np

#: 95 % bound of a shunt channel's zero offset [A] (chosen on the tune half; see module doc).
SHUNT_OFFSET95_A: float = 0.075

#: 95 % bound of a shunt channel's gain error [fraction of what flowed] (from memory).
SHUNT_GAIN95: float = 0.01


def offset_bound_A(idle_offsets_A: list[float]) -> float:
    """95 % bound of the battery shunt's unseen zero offset [A].

    The default bound, or the largest idle offset the same log showed on another
    channel if that is larger (its instrument errs at least that much).
    """
    seen = [abs(x) for x in idle_offsets_A if np.isfinite(x)]
    return max([SHUNT_OFFSET95_A, *seen])


def daily_half_width_Ah(hours: np.ndarray, flows_Ah: list[np.ndarray], offset95_A: float,
                        *, measured_twice: bool = False) -> np.ndarray:
    """95 % half-width of a day's consumed Ah from the instruments alone [Ah].

    ``hours``: hours of battery-shunt data per day; ``flows_Ah``: per-day Ah each
    channel's gain error applies to (consumed, each source's delivered charge).
    The offset and the gains are independent, so they add in quadrature.
    ``measured_twice``: the load was also on its own shunt and the two figures
    are averaged, which divides the variance by two.
    """
    var = (offset95_A * np.asarray(hours, float)) ** 2
    for f in flows_Ah:
        var = var + (SHUNT_GAIN95 * np.asarray(f, float)) ** 2
    if measured_twice:
        var = var / 2.0
    return np.sqrt(var)
