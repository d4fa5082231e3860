"""Cable and fuse sizing for low-voltage DC runs.

One run is a pair of copper conductors (out and return) of one-way length
``length_m`` carrying ``current_A``. This module picks the smallest standard
conductor - metric (IEC 60228, class 5 flexible) and AWG (ASTM B258) - that
satisfies both

* the **voltage-drop limit** over the round trip, from the conductor's
  resistance at the assumed conductor temperature, and
* the **protection rule**: a standard fuse rating ``F`` with
  ``1.25 * I_continuous <= F <= ampacity`` (after derates), so the fuse
  protects the cable and does not blow at the continuous current.

Sources (see docs/cables.md, docs/chargers.md):

* ASTM B258 - AWG diameters, ``d_n = 0.127 mm * 92 ** ((36 - n) / 39)``.
* IEC 60228 - nominal cross-sections and class 5 maximum resistance at 20 degC.
* IEC 60028 - annealed copper resistivity ``rho_20 = 1/58 ohm mm2/m`` and
  temperature coefficient ``alpha = 0.00393 /K`` (standard values, from memory).
* 33 CFR 183.425 Table 5 - allowable amperage by AWG and insulation rating
  (60/75/90/105/125 degC columns, AWG 18 to 4/0: AWG 2-14 verified per
  docs/cables.md#ampacity; all rows checked against a public copy of the CFR text,
  federal.elaws.us, section 183.425). The table assumes 30 degC ambient and its
  note 1 engine-space factors 50 degC (a marine wire maker's appendix quoting
  the CFR). Engine-space factor for 105 degC: 0.85 (verified, same sources);
  the other ratings' factors from memory. Bundling factors (0.70 for 3
  conductors, 0.60 for 4-6, 0.50 for 7-24, 0.40 for 25 or more) from memory.
* NEC 210.20(A) / 215.3 - overcurrent device >= 125 % of the continuous load
  (from memory); NEC 240.4 - the device protects the conductor (from memory);
  NEC 240.6(A) - standard ampere ratings (from memory), with automotive blade
  ratings below 15 A (common practice).
* Voltage-drop limits: 3 % for panelboard feeders and vital/critical circuits
  (ISO 10133, ABYC E-11); 10 % for non-critical loads (ABYC E-11); 1-3 % for
  charging circuits (common practice) - drawdown uses 3 %.
* Fuse placement: ABYC E-11 11.12.1.1 (2004 text as quoted) - within 175 mm
  (7 in) of the battery or connection point; up to 1.83 m (72 in) if the
  conductor comes from a battery terminal and is sheathed over its whole
  length; up to 1.02 m (40 in) if sheathed and fed from another source.

Metric sizes are not in 33 CFR Table 5. A metric conductor is given the
ampacity of the **largest AWG size whose area does not exceed it** - a cable
at least as large as a tabulated one carries at least its rating, so this is
conservative. The ISO 10133 / ISO 13297 ampacity tables were not verified.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field
from typing import Literal, cast, overload

import numpy as np

# --- copper (IEC 60028) -------------------------------------------------------

#: Resistivity of annealed copper at 20 degC [ohm mm2 / m] (IEC 60028: 1/58).
RHO_20_OHM_MM2_PER_M: float = 1.0 / 58.0
#: Temperature coefficient of resistance of annealed copper at 20 degC [1/K].
ALPHA_PER_K: float = 0.00393


@overload
def copper_resistivity(temperature_C: float = 20.0) -> float: ...


@overload
def copper_resistivity(temperature_C: np.ndarray) -> float | np.ndarray: ...


def copper_resistivity(temperature_C: float | np.ndarray = 20.0) -> float | np.ndarray:
    """Resistivity of annealed copper at a conductor temperature.

    Parameters
    ----------
    temperature_C : float or array
        Conductor temperature [degC].

    Returns
    -------
    float or array
        Resistivity [ohm mm2 / m].

    Notes
    -----
    ``rho_T = rho_20 * (1 + alpha * (T - 20))`` with ``rho_20 = 1/58`` and
    ``alpha = 0.00393 /K`` (IEC 60028, standard values).
    """
    rho = RHO_20_OHM_MM2_PER_M * (1.0 + ALPHA_PER_K * (np.asarray(temperature_C, dtype=float) - 20.0))
    return rho if rho.ndim else float(rho)


def temperature_factor(temperature_C: float) -> float:
    """Resistance at ``temperature_C`` relative to 20 degC [-] (IEC 60028 alpha)."""
    return 1.0 + ALPHA_PER_K * (temperature_C - 20.0)


# --- AWG (ASTM B258) ----------------------------------------------------------

#: Gauges carried, smallest conductor first. "1/0".."4/0" are gauge numbers 0..-3.
AWG_SIZES: tuple[str, ...] = ("18", "16", "14", "12", "10", "8", "6", "4", "2", "1",
                              "1/0", "2/0", "3/0", "4/0")


def awg_number(gauge: str | int) -> int:
    """The ASTM B258 gauge number n for a gauge name ("4" -> 4, "2/0" -> -1)."""
    text = str(gauge).strip().upper().removesuffix("AWG").strip()
    if text.endswith("/0"):
        zeros = int(text[:-2])
        if not 1 <= zeros <= 4:
            raise ValueError(f"unknown AWG size {gauge!r}: expected 1/0..4/0")
        return 1 - zeros
    if text in {"0", "00", "000", "0000"}:
        return 1 - len(text)
    try:
        n = int(text)
    except ValueError:
        raise ValueError(f"unknown AWG size {gauge!r}: expected e.g. '10', '4' or '2/0'") from None
    if not -3 <= n <= 40:
        raise ValueError(f"AWG size {gauge!r} out of range: expected 4/0 (n=-3) to 40")
    return n


def awg_diameter_mm(gauge: str | int) -> float:
    """Conductor diameter of an AWG size [mm].

    Notes
    -----
    ASTM B258: ``d_n = 0.127 mm * 92 ** ((36 - n) / 39)``.
    """
    n = awg_number(gauge)
    return 0.127 * 92.0 ** ((36 - n) / 39.0)


def awg_area_mm2(gauge: str | int) -> float:
    """Cross-sectional area of an AWG size [mm2], ``pi d^2 / 4`` (ASTM B258)."""
    d = awg_diameter_mm(gauge)
    return math.pi * d * d / 4.0


# --- IEC 60228 class 5 --------------------------------------------------------

#: IEC 60228 nominal cross-sections [mm2] with class 5 (flexible) maximum
#: resistance at 20 degC [ohm/km], plain and tinned copper (docs/cables.md#conductor-sizes, verified).
IEC60228_CLASS5_OHM_PER_KM: dict[float, tuple[float, float]] = {
    0.75: (26.0, 26.7), 1.0: (19.5, 20.0), 1.5: (13.3, 13.7), 2.5: (7.98, 8.21),
    4.0: (4.95, 5.09), 6.0: (3.30, 3.39), 10.0: (1.91, 1.95), 16.0: (1.21, 1.24),
    25.0: (0.780, 0.795), 35.0: (0.554, 0.565), 50.0: (0.386, 0.393),
    70.0: (0.272, 0.277), 95.0: (0.206, 0.210), 120.0: (0.161, 0.164),
}
METRIC_SIZES_MM2: tuple[float, ...] = tuple(IEC60228_CLASS5_OHM_PER_KM)


def iec60228_resistance_ohm_per_m(area_mm2: float, *, temperature_C: float = 20.0,
                                  tinned: bool = False) -> float:
    """Class 5 maximum conductor resistance at a temperature [ohm/m].

    The IEC 60228 value is at 20 degC; it is corrected with the IEC 60028
    coefficient ``alpha = 0.00393 /K``.
    """
    try:
        plain, tin = IEC60228_CLASS5_OHM_PER_KM[float(area_mm2)]
    except KeyError:
        raise ValueError(f"{area_mm2} mm2 is not an IEC 60228 nominal size: expected one of "
                         f"{', '.join(f'{a:g}' for a in METRIC_SIZES_MM2)}") from None
    return (tin if tinned else plain) / 1000.0 * temperature_factor(temperature_C)


def awg_resistance_ohm_per_m(gauge: str | int, *, temperature_C: float = 20.0) -> float:
    """Resistance of an AWG conductor from its ASTM B258 area and copper resistivity [ohm/m]."""
    return copper_resistivity(temperature_C) / awg_area_mm2(gauge)


# --- ampacity (33 CFR 183.425 Table 5) ---------------------------------------

INSULATION_RATINGS_C: tuple[int, ...] = (60, 75, 90, 105, 125)

#: Allowable amperage outside engine spaces, 33 CFR 183.425 Table 5, by AWG and
#: insulation rating 60/75/90/105/125 degC (the table's 80 and 200 degC columns
#: are not used). AWG 2-14 verified (docs/cables.md#ampacity); every row checked against a
#: public copy of the CFR text (federal.elaws.us, 33 CFR 183.425).
CFR_TABLE5_A: dict[str, tuple[int, int, int, int, int]] = {
    "18": (10, 10, 20, 20, 25),
    "16": (15, 15, 25, 25, 30),
    "14": (20, 20, 30, 35, 40),
    "12": (25, 25, 40, 45, 50),
    "10": (40, 40, 55, 60, 70),
    "8": (55, 65, 70, 80, 90),
    "6": (80, 95, 100, 120, 125),
    "4": (105, 125, 135, 160, 170),
    "2": (140, 170, 180, 210, 225),
    "1": (165, 195, 210, 245, 265),
    "1/0": (195, 230, 245, 285, 305),
    "2/0": (225, 265, 285, 330, 355),
    "3/0": (260, 310, 330, 385, 410),
    "4/0": (300, 360, 385, 445, 475),
}

#: Engine-space multipliers by insulation rating (33 CFR 183.425 Table 5
#: note 1). 105 degC: 0.85 verified (docs/cables.md#ampacity and a wire maker's CFR
#: appendix); others from memory.
ENGINE_SPACE_FACTOR: dict[int, float] = {60: 0.58, 75: 0.75, 90: 0.82, 105: 0.85, 125: 0.89}

#: The ambient temperature the ampacity table assumes outside engine spaces [degC]
#: (30 degC, as quoted with the CFR table in a marine wire maker's appendix).
TABLE_AMBIENT_C: float = 30.0
#: The ambient the engine-space factors assume [degC] (50 degC, same source).
ENGINE_SPACE_AMBIENT_C: float = 50.0


def bundling_factor(conductors: int) -> float:
    """Ampacity multiplier for current-carrying conductors bundled together [-].

    33 CFR 183.425 (from memory): 1-2 conductors 1.0, 3: 0.70, 4-6: 0.60,
    7-24: 0.50, 25 or more: 0.40.
    """
    if conductors < 1:
        raise ValueError(f"bundled conductors = {conductors}: expected 1 or more")
    if conductors <= 2:
        return 1.0
    if conductors == 3:
        return 0.70
    if conductors <= 6:
        return 0.60
    if conductors <= 24:
        return 0.50
    return 0.40


def ambient_factor(ambient_C: float, insulation_C: int, reference_C: float) -> float:
    """Ampacity correction for an ambient hotter than the table's [-].

    ``sqrt((T_ins - T_amb) / (T_ins - T_ref))``, the usual conductor heating
    correction (NEC 310.15 equation form, from memory). Never above 1: a cool
    ambient is not credited.
    """
    if ambient_C <= reference_C:
        return 1.0
    if ambient_C >= insulation_C:
        return 0.0
    return math.sqrt((insulation_C - ambient_C) / (insulation_C - reference_C))


def awg_ampacity_A(gauge: str, insulation_C: int = 105) -> float:
    """Table ampacity of an AWG size, before derates [A] (33 CFR 183.425 Table 5)."""
    if insulation_C not in INSULATION_RATINGS_C:
        raise ValueError(f"insulation rating {insulation_C} degC: expected one of {INSULATION_RATINGS_C}")
    key = _awg_key(gauge)
    return float(CFR_TABLE5_A[key][INSULATION_RATINGS_C.index(insulation_C)])


def metric_ampacity_A(area_mm2: float, insulation_C: int = 105) -> float | None:
    """Ampacity given to a metric conductor: that of the largest AWG not larger than it [A].

    Returns None below the smallest tabulated AWG (18 AWG, 0.82 mm2).
    """
    best: float | None = None
    for g in AWG_SIZES:
        if awg_area_mm2(g) <= area_mm2 + 1e-9:
            best = awg_ampacity_A(g, insulation_C)
    return best


def _awg_key(gauge: str | int) -> str:
    n = awg_number(gauge)
    key = f"{1 - n}/0" if n <= 0 else str(n)
    if key not in CFR_TABLE5_A:
        raise ValueError(f"AWG {gauge} has no 33 CFR 183.425 Table 5 entry here: expected one of "
                         f"{', '.join(AWG_SIZES)}")
    return key


# --- fuses ------------------------------------------------------------------

#: Standard fuse/breaker ratings [A]: NEC 240.6(A) standard ampere ratings
#: (from memory) with automotive blade ratings below 15 A (common practice).
STANDARD_FUSE_RATINGS_A: tuple[float, ...] = (
    1, 2, 3, 5, 7.5, 10, 15, 20, 25, 30, 35, 40, 45, 50, 60, 70, 80, 90, 100, 110, 125, 150,
    175, 200, 225, 250, 300, 350, 400, 450, 500, 600, 700, 800,
)

#: Multiplier on the continuous current for the smallest fuse (NEC 210.20(A)/215.3, from memory).
CONTINUOUS_FACTOR: float = 1.25


def smallest_standard_fuse_A(current_A: float) -> float | None:
    """Smallest standard rating >= 125 % of the continuous current [A], or None above 800 A."""
    need = CONTINUOUS_FACTOR * current_A
    for rating in STANDARD_FUSE_RATINGS_A:
        if rating >= need - 1e-9:
            return float(rating)
    return None


# --- drop limits and placement ----------------------------------------------

CircuitKind = Literal["charging", "critical", "non-critical"]

DROP_LIMIT_PCT: dict[str, float] = {"charging": 3.0, "critical": 3.0, "non-critical": 10.0}


def circuit_for_drop(max_drop_pct: float) -> tuple[CircuitKind, float | None]:
    """A drop limit as given by a person -> (circuit, override) for :func:`size_run`.

    A limit that is a circuit's standard one (3 % critical, 10 % non-critical) names that
    circuit and its source; any other is a critical circuit with the limit as given.
    """
    if max_drop_pct == DROP_LIMIT_PCT["critical"]:
        return "critical", None
    if max_drop_pct == DROP_LIMIT_PCT["non-critical"]:
        return "non-critical", None
    return "critical", max_drop_pct


DROP_LIMIT_SOURCE: dict[str, str] = {
    "charging": "3 %: charging circuits 1-3 % (common practice); drawdown uses the upper end",
    "critical": "3 %: panelboard feeders and vital loads (ISO 10133; ABYC E-11)",
    "non-critical": "10 %: non-critical loads such as cabin lighting (ABYC E-11)",
}

PLACEMENT_NOTE = (
    "Fit the fuse at the source end: within 175 mm (7 in) of the battery or connection point; "
    "up to 1.83 m (72 in) only if the conductor runs from the battery terminal and is sheathed "
    "over its whole length; up to 1.02 m (40 in) if sheathed and fed from another source "
    "(ABYC E-11 11.12.1.1). A run with a battery at each end needs a fuse at each end."
)


def voltage_drop_V(current_A: float, length_m: float, area_mm2: float, *,
                   temperature_C: float = 20.0) -> float:
    """Round-trip voltage drop from copper resistivity [V].

    Parameters
    ----------
    current_A : float
        Current [A].
    length_m : float
        One-way length [m]; the return conductor doubles it.
    area_mm2 : float
        Conductor cross-section [mm2].
    temperature_C : float
        Conductor temperature [degC].

    Notes
    -----
    ``V = 2 L I rho_T / A`` (IEC 60028 resistivity with temperature).
    """
    return 2.0 * length_m * current_A * copper_resistivity(temperature_C) / area_mm2


def minimum_area_mm2(current_A: float, length_m: float, voltage_V: float, max_drop_pct: float, *,
                     temperature_C: float = 20.0) -> float:
    """Smallest area for a drop fraction: ``A = 2 L I rho / (f V)`` [mm2]."""
    return 2.0 * length_m * current_A * copper_resistivity(temperature_C) / (max_drop_pct / 100.0 * voltage_V)


# --- one run ----------------------------------------------------------------

@dataclass(frozen=True)
class CableChoice:
    """One conductor size that satisfies a run's limits."""

    system: Literal["metric", "awg"]
    size: str  # "10 mm2" or "8 AWG"
    cross_section_mm2: float
    resistance_ohm_per_m: float  # at the conductor temperature
    voltage_drop_V: float
    voltage_drop_pct: float
    ampacity_table_A: float
    ampacity_A: float  # after derates


@dataclass(frozen=True)
class RunSizing:
    """A sized cable run. ``cross_section_mm2``/``awg`` are None when nothing fits (see ``why``)."""

    name: str
    current_A: float
    protect_current_A: float
    length_m: float
    voltage_V: float
    max_drop_pct: float
    circuit: str
    drop_limit_source: str
    cross_section_mm2: float | None
    awg: str | None
    voltage_drop_V: float | None
    voltage_drop_pct: float | None
    fuse_A: float | None
    ampacity_A: float | None
    metric: CableChoice | None
    awg_choice: CableChoice | None
    resistance: dict
    placement: str
    assumptions: dict
    cautions: list[str]
    why: str | None = None
    min_area_for_drop_mm2: float = 0.0
    notes: list[str] = field(default_factory=list)

    def to_json(self) -> dict:
        d = asdict(self)
        if self.cross_section_mm2 is None:
            for key in ("cross_section_mm2", "awg", "voltage_drop_pct", "fuse_A", "ampacity_A"):
                d[f"{key}_why"] = self.why
        return d


def _derate(insulation_C: int, ambient_C: float, bundled: int, engine_space: bool) -> tuple[float, dict]:
    if engine_space:
        f_eng = ENGINE_SPACE_FACTOR[insulation_C]
        f_amb = ambient_factor(ambient_C, insulation_C, ENGINE_SPACE_AMBIENT_C)
    else:
        f_eng = 1.0
        f_amb = ambient_factor(ambient_C, insulation_C, TABLE_AMBIENT_C)
    f_bun = bundling_factor(bundled)
    return f_eng * f_amb * f_bun, {"engine_space": f_eng, "ambient": round(f_amb, 4), "bundling": f_bun}


def _validate(name: str, value: float, *, positive: bool = True) -> None:
    if value is None or not math.isfinite(value) or (value <= 0 if positive else value < 0):
        raise ValueError(f"{name} = {value!r}: expected a finite number {'> 0' if positive else '>= 0'}")


def size_run(current_A: float, length_m: float, voltage_V: float, *, name: str = "run",
             max_drop_pct: float | None = None, circuit: CircuitKind = "critical",
             protect_current_A: float | None = None, insulation_C: int = 105,
             conductor_temperature_C: float = 30.0, bundled: int = 1, engine_space: bool = False,
             tinned: bool = False,
             resistance_basis: Literal["iec60228", "resistivity"] = "iec60228",
             sheathed: bool = False) -> RunSizing:
    """Size one two-conductor DC run: metric and AWG conductor, voltage drop and fuse.

    Parameters
    ----------
    current_A : float
        Continuous current used for the voltage drop [A].
    length_m : float
        One-way length [m]; the round trip is twice this.
    voltage_V : float
        Nominal system voltage the drop percentage refers to [V].
    max_drop_pct : float, optional
        Voltage-drop limit [%]; default from ``circuit`` (3 % charging/critical,
        10 % non-critical).
    circuit : {"charging", "critical", "non-critical"}
        What the run feeds; sets the default drop limit and its source.
    protect_current_A : float, optional
        Continuous current the fuse must pass without nuisance blowing [A],
        e.g. an inverter's input at its low-voltage cut-off; default ``current_A``.
    insulation_C : int
        Insulation temperature rating [degC] (60, 75, 90, 105 or 125).
    conductor_temperature_C : float
        Conductor (and ambient) temperature assumed [degC]; sets resistance and
        the ambient derate above 30 degC.
    bundled : int
        Current-carrying conductors bundled together.
    engine_space : bool
        The run passes through an engine space (33 CFR derate).
    tinned : bool
        Tinned copper (IEC 60228 tinned column).
    resistance_basis : {"iec60228", "resistivity"}
        Metric conductor resistance from the IEC 60228 class 5 maximum (the
        default; fine-stranded cable is 10-15 % above ``rho / A``) or from the
        resistivity formula ``rho_T / A`` on the nominal area.
    sheathed : bool
        Conductors inside a multiconductor sheath may be 18 AWG; a conductor
        installed on its own must be at least 16 AWG (33 CFR 183.425(d), (e)),
        so metric sizes below 1.31 mm2 are skipped then too.

    Returns
    -------
    RunSizing
        With ``cross_section_mm2`` etc. None and ``why`` set when no standard
        size up to 120 mm2 / 4/0 AWG satisfies the limits.

    Raises
    ------
    ValueError
        Naming the parameter when an input is out of range.
    """
    _validate("current_A", current_A)
    _validate("length_m", length_m)
    _validate("voltage_V", voltage_V)
    if circuit not in DROP_LIMIT_PCT:
        raise ValueError(f"circuit = {circuit!r}: expected one of {', '.join(DROP_LIMIT_PCT)}")
    limit = DROP_LIMIT_PCT[circuit] if max_drop_pct is None else float(max_drop_pct)
    _validate("max_drop_pct", limit)
    if limit >= 50:
        raise ValueError(f"max_drop_pct = {limit}: expected a percentage below 50 (e.g. 3)")
    if insulation_C not in INSULATION_RATINGS_C:
        raise ValueError(f"insulation_C = {insulation_C}: expected one of {INSULATION_RATINGS_C}")
    if not -40 <= conductor_temperature_C <= 150:
        raise ValueError(f"conductor_temperature_C = {conductor_temperature_C}: expected -40..150 degC")
    if bundled < 1:
        raise ValueError(f"bundled = {bundled}: expected 1 or more conductors")
    if resistance_basis not in ("iec60228", "resistivity"):
        raise ValueError(f"resistance_basis = {resistance_basis!r}: expected 'iec60228' or 'resistivity'")
    protect = current_A if protect_current_A is None else float(protect_current_A)
    _validate("protect_current_A", protect)
    protect = max(protect, current_A)

    derate, factors = _derate(insulation_C, conductor_temperature_C, bundled, engine_space)
    fuse = smallest_standard_fuse_A(protect)
    t_c = conductor_temperature_C
    source = DROP_LIMIT_SOURCE[circuit] if max_drop_pct is None else \
        f"{limit:g} % as given (default for {circuit}: {DROP_LIMIT_SOURCE[circuit]})"

    def ok(drop_V: float, ampacity: float | None) -> bool:
        return (ampacity is not None and fuse is not None and drop_V / voltage_V * 100 <= limit + 1e-9
                and fuse <= ampacity + 1e-9)

    metric = None
    min_area = awg_area_mm2("18" if sheathed else "16") - 1e-9
    for area in METRIC_SIZES_MM2:
        if area < min_area:
            continue
        r = (iec60228_resistance_ohm_per_m(area, temperature_C=t_c, tinned=tinned)
             if resistance_basis == "iec60228" else copper_resistivity(t_c) / area)
        drop = 2 * length_m * current_A * r
        table = metric_ampacity_A(area, insulation_C)
        amp = None if table is None else table * derate
        if ok(drop, amp):
            assert table is not None and amp is not None  # ok() needs an ampacity
            metric = CableChoice("metric", f"{area:g} mm2", area, r, drop, drop / voltage_V * 100, table, amp)
            break
    awg = None
    for g in AWG_SIZES:
        if awg_area_mm2(g) < min_area:
            continue
        r = awg_resistance_ohm_per_m(g, temperature_C=t_c)
        drop = 2 * length_m * current_A * r
        table = awg_ampacity_A(g, insulation_C)
        amp = table * derate
        if ok(drop, amp):
            awg = CableChoice("awg", f"{g} AWG", awg_area_mm2(g), r, drop, drop / voltage_V * 100, table, amp)
            break

    assumptions = {
        "length_one_way_m": length_m,
        "round_trip_m": 2 * length_m,
        "conductor_temperature_C": t_c,
        "insulation_rating_C": insulation_C,
        "bundled_conductors": bundled,
        "engine_space": engine_space,
        "smallest_conductor": "18 AWG (multiconductor sheath)" if sheathed else
                              "16 AWG / 1.5 mm² (installed separately; 33 CFR 183.425(e))",
        "copper": "tinned" if tinned else "plain",
        "derate_factors": factors,
        "derate_total": round(derate, 4),
        "ampacity_table": "33 CFR 183.425 Table 5 (30 °C ambient; engine space 50 °C); "
                          "metric sizes take the rating of the largest AWG not larger than them",
        "resistance_metric": ("IEC 60228 class 5 maximum at 20 °C, corrected with IEC 60028 alpha 0.00393/K"
                              if resistance_basis == "iec60228" else
                              "IEC 60028 resistivity 1/58 Ω mm²/m at 20 °C on the nominal area"),
        "resistance_awg": "ASTM B258 area with IEC 60028 resistivity 1/58 Ω mm²/m at 20 °C",
        "fuse_rule": "1.25 x continuous current <= fuse <= derated cable ampacity "
                     "(NEC 210.20(A)/215.3, NEC 240.4; from memory); standard ratings NEC 240.6(A)",
        "protect_current_A": protect,
    }
    cautions = [
        "Follow local electrical codes and have a qualified installer check the installation.",
        "The fuse's interrupt rating must exceed the battery's short-circuit current "
        "(a lithium bank can deliver several kA).",
    ]
    need_area = minimum_area_mm2(current_A, length_m, voltage_V, limit, temperature_C=t_c)
    why = None
    notes: list[str] = []
    if fuse is None:
        why = (f"125 % of {protect:.1f} A exceeds the largest standard fuse here (800 A): "
               "split the load over parallel runs, each with its own fuse")
    elif metric is None or awg is None:
        missing = " and ".join(s for s, c in (("metric (up to 120 mm²)", metric), ("AWG (up to 4/0)", awg))
                               if c is None)
        why = (f"no standard {missing} conductor meets a {limit:g} % drop (needs >= {need_area:.1f} mm²) "
               f"and a {fuse:g} A fuse within its ampacity: use parallel conductors, a shorter run "
               "or a higher system voltage")
    # Read below only when it fits (why is None): then a metric and an AWG size were found.
    primary, awg_fit = cast(CableChoice, metric), cast(CableChoice, awg)
    if why is not None and metric is not None:
        notes.append("a metric size fits; see 'metric'")
    fits = why is None
    return RunSizing(
        name=name, current_A=current_A, protect_current_A=protect, length_m=length_m, voltage_V=voltage_V,
        max_drop_pct=limit, circuit=circuit, drop_limit_source=source,
        cross_section_mm2=primary.cross_section_mm2 if fits else None,
        awg=awg_fit.size.removesuffix(" AWG") if fits else None,
        voltage_drop_V=primary.voltage_drop_V if fits else None,
        voltage_drop_pct=primary.voltage_drop_pct if fits else None,
        fuse_A=fuse if fits else None,
        ampacity_A=min(primary.ampacity_A, awg_fit.ampacity_A) if fits else None,
        metric=metric, awg_choice=awg,
        resistance={"metric_ohm_per_m": metric.resistance_ohm_per_m if metric else None,
                    "awg_ohm_per_m": awg.resistance_ohm_per_m if awg else None,
                    "round_trip_ohm": 2 * length_m * metric.resistance_ohm_per_m if metric else None},
        placement=PLACEMENT_NOTE, assumptions=assumptions, cautions=cautions, why=why,
        min_area_for_drop_mm2=need_area, notes=notes,
    )
