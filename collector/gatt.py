"""Pure decoding of Bluetooth LE GATT characteristic values.

Standard characteristics, as the Bluetooth SIG *GATT Specification
Supplement* (GSS) defines them (all little-endian; docs/standards.md#bluetooth-gatt):

========  ==================  ========  ==============================================
UUID      name                format    resolution, special values
========  ==================  ========  ==============================================
0x2A19    Battery Level       uint8     1 %, 0-100 (above 100 is invalid)
0x2B18    Voltage             uint16    1/64 V; 0xFFFF = value is not known
0x2AEE    Electric Current    uint16    0.01 A; 0xFFFF = value is not known
0x2B05    Power               uint24    0.1 W; 0xFFFFFE invalid, 0xFFFFFF not known
0x2A6E    Temperature         sint16    0.01 degC; 0x8000 = value is not known
========  ==================  ========  ==============================================

**Direction of current.** Electric Current and Power are *unsigned*: they give
a magnitude. The canonical sign (positive into the bank) therefore comes from
the channel's role: a charge source (``solar``, ``alternator``, ``shore``) is
stored positive, a ``load`` negative. For any other channel (``battery`` or a
user name) the direction is unknown and the current is stored as missing --
never guessed; describe the device's own signed layout in ``system.toml``
``[ble]`` (a signed field type such as ``i16``, or a negative ``scale``) to
get a signed current.

User layouts (``[[ble.characteristic]]`` with ``[[ble.characteristic.fields]]``,
see :class:`analysis.system.BleField`): each field is read at its byte
``offset`` as ``u8 i8 u16 i16 u24 i24 u32 i32 f32``, little-endian unless
``big_endian``, and multiplied by ``scale``; an all-ones unsigned field or the
most negative signed field is taken as "not known" (the GSS convention).
"""

from __future__ import annotations

import math
import struct
from dataclasses import dataclass
from typing import Literal

BASE_UUID = "-0000-1000-8000-00805f9b34fb"

BATTERY_LEVEL = "00002a19" + BASE_UUID
VOLTAGE = "00002b18" + BASE_UUID
ELECTRIC_CURRENT = "00002aee" + BASE_UUID
POWER = "00002b05" + BASE_UUID
TEMPERATURE = "00002a6e" + BASE_UUID

STANDARD: dict[str, str] = {
    BATTERY_LEVEL: "Battery Level",
    VOLTAGE: "Voltage",
    ELECTRIC_CURRENT: "Electric Current",
    POWER: "Power",
    TEMPERATURE: "Temperature",
}

CHARGE_SOURCES = ("solar", "alternator", "shore")


class GattError(ValueError):
    """A characteristic value that cannot be decoded; the message is the quarantine reason."""


def normalise_uuid(uuid: str | int) -> str:
    """A UUID in 128-bit lower-case form; accepts ``0x2A19``, ``2a19`` or the full form."""
    if isinstance(uuid, int):
        return f"{uuid:08x}{BASE_UUID}"
    text = uuid.strip().lower()
    if text.startswith("0x"):
        text = text[2:]
    if len(text) in (4, 8) and all(c in "0123456789abcdef" for c in text):
        return f"{int(text, 16):08x}{BASE_UUID}"
    if len(text) == 36 and text.count("-") == 4:
        return text
    raise GattError(f"{uuid!r} is not a Bluetooth UUID (expected e.g. '0x2A19' or a 128-bit UUID)")


def _uint(data: bytes, n: int, name: str) -> int:
    if len(data) < n:
        raise GattError(f"{name}: {len(data)} bytes, the GSS format needs {n}")
    return int.from_bytes(data[:n], "little", signed=False)


def decode_battery_level(data: bytes) -> float | None:
    """Battery Level (0x2A19, uint8) [%]; None when above 100 (invalid)."""
    x = _uint(data, 1, "Battery Level")
    return float(x) if x <= 100 else None


def decode_voltage(data: bytes) -> float | None:
    """Voltage (0x2B18, uint16, 1/64 V) [V]; None for 0xFFFF (not known)."""
    x = _uint(data, 2, "Voltage")
    return None if x == 0xFFFF else x / 64.0


def decode_electric_current(data: bytes) -> float | None:
    """Electric Current (0x2AEE, uint16, 0.01 A) [A, magnitude]; None for 0xFFFF."""
    x = _uint(data, 2, "Electric Current")
    return None if x == 0xFFFF else x * 0.01


def decode_power(data: bytes) -> float | None:
    """Power (0x2B05, uint24, 0.1 W) [W, magnitude]; None for 0xFFFFFE/0xFFFFFF."""
    x = _uint(data, 3, "Power")
    return None if x >= 0xFFFFFE else x * 0.1


def decode_temperature(data: bytes) -> float | None:
    """Temperature (0x2A6E, sint16, 0.01 degC) [degC]; None for 0x8000 (not known)."""
    if len(data) < 2:
        raise GattError(f"Temperature: {len(data)} bytes, the GSS format needs 2")
    x = int.from_bytes(data[:2], "little", signed=True)
    return None if x == -0x8000 else x * 0.01


@dataclass(frozen=True)
class FieldLayout:
    """One field of a user-described characteristic (mirrors analysis.system.BleField)."""

    quantity: str
    offset: int
    type: str
    scale: float = 1.0
    big_endian: bool = False


_TYPES: dict[str, tuple[int, bool]] = {  # size [bytes], signed
    "u8": (1, False), "i8": (1, True), "u16": (2, False), "i16": (2, True),
    "u24": (3, False), "i24": (3, True), "u32": (4, False), "i32": (4, True), "f32": (4, True),
}


def decode_field(data: bytes, field: FieldLayout) -> float | None:
    """One field of a user layout [canonical unit]; None for the 'not known' pattern.

    Raises
    ------
    GattError
        When the value is shorter than ``offset + size``.
    """
    size, signed = _TYPES[field.type]
    end = field.offset + size
    if len(data) < end:
        raise GattError(f"{field.quantity} at offset {field.offset} ({field.type}) needs {end} bytes, "
                        f"the value has {len(data)}")
    raw = data[field.offset:end]
    order: Literal["big", "little"] = "big" if field.big_endian else "little"
    if field.type == "f32":
        x = struct.unpack(">f" if field.big_endian else "<f", raw)[0]
        return None if not math.isfinite(x) else x * field.scale
    value = int.from_bytes(raw, order, signed=signed)
    if (not signed and value == (1 << (8 * size)) - 1) or (signed and value == -(1 << (8 * size - 1))):
        return None
    return value * field.scale


@dataclass(frozen=True)
class Decoded:
    """Values decoded from one notification, in canonical units (None = not present/known)."""

    voltage_V: float | None = None
    current_A: float | None = None
    temperature_C: float | None = None
    soc_pct: float | None = None
    power_W: float | None = None
    direction_unknown: bool = False


def signed_by_role(magnitude: float | None, channel: str) -> tuple[float | None, bool]:
    """Give an unsigned current/power its canonical sign from the channel's role.

    Returns the signed value (None when the direction is unknown) and whether
    the direction was unknown.
    """
    if magnitude is None:
        return None, False
    if channel in CHARGE_SOURCES:
        return magnitude, False
    if channel == "load":
        return -magnitude, False
    return None, True


def decode_standard(uuid: str, data: bytes, *, channel: str) -> Decoded:
    """Decode a standard characteristic's value (see the module table).

    Raises
    ------
    GattError
        Unknown UUID, or a value shorter than its format.
    """
    key = normalise_uuid(uuid)
    if key == BATTERY_LEVEL:
        return Decoded(soc_pct=decode_battery_level(data))
    if key == VOLTAGE:
        return Decoded(voltage_V=decode_voltage(data))
    if key == ELECTRIC_CURRENT:
        i, unknown = signed_by_role(decode_electric_current(data), channel)
        return Decoded(current_A=i, direction_unknown=unknown)
    if key == POWER:
        p, unknown = signed_by_role(decode_power(data), channel)
        return Decoded(power_W=p, direction_unknown=unknown)
    if key == TEMPERATURE:
        return Decoded(temperature_C=decode_temperature(data))
    raise GattError(f"{uuid}: not a standard characteristic drawdown decodes "
                    f"({', '.join(STANDARD.values())}); describe it in system.toml [ble]")


def decode_layout(data: bytes, fields: list[FieldLayout]) -> Decoded:
    """Decode a user-described characteristic (signed as the user's layout says)."""
    values: dict[str, float | None] = {}
    for f in fields:
        values[f.quantity] = decode_field(data, f)
    return Decoded(voltage_V=values.get("voltage_V"), current_A=values.get("current_A"),
                   temperature_C=values.get("temperature_C"), soc_pct=values.get("soc_pct"),
                   power_W=values.get("power_W"))


def layouts_from_system(ble: object | None) -> dict[str, tuple[str, list[FieldLayout]]]:
    """``{uuid: (channel, fields)}`` from a validated ``System.ble`` (or None)."""
    out: dict[str, tuple[str, list[FieldLayout]]] = {}
    if ble is None:
        return out
    for ch in getattr(ble, "characteristic", []):
        fields = [FieldLayout(f.quantity, f.offset, f.type, f.scale, f.big_endian) for f in ch.fields]
        out[normalise_uuid(ch.uuid)] = (ch.channel, fields)
    return out
