"""drawdown: battery-bank logs in; energy ledger, battery health, solar yield and sizing advice out.

The one import name of the project. Its parts install as ``drawdown.collector``
(stores and live sources), ``drawdown.analysis`` (the ledger, capacity, solar and
sizing) and ``drawdown.dashboard`` (the web pages); the command line is
``drawdown.cli``. The functions below are the public API: each imports its part
only when called, so ``import drawdown`` works on a collector-only install.

Example::

    import drawdown

    system = drawdown.load_system("system.toml")
    with drawdown.open_store("readings.sqlite") as store:
        drawdown.import_log("trip.csv", store, tz=system.site.timezone)
        readings = drawdown.read_readings(store)
    report = drawdown.build_report(readings, system)
    print(report.to_json()["battery"]["usable_Ah"])
    advice = drawdown.size(readings, system, autonomy_days=3)
    run = drawdown.wire(current_A=100, length_m=2.5, voltage_V=12)
"""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:  # the types only: nothing heavy is imported at run time
    import pandas as pd

    from drawdown.analysis.report import Report
    from drawdown.analysis.sizing import SizingResult
    from drawdown.analysis.system import System
    from drawdown.analysis.wiring import RunSizing
    from drawdown.collector.csv_file import ImportResult
    from drawdown.collector.store import Store

__version__ = "0.1.0"

__all__ = ["__version__", "open_store", "load_system", "parse_system", "import_log", "read_readings",
           "build_report", "size", "wire"]


def open_store(path: str | Path, *, read_only: bool = False) -> Store:
    """Open (or create) a reading store: one SQLite file in WAL mode. Use it as a context manager."""
    from drawdown.collector.store import Store

    return Store(path, read_only=read_only)


def load_system(path: str | Path) -> System:
    """Read and validate a ``system.toml`` (UTF-8, UTF-16 or with a BOM).

    Raises ``ValueError`` (``drawdown.analysis.system.SystemError_``) naming the file and the key.
    """
    from drawdown.analysis.system import decode_system_bytes
    from drawdown.analysis.system import parse_system as _parse

    p = Path(path)
    return _parse(decode_system_bytes(p.read_bytes(), source=str(p)), source=str(p))


def parse_system(text: str, *, source: str = "system.toml") -> System:
    """Validate system-description TOML text; ``source`` names it in messages."""
    from drawdown.analysis.system import parse_system as _parse

    return _parse(text, source=source)


def import_log(path: str | Path, store: Store, *, tz: str | None = None, channel: str | None = None,
               invert: tuple[str, ...] = (), nominal_voltage_V: float | None = None) -> ImportResult:
    """Import one log into ``store`` (delimited text: CSV, TSV, semicolons; or Parquet); rejected rows are
    counted and kept aside.

    ``tz`` is the zone of naive local timestamps; ``invert`` names channels whose current
    sign is flipped. Raises ``drawdown.collector.csv_file.UnusableInput`` for a file that
    holds nothing usable (the message names the file and line).
    """
    from drawdown.collector.importing import import_log as _import

    return _import(Path(path), store, tz=tz, channel=channel, invert=invert, nominal_voltage_V=nominal_voltage_V)


def read_readings(store: Store, start: Any = None, end: Any = None) -> pd.DataFrame:
    """The stored readings as a long DataFrame (UTC time ``t``, ``channel``, quantities), ``start <= t < end``."""
    return store.read(start, end)


def build_report(readings: pd.DataFrame, system: System, *, rows_rejected: int = 0,
                 start: Any = None, end: Any = None) -> Report:
    """The whole analysis (the same as ``drawdown report``); ``.to_json()`` gives the report JSON."""
    from drawdown.analysis.report import build_report as _build

    return _build(readings, system, rows_rejected=rows_rejected, start=start, end=end)


def size(readings: pd.DataFrame | None, system: System, *, autonomy_days: float | None = None,
         percentile: float | None = None) -> SizingResult:
    """The sizing advice (the same as ``drawdown size``): battery, array, charger, inverter, cables, fuses.

    ``readings`` may be None to size from the system's ``[[load]]`` inventory alone. Advice on
    cables and fuses carries its assumptions; follow local codes and have a qualified
    installer check it.
    """
    from drawdown.analysis.answers import DEFAULT_AUTONOMY_DAYS, DEFAULT_PERCENTILE, size_answer

    return size_answer(readings, system,
                       autonomy_days=DEFAULT_AUTONOMY_DAYS if autonomy_days is None else autonomy_days,
                       percentile=DEFAULT_PERCENTILE if percentile is None else percentile)


def wire(*, current_A: float, length_m: float, voltage_V: float, max_drop_pct: float = 3.0,
         insulation_C: int = 105, conductor_temperature_C: float = 30.0, bundled: int = 1,
         engine_space: bool = False) -> RunSizing:
    """Size one two-conductor DC run (the same as ``drawdown wire``): mm², AWG, voltage drop and fuse.

    ``length_m`` is one way. The fuse never exceeds what the chosen cable carries. Follow local
    codes and have a qualified installer check the result.
    """
    from drawdown.analysis.wiring import circuit_for_drop, size_run

    circuit, drop = circuit_for_drop(max_drop_pct)  # as `drawdown wire --max-drop` reads it
    return size_run(current_A, length_m, voltage_V, name="run", max_drop_pct=drop, circuit=circuit,
                    insulation_C=insulation_C, conductor_temperature_C=conductor_temperature_C, bundled=bundled,
                    engine_space=engine_space)
