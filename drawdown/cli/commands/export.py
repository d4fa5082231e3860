"""``drawdown export KIND --format parquet|csv --out PATH [--from DATE] [--to DATE] [--json]``

Write what the store holds, or what the analysis made of it, to a file another program reads:

* ``readings`` -- the stored readings (the canonical long frame: time, channel, values);
* ``ledger``   -- the daily ledger, one row per local calendar day (the rows of ``report``);
* ``soc``      -- the state-of-charge series at full resolution, with its 95 % band;
* ``events``   -- full-charge resyncs, OCV anchors, gaps, the collector's own events, and the
  report's cautions and notes.

Values are written at full precision (never rounded: rounding is a face's job); the schema of
every kind is documented in docs/export.md and held in :data:`SCHEMAS`. Parquet keeps UTC
timestamps (microseconds) and file-level metadata (producer, schema version, kind, the
system's timezone); CSV has the same columns, times as ISO 8601 in the site's local time with
their UTC offset, dates as the local YYYY-MM-DD, plain numbers with a decimal point. DATE is a
local calendar date in the site's timezone, ``--to`` inclusive, as for ``report``. The file is
written to a temporary name in the same folder and renamed, so a reader never sees half a file.
"""

from __future__ import annotations

import argparse
import os
import sys
import tempfile
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from drawdown.cli.context import Context, UsageError, print_json, warn

NAME = "export"
HELP = "write readings, the daily ledger, the SoC series or events to Parquet or CSV"

KINDS: tuple[str, ...] = ("readings", "ledger", "soc", "events")
FORMATS: tuple[str, ...] = ("parquet", "csv")
#: The export schema's version (file metadata ``drawdown.schema_version``); raised when a column
#: changes meaning or type, not when one is added at the end.
SCHEMA_VERSION = 1


def add_arguments(s: argparse.ArgumentParser) -> None:
    """This command's options."""
    s.add_argument("kind", metavar="KIND", help="readings, ledger, soc or events")
    s.add_argument("--format", dest="fmt", metavar="FORMAT",
                   help="parquet or csv (default: from the --out file's suffix)")
    s.add_argument("--out", metavar="PATH", help="the file to write (replaced when it exists)")
    s.add_argument("--from", dest="date_from", metavar="DATE")
    s.add_argument("--to", dest="date_to", metavar="DATE")
    s.add_argument("--json", action="store_true")


@dataclass(frozen=True)
class Col:
    """One column of an export: name (with its unit), type, unit, whether it may be empty, meaning."""

    name: str
    type: str          # timestamp (UTC, us) | date | string | bool | float32 | float64
    unit: str
    nullable: bool
    description: str


def _flows() -> tuple[Col, ...]:
    out = []
    for what, unit in (("Ah", "Ah"), ("Wh", "Wh")):
        for src in ("solar", "alternator", "shore", "other"):
            out.append(Col(f"charged_{what}_{src}", "float64", unit, True,
                           f"{'charge' if what == 'Ah' else 'energy'} delivered into the bank by "
                           + ("a source no channel measures" if src == "other" else f"the {src} channel")))
    return tuple(out)


#: The columns of each kind, in file order (docs/export.md shows the same tables).
SCHEMAS: dict[str, tuple[Col, ...]] = {
    "readings": (
        Col("t", "timestamp", "UTC", False, "reading time"),
        Col("channel", "string", "", False, "battery, solar, alternator, shore, load or a user name"),
        Col("voltage_V", "float32", "V", True, "terminal voltage"),
        Col("current_A", "float32", "A", True, "current, positive into the bank (a source delivering), "
                                                "negative out (a load)"),
        Col("temperature_C", "float32", "degC", True, "temperature"),
        Col("soc_pct", "float32", "%", True, "the monitor's own state of charge (not drawdown's)"),
    ),
    "ledger": (
        Col("date", "date", "local date", False, "the local calendar day (site timezone)"),
        Col("day_start", "timestamp", "UTC", False, "local midnight starting the day"),
        Col("day_end", "timestamp", "UTC", False, "local midnight ending the day (23 or 25 h on a DST change)"),
        Col("complete", "bool", "", False, "the channels cover the day midnight to midnight without a gap"),
        Col("consumed_Ah", "float64", "Ah", True, "charge the loads used"),
        Col("consumed_Ah_pi95_lo", "float64", "Ah", True, "lower end of the 95 % range of consumed_Ah"),
        Col("consumed_Ah_pi95_hi", "float64", "Ah", True, "upper end of the 95 % range of consumed_Ah"),
        Col("consumed_Wh", "float64", "Wh", True, "energy the loads used"),
        *_flows(),
        Col("soc_min_pct", "float64", "%", True, "lowest state of charge of the day"),
        Col("soc_end_pct", "float64", "%", True, "state of charge at the day's last reading"),
        Col("hidden_load_h", "float64", "h", True, "hours whose load was estimated, not seen (one shunt)"),
        Col("profile_filled_h", "float64", "h", True, "of hidden_load_h, hours filled from other days"),
        Col("observed_load_share", "float64", "fraction 0-1", True, "share of the day's use measured directly"),
        Col("attribution_confidence", "float64", "fraction 0-1", True,
            "confidence of the split of charge by source"),
        Col("mean_temperature_C", "float64", "degC", True, "mean battery temperature"),
        Col("driving_h", "float64", "h", True, "hours with the alternator charging"),
        Col("device_soc_diff_pct", "float64", "%", True, "mean absolute difference of drawdown's SoC and the monitor's own"),
        Col("gap_s", "float64", "s", True, "seconds of the day with no readings"),
    ),
    "soc": (
        Col("t", "timestamp", "UTC", False, "battery reading time"),
        Col("soc_pct", "float32", "%", False, "drawdown's state of charge (the report's, every sample)"),
        Col("soc_pct_lo", "float64", "%", True, "lower end of the 95 % band"),
        Col("soc_pct_hi", "float64", "%", True, "upper end of the 95 % band"),
    ),
    "events": (
        Col("t", "timestamp", "UTC", False, "when it happened (a caution or note: the analysed period's start)"),
        Col("t_end", "timestamp", "UTC", True, "when it ended: a gap's end, the last moment a full bank still met "
                                              "the full-charge conditions, the period's end for a caution or note"),
        Col("kind", "string", "", False, "full_charge_resync, ocv_anchor, quasi_ocv_anchor, gap, caution, note, "
                                         "charging_finding, hidden_load, low_soc, incomplete_day (a day's note, "
                                         "t to t_end is that day), or collector_<kind> (the live collector's own "
                                         "record)"),
        Col("channel", "string", "", True, "the channel it concerns"),
        Col("soc_pct", "float64", "%", True, "an anchor's known state of charge"),
        Col("soc_sigma_pct", "float64", "%", True, "an anchor's one-sigma uncertainty [percentage points]"),
        Col("duration_s", "float64", "s", True, "t_end - t"),
        Col("message", "string", "", True, "what it is, in words (a collector event: its record as JSON)"),
    ),
}


# --------------------------------------------------------------------------------------------
# checks
# --------------------------------------------------------------------------------------------

def _format(fmt: str | None, out: Path) -> str:
    if fmt is None:
        guess = {".parquet": "parquet", ".pq": "parquet", ".csv": "csv"}.get(out.suffix.lower())
        if guess is None:
            raise UsageError(f"--format: give --format parquet or --format csv (the --out name {out.name!r} "
                             "does not say which)")
        return guess
    f = fmt.strip().lower()
    if f not in FORMATS:
        raise UsageError(f"--format {fmt!r}: expected parquet or csv")
    return f


def out_target(text: str | None) -> Path:
    """The ``--out`` file, checked before anything is read; UsageError when it cannot be written."""
    if not text:
        raise UsageError("--out PATH: name the file to write, e.g. --out ledger.csv")
    path = Path(text)
    if path.is_dir() or text.endswith(("/", os.sep)):
        raise UsageError(f"--out {text}: is a folder; give a file name, e.g. --out {path / 'export.parquet'}")
    parent = path.parent if str(path.parent) else Path(".")
    if not parent.exists():
        raise UsageError(f"--out {text}: the folder {parent} does not exist; create it first or choose another place")
    if not parent.is_dir():
        raise UsageError(f"--out {text}: {parent} is not a folder")
    if not os.access(parent, os.W_OK | os.X_OK) or (path.exists() and not os.access(path, os.W_OK)):
        raise UsageError(f"--out {text}: this user may not write there; choose another place")
    return path


def _say(msg: str) -> None:
    """Progress for a person at a terminal; nothing in a pipe or a test."""
    if sys.stderr.isatty():
        print(msg, file=sys.stderr)


# --------------------------------------------------------------------------------------------
# the data of each kind: column name -> numpy array (timestamps as datetime64[us] UTC, NaT empty)
# --------------------------------------------------------------------------------------------

def _us(a: Any) -> Any:
    import numpy as np

    return np.asarray(a, dtype=np.int64).view("M8[us]")


def _readings_data(frame: Any) -> dict[str, Any]:
    import numpy as np

    from drawdown.collector.canonical import VALUE_COLUMNS, to_epoch_us

    channel = frame["channel"].astype("category")
    out = {"t": _us(to_epoch_us(frame["t"])),
           "channel": Channels(channel.cat.codes.to_numpy(), [str(c) for c in channel.cat.categories])}
    for c in VALUE_COLUMNS:
        out[c] = frame[c].to_numpy(dtype=np.float32, na_value=np.nan)
    return out


def _ledger_data(report: Any) -> dict[str, Any]:
    import numpy as np

    d = report.ledger
    bounds = np.asarray(report.ledger_result.bounds_us, dtype=np.int64)
    out: dict[str, Any] = {"date": np.array([x.isoformat() for x in d["date"]], dtype="M8[D]"),
                           "day_start": _us(bounds[:-1]), "day_end": _us(bounds[1:]),
                           "complete": d["complete"].to_numpy(dtype=bool)}
    for col in SCHEMAS["ledger"]:
        if col.name not in out:
            out[col.name] = d[col.name].to_numpy(dtype=np.float64, na_value=np.nan)
    return out


#: Samples per slice when the SoC band is computed at full resolution (bounded temporaries).
BAND_SLICE = 1 << 20


def _soc_data(report: Any) -> tuple[dict[str, Any], dict[str, str]]:
    import numpy as np

    from drawdown.analysis.soc_band import soc_band_pct

    soc = report.ledger_result.soc if report.ledger_result is not None else None
    if soc is None or not len(soc.t_us):
        raise UsageError("soc: no state of charge in the selected dates: it needs a battery channel "
                         f"(channels: {', '.join(report.data_quality.get('channels', {})) or 'none'})")
    series = report.extras.get("soc_series") or {}
    c_rng = tuple(series.get("band_capacity_Ah") or ())
    n = len(soc.t_us)
    lo = np.full(n, np.nan)
    hi = np.full(n, np.nan)
    meta: dict[str, str] = {"drawdown.soc_capacity_Ah": repr(float(soc.capacity_Ah)),
                            "drawdown.soc_start": str(soc.start)}
    if len(c_rng) == 2 and None not in c_rng:
        anchors = [(a.index, a.soc_pct, a.sigma) for a in soc.anchors]  # as the report's band (analysis.report)
        for s0 in range(0, n, BAND_SLICE):
            at = np.arange(s0, min(n, s0 + BAND_SLICE))
            lo[at], hi[at] = soc_band_pct(soc.t_us, soc.soc, soc.capacity_Ah, c_rng, anchors, at=at)
        meta["drawdown.band_capacity_Ah"] = f"{c_rng[0]!r},{c_rng[1]!r}"
        meta["drawdown.band_why"] = str(series.get("band_why", ""))
    return {"t": _us(soc.t_us), "soc_pct": np.asarray(soc.soc, dtype=np.float32), "soc_pct_lo": lo,
            "soc_pct_hi": hi}, meta


def _ts_us(when: Any) -> int:
    """An ISO text or Timestamp as int64 microseconds since 1970 UTC."""
    import pandas as pd

    ts = pd.Timestamp(when)
    ts = ts.tz_localize("UTC") if ts.tzinfo is None else ts.tz_convert("UTC")
    return int((ts - pd.Timestamp(0, tz="UTC")) // pd.Timedelta(microseconds=1))


def _events_data(report: Any, collector_events: list[dict[str, Any]]) -> dict[str, Any]:
    import json

    import numpy as np

    rows: list[tuple] = []  # (t, t_end, kind, channel, soc, sigma, message)
    soc = report.ledger_result.soc if report.ledger_result is not None else None
    if soc is not None:
        for a in soc.anchors:
            if a.kind != "full":
                continue
            end = int(soc.t_us[a.end_index]) if 0 <= a.end_index < len(soc.t_us) else None
            rows.append((a.t_us, end, "full_charge_resync", "battery", a.soc_pct, 100 * a.sigma,
                         "full-charge resync: the bank met the full-charge conditions; state of charge set to "
                         f"{a.soc_pct:g} %"))
        for a in soc.capacity_anchors:
            if a.kind == "full":
                continue
            quasi = a.kind != "ocv"
            rows.append((a.t_us, None, "quasi_ocv_anchor" if quasi else "ocv_anchor", "battery", a.soc_pct,
                         100 * a.sigma,
                         (f"low-current night voltage read as {a.soc_pct:.1f} % (+- {200 * a.sigma:.0f} points, "
                          "95 %): used for the capacity only, never to reset the state of charge") if quasi else
                         (f"rested voltage read as {a.soc_pct:.1f} % (+- {200 * a.sigma:.0f} points, 95 %): "
                          "the state of charge was reset to it")))
    for g in report.ledger_result.gaps if report.ledger_result is not None else ():
        rows.append((g.start_us, g.end_us, "gap", g.channel, None, None,
                     f"no readings on {g.channel} for {g.seconds:.0f} s: the energy in this span is unknown"))
    p0, p1 = _ts_us(report.period["start"]), _ts_us(report.period["end"])
    for text in report.extras.get("cautions") or []:
        rows.append((p0, p1, "caution", None, None, None, str(text)))
    for text in (report.extras.get("charging") or {}).get("findings") or []:
        rows.append((p0, p1, "charging_finding", None, None, None, str(text)))
    # what the report says of single days (the same text as report --json's days), over that day
    bounds = report.ledger_result.bounds_us if report.ledger_result is not None else ()
    for k, day in enumerate(report.days):
        if k + 1 >= len(bounds):
            break
        d0, d1 = int(bounds[k]), int(bounds[k + 1])
        if day.get("hidden_load_note"):
            rows.append((d0, d1, "hidden_load", "battery", None, None, str(day["hidden_load_note"])))
        if day.get("soc_min_pct_note"):
            rows.append((d0, d1, "low_soc", "battery", day.get("soc_min_pct"), None, str(day["soc_min_pct_note"])))
        if not day.get("complete", True) and day.get("complete_why"):
            rows.append((d0, d1, "incomplete_day", None, None, None, str(day["complete_why"])))
    for text in report.data_quality.get("notes") or []:
        rows.append((p0, p1, "note", None, None, None, str(text)))
    for ev in collector_events:
        t_ev = _ts_us(ev["t"])
        detail = ev.get("detail") or {}
        channel = detail.get("channel") if isinstance(detail, dict) else None
        rows.append((t_ev, None, f"collector_{ev['kind']}", channel if isinstance(channel, str) else None, None, None,
                     json.dumps(detail, sort_keys=True, default=str)))
    rows.sort(key=lambda r: (r[0], r[2]))
    nat = np.iinfo(np.int64).min
    t_end = np.array([nat if r[1] is None else int(r[1]) for r in rows], dtype=np.int64)
    t = np.array([int(r[0]) for r in rows], dtype=np.int64)
    dur = np.where(t_end == nat, np.nan, (t_end - t) / 1e6)
    return {"t": _us(t), "t_end": _us(t_end), "kind": np.array([r[2] for r in rows], dtype=object),
            "channel": np.array([r[3] for r in rows], dtype=object),
            "soc_pct": np.array([np.nan if r[4] is None else float(r[4]) for r in rows], dtype=np.float64),
            "soc_sigma_pct": np.array([np.nan if r[5] is None else float(r[5]) for r in rows], dtype=np.float64),
            "duration_s": dur.astype(np.float64), "message": np.array([r[6] for r in rows], dtype=object)}


# --------------------------------------------------------------------------------------------
# writers
# --------------------------------------------------------------------------------------------

def _arrow_type(col: Col) -> Any:
    import pyarrow as pa

    return {"timestamp": pa.timestamp("us", tz="UTC"), "date": pa.date32(), "string": pa.string(),
            "bool": pa.bool_(), "float32": pa.float32(), "float64": pa.float64()}[col.type]


def _arrow_schema(kind: str, meta: dict[str, str]) -> Any:
    import json

    import pyarrow as pa

    fields = [pa.field(col.name, _arrow_type(col), nullable=col.nullable,
                       metadata={"unit": col.unit, "description": col.description}) for col in SCHEMAS[kind]]
    units = {c.name: c.unit for c in SCHEMAS[kind]}
    return pa.schema(fields, metadata={**meta, "drawdown.units": json.dumps(units)})


def _arrow_column(kind: str, col: Col, values: Any) -> Any:
    import numpy as np
    import pyarrow as pa

    typ = _arrow_type(col)
    if col.type == "string" and isinstance(values, Channels):
        arr = pa.DictionaryArray.from_arrays(pa.array(values.codes), pa.array(values.names, pa.string())).cast(typ)
    elif col.type == "string":
        arr = pa.array(list(values), type=typ)
    elif col.type == "timestamp":
        arr = pa.array(np.asarray(values).view("M8[us]"), type=typ, from_pandas=True)
    else:
        arr = pa.array(values, type=typ, from_pandas=True)
    if not col.nullable and arr.null_count:  # a bug, never bad input: say so rather than write it
        raise RuntimeError(f"export {kind}: column {col.name} has {arr.null_count} empty values")
    return arr


def _arrow_table(kind: str, data: dict[str, Any], meta: dict[str, str]) -> Any:
    import pyarrow as pa

    return pa.Table.from_arrays([_arrow_column(kind, col, data[col.name]) for col in SCHEMAS[kind]],
                                schema=_arrow_schema(kind, meta))


#: Parquet writing: zstd; times delta-coded (sorted per channel, so nearly free); floats split by
#: byte (their exponents compress together); only the channel column dictionary-coded; min/max
#: statistics on time and channel (what a reader filters a readings file on), not on every value.
PARQUET_OPTIONS: dict[str, Any] = {"compression": "zstd", "use_dictionary": ["channel"],
                                   "write_statistics": ["t", "channel"],
                                   "column_encoding": {"t": "DELTA_BINARY_PACKED", "voltage_V": "BYTE_STREAM_SPLIT",
                                                       "current_A": "BYTE_STREAM_SPLIT",
                                                       "temperature_C": "BYTE_STREAM_SPLIT",
                                                       "soc_pct": "BYTE_STREAM_SPLIT"}}


def _parquet_options(kind: str) -> dict[str, Any]:
    if kind == "readings":
        return PARQUET_OPTIONS
    return {"compression": "zstd"}


def _write_parquet(path: Path, kind: str, data: dict[str, Any], meta: dict[str, str]) -> None:
    import pyarrow.parquet as pq

    pq.write_table(_arrow_table(kind, data, meta), path, **_parquet_options(kind))


class Channels:
    """A channel column as small codes into a list of names (a year of readings holds three or four
    names ~100 M times: never as Python strings)."""

    def __init__(self, codes: Any, names: list[str]):
        self.codes = codes
        self.names = names

    def __len__(self) -> int:
        return len(self.codes)

    def __getitem__(self, part: slice) -> Channels:
        return Channels(self.codes[part], self.names)

    def text(self) -> Any:
        import numpy as np

        return np.asarray(self.names, dtype=object)[self.codes]


READINGS_BATCH_ROWS = 1 << 20  # rows per Parquet row group when streaming readings


def _stream_readings_parquet(path: Path, store: Any, start: Any, end: Any, meta: dict[str, str]) -> dict[str, Any]:
    """Write the store's readings to Parquet piece by piece (never the whole store in memory);
    returns rows and the first and last time [us]."""
    import queue
    import threading

    import numpy as np
    import pyarrow as pa
    import pyarrow.parquet as pq

    from drawdown.collector.canonical import VALUE_COLUMNS

    schema = _arrow_schema("readings", meta)
    cols = SCHEMAS["readings"]
    names: list[str] = []
    pending: list[tuple[int, Any, list[Any]]] = []
    held = rows = 0
    first = last = None

    def flush(writer: Any) -> None:
        nonlocal held
        if not pending:
            return
        t = np.concatenate([p[1] for p in pending])
        codes = np.concatenate([np.full(len(p[1]), p[0], np.int16) for p in pending])
        data: dict[str, Any] = {"t": t, "channel": Channels(codes, list(names))}
        for j, c in enumerate(VALUE_COLUMNS):
            data[c] = np.concatenate([p[2][j] if p[2][j] is not None else np.full(len(p[1]), np.nan, np.float32)
                                      for p in pending])
        writer.write_batch(pa.record_batch([_arrow_column("readings", col, data[col.name]) for col in cols],
                                           schema=schema))
        pending.clear()
        held = 0

    # The writer encodes in C++ without the GIL: it runs in its own thread while this one reads the
    # store and builds the next batch (two batches in flight at most, so memory stays bounded).
    batches: queue.Queue[Any] = queue.Queue(maxsize=2)
    failed: list[BaseException] = []

    def write_all() -> None:
        try:
            with pq.ParquetWriter(path, schema, **PARQUET_OPTIONS) as writer:
                while (batch := batches.get()) is not None:
                    writer.write_batch(batch)
        except BaseException as exc:  # noqa: BLE001 - handed to the reading thread, raised there
            failed.append(exc)
            while batches.get() is not None:  # let the reader finish rather than block
                pass

    class Sink:
        def write_batch(self, batch: Any) -> None:
            batches.put(batch)

    writer_thread = threading.Thread(target=write_all, name="parquet-writer", daemon=True)
    writer_thread.start()
    sink = Sink()
    try:
        for name, t, vals in store.iter_pieces(start, end):
            if name not in names:
                names.append(name)
            pending.append((names.index(name), t, vals))
            held += len(t)
            rows += len(t)
            first = int(t[0]) if first is None else min(first, int(t[0]))
            last = int(t[-1]) if last is None else max(last, int(t[-1]))
            if held >= READINGS_BATCH_ROWS:
                flush(sink)
            if failed:
                break
        if not failed:
            flush(sink)
    finally:
        batches.put(None)
        writer_thread.join()
    if failed:
        raise failed[0]
    return {"rows": rows, "first_us": first, "last_us": last}


def _num_text(a: Any) -> Any:
    """Numbers as text at full precision: the shortest text that reads back to the same value of the
    array's own type (float32 or float64), never in exponent form; empty where missing."""
    import numpy as np

    out = a.astype(str).astype(object)
    nan = np.isnan(a)
    sci = np.char.find(a.astype(str), "e") >= 0
    for i in np.flatnonzero(sci & ~nan & np.isfinite(a)):
        out[i] = np.format_float_positional(a[i], unique=True, trim="-")
    out[nan] = ""
    return out


def _time_text(t: Any, tz: str) -> Any:
    """UTC datetime64[us] as ISO 8601 local time with its offset ('2026-04-06T00:00:00+01:00'); empty for NaT."""
    import numpy as np
    import pandas as pd

    us = t.view(np.int64)
    nat = np.isnat(t)
    safe = np.where(nat, 0, us)
    idx = pd.DatetimeIndex(safe.view("M8[us]")).tz_localize("UTC").tz_convert(tz)
    wall = idx.tz_localize(None).as_unit("us").asi8
    off_min = (wall - safe) // 60_000_000
    fraction = bool(np.any((wall % 1_000_000)[~nat]))
    body = np.datetime_as_string(wall.view("M8[us]"), unit="us" if fraction else "s").astype(object)
    labels = {}
    for m in np.unique(off_min):
        sign = "+" if m >= 0 else "-"
        labels[int(m)] = f"{sign}{abs(int(m)) // 60:02d}:{abs(int(m)) % 60:02d}"
    offs = np.array([labels[int(m)] for m in off_min], dtype=object) if len(labels) > 1 else \
        np.full(len(off_min), next(iter(labels.values()), ""), dtype=object)
    out = body + offs
    out[nat] = ""
    return out


def _csv_columns(kind: str, data: dict[str, Any], tz: str) -> list[Any]:
    import numpy as np

    cols = []
    for col in SCHEMAS[kind]:
        v = data[col.name]
        if col.type == "timestamp":
            cols.append(_time_text(v, tz))
        elif col.type == "date":
            cols.append(np.datetime_as_string(v, unit="D").astype(object))
        elif col.type == "bool":
            cols.append(np.where(v, "true", "false").astype(object))
        elif col.type.startswith("float"):
            cols.append(_num_text(np.asarray(v, dtype=col.type)))
        elif isinstance(v, Channels):
            cols.append(v.text())
        else:
            cols.append(np.array(["" if x is None else str(x) for x in v], dtype=object))
    return cols


CSV_SLICE = 1 << 18  # rows formatted at a time


def _write_csv(path: Path, kind: str, data: dict[str, Any], tz: str) -> None:
    import csv

    n = len(data[SCHEMAS[kind][0].name])
    with open(path, "w", newline="", encoding="utf-8") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow([c.name for c in SCHEMAS[kind]])
        for s0 in range(0, max(n, 1), CSV_SLICE):
            part = {k: v[s0:s0 + CSV_SLICE] for k, v in data.items()}
            if n == 0:
                break
            w.writerows(zip(*(c.tolist() for c in _csv_columns(kind, part, tz))))


def _write_atomic(path: Path, write: Any) -> int:
    """Write through ``write(tmp_path)`` into a temporary file beside ``path``, then rename; bytes written."""
    fd, tmp_name = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent if str(path.parent)
                                    else ".")
    os.close(fd)
    tmp = Path(tmp_name)
    try:
        write(tmp)
        with open(tmp, "rb") as f:
            os.fsync(f.fileno())
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(tmp, 0o666 & ~umask)  # mkstemp makes it private; an export is an ordinary file
        size = tmp.stat().st_size
        os.replace(tmp, path)
        return size
    except OSError as exc:
        raise UsageError(f"--out {path}: cannot write the export there ({exc.strerror or exc}); nothing was "
                         "written") from None
    finally:
        try:
            tmp.unlink()
        except FileNotFoundError:
            pass
        except OSError:
            pass


# --------------------------------------------------------------------------------------------
# the command
# --------------------------------------------------------------------------------------------

def _span(kind: str, data: dict[str, Any]) -> tuple[Any, Any]:
    import numpy as np
    import pandas as pd

    def iso(x: Any) -> str:
        return pd.Timestamp(int(x), unit="us", tz="UTC").isoformat()

    start_col, end_cols = {"ledger": ("day_start", ("day_end",)), "events": ("t", ("t", "t_end"))}.get(
        kind, ("t", ("t",)))
    t0 = data[start_col].view(np.int64)
    if not len(t0):
        return None, None
    ends = np.concatenate([data[c][~np.isnat(data[c])].view(np.int64) for c in end_cols])
    return iso(t0.min()), iso(ends.max())


def run(args: Any, ctx: Context) -> int:
    from drawdown import __version__
    from drawdown.cli.commands.report import _no_readings_message, date_range
    from drawdown.collector.parquet_file import META_KIND, META_PRODUCER, META_SCHEMA_VERSION, META_TIMEZONE

    kind = (args.kind or "").strip().lower()
    if kind not in KINDS:
        raise UsageError(f"KIND {args.kind!r}: unknown; expected one of {', '.join(KINDS)}")
    path = out_target(args.out)
    fmt = _format(args.fmt, path)
    if path.suffix.lower() in (".parquet", ".csv") and path.suffix.lower() != f".{fmt}":
        warn(f"drawdown export: --out {path} is named {path.suffix} but is written as {fmt}")
    system = None
    if kind == "readings" and not ctx.has_system():
        tz = "UTC"
        warn(f"drawdown export: no system description at {ctx.system_path}: --from/--to and the CSV times "
             "are in UTC")
    else:
        system = ctx.load_system()  # exit 2 naming the file and key when it is missing or does not validate
        tz = system.site.timezone
    start, end = date_range(args, ctx, tz)
    meta = {META_PRODUCER: f"drawdown {__version__}", META_SCHEMA_VERSION: str(SCHEMA_VERSION),
            META_KIND: kind, META_TIMEZONE: tz, "drawdown.from": args.date_from or "",
            "drawdown.to": args.date_to or ""}
    _say(f"reading {ctx.store_path} ...")
    store = ctx.open_store(read_only=True)  # an export never writes the store
    if kind == "readings" and fmt == "parquet":  # streamed: a year of readings never sits in memory
        try:
            span = store.time_span()
            got: dict[str, Any] = {}

            def stream(tmp: Path) -> None:
                got.update(_stream_readings_parquet(tmp, store, start, end, meta))
                if not got["rows"]:
                    raise UsageError(_no_readings_message(ctx.store_path, span, tz, args))

            size = _write_atomic(path, stream)
        finally:
            store.close()
        iso = _iso_us
        return _finish(args, kind, fmt, path, got["rows"], iso(got["first_us"]), iso(got["last_us"]), tz, size)
    try:
        readings = store.read(start, end)
        rows_rejected = sum(int(i["rows_rejected"]) for i in store.imports())
        span = store.time_span()
        collector_events = []
        if kind == "events":
            collector_events = [e for e in store.events()
                                if (start is None or e["t"] >= start) and (end is None or e["t"] < end)]
    finally:
        store.close()
    if readings.empty:
        raise UsageError(_no_readings_message(ctx.store_path, span, tz, args))

    if kind == "readings":
        data = _readings_data(readings)
        del readings
    else:
        from drawdown.analysis.report import build_report

        assert system is not None  # loaded above for every kind but readings
        _say(f"analysing {len(readings):,} readings ...")
        try:
            report = build_report(readings, system, rows_rejected=rows_rejected)
        except ValueError as exc:
            if not str(exc).startswith("no "):
                raise
            raise UsageError(f"{ctx.store_path}: {exc}") from None
        del readings
        if kind == "ledger":
            data = _ledger_data(report)
            meta["drawdown.mode"] = str(report.data_quality.get("mode", ""))
        elif kind == "soc":
            data, extra = _soc_data(report)
            meta.update(extra)
        else:
            data = _events_data(report, collector_events)
    rows = len(data[SCHEMAS[kind][0].name])
    _say(f"writing {rows:,} rows to {path} ...")
    if fmt == "parquet":
        size = _write_atomic(path, lambda tmp: _write_parquet(tmp, kind, data, meta))
    else:
        size = _write_atomic(path, lambda tmp: _write_csv(tmp, kind, data, tz))
    first, last = _span(kind, data)
    return _finish(args, kind, fmt, path, rows, first, last, tz, size)


def _iso_us(us: int) -> str:
    from datetime import datetime, timedelta, timezone

    return (datetime(1970, 1, 1, tzinfo=timezone.utc) + timedelta(microseconds=int(us))).isoformat()


def _finish(args: Any, kind: str, fmt: str, path: Path, rows: int, first: Any, last: Any, tz: str, size: int) -> int:
    out = {"kind": kind, "format": fmt, "path": str(path), "rows": rows,
           "columns": [c.name for c in SCHEMAS[kind]], "first": first, "last": last, "timezone": tz,
           "schema_version": SCHEMA_VERSION, "from": args.date_from, "to": args.date_to, "bytes": size}
    if args.json:
        print_json(out)
        return 0
    from drawdown.dashboard.labels import local_time

    when = f", {local_time(first, tz)} to {local_time(last, tz)}" if first else ""
    print(f"wrote {path}: {rows:,} {kind} rows as {fmt}{when} ({tz})")
    return 0
