"""Column names and units of battery logs: what a column measures and how to scale it.

Shared by the file importer (:mod:`collector.csv_file`) and the live collectors,
so that a header such as ``Current (mA)`` means the same thing everywhere.

A column is described by a :class:`ColumnSpec`: the *channel* it belongs to
(``battery``, ``solar``, ... or ``None`` for "the file's default channel"),
the canonical *quantity* and the *scale* that turns a raw value into the
canonical unit::

    canonical value = raw value * scale

=============  ================  ========================================
quantity        canonical unit    units understood (scale)
=============  ================  ========================================
time            --                text (ISO 8601, local) or Unix epoch;
                                  scale = seconds per raw unit for epochs
                                  (1 for s, 0.001 for ms), 1.0 = detect
voltage_V       V                 V (1), mV (0.001), kV is not a thing here
current_A       A                 A (1), mA (0.001), kA (1000)
power_W         W                 W (1), mW (0.001), kW (1000)
temperature_C   degC              degC (1)
soc_pct         %                 % (1)
ignore          --                a column the user asked us to skip
=============  ================  ========================================

Power columns
-------------
The store keeps current, not power. When a channel has a power column but no
current column, the importer derives ``current_A = power_W / voltage_V`` using
that channel's own voltage when it has one, otherwise the battery channel's
voltage at the same instant (the charge source delivers at the bank's
voltage when it is measured at the bank, which is where a monitor measures
it). Where no voltage is known the current stays missing and the row is still
stored (with its voltage/temperature/state of charge) -- it is never guessed.

Recognised names (case-insensitive; units in ``()`` ``[]`` ``{}`` or as a last
word): ``voltage`` ``volt`` ``volts`` ``V`` ``U`` ``Vbat``; ``current`` ``amp``
``amps`` ``ampere`` ``A`` ``I`` ``Ibat``; ``power`` ``watt`` ``watts`` ``W``
``P``; ``temperature`` ``temp`` ``°C`` ``degC``; ``SOC`` ``state of charge``
``%``; ``time`` ``timestamp`` ``date`` ``datetime`` ``epoch`` ``unix`` ``ts``
``utc`` (with ``_ms`` / ``millis`` for milliseconds). Channel words:
``battery`` ``batt`` ``bat`` ``bank`` ``house`` ``shunt`` -> battery; ``solar``
``pv`` ``panel`` ``mppt`` -> solar; ``alternator`` ``alt`` ``dcdc`` ``b2b``
``engine`` -> alternator; ``shore`` ``mains`` ``grid`` ``hookup`` -> shore;
``load`` ``loads`` ``consumer`` -> load. A canonical-style name
``<name>_<quantity>_<unit>`` (``fridge_current_A``) takes ``<name>`` as the
channel whatever it is.
"""

from __future__ import annotations

from collections.abc import Callable

import re
from dataclasses import dataclass
from typing import Literal

Quantity = Literal["time", "voltage_V", "current_A", "power_W", "temperature_C", "soc_pct", "ignore"]

QUANTITIES: tuple[str, ...] = ("time", "voltage_V", "current_A", "power_W", "temperature_C", "soc_pct", "ignore")

#: What ``--map COLUMN=QUANTITY`` accepts after an optional ``CHANNEL.`` prefix,
#: with the (quantity, scale) each stands for.
MAP_QUANTITIES: dict[str, tuple[str, float]] = {
    "time": ("time", 1.0),
    "epoch_s": ("time", 1.0),
    "epoch_ms": ("time", 0.001),
    "voltage_V": ("voltage_V", 1.0),
    "voltage_mV": ("voltage_V", 0.001),
    "current_A": ("current_A", 1.0),
    "current_mA": ("current_A", 0.001),
    "power_W": ("power_W", 1.0),
    "power_kW": ("power_W", 1000.0),
    "temperature_C": ("temperature_C", 1.0),
    "soc_pct": ("soc_pct", 1.0),
    "ignore": ("ignore", 1.0),
}
_MAP_LOWER = {k.lower(): v for k, v in MAP_QUANTITIES.items()}


@dataclass(frozen=True)
class ColumnSpec:
    """What one log column measures.

    Attributes
    ----------
    channel
        Channel name (``battery``, ``solar``, ``alternator``, ``shore``, ``load``
        or a user name), or ``None``: the file's default channel.
    quantity
        One of :data:`QUANTITIES`.
    scale
        Multiply a raw value by this to get the canonical unit [canonical unit
        per raw unit], e.g. 0.001 for mA or mV, 1000 for kW. For ``time`` it is
        seconds per raw unit of a numeric epoch (1.0 also means "detect").
    """

    channel: str | None
    quantity: Quantity
    scale: float = 1.0


_CHANNEL_WORDS: dict[str, str] = {
    "battery": "battery", "batt": "battery", "bat": "battery", "bank": "battery",
    "house": "battery", "shunt": "battery", "accu": "battery",
    "solar": "solar", "pv": "solar", "panel": "solar", "panels": "solar", "mppt": "solar",
    "alternator": "alternator", "alt": "alternator", "dcdc": "alternator", "b2b": "alternator",
    "engine": "alternator",
    "shore": "shore", "mains": "shore", "grid": "shore", "hookup": "shore",
    "load": "load", "loads": "load", "consumer": "load", "consumers": "load",
}

# word -> quantity (the word names the quantity, not the unit)
_QUANTITY_WORDS: dict[str, str] = {
    "voltage": "voltage_V", "volt": "voltage_V", "volts": "voltage_V", "u": "voltage_V",
    "vbat": "voltage_V", "vbatt": "voltage_V", "spannung": "voltage_V",
    "current": "current_A", "amp": "current_A", "amps": "current_A", "ampere": "current_A",
    "amperes": "current_A", "i": "current_A", "ibat": "current_A", "ibatt": "current_A",
    "power": "power_W", "watt": "power_W", "watts": "power_W", "p": "power_W",
    "temperature": "temperature_C", "temp": "temperature_C",
    "soc": "soc_pct",
}

# unit token -> (quantity, scale)
_UNITS: dict[str, tuple[str, float]] = {
    "v": ("voltage_V", 1.0), "mv": ("voltage_V", 0.001),
    "a": ("current_A", 1.0), "ma": ("current_A", 0.001), "ka": ("current_A", 1000.0),
    "w": ("power_W", 1.0), "mw": ("power_W", 0.001), "kw": ("power_W", 1000.0),
    "degc": ("temperature_C", 1.0), "c": ("temperature_C", 1.0),
    "pct": ("soc_pct", 1.0), "percent": ("soc_pct", 1.0),
}

_TIME_WORDS = {"time", "timestamp", "date", "datetime", "epoch", "unix", "ts", "utc", "zeit",
               "localtime", "unixtime", "time_utc"}
_MS_WORDS = {"ms", "millis", "msec", "milliseconds"}
# Words that make a column something we do not store (energy, counters, remaining time).
_REJECT_WORDS = {"ah", "wh", "kwh", "mah", "consumed", "remaining", "ttg", "min", "max",
                 "cycles", "count", "counter", "id", "seq", "line", "status", "alarm", "relay",
                 "error", "flags", "checksum", "crc", "ttl", "eta"}

_CANONICAL = re.compile(
    r"^(?P<ch>[a-z][a-z0-9]*(?:_[a-z0-9]+)*?)_(?P<q>voltage_(?:v|mv)|current_(?:a|ma)|power_(?:w|kw)"
    r"|temperature_c|soc_pct)$")
_CHANNEL_NAME = re.compile(r"^[a-z][a-z0-9_\-]{0,39}$")


def normalise_channel(name: str) -> str:
    """A channel name as stored: lower case, ``[a-z][a-z0-9_-]*``, at most 40 characters.

    Raises
    ------
    ValueError
        Naming the bad name and what is allowed.
    """
    out = name.strip().lower().replace(" ", "_")
    if not _CHANNEL_NAME.match(out):
        raise ValueError(
            f"channel name {name!r} is not usable: use a letter followed by letters, digits, '_' or '-'"
            " (at most 40 characters), e.g. 'battery', 'solar', 'fridge'")
    return out


def _tokens(name: str) -> tuple[list[str], str | None]:
    """Split a header into lower-case words and the unit given in brackets, if any."""
    text = name.strip().strip('"').strip("'")
    text = re.sub(r"(?<=[a-z])(?=[A-Z][a-z])", " ", text)  # BatteryVoltage -> Battery Voltage
    text = text.replace("℃", " degC ").replace("°C", " degC ").replace("°c", " degC ")
    text = text.replace("°", " deg ").replace("%", " pct ")
    unit = None
    m = re.search(r"[\(\[\{]\s*([^\)\]\}]*?)\s*[\)\]\}]", text)
    if m:
        unit = m.group(1).strip().lower().replace(" ", "") or None
        text = text[:m.start()] + " " + text[m.end():]
    words = [w for w in re.split(r"[^0-9a-zA-Z]+", text.lower()) if w]
    # "deg c" written apart
    joined: list[str] = []
    for w in words:
        if w == "c" and joined and joined[-1] == "deg":
            joined[-1] = "degc"
        else:
            joined.append(w)
    if unit is not None:
        unit = {"°c": "degc", "degc": "degc", "pct": "pct", "%": "pct", "c": "degc", "deg": "degc"}.get(unit, unit)
    return joined, unit


def mapped_spec(column_map: dict[str, ColumnSpec]) -> Callable[[str], ColumnSpec | None]:
    """What a column name measures: the user's ``--map`` (exact name, then any case and spacing),
    else :func:`classify_column`. Both importers (text and Parquet) read names through this."""
    lower_map = {k.strip().lower(): v for k, v in column_map.items()}

    def spec_of(name: str) -> ColumnSpec | None:
        if name in column_map:
            return column_map[name]
        if name.strip().lower() in lower_map:
            return lower_map[name.strip().lower()]
        return classify_column(name)

    return spec_of


def classify_column(name: str) -> ColumnSpec | None:
    """What a header names, or None when it is none of the quantities we store.

    Parameters
    ----------
    name
        The column header as written in the log, e.g. ``'battery_current_A'``,
        ``'Current (mA)'``, ``'U[V]'``, ``'Temp °C'``, ``'SOC %'``, ``'epoch_ms'``.

    Returns
    -------
    ColumnSpec or None
        ``classify_column('Current (mA)') == ColumnSpec(None, 'current_A', 0.001)``;
        ``classify_column('PV W') == ColumnSpec('solar', 'power_W', 1.0)``.
    """
    if not isinstance(name, str) or not name.strip():
        return None
    raw = name.strip()
    channel: str | None
    quantity: str | None
    m = _CANONICAL.match(raw.lower())
    if m and not re.search(r"[\s\(\[]", raw):
        q, _, unit = m.group("q").rpartition("_")
        quantity, scale = _UNITS["pct" if q == "soc" else ("degc" if q == "temperature" else unit)]
        channel = _CHANNEL_WORDS.get(m.group("ch"), m.group("ch"))
        try:
            channel = normalise_channel(channel)
        except ValueError:
            return None
        return ColumnSpec(channel, quantity, scale)  # type: ignore[arg-type]

    words, unit = _tokens(raw)
    if not words and unit is None:
        return None
    if any(w in _REJECT_WORDS for w in words):
        return None

    # time
    if any(w in _TIME_WORDS for w in words):
        if unit in _MS_WORDS or any(w in _MS_WORDS for w in words):
            return ColumnSpec(None, "time", 0.001)
        if unit == "s" or "s" in words[1:]:
            return ColumnSpec(None, "time", 1.0)
        return ColumnSpec(None, "time", 1.0)

    channel = None
    for w in words:
        if w in _CHANNEL_WORDS:
            channel = _CHANNEL_WORDS[w]
            break

    state_of_charge = "state" in words and "charge" in words
    quantity = "soc_pct" if state_of_charge else None
    if quantity is None:
        for w in words:
            if w in _QUANTITY_WORDS:
                quantity = _QUANTITY_WORDS[w]
                break

    # unit: from brackets, else a word that is a unit (the last one wins: 'PV W', 'Current mA')
    unit_q: tuple[str, float] | None = None
    if unit is not None:
        unit_q = _UNITS.get(unit)
        if unit_q is None:
            return None  # a bracketed unit we do not store (Ah, Wh, s, ...)
    else:
        for w in reversed(words):
            if w in _UNITS and not (w == "c" and quantity not in (None, "temperature_C")):
                if w in ("a", "v", "w", "c") and quantity is None and len(words) > 1 and w == words[0]:
                    # 'a' as a first word of a phrase is an article, not amps ('A time')
                    continue
                unit_q = _UNITS[w]
                break

    if quantity is None and unit_q is None:
        return None
    if quantity is None:
        assert unit_q is not None  # one of the two is known (above)
        quantity, scale = unit_q
    elif unit_q is None:
        scale = 1.0
    else:
        if unit_q[0] != quantity:
            return None  # 'voltage (A)': contradictory, let the user --map it
        scale = unit_q[1]
    return ColumnSpec(channel, quantity, scale)  # type: ignore[arg-type]


def parse_map_option(text: str) -> tuple[str, ColumnSpec]:
    """Parse one ``--map COLUMN=QUANTITY`` option.

    ``QUANTITY`` is ``[CHANNEL.]NAME`` with NAME one of :data:`MAP_QUANTITIES`
    (``current_A``, ``current_mA``, ``voltage_V``, ``voltage_mV``, ``power_W``,
    ``power_kW``, ``temperature_C``, ``soc_pct``, ``time``, ``epoch_s``,
    ``epoch_ms``, ``ignore``), e.g. ``'Amps=current_A'`` or
    ``'I_sol=solar.current_mA'``.

    Raises
    ------
    ValueError
        Naming the option and listing what is allowed.
    """
    allowed = ", ".join(MAP_QUANTITIES)
    if "=" not in text:
        raise ValueError(f"--map {text!r}: expected COLUMN=QUANTITY, e.g. 'Amps=current_A'; "
                         f"QUANTITY is [CHANNEL.]one of: {allowed}")
    column, _, target = text.rpartition("=")
    column, target = column.strip(), target.strip()
    if not column:
        raise ValueError(f"--map {text!r}: the column name before '=' is empty")
    channel: str | None = None
    if "." in target:
        ch, _, target = target.partition(".")
        try:
            channel = normalise_channel(ch)
        except ValueError as exc:
            raise ValueError(f"--map {text!r}: {exc}") from None
    hit = _MAP_LOWER.get(target.lower())
    if hit is None:
        raise ValueError(f"--map {text!r}: unknown quantity {target!r}; allowed: {allowed}"
                         " (optionally prefixed by a channel, e.g. 'solar.current_A')")
    return column, ColumnSpec(channel, hit[0], hit[1])  # type: ignore[arg-type]
