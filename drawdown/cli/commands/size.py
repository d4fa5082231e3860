"""``drawdown size``: right-sized battery, array, DC-DC charger and inverter, with cable runs.

Reads the stored readings and ``system.toml`` and asks
:func:`analysis.answers.size_answer` -- the same function the Upgrade planner
page calls -- for the answer (daily ledger, measured performance ratio, lowest
temperature and peak DC load, then :func:`analysis.sizing.recommend`). With no
readings it sizes from the ``[[load]]`` inventory; with neither it exits 2
saying what is missing.
"""

from __future__ import annotations

import argparse
import math
import sys

from drawdown.dashboard import labels
from drawdown.cli.context import UsageError, print_json
from drawdown.cli.progress import stages


NAME = "size"
HELP = "right-sizing recommendation"


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("--autonomy-days", type=float, default=None, metavar="N",
                   help="days parked without charging before the bank reaches its reserve, the lowest "
                        "planned state of charge (1 - max_dod) (default 3)")
    s.add_argument("--percentile", type=float, default=90.0, help="design-day percentile (default 90)")
    s.add_argument("--json", action="store_true")


def run(args, ctx) -> int:
    from drawdown.analysis.answers import size_answer
    from drawdown.analysis.sizing import SizingInputError

    from drawdown.analysis.answers import DEFAULT_AUTONOMY_DAYS

    n = DEFAULT_AUTONOMY_DAYS if args.autonomy_days is None else args.autonomy_days
    if not math.isfinite(n) or not 0 < n <= 60:
        raise UsageError(f"--autonomy-days {n:g}: expected 0 < N <= 60 days")
    if not math.isfinite(args.percentile) or not 50 <= args.percentile < 100:
        raise UsageError(f"--percentile {args.percentile:g}: expected 50 <= P < 100 (e.g. 90)")
    system = ctx.load_system()
    readings = None
    with stages("sizing", ["reading the store", "sizing"]) as step:
        if ctx.store_path.exists():
            step("reading the store")
            with ctx.open_store() as store:
                readings = store.read()
        step("sizing")
        try:
            # The same function the Upgrade planner calls: one answer for the same store and targets.
            result = size_answer(readings, system, autonomy_days=n, percentile=args.percentile)
        except SizingInputError as exc:
            raise UsageError(str(exc)) from None
    out = result.to_json()
    if args.json:
        print_json(out)
        return 0
    print("\n".join(describe(out)))
    return 0


def _f(x, fmt: str = ".0f", none: str = "-") -> str:
    return none if x is None else format(x, fmt)


def _gain(row: dict, horizon: float) -> str:
    """What a step row buys over the row above, or nothing to say."""
    gain = row.get("buys_days_at_percentile")
    if gain is None:
        return ""
    if row["at_horizon"]:
        return " (no shortfall within the simulated horizon)" if abs(gain) < 0.05 else f" (at least {gain:+.1f} days)"
    return " (no gain)" if abs(gain) < 0.05 else f" ({gain:+.1f} days)"


def describe(j: dict) -> list[str]:
    """Readable lines for a sizing result (``SizingResult.to_json()``); the planner page shows the same figures."""
    b, s, dc, inv, au, dl = j["battery"], j["solar"], j["dc_dc_charger"], j["inverter"], j["autonomy"], j["design_load"]
    pres = j["present_system"]
    a = j["assumptions"]
    chem = labels.chemistry(b["chemistry"])
    lines = ["Right-sizing recommendation", ""]
    if j.get("verdict"):
        lines += ["In short:", *(f"  {labels.for_people(v)}" for v in j["verdict"]), ""]
    lines.append(f"Design day: {a['design_Wh_per_day']:.0f} Wh ({a['design_Ah_per_day']:.1f} Ah) per day, "
                 f"{dl['percentile']:g}th percentile, from {dl['source']}"
                 + (f" ({dl['n_days']} complete days; mean {dl['mean_Wh_per_day']:.0f} Wh)" if dl['n_days'] else ""))
    pva = dl.get("planned_vs_actual")
    if pva:
        lines.append(f"  Planned {pva['planned_Wh_per_day']:.0f} Wh/day vs measured mean "
                     f"{pva['actual_mean_Wh_per_day']:.0f} Wh/day ({_f(pva['difference_pct'], '+.0f')} %)")
    lines.append(f"Battery: {b['capacity_Ah']:.0f} Ah {chem} at {b['nominal_voltage_V']:g} V "
                 f"(now {b['present_Ah']:.0f} Ah); usable {b['usable_Wh']:.0f} Wh at {b['max_dod'] * 100:.0f} % DoD "
                 f"(keeps a {100 * (1 - b['max_dod']):.0f} % reserve), "
                 f"temperature factor {b['temperature_factor']:.2f}")
    if not b["meets_target"]:
        lines.append(f"  {b['meets_target_why']}")
    month = labels.month(s["design_month"])
    if s.get("array_W") is None:
        lines.append(f"Solar array: no size (now {s['present_W']:.0f} W) - {s.get('array_W_why')}")
    else:
        lines.append(f"Solar array: {s['array_W']:.0f} W (now {s['present_W']:.0f} W); refills the design day in "
                     f"{month} ({s['design_month_psh_h']:.2f} clear-sky sun hours x performance ratio "
                     f"{s['performance_ratio']:.2f}, {s['performance_ratio_source']})")
        if s.get("months_not_covered_why"):
            lines.append(f"  {s['months_not_covered_why']}")
    if dc.get("current_A") is None:
        lines.append(f"DC-DC charger: none - {dc['current_A_why']}")
    else:
        lines.append(f"DC-DC charger: {dc['current_A']:.0f} A (needs {dc['required_A']:.0f} A over "
                     f"{dc['driving_h_per_day']:.1f} h driving, {dc['driving_h_source']}); draws about "
                     f"{dc['input_A']:.0f} A from the alternator")
    if inv.get("continuous_W") is None:
        lines.append(f"Inverter: none - {inv['continuous_W_why']}")
    else:
        lines.append(f"Inverter: {inv['continuous_W']:.0f} W continuous, {inv['surge_W']:.0f} W surge; DC input "
                     f"{inv['dc_input_A_nominal']:.0f} A nominal, {inv['dc_input_A_at_cutoff']:.0f} A at "
                     f"{inv['low_voltage_cutoff_V']:g} V; idle about {inv['idle_Wh_per_day']:.0f} Wh/day")
    p = au["percentile"]
    h = au["horizon_days"]

    def days(x: float) -> str:
        return f">= {h:g}" if x >= h else f"{x:.1f}"

    lines.append(f"Autonomy, days parked from full to the reserve ({au['method']}): median {days(au['days_p50'])} days, "
                 f"{days(au[f'days_p{p:g}'])} days in {p:g} % of spells (target {au['target_days']:g}: "
                 f"{'met' if au['meets_target'] else 'NOT met'}); chance of reaching the reserve within the target "
                 f"{au['chance_reserve_within_target'] * 100:.0f} %")
    pa = pres["autonomy"]
    lines.append(f"  Present system ({pres['battery_Ah']:.0f} Ah, {pres['array_W']:.0f} W): median "
                 f"{days(pa['days_p50'])} days, {days(pa[f'days_p{p:g}'])} days in {p:g} % of spells"
                 + (" - already meets the target" if pa["meets_target"] else " - short of the target"))
    no_logs = not au.get("sequences")
    for key, title in (("battery", "What each battery step buys" + (":" if no_logs else " (with the recommended array):")),
                       ("array", "What each array step buys (with the recommended battery):")):
        rows = j["steps"].get(key, [])
        if not rows:
            if j["steps"].get(f"{key}_why"):
                lines.append(f"Array steps: none - {j['steps'][f'{key}_why']}")
            continue
        lines.append(title)
        for row in rows:
            lines.append(f"  {row['battery_Ah']:.0f} Ah + {row['array_W']:.0f} W: median {days(row['days_p50'])} d, "
                         f"p{p:g} {days(row['days_at_percentile'])} d{_gain(row, h)}"
                         f"{'' if row['meets_target'] else ' - short of the target'}")
    cc = j["cross_check"]
    if cc.get("battery_capacity_Ah") is not None:
        lines.append(f"Cross-check ({cc['method']}): battery {cc['battery_capacity_Ah']:.0f} Ah, array "
                     f"{_f(cc.get('array_W'))} W")
        for e in cc["explanation"]:
            lines.append(f"  {e}")
    lines.append("Cable runs (one-way length; fuse at the source end; each size with its own voltage drop):")
    for r in j["runs"]:
        if r["cross_section_mm2"] is None:
            lines.append(f"  {r['name']}: {r['current_A']:.0f} A over {r['length_m']:g} m - {r['why']}")
        else:
            lines.append(f"  {r['name']}: {r['current_A']:.0f} A over {r['length_m']:g} m -> "
                         f"{r['cross_section_mm2']:g} mm² ({r['voltage_drop_pct']:.1f} % drop) or {r['awg']} AWG "
                         f"({r['awg_choice']['voltage_drop_pct']:.1f} % drop), fuse {r['fuse_A']:g} A")
    lines.append(f"Assumptions: conductor {a['conductor_temperature_C']:g} °C, {a['insulation_rating_C']} °C "
                 f"insulation, not bundled; one-way run lengths {labels.run_lengths(a['run_lengths_one_way_m'])}; "
                 f"{a['simulation']}")
    for n in j["notes"]:
        lines.append(f"Note: {labels.for_people(n)}")
    for c in j["cautions"]:
        lines.append(f"Caution: {labels.for_people(c)}")
    return lines


if __name__ == "__main__":  # pragma: no cover
    sys.exit("run through 'drawdown size'")
