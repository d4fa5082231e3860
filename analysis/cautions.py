"""Safety cautions that travel with every sizing or wiring recommendation.

Plain sentences, each with its reason. The list is built from the situation
(chemistry, logged temperatures, a DC-DC charger in the plan, an alternator
rating) so that a caution only says what applies, but the general ones -
local codes and a qualified installer, fuse at the source - always appear.
"""

from __future__ import annotations

GENERAL = ("Follow local electrical codes and have a qualified installer design or check the "
           "installation; these figures are a starting point, not a certificate.")
FUSE_AT_SOURCE = ("Fit each fuse close to the battery or source it protects (within 175 mm / 7 in; "
                  "ABYC E-11 11.12.1.1), and never fit a fuse larger than the cable's ampacity.")
INTERRUPT_LFP = ("A lithium (LiFePO4) bank can deliver several kA into a short circuit: the main fuse "
                 "must have an interrupt rating above that (common practice: a high-interrupt battery "
                 "fuse or class T fuse), not an automotive blade or plain ANL-type fuse.")
INTERRUPT_LEAD = ("A lead-acid bank can deliver thousands of amps into a short circuit: choose a main "
                  "fuse whose interrupt rating exceeds it.")
LFP_COLD = ("Lithium (LiFePO4) must not be charged below 0 °C (common practice; lithium plating): "
            "use a BMS with low-temperature charge cut-off, or heat the bank.")
STARTER = ("Protect the starter battery: trigger the DC-DC charger on ignition, D+ or an engine-running "
           "signal (smart alternators can sit at 12.2-12.8 V), keep a low-voltage cut-off on the starter "
           "side, and fuse the run at the starter battery.")
ASSUMPTIONS = ("The run lengths, temperatures, insulation rating and bundling used are listed under "
               "'assumptions': re-run 'drawdown wire' with your real values before buying cable.")


def build_cautions(*, chemistry: str, min_temperature_C: float | None = None,
                   has_dc_dc: bool = False, alternator_input_A: float | None = None,
                   alternator_rating_A: float | None = None, extra: list[str] | None = None) -> list[str]:
    """The cautions for one recommendation.

    Parameters
    ----------
    chemistry : str
        Battery chemistry ("lifepo4", "agm", "gel", "flooded").
    min_temperature_C : float, optional
        Lowest temperature seen in the logs [degC]; below 0 degC with lithium
        adds a pointed warning with the value.
    has_dc_dc : bool
        A DC-DC charger is part of the plan (starter-battery protection).
    alternator_input_A, alternator_rating_A : float, optional
        DC-DC input current and the alternator's rating [A]; hot output is
        roughly 60-70 % of the rating (common practice), so a draw above 50 % of
        the rating is flagged.
    extra : list of str
        Situation-specific cautions appended at the end.
    """
    out = [GENERAL, FUSE_AT_SOURCE, INTERRUPT_LFP if chemistry == "lifepo4" else INTERRUPT_LEAD]
    if chemistry == "lifepo4":
        if min_temperature_C is not None and min_temperature_C < 0:
            out.append(f"The logs went down to {min_temperature_C:.1f} °C. " + LFP_COLD)
        else:
            out.append(LFP_COLD)
    if has_dc_dc:
        out.append(STARTER)
        if alternator_input_A is not None:
            if alternator_rating_A is None:
                out.append(f"The DC-DC charger draws about {alternator_input_A:.0f} A from the alternator: "
                           f"check its rating is at least {2 * alternator_input_A:.0f} A (hot output is "
                           "roughly 60-70 % of the rating; common practice).")
            elif alternator_input_A > 0.5 * alternator_rating_A:
                out.append(f"The DC-DC charger's {alternator_input_A:.0f} A input is "
                           f"{100 * alternator_input_A / alternator_rating_A:.0f} % of the "
                           f"{alternator_rating_A:.0f} A alternator rating: a hot alternator gives roughly "
                           "60-70 % of its rating and the vehicle needs the rest; choose a smaller charger "
                           "or limit its current (common practice: keep it below 50 %).")
    out.append(ASSUMPTIONS)
    out.extend(extra or [])
    return out
