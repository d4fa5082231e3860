"""Numbers made ready for report JSON: rounded, and None where there is no finite value."""

from __future__ import annotations

import math
from typing import Any


def rounded(x: Any, nd: int) -> Any:
    """``x`` rounded to ``nd`` decimals; None for None, NaN or infinity; non-numbers unchanged.

    Report JSON carries ``null`` where a value is unknown (never NaN, which is not JSON).
    """
    if x is None:
        return None
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return x
    return round(xf, nd) if math.isfinite(xf) else None
