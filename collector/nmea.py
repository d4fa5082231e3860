"""NMEA 0183 sentences: checksum and XDR (transducer measurement) decoding.

An XDR sentence carries repeating groups of four fields -- transducer type,
value, unit, transducer name::

    $IIXDR,U,12.85,V,BATT1,I,-4.2,A,BATT1,C,18.5,C,BATT1*40

Type codes used for a battery bank: ``U`` voltage (unit ``V``), ``I`` current
(unit ``A``), ``C`` temperature (unit ``C``; ``F`` and ``K`` are converted).
The checksum is the 8-bit XOR of every character between ``$`` and ``*``,
written as two hexadecimal digits (docs/standards.md#nmea-0183-xdr; NMEA 0183, from secondary
descriptions). Other sentences (positions, depth, wind) are not battery data
and are skipped without counting them as malformed.

Transducer names become channels: the name is lower-cased; a name whose
letters are one of the channel words of :mod:`collector.columns` (``BATT``,
``SOLAR``, ``PV``, ``ALT`` ...) followed by nothing or ``1`` is that channel
(``BATT1`` -> ``battery``), anything else stays a user channel (``BATT2`` ->
``batt2``, ``WTHI`` -> ``wthi``).
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

MAX_SENTENCE_CHARS = 82  # NMEA 0183 limit including '$' and the CR LF

_CHANNEL_WORDS = {
    "battery": "battery", "batt": "battery", "bat": "battery", "bank": "battery", "house": "battery",
    "solar": "solar", "pv": "solar", "mppt": "solar",
    "alternator": "alternator", "alt": "alternator", "dcdc": "alternator",
    "shore": "shore", "mains": "shore",
    "load": "load", "loads": "load",
}
_NAME = re.compile(r"^([a-z]+?)(\d*)$")


class NmeaError(ValueError):
    """A sentence that cannot be used; the message is the quarantine reason."""


def checksum(body: str) -> int:
    """8-bit XOR of the characters of ``body`` (the text between ``$`` and ``*``)."""
    value = 0
    for ch in body.encode("ascii", errors="replace"):
        value ^= ch
    return value


def with_checksum(body: str) -> str:
    """A complete sentence ``$<body>*HH`` for ``body`` (e.g. ``'IIXDR,U,12.8,V,BATT1'``)."""
    return f"${body}*{checksum(body):02X}"


def split_sentence(line: str, *, require_checksum: bool = True) -> list[str]:
    """Verify a sentence and return its comma-separated fields (address first).

    Raises
    ------
    NmeaError
        Not starting with ``$``, too long, a missing (when required) or wrong
        checksum.
    """
    text = line.strip()
    if not text.startswith("$"):
        raise NmeaError("not an NMEA sentence (no leading '$')")
    if len(text) > MAX_SENTENCE_CHARS:
        raise NmeaError(f"sentence longer than {MAX_SENTENCE_CHARS} characters")
    star = text.rfind("*")
    if star < 0:
        if require_checksum:
            raise NmeaError("no checksum ('*hh' missing)")
        body = text[1:]
    else:
        body, given = text[1:star], text[star + 1:]
        try:
            given_value = int(given, 16)
        except ValueError:
            raise NmeaError(f"checksum {given!r} is not two hex digits") from None
        if len(given) != 2:
            raise NmeaError(f"checksum {given!r} is not two hex digits")
        expected = checksum(body)
        if given_value != expected:
            raise NmeaError(f"checksum mismatch: sentence says {given.upper()}, computed {expected:02X}")
    return body.split(",")


def transducer_channel(name: str, default: str) -> str:
    """The channel for an XDR transducer name (see the module notes)."""
    low = name.strip().lower()
    if not low:
        return default
    m = _NAME.match(low)
    if m and m.group(1) in _CHANNEL_WORDS and m.group(2) in ("", "1"):
        return _CHANNEL_WORDS[m.group(1)]
    cleaned = re.sub(r"[^a-z0-9_\-]", "_", low)
    if not cleaned[0].isalpha():
        cleaned = "x" + cleaned
    return cleaned[:40]


@dataclass(frozen=True, slots=True)
class XdrMeasurement:
    """One transducer group of an XDR sentence, in canonical units."""

    channel: str
    quantity: str  # voltage_V | current_A | temperature_C
    value: float


def _temperature_C(value: float, unit: str) -> float:
    if unit == "C":
        return value
    if unit == "F":
        return (value - 32.0) * 5.0 / 9.0
    if unit == "K":
        return value - 273.15
    raise NmeaError(f"temperature unit {unit!r} not understood (expected C, F or K)")


def parse_xdr(fields: list[str], *, default_channel: str = "battery") -> list[XdrMeasurement]:
    """Decode the fields of a verified XDR sentence (from :func:`split_sentence`).

    Groups of types we do not store (pressure, angle, ...) are skipped; an
    empty value field is a missing value and skipped too.

    Raises
    ------
    NmeaError
        Wrong number of fields, a value that is not a number, a unit that does
        not fit its type.
    """
    groups = fields[1:]
    if len(groups) == 0 or len(groups) % 4 != 0:
        raise NmeaError(f"XDR needs groups of 4 fields (type,value,unit,name); got {len(groups)} fields")
    out: list[XdrMeasurement] = []
    for i in range(0, len(groups), 4):
        kind, raw, unit, name = (f.strip() for f in groups[i:i + 4])
        if raw == "":
            continue
        try:
            value = float(raw)
        except ValueError:
            raise NmeaError(f"XDR value {raw!r} is not a number") from None
        if not math.isfinite(value):
            raise NmeaError(f"XDR value {raw!r} is not finite")
        kind = kind.upper()
        unit = unit.upper()
        channel = transducer_channel(name, default_channel)
        if kind == "U":
            if unit != "V":
                raise NmeaError(f"XDR voltage with unit {unit!r} (expected V)")
            out.append(XdrMeasurement(channel, "voltage_V", value))
        elif kind == "I":
            if unit != "A":
                raise NmeaError(f"XDR current with unit {unit!r} (expected A)")
            out.append(XdrMeasurement(channel, "current_A", value))
        elif kind == "C":
            out.append(XdrMeasurement(channel, "temperature_C", _temperature_C(value, unit)))
        # other transducer types (P pressure, A angle, H humidity ...) are not battery data
    return out


def sentence_type(fields: list[str]) -> str:
    """The sentence formatter (``XDR``) of a field list whose first field is the address."""
    address = fields[0]
    return address[2:] if len(address) == 5 else address[-3:]
