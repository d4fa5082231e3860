"""``drawdown wire``: size one cable run - cross-section, voltage drop, fuse.

``--length`` is the one-way run [m] (the return conductor doubles it),
``--voltage`` the nominal system voltage, ``--max-drop`` the limit in % (3 by
default: charging and critical circuits; 10 for non-critical loads).

When no standard size (up to 120 mm2 / 4/0 AWG, or 800 A of fuse) satisfies
the limits, the command still exits 0 - the input was valid - and prints the
size keys as null with a ``..._why`` key saying why and what to do (parallel
conductors, a shorter run, a higher system voltage). Invalid input (negative
current, zero length, ...) exits 2 naming the option.
"""

from __future__ import annotations

import argparse
import math

from drawdown.dashboard import labels
from drawdown.cli.context import UsageError, print_json

NAME = "wire"
HELP = "size one cable run: cross-section, voltage drop, fuse"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("--current", type=float, required=True, metavar="A", help="continuous current [A]")
    s.add_argument("--length", type=float, required=True, metavar="M", help="one-way run [m]")
    s.add_argument("--voltage", type=float, required=True, metavar="V", help="nominal system voltage [V]")
    s.add_argument("--max-drop", type=float, default=3.0, metavar="PCT", help="voltage-drop limit [%%] (default 3)")
    s.add_argument("--insulation", type=int, default=105, choices=[60, 75, 90, 105, 125],
                   help="insulation temperature rating [degC] (default 105)")
    s.add_argument("--ambient", type=float, default=30.0, metavar="C", help="conductor temperature assumed [degC]")
    s.add_argument("--bundled", type=int, default=1, metavar="N", help="current-carrying conductors bundled together")
    s.add_argument("--engine-space", action="store_true", help="run passes through an engine space")
    s.add_argument("--json", action="store_true")


#: The bank voltages this sizes [V]: 6 V (two-cell lead-acid, golf-cart banks) up to 60 V, the
#: top of a 48 V bank while charging and the limit of extra-low-voltage DC work (the same
#: range as ``nominal_voltage_V`` in system.toml).
BANK_VOLTAGE_MIN_V = 6.0
BANK_VOLTAGE_MAX_V = 60.0


def _check(option: str, value: float, *, low: float = 0.0, high: float = math.inf, strict: bool = True) -> None:
    bad = not math.isfinite(value) or (value <= low if strict else value < low) or value > high
    if bad:
        rng = f"> {low:g}" if strict else f">= {low:g}"
        if math.isfinite(high):
            rng += f" and <= {high:g}"
        raise UsageError(f"{option} {value:g}: expected a number {rng}")


def run(args, ctx) -> int:
    from drawdown.analysis.wiring import circuit_for_drop, size_run

    _check("--current", args.current, high=5000)
    _check("--length", args.length, high=1000)
    if not (math.isfinite(args.voltage) and BANK_VOLTAGE_MIN_V <= args.voltage <= BANK_VOLTAGE_MAX_V):
        raise UsageError(f"--voltage {args.voltage:g}: expected the bank's nominal DC voltage, "
                         f"{BANK_VOLTAGE_MIN_V:g} to {BANK_VOLTAGE_MAX_V:g} V (12, 24 or 48 V systems; "
                         "mains AC wiring is outside what this sizes)")
    _check("--max-drop", args.max_drop, high=49)
    _check("--ambient", args.ambient, low=-40, high=150, strict=False)
    if args.bundled < 1:
        raise UsageError(f"--bundled {args.bundled}: expected 1 or more conductors")
    if args.ambient >= args.insulation:
        raise UsageError(f"--ambient {args.ambient:g}: must be below the insulation rating "
                         f"(--insulation {args.insulation}); choose a higher-rated insulation")
    circuit, drop = circuit_for_drop(args.max_drop)
    try:
        r = size_run(args.current, args.length, args.voltage, name="run", max_drop_pct=drop, circuit=circuit,
                     insulation_C=args.insulation, conductor_temperature_C=args.ambient,
                     bundled=args.bundled, engine_space=args.engine_space)
    except ValueError as exc:
        raise UsageError(str(exc)) from None
    if args.json:
        print_json(r.to_json())
        return 0
    print("\n".join(describe(r)))
    return 0


def describe(r) -> list[str]:
    """Readable lines for one sized run (used by ``size`` too)."""
    a = r.assumptions
    lines = [f"Run: {r.current_A:.1f} A over {r.length_m:g} m one way ({2 * r.length_m:g} m round trip) "
             f"at {r.voltage_V:g} V, drop limit {r.max_drop_pct:g} %"]
    if r.cross_section_mm2 is None:
        lines.append(f"  No single standard cable fits: {r.why}.")
    else:
        m, g = r.metric, r.awg_choice
        lines.append(f"  Metric: {m.size} - drop {m.voltage_drop_V:.3f} V ({m.voltage_drop_pct:.2f} %), "
                     f"ampacity {m.ampacity_A:.0f} A after derates")
        lines.append(f"  AWG:    {g.size} ({g.cross_section_mm2:.2f} mm2) - drop {g.voltage_drop_V:.3f} V "
                     f"({g.voltage_drop_pct:.2f} %), ampacity {g.ampacity_A:.0f} A after derates")
        lines.append(f"  Fuse:   {r.fuse_A:g} A (>= 125 % of {r.protect_current_A:.1f} A, <= cable ampacity "
                     f"{r.ampacity_A:.0f} A)")
    lines.append(f"  Drop limit: {r.drop_limit_source}")
    lines.append(f"  Minimum area for the drop alone: {r.min_area_for_drop_mm2:.2f} mm2")
    lines.append(f"  Placement: {r.placement}")
    lines.append(f"  Assumptions: conductor at {a['conductor_temperature_C']:g} degC, {a['insulation_rating_C']} degC "
                 f"insulation, {a['bundled_conductors']} bundled, engine space {'yes' if a['engine_space'] else 'no'}, "
                 f"derate x{a['derate_total']:g}; ampacity from {a['ampacity_table']}")
    for n in r.notes:
        lines.append(f"  Note: {n}")
    for c in r.cautions:
        lines.append(f"  Caution: {c}")
    return [labels.for_people(line) for line in lines]  # mm², °C as the trade writes them
