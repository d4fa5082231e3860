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
from typing import Literal
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator

Chemistry = Literal["lifepo4", "agm", "gel", "flooded"]

#: Defaults by chemistry. Sources are named beside each value; see
#: ../shared/FIELDREF.md §1-§4 and DEVELOPERS.md.
CHEMISTRY_DEFAULTS: dict[str, dict[str, float]] = {
    # peukert_k: vendor-quoted typical ranges (common practice): LFP 1.00-1.05,
    # AGM 1.05-1.15, gel 1.1-1.25, flooded 1.2-1.6 (new ~1.25).
    # charge_efficiency: Ah efficiency, from memory: LFP 0.99-0.999,
    # AGM/gel 0.90-0.97, flooded 0.85-0.95.
    # charged_voltage_per_12V: full-charge resync threshold (common practice):
    # LFP ~ absorption - 0.2 V = 14.0 V; lead-acid ~ float - 0.2 V = 13.2 V.
    # tail_current_pct: 2-5 % of C for LFP, 2-4 % for lead-acid (common practice).
    # max_dod: usable depth of discharge, common practice: 0.5 for cycled
    # lead-acid, 0.8-0.9 for LFP.
    "lifepo4": {"peukert_k": 1.03, "charge_efficiency": 0.99, "charged_voltage_per_12V": 14.0,
                "tail_current_pct": 4.0, "max_dod": 0.8},
    "agm": {"peukert_k": 1.10, "charge_efficiency": 0.95, "charged_voltage_per_12V": 13.2,
            "tail_current_pct": 3.0, "max_dod": 0.5},
    "gel": {"peukert_k": 1.15, "charge_efficiency": 0.95, "charged_voltage_per_12V": 13.2,
            "tail_current_pct": 3.0, "max_dod": 0.5},
    "flooded": {"peukert_k": 1.25, "charge_efficiency": 0.90, "charged_voltage_per_12V": 13.2,
                "tail_current_pct": 3.0, "max_dod": 0.5},
}


class SystemError_(ValueError):
    """A system description that cannot be used; the message names the key."""


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


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
    charged_voltage_V: float | None = Field(default=None, gt=0, le=80)
    tail_current_pct: float | None = Field(default=None, gt=0, le=20)
    detection_time_s: float = Field(default=120, ge=10, le=3600)
    max_dod: float | None = Field(default=None, gt=0.05, le=1.0)

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
    def effective_charged_voltage_V(self) -> float:
        if self.charged_voltage_V is not None:
            return self.charged_voltage_V
        return self._default("charged_voltage_per_12V") * round(self.series_12V_blocks)

    @property
    def effective_tail_current_A(self) -> float:
        pct = self.tail_current_pct if self.tail_current_pct is not None else self._default("tail_current_pct")
        return pct / 100.0 * self.rated_capacity_Ah

    @property
    def effective_max_dod(self) -> float:
        return self.max_dod if self.max_dod is not None else self._default("max_dod")


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


def _explain(exc: ValidationError, source: str) -> str:
    lines = [f"{source}: invalid system description"]
    for err in exc.errors():
        key = _location(err["loc"]) or "(top level)"
        if err["type"] == "extra_forbidden":
            lines.append(f"  {key}: unknown key (check its spelling; see DESIGN.md for the schema)")
            continue
        if err["type"] == "missing":
            lines.append(f"  {key}: required key is missing")
            continue
        given = err.get("input")
        msg = err["msg"]
        lines.append(f"  {key} = {given!r}: {msg}")
    return "\n".join(lines)


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
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise SystemError_(f"{source}: not valid TOML: {exc}") from None
    return system_from_mapping(data, source=source)
