"""The system description (``system.toml``) as validated, typed objects.

This module is pure: it validates a mapping (or TOML text handed to it) and
never opens a file itself. The command line reads the file and passes the text
to :func:`parse_system` so that error messages can name the file.

Every quantity carries its unit in its name. Unknown keys are errors, never
silently ignored (a typo in ``rated_capacity_Ah`` must not fall back to a
default capacity).
"""

from __future__ import annotations

import tomllib
from typing import Literal, cast
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator
from pydantic_core import ErrorDetails

Chemistry = Literal["lifepo4", "agm", "gel", "flooded"]

#: Defaults by chemistry, each with its source. "From memory" marks a figure
#: recalled from the named source rather than re-read from it; docs/peukert.md,
#: docs/soc.md and docs/solar.md hold the formulas and check values. Per-cell voltages are multiplied by
#: 6 cells (lead-acid, per 12 V block) or 4 cells (LiFePO4, per 12.8 V block).
#:
#: peukert_k -- there is no standard value: the exponent is a fit to one battery's
#:   discharges, not a material constant (Doerffel & Sharkh, J. Power Sources 155
#:   (2006) 395, from memory), so the report fits it whenever the log allows and
#:   these are only its starting points. Common practice (no primary source):
#:   LiFePO4 1.00-1.05 -> 1.03; AGM 1.05-1.15 -> 1.10; gel 1.10-1.25 -> 1.15;
#:   flooded 1.20-1.60, about 1.25 when new -> 1.25.
#: charge_efficiency -- charge (Ah) efficiency, used only until the log holds two
#:   full charges to measure it from (analysis.capacity). Lead-acid: 0.90, the
#:   battery efficiency of the Sandia SAND87-7023 stand-alone PV worksheet (docs/solar.md,
#:   checked; analysis.design_method uses the same figure), for every lead-acid
#:   type -- within the 0.85-0.97 usually quoted for flooded and VRLA batteries,
#:   lower during absorption (docs/soc.md#charge-efficiency, from memory). LiFePO4: coulombic
#:   efficiency 0.99-0.999 (docs/soc.md#charge-efficiency, from memory) -> 0.99, the cautious end.
#: full_voltage_per_12V -- the bank is full only while a charger holds it at a
#:   charge voltage; the threshold must sit above a rested full battery and at or
#:   below every usual charge setting. Lead-acid: 2.20 V/cell = 13.2 V. A rested
#:   full cell reads 2.10-2.15 V (OCV ~ SG + 0.84, Linden's Handbook of Batteries,
#:   from memory; docs/ocv.md tables); float settings run 2.20-2.25 V/cell for vented
#:   cells (IEC 60896-11 float test: 2.14-2.25 V/cell as the maker sets it, from
#:   memory) and 2.25-2.30 V/cell for VRLA (IEEE 1188 practice, from memory); the
#:   EN 50272-2 / IEC 62485-2 ventilation table takes 2.23 V (vented) and 2.27 V
#:   (VRLA) as typical float. Temperature compensation of about -4 mV/degC per cell
#:   (common practice) lowers a warm bank's float by ~0.06 V/cell at 40 degC, so
#:   2.20 V/cell is the level every float and absorption setting still reaches.
#:   LiFePO4: 3.50 V/cell = 14.0 V, the middle of the 3.45-3.55 V/cell end-of-charge
#:   window used for house banks (common practice), above the 3.35-3.40 V/cell
#:   float and rest level and below the 3.65 V/cell charge limit of LFP cells
#:   (common practice, from memory).
#: full_current_pct -- the end-of-charge current at that voltage, % of the rated
#:   capacity per hour. LiFePO4: 5 % (0.05 It), the constant-voltage termination of
#:   the standard charge in IEC 61960-3 (from memory). Lead-acid: 2 %, the middle of
#:   the 1-3 % of C end-of-absorption criterion in common use; a full battery at
#:   boost voltage (2.40 V/cell) takes only 0.4 % (vented) to 0.8 % (VRLA) of C
#:   (EN 50272-2 / IEC 62485-2 gas-current table: 4 and 8 mA/Ah), so an aged or warm
#:   bank still gets below 2 % when full, while a bank still taking 2 % at
#:   absorption voltage is within a few per cent of full.
#: max_dod -- the deepest planned discharge; the reserve (lowest planned state of
#:   charge) is 1 - max_dod. Common practice, as in sizing under IEEE 1013 and the
#:   Sandia worksheet (docs/solar.md#stand-alone-sizing): 0.5 for cycled lead-acid, 0.8 (of 0.8-0.9) for
#:   LiFePO4.
CHEMISTRY_DEFAULTS: dict[str, dict[str, float]] = {
    "lifepo4": {
        "peukert_k": 1.03,             # common practice 1.00-1.05 (no primary source)
        "charge_efficiency": 0.99,     # 0.99-0.999, cautious end (docs/soc.md, from memory)
        "full_voltage_per_12V": 14.0,  # 3.50 V/cell: 3.45-3.55 V/cell end of charge (common practice)
        "full_current_pct": 5.0,       # 0.05 It: IEC 61960-3 standard-charge termination (from memory)
        "max_dod": 0.8,                # common practice 0.8-0.9 (docs/solar.md)
    },
    "agm": {
        "peukert_k": 1.10,             # common practice 1.05-1.15 (no primary source)
        "charge_efficiency": 0.90,     # Sandia SAND87-7023 worksheet battery efficiency
        "full_voltage_per_12V": 13.2,  # 2.20 V/cell: at or below every float (IEEE 1188 practice, from memory)
        "full_current_pct": 2.0,       # 1-3 % of C in common use; full VRLA takes 0.8 % (EN 50272-2)
        "max_dod": 0.5,                # cycled lead-acid, common practice (docs/solar.md, IEEE 1013 sizing)
    },
    "gel": {
        "peukert_k": 1.15,             # common practice 1.10-1.25 (no primary source)
        "charge_efficiency": 0.90,     # Sandia SAND87-7023 worksheet battery efficiency
        "full_voltage_per_12V": 13.2,  # 2.20 V/cell: at or below every float (IEEE 1188 practice, from memory)
        "full_current_pct": 2.0,       # 1-3 % of C in common use; full VRLA takes 0.8 % (EN 50272-2)
        "max_dod": 0.5,                # cycled lead-acid, common practice (docs/solar.md, IEEE 1013 sizing)
    },
    "flooded": {
        "peukert_k": 1.25,             # common practice 1.20-1.60, ~1.25 new (no primary source)
        "charge_efficiency": 0.90,     # Sandia SAND87-7023 worksheet battery efficiency
        "full_voltage_per_12V": 13.2,  # 2.20 V/cell: lowest vented float (IEC 60896-11 range, from memory)
        "full_current_pct": 2.0,       # 1-3 % of C in common use; full vented takes 0.4 % (EN 50272-2)
        "max_dod": 0.5,                # cycled lead-acid, common practice (docs/solar.md, IEEE 1013 sizing)
    },
}

#: How long the full conditions must hold before the bank counts as full [s]:
#: 1-3 minutes is common practice (docs/soc.md#full-charge-resync) -- long enough that a passing
#: cloud or a load switching off does not qualify, short enough to catch a
#: short absorption at the end of a drive.
FULL_HOLD_S_DEFAULT = 120.0

#: Keys renamed in system.toml: old -> new, by table. An old key is an error that
#: names the new one (no silent alias: a file must mean one thing).
RENAMED_KEYS: dict[tuple[str, str], str] = {
    ("battery", "charged_voltage_V"): "full_voltage_V",
    ("battery", "tail_current_pct"): "full_current_pct",
    ("battery", "detection_time_s"): "full_hold_s",
}


class SystemError_(ValueError):
    """A system description that cannot be used; the message names the key."""


class _Strict(BaseModel):
    # strict: a bool or a string is not a number (``peak_power_W = true`` must not become
    # 1.0, nor ``rated_capacity_Ah = "200"`` 200); an integer is still a valid float.
    # allow_inf_nan=False: TOML can write nan and inf, neither is a battery or an array.
    model_config = ConfigDict(extra="forbid", frozen=True, strict=True, allow_inf_nan=False)


class Site(_Strict):
    latitude_deg: float = Field(ge=-90, le=90)
    longitude_deg: float = Field(ge=-180, le=180)
    timezone: str = "UTC"
    altitude_m: float = Field(default=0.0, ge=-500, le=9000)

    @field_validator("timezone")
    @classmethod
    def _known_zone(cls, value: str) -> str:
        try:
            ZoneInfo(value)
        except (ZoneInfoNotFoundError, ValueError) as exc:
            raise ValueError(f"unknown IANA timezone {value!r} (e.g. 'Europe/Oslo')") from exc
        return value


class Battery(_Strict):
    chemistry: Chemistry
    nominal_voltage_V: float = Field(ge=6, le=60)
    rated_capacity_Ah: float = Field(gt=0, le=20000)
    rated_hours: float = Field(default=20, gt=0, le=500)
    # Optional overrides of the chemistry defaults above.
    peukert_k: float | None = Field(default=None, ge=1.0, le=1.8)
    charge_efficiency: float | None = Field(default=None, gt=0.5, le=1.0)
    # The bank counts as full (SoC := 100 %) when, while charging, its voltage is at
    # least full_voltage_V and the charge current at most full_current_pct of the
    # rated capacity, both for full_hold_s.
    full_voltage_V: float | None = Field(default=None, gt=0, le=80)
    full_current_pct: float | None = Field(default=None, gt=0, le=20)
    full_hold_s: float = Field(default=FULL_HOLD_S_DEFAULT, ge=10, le=3600)
    max_dod: float | None = Field(default=None, gt=0.05, le=1.0)
    # The bank's own rested-voltage curve, [[SoC %, bank volts], ...] from its maker's datasheet
    # or a rest test, used instead of the chemistry's typical table (docs/ocv.md#your-banks-own-curve).
    rest_voltage_curve: tuple[tuple[float, float], ...] | None = None

    @field_validator("rest_voltage_curve", mode="before")
    @classmethod
    def _curve_pairs(cls, value: object) -> object:
        if isinstance(value, list):  # TOML arrays arrive as lists: pairs of numbers
            return tuple(tuple(float(x) if isinstance(x, int) and not isinstance(x, bool) else x for x in pair)
                         if isinstance(pair, list) else pair for pair in value)
        return value

    @model_validator(mode="after")
    def _curve_shape(self) -> Battery:
        curve = self.rest_voltage_curve
        if curve is None:
            return self
        if self.chemistry != "lifepo4":
            # Measured on the independent family (docs/validation.md): with a lead-acid bank's own
            # curve the rested-voltage anchors are right, but the bank's extra ampere-hours at a slow
            # night draw, which drawdown does not yet count, then push the capacity ~10 % high with
            # an interval that can miss. Until that is counted the key is refused, not half-used.
            raise ValueError(f"rest_voltage_curve: used for LiFePO4 banks only so far, not {self.chemistry} "
                             "(docs/ocv.md#your-banks-own-curve says why); leave it out for this bank")
        if len(curve) < 3:
            raise ValueError(f"rest_voltage_curve: {len(curve)} point(s); give at least 3 [SoC %, volts] pairs "
                             "from 0 to 100 %")
        socs = [p[0] for p in curve]
        volts = [p[1] for p in curve]
        if any(not (0.0 <= x <= 100.0) for x in socs) or any(b <= a for a, b in zip(socs, socs[1:])):
            raise ValueError(f"rest_voltage_curve: the SoC values {socs} must rise from 0 towards 100 %")
        if socs[0] > 10.0 or socs[-1] < 90.0:
            raise ValueError(f"rest_voltage_curve: it spans {socs[0]:g}-{socs[-1]:g} %; give points from at most "
                             "10 % up to at least 90 %")
        if any(b <= a for a, b in zip(volts, volts[1:])):
            raise ValueError(f"rest_voltage_curve: the voltages {volts} must rise with the state of charge")
        lo, hi = 0.8 * self.nominal_voltage_V, 1.2 * self.nominal_voltage_V
        if volts[0] < lo or volts[-1] > hi:
            raise ValueError(f"rest_voltage_curve: {volts[0]:g}-{volts[-1]:g} V is not a rested "
                             f"{self.nominal_voltage_V:g} V bank (expected within {lo:.1f}-{hi:.1f} V): volts are "
                             "for the whole bank, not per cell")
        return self

    def _default(self, key: str) -> float:
        return CHEMISTRY_DEFAULTS[self.chemistry][key]

    @property
    def series_12V_blocks(self) -> float:
        """How many 12 V blocks the bank voltage corresponds to (1, 2 or 4)."""
        return self.nominal_voltage_V / (12.8 if self.chemistry == "lifepo4" else 12.0)

    @property
    def rated_current_A(self) -> float:
        """I_H = C_H / H, the current of the rated discharge [A]."""
        return self.rated_capacity_Ah / self.rated_hours

    @property
    def effective_peukert_k(self) -> float:
        return self.peukert_k if self.peukert_k is not None else self._default("peukert_k")

    @property
    def effective_charge_efficiency(self) -> float:
        if self.charge_efficiency is not None:
            return self.charge_efficiency
        return self._default("charge_efficiency")

    @property
    def effective_full_voltage_V(self) -> float:
        """Bank voltage at or above which, while charging, the bank can count as full [V]."""
        if self.full_voltage_V is not None:
            return self.full_voltage_V
        return self._default("full_voltage_per_12V") * round(self.series_12V_blocks)

    @property
    def effective_full_current_pct(self) -> float:
        if self.full_current_pct is not None:
            return self.full_current_pct
        return self._default("full_current_pct")

    @property
    def effective_full_current_A(self) -> float:
        """Charge current at or below which, at the full voltage, the bank can count as full [A]."""
        return self.effective_full_current_pct / 100.0 * self.rated_capacity_Ah

    @property
    def effective_max_dod(self) -> float:
        return self.max_dod if self.max_dod is not None else self._default("max_dod")

    @property
    def reserve_pct(self) -> float:
        """The reserve: the lowest planned state of charge, 100 x (1 - max_dod) [%]."""
        return 100.0 * (1.0 - self.effective_max_dod)


class SolarArray(_Strict):
    name: str = "array"
    peak_power_W: float = Field(gt=0, le=50000)
    tilt_deg: float = Field(default=0, ge=0, le=90)
    azimuth_deg: float = Field(default=180, ge=0, lt=360)
    controller: Literal["mppt", "pwm"] = "mppt"
    # pvlib documents gamma_pdc as -0.002 to -0.005 /degC; -0.004 is typical for c-Si.
    gamma_pdc_per_C: float = Field(default=-0.004, ge=-0.01, le=0)
    # Module voltage at maximum power, used by the PWM model (36-cell: ~18 V).
    module_vmp_V: float | None = Field(default=None, gt=0, le=1000)


class Charger(_Strict):
    source: Literal["alternator", "shore"]
    max_current_A: float = Field(gt=0, le=1000)
    # Alternator rating, if known, for the alternator-capacity flag in sizing.
    alternator_rating_A: float | None = Field(default=None, gt=0, le=1000)


class Load(_Strict):
    name: str
    power_W: float = Field(ge=0, le=20000)
    hours_per_day: float = Field(ge=0, le=24)
    ac: bool = False  # runs through the inverter
    surge_factor: float = Field(default=1.0, ge=1.0, le=10.0)


class BleField(_Strict):
    """One value inside a user-described GATT characteristic."""

    quantity: Literal["voltage_V", "current_A", "temperature_C", "soc_pct", "power_W"]
    offset: int = Field(ge=0, le=511)
    type: Literal["u8", "i8", "u16", "i16", "u24", "i24", "u32", "i32", "f32"]
    scale: float = 1.0
    big_endian: bool = False


class BleCharacteristic(_Strict):
    uuid: str
    channel: str = "battery"
    fields: list[BleField]


class Ble(_Strict):
    characteristic: list[BleCharacteristic] = []


class System(_Strict):
    site: Site
    battery: Battery
    solar: list[SolarArray] = []
    charger: list[Charger] = []
    load: list[Load] = []
    ble: Ble | None = None


def _location(loc: tuple) -> str:
    parts: list[str] = []
    for item in loc:
        if isinstance(item, int):
            parts[-1] = f"{parts[-1]}[{item}]" if parts else f"[{item}]"
        else:
            parts.append(str(item))
    return ".".join(parts)


def _explain(exc: ValidationError, source: str, *,
             renamed: dict[tuple[str, str], str] | None = None) -> str:
    renamed = RENAMED_KEYS if renamed is None else renamed
    lines = [f"{source}: invalid system description"]
    for err in exc.errors():
        key = _location(err["loc"]) or "(top level)"
        loc = tuple(str(x) for x in err["loc"] if not isinstance(x, int))
        if err["type"] == "extra_forbidden" and loc[-2:] in renamed:
            lines.append(f"  {key}: this key is now called {renamed[cast(tuple[str, str], loc[-2:])]} (same meaning and unit); "
                         "rename it")
            continue
        if err["type"] == "extra_forbidden":
            lines.append(f"  {key}: unknown key (check its spelling; README 'Describe your system' lists the keys)")
            continue
        if err["type"] == "missing":
            lines.append(f"  {key}: required key is missing")
            continue
        given = err.get("input")
        msg = _plain_message(err, given)
        lines.append(f"  {key} = {_toml_value(given)}: {msg}")
    return "\n".join(lines)


_TYPE_NAMES = {bool: "true/false", str: "text", int: "a whole number", float: "a number",
               list: "a list", dict: "a table"}
_EXPECTED = {"float_type": "a number", "int_type": "a whole number", "bool_type": "true or false",
             "string_type": "text in quotes", "list_type": "a list", "model_type": "a table",
             "dict_type": "a table"}


def _toml_value(value: object) -> str:
    """A value for messages: true/false and nan as TOML writes them, anything else as Python's repr."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value != value:
        return "nan"
    return repr(value)


def _plain_message(err: ErrorDetails, given: object) -> str:
    """Pydantic's message, said in the terms of a TOML file."""
    kind = err["type"]
    if kind == "finite_number":
        return "must be a finite number (nan and inf are not values)"
    if kind in _EXPECTED:
        got = _TYPE_NAMES.get(type(given), type(given).__name__)
        msg = f"expected {_EXPECTED[kind]}, got {got}"
        if kind in ("float_type", "int_type") and isinstance(given, str):
            msg += f" (write it without quotes: {given.strip()})" if _is_number(given) else ""
        return msg
    return err["msg"]


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def decode_system_bytes(raw: bytes, *, source: str = "system.toml") -> str:
    """The text of a system.toml file's bytes: UTF-8 (TOML's encoding), or UTF-16 as some editors save.

    A UTF-8 or UTF-16 byte-order mark is honoured; UTF-16 without one is recognised by its
    NUL bytes in every other position.

    Raises
    ------
    SystemError_
        When the bytes are none of these (the message names the file and says what to do).
    """
    if raw.startswith(b"\xef\xbb\xbf"):
        encoding = "utf-8-sig"
    elif raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        encoding = "utf-16"
    elif len(raw) >= 4 and raw[1::2].count(0) > 0.3 * len(raw[1::2]) and raw[0::2].count(0) == 0:
        encoding = "utf-16-le"
    elif len(raw) >= 4 and raw[0::2].count(0) > 0.3 * len(raw[0::2]) and raw[1::2].count(0) == 0:
        encoding = "utf-16-be"
    else:
        encoding = "utf-8"
    try:
        return raw.decode(encoding)
    except UnicodeDecodeError as exc:
        raise SystemError_(f"{source}: not readable as text (byte {exc.start} is not valid {encoding}); "
                           "save the file as UTF-8") from None


def system_from_mapping(data: dict, *, source: str = "system.toml") -> System:
    """Validate a mapping (parsed TOML) into a :class:`System`.

    Raises
    ------
    SystemError_
        With one line per problem, each naming the key, the value given and
        the allowed range.
    """
    try:
        return System.model_validate(data)
    except ValidationError as exc:
        raise SystemError_(_explain(exc, source)) from None


def parse_system(text: str, *, source: str = "system.toml") -> System:
    """Parse and validate TOML text; ``source`` names the file in messages."""
    try:
        data = tomllib.loads(text.removeprefix("\ufeff"))  # a BOM left by a Windows editor
    except tomllib.TOMLDecodeError as exc:
        raise SystemError_(f"{source}: not valid TOML: {exc}") from None
    return system_from_mapping(data, source=source)
