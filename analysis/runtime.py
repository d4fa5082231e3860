"""Runtime left: at the present draw and over a typical day, within the usable depth of discharge.

Usable charge left is ``C * (SoC/100 - (1 - max_DoD))`` [Ah]: the part of the
present state of charge above the reserve, the lowest planned state of charge
``1 - max_DoD`` (chemistry defaults in analysis.system, common practice: 50 % for
cycled lead-acid, 20 % for LiFePO4). At a constant draw the runtime follows
Peukert: a draw above the rated current empties the bank faster,
``t = Ah_left / I_eff`` with ``I_eff`` the clamped Peukert-corrected current.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from drawdown.analysis.peukert import effective_current
from drawdown.analysis.system import System


@dataclass(frozen=True)
class RuntimeEstimate:
    """Runtime left; None values carry a reason in the matching ``*_why``."""

    soc_now_pct: float | None
    usable_left_Ah: float | None
    capacity_Ah: float
    capacity_source: str
    max_dod: float
    present_draw_A: float | None
    hours_at_present_draw: float | None
    hours_at_present_draw_why: str | None
    typical_day_consumed_Ah: float | None
    typical_day_charged_Ah: float | None
    days_without_charging: float | None
    days_at_typical_day: float | None
    days_why: str | None
    reserve_pct: float | None = None   # the lowest planned state of charge, 100 (1 - max_dod) [%]

    def to_json(self) -> dict:
        out = dict(self.__dict__)
        for k, v in out.items():
            if isinstance(v, float):
                out[k] = round(v, 3)
        return out


def runtime_left(*, soc_now_pct: float | None, last_hour_net_A: float | None, ledger_days: pd.DataFrame,
                 system: System, capacity_Ah: float | None, peukert_k: float) -> RuntimeEstimate:
    """Runtime left at the present draw and at the typical day.

    Parameters
    ----------
    soc_now_pct : state of charge at the end of the log [%]
    last_hour_net_A : mean net battery current over the last hour [A] (negative = discharging)
    ledger_days : the daily ledger (analysis.ledger); complete days make the typical day
    system : system description
    capacity_Ah : usable capacity estimate [Ah]; None falls back to the rated capacity
    peukert_k : Peukert exponent used for the present-draw runtime
    """
    b = system.battery
    cap = capacity_Ah if capacity_Ah else b.rated_capacity_Ah
    src = "estimated usable capacity" if capacity_Ah else "rated capacity (usable capacity unknown)"
    dod = b.effective_max_dod
    left = None
    if soc_now_pct is not None and np.isfinite(soc_now_pct):
        left = max(0.0, cap * (soc_now_pct / 100.0 - (1.0 - dod)))
    hours, why = None, None
    if left is None:
        why = "no state of charge (no battery channel)"
    elif last_hour_net_A is None or not np.isfinite(last_hour_net_A):
        why = "no readings in the last hour of the log"
    elif last_hour_net_A >= -0.05:
        why = f"the bank is not discharging at the end of the log (net {last_hour_net_A:+.2f} A)"
    else:
        i_eff = float(effective_current(last_hour_net_A, b.rated_current_A, peukert_k))
        hours = left / i_eff
    complete = ledger_days[ledger_days["complete"]] if len(ledger_days) else ledger_days
    cons = chg = d_none = d_typ = None
    dwhy = None
    if len(complete) == 0:
        dwhy = "no complete day in the log to make a typical day"
    else:
        cons = float(complete["consumed_Ah"].median())
        chg = float(complete[[c for c in complete.columns if c.startswith("charged_Ah_")]].sum(axis=1).median())
        if left is None:
            dwhy = "no state of charge (no battery channel)"
        elif cons <= 0:
            dwhy = "typical day consumes nothing"
        else:
            d_none = left / cons
            net = cons - chg * b.effective_charge_efficiency
            if net > 0:
                d_typ = left / net
            else:
                dwhy = "a typical day charges at least what it uses: the bank does not run down"
    return RuntimeEstimate(soc_now_pct, left, float(cap), src, dod, last_hour_net_A, hours, why, cons, chg,
                           d_none, d_typ, dwhy, 100.0 * (1.0 - dod))
