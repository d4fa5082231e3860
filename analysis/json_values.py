"""Numbers made ready for report JSON: rounded, and None where there is no finite value."""

from __future__ import annotations

import math
from typing import Any


def finite(x: Any) -> Any:
    """``x`` as a float at full precision; None for None, NaN or infinity; non-numbers unchanged.

    Report JSON carries ``null`` where a value is unknown (never NaN, which is not JSON).
    """
    if x is None:
        return None
    try:
        xf = float(x)
    except (TypeError, ValueError):
        return x
    return xf if math.isfinite(xf) else None


def rounded(x: Any, nd: int) -> Any:
    """``x`` rounded to ``nd`` decimals; None for None, NaN or infinity; non-numbers unchanged."""
    v = finite(x)
    return round(v, nd) if isinstance(v, float) else v


def json_ready(obj: Any, nd: int = 3) -> Any:
    """A JSON-like tree with every float rounded for JSON: ``nd`` decimals, small values to 4 significant digits.

    Small physical values (a cable's resistance per metre, 0.000412 ohm/m) keep their
    significant digits; NaN and infinity become None. Dicts, lists and tuples are walked.
    """
    if isinstance(obj, bool) or obj is None or isinstance(obj, (int, str)):
        return obj
    if isinstance(obj, float):
        if not math.isfinite(obj):
            return None
        if obj == 0.0 or abs(obj) >= 10.0 ** -(nd - 1):
            return round(obj, nd)
        return float(f"{obj:.4g}")
    if isinstance(obj, dict):
        return {k: json_ready(v, nd) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(v, nd) for v in obj]
    try:  # numpy scalars
        import numpy as np

        if isinstance(obj, np.floating):
            return json_ready(float(obj), nd)
        if isinstance(obj, np.integer):
            return int(obj)
        if isinstance(obj, np.bool_):
            return bool(obj)
    except ImportError:  # pragma: no cover
        pass
    return obj
