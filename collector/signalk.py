"""Signal K delta messages -> canonical readings.

Signal K (the open marine data standard; schemas/groups/electrical.json and
data_model.md, docs/standards.md#signal-k) sends *delta* messages::

    {"context": "vessels.self",
     "updates": [{"source": {"label": "x"}, "timestamp": "2024-06-21T12:00:00Z",
                  "values": [{"path": "electrical.batteries.house.voltage", "value": 13.28},
                             {"path": "electrical.batteries.house.current", "value": -4.2}]}]}

All Signal K units are SI. Paths read (under ``electrical.batteries.<id>.``;
the same leaves under ``electrical.solar.<id>.`` and
``electrical.alternators.<id>.``):

=============================  ======  ===================================
path leaf                       unit    stored as
=============================  ======  ===================================
``voltage``                     V       voltage_V
``current``                     A       current_A (Signal K: positive = charging, as ours)
``temperature``                 K       temperature_C = K - 273.15
``capacity.stateOfCharge``      ratio   soc_pct = ratio x 100
=============================  ======  ===================================

Other paths (power, capacity in J, lifetime discharge in C, navigation ...)
are skipped -- not errors. Channels: a battery id ``house``, ``main``,
``bank``, ``battery``, ``0`` or ``1`` is the ``battery`` channel, any other id
(``starter``) its own channel; the first solar / alternator id is ``solar`` /
``alternator``, others ``solar_<id>`` / ``alternator_<id>``.
"""

from __future__ import annotations

import math
from typing import Any

from drawdown.collector.lines import parse_time
from drawdown.collector.source import NAN, Reading

_GROUPS = {"batteries": "battery", "solar": "solar", "alternators": "alternator"}
_BATTERY_IDS = {"house", "main", "bank", "battery", "0", "1", "service"}
_LEAVES: dict[str, tuple[int, float, float]] = {  # leaf -> (slot, multiply, add)
    "voltage": (0, 1.0, 0.0),
    "current": (1, 1.0, 0.0),
    "temperature": (2, 1.0, -273.15),
    "capacity.stateOfCharge": (3, 100.0, 0.0),
}
KELVIN_OFFSET = 273.15


class SignalKError(ValueError):
    """A delta message that cannot be used; the message is the quarantine reason."""


def is_delta(obj: Any) -> bool:
    """True when ``obj`` looks like a Signal K delta (a dict with an ``updates`` list)."""
    return isinstance(obj, dict) and isinstance(obj.get("updates"), list)


def channel_for(group: str, ident: str) -> str:
    """The channel of ``electrical.<group>.<ident>`` (see the module notes)."""
    base = _GROUPS[group]
    low = ident.lower()
    if group == "batteries":
        if low in _BATTERY_IDS:
            return "battery"
        name = "".join(c if c.isalnum() or c in "_-" else "_" for c in low)
        return name if name[:1].isalpha() else f"battery_{name}"
    if low in ("0", "1", base, "main"):
        return base
    return f"{base}_{''.join(c if c.isalnum() else '_' for c in low)}"[:40]


def split_path(path: str) -> tuple[str, str] | None:
    """``(channel, leaf)`` for an electrical path we store, else None."""
    parts = path.split(".")
    if len(parts) < 4 or parts[0] != "electrical" or parts[1] not in _GROUPS:
        return None
    leaf = ".".join(parts[3:])
    if leaf not in _LEAVES:
        return None
    return channel_for(parts[1], parts[2]), leaf


def delta_to_readings(msg: dict[str, Any], *, t_host_s: float, self_only: bool = True
                      ) -> tuple[list[Reading], list[str]]:
    """Readings from one delta message, plus the reasons of values that were rejected.

    Parameters
    ----------
    msg
        The parsed delta.
    t_host_s
        Arrival time on the host clock [UTC s], used for updates without a
        ``timestamp``.
    self_only
        Keep only ``vessels.self`` (and messages without a context).

    Raises
    ------
    SignalKError
        When ``msg`` is not a delta at all.
    """
    if not is_delta(msg):
        raise SignalKError("not a Signal K delta (no 'updates' list)")
    context = msg.get("context", "vessels.self")
    if self_only and context not in ("vessels.self", "self") and not str(context).startswith("vessels.self"):
        return [], []
    readings: list[Reading] = []
    problems: list[str] = []
    for update in msg["updates"]:
        if not isinstance(update, dict):
            problems.append("an update that is not an object")
            continue
        t_dev = parse_time(update.get("timestamp")) if update.get("timestamp") is not None else None
        t_s = t_host_s if t_dev is None else t_dev
        per_channel: dict[str, list[float]] = {}
        for item in update.get("values") or []:
            if not isinstance(item, dict) or "path" not in item:
                problems.append("a value without a path")
                continue
            where = split_path(str(item["path"]))
            if where is None:
                continue
            channel, leaf = where
            value = item.get("value")
            if value is None:
                continue
            if isinstance(value, bool) or not isinstance(value, (int, float)) or not math.isfinite(value):
                problems.append(f"{item['path']}: value {value!r} is not a number")
                continue
            slot, mul, add = _LEAVES[leaf]
            slots = per_channel.setdefault(channel, [NAN, NAN, NAN, NAN])
            slots[slot] = float(value) * mul + add
        for channel, (v, i, temp, soc) in per_channel.items():
            readings.append(Reading(t_s, channel, v, i, temp, soc, t_dev is None))
    return readings, problems
