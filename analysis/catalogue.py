"""Common nominal sizes that sizing chooses from (no brands).

Sizes are trade-typical nominal ratings (common practice), not any maker's list.
Battery capacities are the Ah of one bank at the system voltage: a 24 V or 48 V
bank of the same Ah is built from 12 V blocks (or cells) in series, so the Ah
list is the same and the energy scales with the voltage.
"""

from __future__ import annotations

#: LiFePO4 bank capacities at any nominal voltage [Ah] (common practice).
LFP_CAPACITIES_AH: tuple[float, ...] = (100, 200, 280, 300, 400, 460, 560)
#: Lead-acid (AGM, gel, flooded) bank capacities: 100 Ah blocks in parallel [Ah] (common practice).
LEAD_ACID_CAPACITIES_AH: tuple[float, ...] = (100, 200, 300, 400, 500, 600, 800)
#: Array sizes: 50 W steps [W] (panels commonly 100/175/200/400 W; common practice).
ARRAY_STEP_W: float = 50.0
ARRAY_MAX_W: float = 2000.0
#: DC-DC (battery-to-battery) charger output currents [A] (common practice).
DC_DC_CURRENTS_A: tuple[float, ...] = (20, 30, 40, 50, 60)
#: Inverter continuous ratings [W] (common practice).
INVERTER_CONTINUOUS_W: tuple[float, ...] = (300, 600, 1000, 1500, 2000, 3000)
#: Surge an inverter of this class usually sustains for a few seconds, as a
#: multiple of its continuous rating (common practice, from memory: 1.5-2x).
INVERTER_SURGE_MULTIPLE: float = 2.0


def battery_capacities_Ah(chemistry: str, *, parallel_max: int = 4) -> tuple[float, ...]:
    """Catalogue capacities for a chemistry, extended with parallel banks of the largest [Ah]."""
    base = LFP_CAPACITIES_AH if chemistry == "lifepo4" else LEAD_ACID_CAPACITIES_AH
    extra = tuple(base[-1] * n for n in range(2, parallel_max + 1))
    return tuple(sorted(set(base + extra)))


def array_sizes_W(present_W: float = 0.0) -> tuple[float, ...]:
    """Array totals from the present array up in 50 W steps [W] (present included)."""
    sizes = {round(present_W, 1)}
    step = ARRAY_STEP_W
    w = step * (int(present_W // step) + 1)
    while w <= max(ARRAY_MAX_W, present_W):
        sizes.add(w)
        w += step
    return tuple(sorted(sizes))


def smallest_at_least(options: tuple[float, ...], need: float) -> float | None:
    """Smallest catalogue value >= need, or None when the catalogue has none."""
    for v in options:
        if v >= need - 1e-9:
            return float(v)
    return None
