"""Words and numbers as a person reads them, shared by every face (command line, pages, HTML report).

Analysis results carry machine names (``lifepo4``, ``degC``, ``mm2``) and UTC
times; these helpers turn them into the trade's own spelling and the site's
local time with its zone. JSON keeps the machine forms and UTC ISO 8601.
"""

from __future__ import annotations

import re
from collections.abc import Callable
from typing import Any

#: Chemistry names as the trade writes them.
CHEMISTRY: dict[str, str] = {"lifepo4": "LiFePO4", "agm": "AGM", "gel": "gel", "flooded": "flooded lead-acid"}

MONTHS: tuple[str, ...] = ("January", "February", "March", "April", "May", "June", "July", "August",
                           "September", "October", "November", "December")

_Replacement = str | Callable[[re.Match[str]], str]
_UNITS: list[tuple[re.Pattern[str], _Replacement]] = [
    (re.compile(r"(\d)\s*degC\b"), "\\1 °C"), (re.compile(r"\bdegC\b"), "°C"),
    (re.compile(r"(\d)\s*mm2\b"), "\\1 mm²"), (re.compile(r"\bmm2\b"), "mm²"),
    (re.compile(r"\bWm2\b"), "W/m²"), (re.compile(r"\bkWh/m2\b"), "kWh/m²"),
    (re.compile(r"\bmOhm\b"), "mΩ"), (re.compile(r"\blifepo4\b"), "LiFePO4"),
    # 'N thing(s)': singular for exactly 1 (not 0.1 or 21), plural otherwise; other words are left alone.
    (re.compile(r"(?<![\d.,])1 (\w+)\(s\)"), "1 \\1"), (re.compile(r"(\d) (\w+)\(s\)"), "\\1 \\2s"),
    (re.compile(r"\b(\w+)\(s\)"), "\\1s"),
    (re.compile(r"(?<=\s)>=(?=\s)"), "≥"), (re.compile(r"(?<=\s)<=(?=\s)"), "≤"),
    # 1500 W -> 1,500 W (a figure with a unit; dates and years carry none)
    (re.compile(r"(?<![\d.,])(\d{4,})(?= ?(?:W|Wh|kWh|Ah|A|mAh)\b)"), lambda m: f"{int(m.group(1)):,}")
]


def chemistry(name: str | None) -> str:
    """'lifepo4' -> 'LiFePO4' (unknown names unchanged)."""
    return CHEMISTRY.get(str(name or "").lower(), str(name or ""))


def month(m: int | None) -> str:
    """1 -> 'January'; None -> '-'."""
    return "-" if m is None else MONTHS[int(m) - 1]


def for_people(text: Any) -> str:
    """A sentence from analysis with units and names spelled for people ('0 degC' -> '0 °C', 'mm2' -> 'mm²')."""
    out = str(text)
    for pattern, repl in _UNITS:
        out = pattern.sub(repl, out)
    return out


def sentence(text: Any) -> str:
    """:func:`for_people`, starting with a capital letter: a note shown on its own line."""
    out = for_people(text)
    return out[:1].upper() + out[1:] if out[:1].islower() else out


def plural(n: int, word: str, many: str | None = None) -> str:
    """'1 file', '3 files' (no 'file(s)')."""
    return f"{n:,} {word if n == 1 else (many or word + 's')}"


def local_time(t: Any, tz: str, *, seconds: bool = False) -> str:
    """A UTC time (ISO text or Timestamp) in the site's zone with its abbreviation: '2026-10-11 23:59 CEST'."""
    if t is None or (isinstance(t, float) and t != t):
        return "-"
    import pandas as pd  # here, not at the top: the command line imports this module to build --help

    try:
        ts = pd.Timestamp(t)
    except (TypeError, ValueError):
        return str(t)
    ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts
    ts = ts.tz_convert(tz)
    return ts.strftime("%Y-%m-%d %H:%M:%S %Z" if seconds else "%Y-%m-%d %H:%M %Z")


def run_lengths(lengths: dict[str, float]) -> str:
    """{'battery-inverter': 1.5, ...} -> 'battery-inverter 1.5 m, ...' (never a Python dict in text)."""
    return ", ".join(f"{name} {float(m):g} m" for name, m in lengths.items())


#: The cable table's columns (key, header) on every face: each conductor size with its own voltage drop.
RUN_COLUMNS: list[tuple[str, str]] = [
    ("name", "Run"), ("current_A", "Current [A]"), ("length_m", "One-way length [m]"),
    ("cross_section_mm2", "Cable [mm²]"), ("drop_mm2", "Drop, mm² cable [%]"), ("awg", "AWG"),
    ("drop_awg", "Drop, AWG cable [%]"), ("fuse_A", "Fuse [A]")]


def number(x: Any, digits: int = 1) -> str:
    """A number with fixed decimals and thousands separators; an en dash when unknown."""
    if x is None:
        return "–"
    try:
        f = float(x)
    except (TypeError, ValueError):
        return str(x)
    return "–" if f != f or f in (float("inf"), float("-inf")) else f"{f:,.{digits}f}"


def mm2(x: Any) -> str:
    """A conductor cross-section as it is sold and as the command line says it: 1.5, 2.5, 4, 6, 10, 16 (mm²)."""
    if x is None or not isinstance(x, (int, float)) or x != x:
        return number(x, 1)
    return f"{round(float(x), 2):g}"


def run_rows(runs: list[dict]) -> list[dict[str, Any]]:
    """Rows of the cable table from the ``size`` JSON ``runs`` (mm² and AWG each with their own drop)."""
    rows = []
    for r in runs:
        awg = r.get("awg_choice") or {}
        rows.append({"name": r.get("name"), "current_A": number(r.get("current_A"), 1),
                     "length_m": number(r.get("length_m"), 1), "cross_section_mm2": mm2(r.get("cross_section_mm2")),
                     "drop_mm2": number(r.get("voltage_drop_pct"), 1), "awg": r.get("awg") or "–",
                     "drop_awg": number(awg.get("voltage_drop_pct"), 1), "fuse_A": number(r.get("fuse_A"), 0)})
    return rows
