"""Line parsers for the text protocols home-made and generic monitors emit.

Formats
-------
``csv``
    Delimited values (``,`` ``;`` tab or spaces) with a header line, or a
    fixed column order given with ``--columns``. A header is recognised with
    the importer's column classifier (:func:`collector.columns.classify_column`),
    so ``Current (mA)`` means the same live as in a file. A header repeated
    later (the device rebooted) is neither data nor rejected; a different
    header replaces the old one.
``keyvalue``
    ``V=12.84 I=-4.2 T=18.5 SOC=87`` -- pairs separated by spaces, commas or
    semicolons; keys classified like headers plus the short keys ``V`` ``I``
    ``A`` ``P`` ``W`` ``SOC``; ``t``/``T`` is a time when its value is a
    plausible time, else a temperature; a value may carry its unit
    (``12.8V``, ``-4200mA``).
``jsonl``
    One JSON object per line: ``{"voltage_V": 12.8, "current_A": -4.2}``,
    optionally with ``"channel"`` and a time (``"t"``/``"time"``/
    ``"timestamp"``: epoch seconds, epoch milliseconds or ISO 8601), or with
    one object per channel: ``{"battery": {...}, "solar": {...}}``.
``nmea``
    NMEA 0183 XDR sentences with a verified checksum (:mod:`collector.nmea`).

A parser's :meth:`LineParser.feed` takes one line (without its terminator)
and the host time it arrived, and returns the readings it yields and the
rejects ``(text, reason)`` -- a malformed line is never an exception.
:class:`AutoParser` picks the format by a vote over the first lines.

Times
-----
A device time is used when it is plausible -- an epoch in seconds or
milliseconds after 2001-09-09 (1e9 s), or ISO 8601; an ISO time without an
offset is taken as UTC (monitors with a clock almost always keep UTC;
document yours). A small number (a device's uptime counter) is not a time: such
readings are stamped with the host clock.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Callable
from datetime import datetime, timezone

from drawdown.collector import nmea
from drawdown.collector.columns import MAP_QUANTITIES, ColumnSpec, classify_column, normalise_channel
from drawdown.collector.source import NAN, Reading

FORMATS: tuple[str, ...] = ("csv", "keyvalue", "jsonl", "nmea")
MAX_LINE_CHARS = 4096

Result = tuple[list[Reading], list[tuple[str, str]]]

# Short keys live protocols use that a file header would not (key=value, JSON).
_SHORT_KEYS: dict[str, ColumnSpec] = {
    "v": ColumnSpec(None, "voltage_V", 1.0),
    "i": ColumnSpec(None, "current_A", 1.0),
    "a": ColumnSpec(None, "current_A", 1.0),
    "p": ColumnSpec(None, "power_W", 1.0),
    "w": ColumnSpec(None, "power_W", 1.0),
    "temp": ColumnSpec(None, "temperature_C", 1.0),
    "soc": ColumnSpec(None, "soc_pct", 1.0),
}
# 't' / 'T' is a time when its value is a plausible time, else a temperature.
_T_KEYS = ("t", "T")
_TEMPERATURE = ColumnSpec(None, "temperature_C", 1.0)
_VALUE_UNIT = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*([a-zA-Z%°]*)\s*$")
_UNIT_SCALE: dict[str, tuple[str, float]] = {
    "v": ("voltage_V", 1.0), "mv": ("voltage_V", 0.001),
    "a": ("current_A", 1.0), "ma": ("current_A", 0.001),
    "w": ("power_W", 1.0), "kw": ("power_W", 1000.0), "mw": ("power_W", 0.001),
    "c": ("temperature_C", 1.0), "°c": ("temperature_C", 1.0), "degc": ("temperature_C", 1.0),
    "%": ("soc_pct", 1.0),
}
_HEADER_FIELD = re.compile(r"^[\w \-.()\[\]/%°µ]+$")
_QUANTITY_SLOT = {"voltage_V": 0, "current_A": 1, "temperature_C": 2, "soc_pct": 3, "power_W": 4}


class LineError(ValueError):
    """One unusable line; the message is the quarantine reason."""


def classify_key(name: str) -> ColumnSpec | None:
    """What a header/key names: the importer's classifier, plus short live keys (``V``, ``I``, ``t``)."""
    spec = classify_column(name)
    if spec is not None:
        return spec
    low = name.strip().lower()
    if low in _SHORT_KEYS:
        return _SHORT_KEYS[low]
    if "." in low:  # 'solar.current_A': channel prefix
        ch, _, rest = low.partition(".")
        inner = classify_key(name.strip()[len(ch) + 1:])
        if inner is not None and rest:
            try:
                return ColumnSpec(normalise_channel(ch), inner.quantity, inner.scale)
            except ValueError:
                return None
    return None


def parse_columns_option(text: str) -> list[ColumnSpec | None]:
    """The ``--columns`` option: a fixed column order for headerless delimited lines.

    Each name is ``[CHANNEL.]QUANTITY`` with QUANTITY one of
    :data:`collector.columns.MAP_QUANTITIES` (``voltage_V``, ``current_mA``,
    ``time``, ``ignore`` ...) or any header the classifier understands;
    ``-`` or an empty name skips a column.

    Raises
    ------
    ValueError
        Naming the column that is not understood and what is allowed.
    """
    out: list[ColumnSpec | None] = []
    lower = {k.lower(): v for k, v in MAP_QUANTITIES.items()}
    for raw in text.split(","):
        name = raw.strip()
        if name in ("", "-", "ignore"):
            out.append(None)
            continue
        channel = None
        base = name
        if "." in name:
            ch, _, base = name.partition(".")
            channel = normalise_channel(ch)
        hit = lower.get(base.lower())
        if hit is not None:
            out.append(ColumnSpec(channel, hit[0], hit[1]))  # type: ignore[arg-type]
            continue
        spec = classify_key(base)
        if spec is None:
            raise ValueError(
                f"--columns: {name!r} is not a quantity; use [CHANNEL.]NAME with NAME one of "
                f"{', '.join(MAP_QUANTITIES)}, or '-' to skip a column")
        out.append(ColumnSpec(channel or spec.channel, spec.quantity, spec.scale))
    if not any(s is not None and s.quantity not in ("time", "ignore") for s in out):
        raise ValueError(f"--columns {text!r}: names no measured quantity (voltage_V, current_A, ...)")
    return out


def parse_time(value: object, scale: float = 1.0) -> float | None:
    """A device time as UTC epoch seconds, or None when it is not a plausible time.

    Numbers: epoch seconds (``scale`` seconds per unit; values above 1e11 are
    taken as milliseconds); below 1e9 s (before 2001) a number is a counter,
    not a time. Text: a number as above, or ISO 8601 (no offset = UTC).
    """
    if value is None:
        return None
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        x = float(value) * scale
        if not math.isfinite(x):
            return None
        if x > 1e11:  # milliseconds
            x /= 1000.0
        return x if 1e9 <= x < 4.2e9 else None
    if isinstance(value, str):
        text = value.strip()
        try:
            return parse_time(float(text), scale)
        except ValueError:
            pass
        try:
            ts = datetime.fromisoformat(text.replace("Z", "+00:00"))
        except ValueError:
            return None
        if ts.tzinfo is None:
            ts = ts.replace(tzinfo=timezone.utc)
        return ts.timestamp()
    return None


class _Builder:
    """Collects values per channel for one line and turns them into readings."""

    __slots__ = ("default", "values")

    def __init__(self, default: str):
        self.default = default
        self.values: dict[str, list[float]] = {}

    def add(self, spec: ColumnSpec, value: float) -> None:
        ch = spec.channel or self.default
        slots = self.values.get(ch)
        if slots is None:
            slots = self.values[ch] = [NAN, NAN, NAN, NAN, NAN]
        slots[_QUANTITY_SLOT[spec.quantity]] = value * spec.scale

    def readings(self, t_s: float, host_stamped: bool) -> list[Reading]:
        out = []
        for ch, (v, i, temp, soc, p) in self.values.items():
            if math.isnan(i) and not math.isnan(p) and not math.isnan(v) and v > 0:
                i = p / v  # power without current: the channel's own voltage (see collector.columns)
            r = Reading(t_s, ch, v, i, temp, soc, host_stamped)
            if r.has_values():
                out.append(r)
        return out


def _number(text: str) -> float:
    x = float(text)
    if not math.isfinite(x):
        raise ValueError(text)
    return x


def first_line_is_whole(text: str) -> bool:
    """Whether the first line read after (re)connecting can be trusted to be whole.

    The device may have been mid-line when the port opened, and a cut line can
    look valid with wrong values (``2.85,-4.2`` from ``12.85,-4.2``). Lines
    that mark their own start are safe: an NMEA sentence (``$``, checksummed),
    a JSON object (``{``), or a header line (no field is a number -- a cut
    header at worst mismatches the data and gets them rejected, never misread).
    """
    s = text.strip()
    if s.startswith(("$", "{")):
        return True
    if "=" in s or not s:
        return False
    for f in re.split(r"[,;\t ]+", s):
        try:
            float(f)
            return False
        except ValueError:
            continue
    return True


class LineParser:
    """Base class: ``feed(line, t_host_s) -> (readings, rejects)``."""

    format: str = ""

    def __init__(self, *, channel: str = "battery"):
        self.channel = normalise_channel(channel)

    def feed(self, line: str, t_host_s: float) -> Result:
        if len(line) > MAX_LINE_CHARS:
            return [], [(line[:200], f"line longer than {MAX_LINE_CHARS} characters")]
        text = line.strip()
        if not text:
            return [], []
        try:
            return self.parse(text, t_host_s), []
        except LineError as exc:
            return [], [(text, str(exc))]

    def parse(self, text: str, t_host_s: float) -> list[Reading]:  # pragma: no cover - abstract
        raise NotImplementedError


class DelimitedParser(LineParser):
    """Delimited values with a header line, or a fixed column order (``columns``).

    Parameters
    ----------
    columns
        Fixed column order (from :func:`parse_columns_option`); None: wait
        for a header line.
    channel
        Channel for columns that name none.
    delimiter
        ``,`` ``;`` ``\\t`` or ``" "`` (any run of spaces); None: detected
        from the first line.
    """

    format = "csv"

    def __init__(self, *, columns: list[ColumnSpec | None] | None = None, channel: str = "battery",
                 delimiter: str | None = None):
        super().__init__(channel=channel)
        self.columns = columns
        self.fixed = columns is not None
        self.delimiter = delimiter
        self.header: list[str] | None = None

    @staticmethod
    def detect_delimiter(text: str) -> str:
        counts = {d: text.count(d) for d in (",", ";", "\t")}
        best = max(counts, key=counts.__getitem__)
        return best if counts[best] else " "

    def _split(self, text: str) -> list[str]:
        if self.delimiter is None:
            self.delimiter = self.detect_delimiter(text)
        if self.delimiter == " ":
            return text.split()
        return [f.strip() for f in text.split(self.delimiter)]

    def _try_header(self, fields: list[str]) -> bool:
        # a header has no number in it (a noisy line such as '$IIXDR,U,12.85,V' is not one)
        # and only the characters column names use ('{"voltage_V": 12.' is not one either)
        if not all(_HEADER_FIELD.match(f) for f in fields):
            return False
        for f in fields:
            try:
                float(f)
                return False
            except ValueError:
                pass
        specs = [classify_key(f) for f in fields]
        if not any(s is not None and s.quantity not in ("time", "ignore") for s in specs):
            return False
        named = [(s.channel, s.quantity) for s in specs if s is not None and s.quantity != "ignore"]
        if len(named) != len(set(named)):
            return False  # two columns for the same quantity: ambiguous, not taken as a header
        self.columns = specs
        self.header = fields
        return True

    def parse(self, text: str, t_host_s: float) -> list[Reading]:
        fields = self._split(text)
        numeric = True
        try:
            float(fields[-1])
        except ValueError:
            numeric = False
        if not numeric and fields != self.header and not self.fixed:
            if self._try_header(fields):
                return []
        if fields == self.header:
            return []  # a repeated header (device restarted)
        if self.columns is None:
            raise LineError("no header line seen yet; pass --columns (e.g. 'voltage_V,current_A')")
        if len(fields) != len(self.columns):
            raise LineError(f"{len(fields)} fields, the header has {len(self.columns)}")
        b = _Builder(self.channel)
        t_dev: float | None = None
        for spec, raw in zip(self.columns, fields):
            if spec is None or spec.quantity == "ignore":
                continue
            if spec.quantity == "time":
                t_dev = parse_time(raw, spec.scale)
                continue
            if raw == "" or raw.lower() in ("nan", "null", "na", "-"):
                continue
            try:
                b.add(spec, _number(raw))
            except ValueError:
                raise LineError(f"value {raw!r} is not a number") from None
        return b.readings(t_host_s if t_dev is None else t_dev, t_dev is None)


def _split_value_unit(raw: str, spec: ColumnSpec | None, key: str) -> tuple[ColumnSpec, float]:
    m = _VALUE_UNIT.match(raw)
    if not m:
        raise LineError(f"value {raw!r} of {key!r} is not a number")
    x = _number(m.group(1))
    unit = m.group(2).lower()
    if unit:
        hit = _UNIT_SCALE.get(unit)
        if hit is None:
            raise LineError(f"unit {m.group(2)!r} of {key!r} not understood")
        if spec is None:
            spec = ColumnSpec(None, hit[0], hit[1])  # type: ignore[arg-type]
        elif spec.quantity != hit[0]:
            raise LineError(f"{key}={raw}: the unit contradicts the key")
        else:
            spec = ColumnSpec(spec.channel, spec.quantity, hit[1])
    if spec is None:
        raise LineError(f"key {key!r} not understood")
    return spec, x


class KeyValueParser(LineParser):
    """``key=value`` pairs; unknown keys are ignored, a line with none we store is rejected."""

    format = "keyvalue"
    _SPLIT = re.compile(r"[\s,;]+")

    def __init__(self, *, channel: str = "battery"):
        super().__init__(channel=channel)
        self._keys: dict[str, ColumnSpec | None] = {}
        self._channel_key = ("channel", "ch", "name")

    def _spec(self, key: str) -> ColumnSpec | None:
        if key not in self._keys:
            self._keys[key] = classify_key(key)
        return self._keys[key]

    def parse(self, text: str, t_host_s: float) -> list[Reading]:
        pairs = [p for p in self._SPLIT.split(text) if p]
        channel = self.channel
        items: list[tuple[str, str]] = []
        for p in pairs:
            key, sep, raw = p.partition("=")
            if not sep:
                sep_key, sep2, raw2 = p.partition(":")
                if not sep2:
                    raise LineError(f"{p!r} is not a key=value pair")
                key, raw = sep_key, raw2
            key = key.strip()
            if key.lower() in self._channel_key:
                try:
                    channel = normalise_channel(raw)
                except ValueError as exc:
                    raise LineError(str(exc)) from None
                continue
            items.append((key, raw.strip()))
        b = _Builder(channel)
        t_dev: float | None = None
        known = 0
        for key, raw in items:
            if key in _T_KEYS:
                t_try = parse_time(raw)
                if t_try is not None:
                    t_dev = t_try
                    continue
            spec = _TEMPERATURE if key in _T_KEYS else self._spec(key)
            if spec is not None and spec.quantity == "time":
                t_dev = parse_time(raw, spec.scale)
                continue
            if spec is None and not _VALUE_UNIT.match(raw):
                continue  # a key we do not store (seq=, status=OK)
            if spec is None:
                try:
                    spec, x = _split_value_unit(raw, None, key)
                except LineError:
                    continue
            else:
                spec, x = _split_value_unit(raw, spec, key)
            if spec.quantity == "ignore":
                continue
            b.add(spec, x)
            known += 1
        if not known:
            raise LineError("no key=value pair we store (voltage, current, temperature, state of charge)")
        return b.readings(t_host_s if t_dev is None else t_dev, t_dev is None)


class JsonLinesParser(LineParser):
    """One JSON object per line (see the module notes for the shapes understood)."""

    format = "jsonl"

    def __init__(self, *, channel: str = "battery"):
        super().__init__(channel=channel)
        self._keys: dict[str, ColumnSpec | None] = {}

    def _spec(self, key: str) -> ColumnSpec | None:
        if key not in self._keys:
            self._keys[key] = classify_key(key)
        return self._keys[key]

    def _fill(self, b: _Builder, obj: dict, channel: str | None) -> tuple[int, float | None]:
        known = 0
        t_dev = None
        for key, value in obj.items():
            if isinstance(value, dict):
                try:
                    ch = normalise_channel(key)
                except ValueError:
                    continue
                k, t_inner = self._fill(b, value, ch)
                known += k
                t_dev = t_dev if t_inner is None else t_inner
                continue
            if key in _T_KEYS:
                t_try = parse_time(value)
                if t_try is not None:
                    t_dev = t_try
                    continue
            spec = _TEMPERATURE if key in _T_KEYS else self._spec(key)
            if spec is None or spec.quantity == "ignore":
                continue
            if spec.quantity == "time":
                t_dev = parse_time(value, spec.scale)
                continue
            if value is None:
                known += 1
                continue
            if isinstance(value, bool) or not isinstance(value, (int, float, str)):
                raise LineError(f"{key!r}: {value!r} is not a number")
            if isinstance(value, str):
                spec, x = _split_value_unit(value, spec, key)
            else:
                x = float(value)
                if not math.isfinite(x):
                    raise LineError(f"{key!r}: {value!r} is not finite")
            if channel is not None and spec.channel is None:
                spec = ColumnSpec(channel, spec.quantity, spec.scale)
            b.add(spec, x)
            known += 1
        return known, t_dev

    def parse(self, text: str, t_host_s: float) -> list[Reading]:
        try:
            obj = json.loads(text)
        except (ValueError, RecursionError):
            raise LineError("not valid JSON") from None
        if not isinstance(obj, dict):
            raise LineError("a JSON line must be an object {...}")
        channel = self.channel
        if "channel" in obj:
            try:
                channel = normalise_channel(str(obj.pop("channel")))
            except ValueError as exc:
                raise LineError(str(exc)) from None
        b = _Builder(channel)
        known, t_dev = self._fill(b, obj, None)
        if not known:
            raise LineError("no key we store (voltage_V, current_A, temperature_C, soc_pct, power_W)")
        return b.readings(t_host_s if t_dev is None else t_dev, t_dev is None)


class NmeaParser(LineParser):
    """NMEA 0183 XDR sentences; other sentences are skipped (not rejected)."""

    format = "nmea"

    def __init__(self, *, channel: str = "battery", require_checksum: bool = True):
        super().__init__(channel=channel)
        self.require_checksum = require_checksum

    def parse(self, text: str, t_host_s: float) -> list[Reading]:
        if text.startswith("!"):
            return []  # encapsulated sentences (AIS): not battery data
        try:
            fields = nmea.split_sentence(text, require_checksum=self.require_checksum)
            if nmea.sentence_type(fields) != "XDR":
                return []
            measurements = nmea.parse_xdr(fields, default_channel=self.channel)
        except nmea.NmeaError as exc:
            raise LineError(str(exc)) from None
        b = _Builder(self.channel)
        for m in measurements:
            b.add(ColumnSpec(m.channel, m.quantity, 1.0), m.value)  # type: ignore[arg-type]
        return b.readings(t_host_s, True)


def guess_format(line: str) -> str | None:
    """The format one line looks like, or None for an empty/unrecognisable line."""
    text = line.strip()
    if not text:
        return None
    if text.startswith("$") and "*" in text:
        return "nmea"
    if text.startswith("{") and text.endswith("}"):
        return "jsonl"
    tokens = [t for t in re.split(r"[\s,;]+", text) if t]
    if tokens and sum("=" in t for t in tokens) >= max(1, len(tokens) // 2):
        return "keyvalue"
    if len(re.split(r"[,;\t]| +", text)) >= 2:
        return "csv"
    return None


def make_parser(fmt: str, *, channel: str = "battery", columns: list[ColumnSpec | None] | None = None
                ) -> LineParser:
    """A parser for one of :data:`FORMATS`."""
    if fmt == "csv":
        return DelimitedParser(columns=columns, channel=channel)
    if fmt == "keyvalue":
        return KeyValueParser(channel=channel)
    if fmt == "jsonl":
        return JsonLinesParser(channel=channel)
    if fmt == "nmea":
        return NmeaParser(channel=channel)
    raise ValueError(f"unknown line format {fmt!r}; expected one of {', '.join(FORMATS)}")


class AutoParser(LineParser):
    """Detect the format by a vote over the first ``vote_lines`` recognisable lines.

    Lines seen while voting are kept (with their arrival times) and parsed
    once the format is chosen, so nothing is lost to detection.
    """

    format = "auto"

    def __init__(self, *, channel: str = "battery", columns: list[ColumnSpec | None] | None = None,
                 vote_lines: int = 5, on_detect: Callable[[str], None] | None = None):
        super().__init__(channel=channel)
        self.columns = columns
        self.vote_lines = vote_lines
        self.on_detect = on_detect
        self.inner: LineParser | None = None
        self._held: list[tuple[str, float, str | None]] = []

    def feed(self, line: str, t_host_s: float) -> Result:
        if self.inner is not None:
            return self.inner.feed(line, t_host_s)
        guess = guess_format(line) if len(line) <= MAX_LINE_CHARS else None
        self._held.append((line, t_host_s, guess))
        votes = [g for _, _, g in self._held if g is not None]
        if len(votes) < self.vote_lines and len(self._held) < 4 * self.vote_lines:
            return [], []
        return self.decide()

    def decide(self) -> Result:
        """Choose the format now (by majority of what was seen) and parse the held lines."""
        votes = [g for _, _, g in self._held if g is not None]
        if not votes:
            held, self._held = self._held, []
            return [], [(text.strip()[:200], "format not recognised (csv, key=value, JSON, NMEA)")
                        for text, _, _ in held if text.strip()]
        fmt = max(set(votes), key=votes.count)
        self.inner = make_parser(fmt, channel=self.channel, columns=self.columns)
        self.format = fmt
        if self.on_detect is not None:
            self.on_detect(fmt)
        readings: list[Reading] = []
        rejects: list[tuple[str, str]] = []
        held, self._held = self._held, []
        for text, t, _ in held:
            r, j = self.inner.feed(text, t)
            readings.extend(r)
            rejects.extend(j)
        return readings, rejects
