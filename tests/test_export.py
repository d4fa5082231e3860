"""``drawdown export`` and the Parquet importer (collector.parquet_file), through the real command line.

One simulated trip (the project's simulator, spring-truck: 6 days at 60 s, Africa/Casablanca,
UTC+1 in April 2026) is imported into a real SQLite store; every export is a real file in
tmp_path. Outside references: Europe/Oslo is UTC+2 in summer (IANA tz database), so 12:00 local
on 2025-06-01 is 10:00Z; Unix epoch 1748772000 s is 2025-06-01T10:00:00Z (POSIX time); the
Parquet format begins and ends a file with the magic bytes ``PAR1`` (Apache Parquet format
specification).
"""

from __future__ import annotations

import csv
import json
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from drawdown.analysis.report import build_report
from drawdown.analysis.system import parse_system
from drawdown.cli import main
from drawdown.cli.commands import export as export_cmd
from drawdown.collector.store import Store
from systems import OSLO_LFP_SYSTEM

DOCS = Path(__file__).resolve().parent.parent / "docs" / "export.md"
TZ = "Africa/Casablanca"



def run_json(capsys, argv: list[str]) -> tuple[int, dict]:
    code = main(argv)
    out = capsys.readouterr().out
    return code, json.loads(out)  # raises unless stdout is exactly one JSON document


@pytest.fixture(scope="module")
def trip(tmp_path_factory):
    folder = tmp_path_factory.mktemp("trip")
    log = folder / "trip.csv"
    assert main(["simulate", "--scenario", "spring-truck", "--days", "6", "--interval", "60",
                 "--out", str(log)]) == 0
    assert main([*_base(folder), "import", str(log)]) == 0
    return folder


def _base(folder: Path) -> list[str]:
    return ["--store", str(folder / "readings.sqlite"), "--system", str(folder / "system.toml")]


@pytest.fixture(scope="module")
def report(trip):
    system = parse_system((trip / "system.toml").read_text(encoding="utf-8"))
    with Store(trip / "readings.sqlite", read_only=True) as st:
        readings = st.read()
        rejected = sum(int(i["rows_rejected"]) for i in st.imports())
    return build_report(readings, system, rows_rejected=rejected)


def _export(trip, capsys, tmp_path, kind: str, fmt: str, *extra: str) -> tuple[Path, dict]:
    out = tmp_path / f"{kind}.{fmt}"
    code, obj = run_json(capsys, [*_base(trip), "export", kind, "--format", fmt, "--out", str(out), "--json",
                                  *extra])
    assert code == 0
    return out, obj


# -- schema ------------------------------------------------------------------------------------

_ARROW = {"timestamp": pa.timestamp("us", tz="UTC"), "date": pa.date32(), "string": pa.string(),
          "bool": pa.bool_(), "float32": pa.float32(), "float64": pa.float64()}
#: A unit and the word of a column's name that says it (``charged_Ah_solar``, ``soc_pct_lo``).
_UNIT_WORD = {"V": "V", "A": "A", "Ah": "Ah", "Wh": "Wh", "h": "h", "s": "s", "%": "pct", "degC": "C"}


@pytest.mark.parametrize("kind", export_cmd.KINDS)
def test_parquet_schema_types_utc_units_and_metadata(trip, capsys, tmp_path, kind):
    out, _ = _export(trip, capsys, tmp_path, kind, "parquet")
    schema = pq.read_schema(out)
    cols = export_cmd.SCHEMAS[kind]
    assert schema.names == [c.name for c in cols]
    for col in cols:
        field = schema.field(col.name)
        assert field.type == _ARROW[col.type], col.name
        assert field.nullable == col.nullable, col.name
        assert field.metadata[b"unit"].decode() == col.unit
        if col.type == "timestamp":
            assert (field.type.unit, field.type.tz) == ("us", "UTC")
        if col.type.startswith("float"):
            words = col.name.split("_")
            ok = (words[-1] in ("share", "confidence") if col.unit == "fraction 0-1"
                  else _UNIT_WORD[col.unit] in words)
            assert ok, f"{col.name}: unit {col.unit} not in the name"
    meta = {k.decode(): v.decode() for k, v in schema.metadata.items()}
    assert meta["drawdown.producer"].startswith("drawdown ")
    assert meta["drawdown.schema_version"] == str(export_cmd.SCHEMA_VERSION)
    assert meta["drawdown.kind"] == kind
    assert meta["drawdown.timezone"] == TZ
    assert json.loads(meta["drawdown.units"]) == {c.name: c.unit for c in cols}
    # what a reader gets: UTC instants at microsecond resolution
    df = pd.read_parquet(out)
    t = df["day_start" if kind == "ledger" else "t"]
    assert str(t.dtype) == "datetime64[us, UTC]"


def test_docs_list_every_column_of_every_kind():
    text = DOCS.read_text(encoding="utf-8")
    for kind, cols in export_cmd.SCHEMAS.items():
        assert f"`{kind}`" in text
        for col in cols:
            assert re.search(rf"^\| `{re.escape(col.name)}` \|", text, re.M), f"{kind}.{col.name} not documented"


# -- round trip ----------------------------------------------------------------------------------

def test_readings_round_trip_is_exact(trip, capsys, tmp_path):
    first, obj = _export(trip, capsys, tmp_path, "readings", "parquet")
    other = tmp_path / "other"
    other.mkdir()
    (other / "system.toml").write_text((trip / "system.toml").read_text(encoding="utf-8"), encoding="utf-8")
    code, imp = run_json(capsys, [*_base(other), "import", str(first), "--json"])
    assert code == 0
    entry = imp["files"][0]
    assert entry["rows_stored"] == obj["rows"] and entry["rows_rejected"] == 0 and entry["sign_inverted"] == []
    again = other / "again.parquet"
    code, _ = run_json(capsys, [*_base(other), "export", "readings", "--format", "parquet", "--out", str(again),
                                "--json"])
    assert code == 0
    pd.testing.assert_frame_equal(pd.read_parquet(first), pd.read_parquet(again))
    assert pq.read_table(first).equals(pq.read_table(again))
    with Store(trip / "readings.sqlite", read_only=True) as a, Store(other / "readings.sqlite", read_only=True) as b:
        pd.testing.assert_frame_equal(a.read(), b.read())


def test_a_streamed_readings_export_in_many_row_groups_holds_exactly_what_the_store_reads(
        tmp_path, capsys, monkeypatch):
    """The Parquet readings export is written piece by piece (row groups), never as one frame; with
    small row groups, overlapping writes and a range, it must still equal ``Store.read`` row for row.
    The Parquet format specification's DELTA_BINARY_PACKED and BYTE_STREAM_SPLIT encodings are
    what the file metadata must name for the time and float columns."""
    monkeypatch.setattr(export_cmd, "READINGS_BATCH_ROWS", 700)
    t0 = pd.Timestamp("2025-06-01T00:00:00Z")
    store_path = tmp_path / "readings.sqlite"

    def frame(start_s: int, n: int, channel: str, amps: float, step: int = 60) -> pd.DataFrame:
        t = t0 + pd.to_timedelta(np.arange(start_s, start_s + n * step, step), unit="s")
        volts = 13.1 if channel == "battery" else np.nan
        return pd.DataFrame({"t": t, "channel": channel, "voltage_V": volts, "current_A": amps,
                             "temperature_C": np.nan, "soc_pct": np.nan})

    with Store(store_path) as st:
        st.append(frame(0, 3 * 1440, "battery", -1.25))    # three days
        st.append(frame(100_000, 800, "battery", -2.5))   # overlaps the first on day 2: newest wins
        st.append(frame(3, 3000, "solar", 4.0, step=70))
    out = tmp_path / "r.parquet"
    # no system description beside the store: dates are UTC days
    code, obj = run_json(capsys, ["--store", str(store_path), "export", "readings", "--format", "parquet",
                                  "--out", str(out), "--from", "2025-06-02", "--to", "2025-06-02", "--json"])
    assert code == 0
    with Store(store_path, read_only=True) as st:
        want = st.read("2025-06-02T00:00Z", "2025-06-03T00:00Z")
    assert set(want["channel"].astype(str)) == {"battery", "solar"} and (want["current_A"] == -2.5).sum() == 800
    got = pd.read_parquet(out)
    assert obj["rows"] == len(want) == len(got) and pq.ParquetFile(out).num_row_groups > 1
    assert np.array_equal(got["t"].to_numpy("M8[us]").view("i8"), want["t"].to_numpy("M8[us]").view("i8"))
    assert list(got["channel"]) == list(want["channel"].astype(str))
    for c in ("voltage_V", "current_A", "temperature_C", "soc_pct"):
        assert np.array_equal(got[c].to_numpy("float32", na_value=np.nan), want[c].to_numpy("float32"),
                              equal_nan=True)
    meta = pq.ParquetFile(out).metadata.row_group(0)
    encodings = {meta.column(j).path_in_schema: set(meta.column(j).encodings) for j in range(meta.num_columns)}
    assert "DELTA_BINARY_PACKED" in encodings["t"] and "BYTE_STREAM_SPLIT" in encodings["current_A"]
    assert obj["first"] == want["t"].min().isoformat() and obj["last"] == want["t"].max().isoformat()


def test_the_same_export_imported_twice_adds_nothing(trip, capsys, tmp_path):
    out, obj = _export(trip, capsys, tmp_path, "readings", "parquet")
    fresh = ["--store", str(tmp_path / "fresh.sqlite")]
    code, one = run_json(capsys, [*fresh, "import", str(out), "--json"])
    code2, two = run_json(capsys, [*fresh, "import", str(out), "--json"])
    assert code == code2 == 0
    assert one["files"][0]["rows_added"] == obj["rows"]
    assert two["files"][0]["already_imported"] is True and two["files"][0]["rows_added"] == 0
    with Store(tmp_path / "fresh.sqlite", read_only=True) as st:
        assert len(st.read()) == obj["rows"]
    # into the store it came from: every row is already held, none written again
    code, back = run_json(capsys, [*_base(trip), "import", str(out), "--json"])
    assert code == 0
    assert back["files"][0]["rows_already_held"] == obj["rows"] and back["files"][0]["rows_added"] == 0


def test_the_import_dispatches_on_the_magic_bytes(trip, capsys, tmp_path):
    out, obj = _export(trip, capsys, tmp_path, "readings", "parquet")
    raw = out.read_bytes()
    assert raw[:4] == raw[-4:] == b"PAR1"
    renamed = tmp_path / "export.dat"
    renamed.write_bytes(raw)
    code, imp = run_json(capsys, ["--store", str(tmp_path / "m.sqlite"), "import", str(renamed), "--json"])
    assert code == 0 and imp["files"][0]["rows_stored"] == obj["rows"]
    fake = tmp_path / "fake.parquet"
    fake.write_text("time,current_A\n2025-01-01T00:00:00Z,1\n", encoding="utf-8")
    assert main(["--store", str(tmp_path / "m.sqlite"), "import", str(fake)]) == 2
    out_text = capsys.readouterr().out
    assert str(fake) in out_text and "not a readable Parquet file" in out_text and "PAR1" in out_text


def test_other_exports_are_refused_by_the_importer(trip, capsys, tmp_path):
    out, _ = _export(trip, capsys, tmp_path, "ledger", "parquet")
    assert main(["--store", str(tmp_path / "x.sqlite"), "import", str(out)]) == 2
    assert "a drawdown ledger export, which holds no readings" in capsys.readouterr().out


# -- CSV ------------------------------------------------------------------------------------------

_ISO_OFFSET = re.compile(r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}:\d{2}(\.\d{6})?[+-]\d{2}:\d{2}$")


def _csv_rows(path: Path) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


def test_ledger_csv_has_local_dates_and_the_reports_numbers_at_full_precision(trip, capsys, tmp_path, report):
    out, obj = _export(trip, capsys, tmp_path, "ledger", "csv")
    code, rj = run_json(capsys, [*_base(trip), "report", "--json"])
    assert code == 0
    rows = _csv_rows(out)
    assert list(rows[0]) == obj["columns"] == [c.name for c in export_cmd.SCHEMAS["ledger"]]
    assert [r["date"] for r in rows] == [d["date"] for d in rj["days"]]
    assert all(re.fullmatch(r"\d{4}-\d{2}-\d{2}", r["date"]) for r in rows)
    # April 2026 in Casablanca is UTC+1: each day runs local midnight to local midnight
    assert rows[0]["day_start"] == f"{rows[0]['date']}T00:00:00+01:00"
    led = report.ledger
    for r, d, (_, full) in zip(rows, rj["days"], led.iterrows()):
        assert r["complete"] in ("true", "false") and (r["complete"] == "true") == d["complete"]
        assert abs(float(r["consumed_Ah"]) - float(full["consumed_Ah"])) <= 1e-9
        assert float(r["consumed_Ah"]) == float(full["consumed_Ah"])  # repr round-trips exactly
        assert float(r["consumed_Ah"]) == pytest.approx(d["consumed_Ah"], abs=6e-4)  # the JSON keeps 3 decimals
        assert float(r["charged_Ah_solar"]) == float(full["charged_Ah_solar"])
        for key, value in r.items():  # plain numbers: no exponent, no thousands separator, no unit
            if key not in ("date", "day_start", "day_end", "complete") and value:
                assert re.fullmatch(r"-?\d+(\.\d+)?", value), (key, value)
    frame = pd.read_csv(out)
    assert frame["consumed_Ah"].to_numpy() == pytest.approx(led["consumed_Ah"].to_numpy(), abs=1e-9)


def test_ledger_from_to_matches_the_report_for_the_same_dates(trip, capsys, tmp_path):
    out, obj = _export(trip, capsys, tmp_path, "ledger", "csv", "--from", "2026-04-07", "--to", "2026-04-09")
    code, rj = run_json(capsys, [*_base(trip), "report", "--from", "2026-04-07", "--to", "2026-04-09", "--json"])
    assert code == 0
    rows = _csv_rows(out)
    assert [r["date"] for r in rows] == [d["date"] for d in rj["days"]] == ["2026-04-07", "2026-04-08", "2026-04-09"]
    assert obj["from"] == "2026-04-07" and obj["to"] == "2026-04-09"


def test_readings_csv_times_carry_offsets_and_values_read_back_exactly(trip, capsys, tmp_path):
    out, obj = _export(trip, capsys, tmp_path, "readings", "csv")
    rows = _csv_rows(out)
    assert len(rows) == obj["rows"]
    assert all(_ISO_OFFSET.match(r["t"]) for r in rows[:50])
    frame = pd.read_csv(out, dtype={"channel": str})
    with Store(trip / "readings.sqlite", read_only=True) as st:
        stored = st.read()
    t = pd.to_datetime(frame["t"], utc=True, format="ISO8601")
    assert (t.to_numpy() == stored["t"].to_numpy()).all()
    assert list(frame["channel"]) == list(stored["channel"].astype(str))
    for col in ("voltage_V", "current_A", "temperature_C", "soc_pct"):
        back = frame[col].to_numpy(dtype=np.float64).astype(np.float32)
        np.testing.assert_array_equal(back, stored[col].to_numpy())  # NaN where empty, else bit-equal


# -- soc and events -------------------------------------------------------------------------------

def test_soc_export_is_full_resolution_with_the_reports_band(trip, capsys, tmp_path, report):
    out, obj = _export(trip, capsys, tmp_path, "soc", "parquet")
    df = pd.read_parquet(out)
    assert len(df) == obj["rows"] == len(report.soc)
    np.testing.assert_array_equal(df["soc_pct"].to_numpy(), report.soc.to_numpy())
    assert (df["t"].to_numpy() == report.soc.index.to_numpy()).all()
    series = report.extras["soc_series"]  # the report's downsampled band, unrounded
    at = pd.to_datetime(pd.Series(series["t"]), utc=True).dt.as_unit("us")
    sub = df.set_index("t").loc[at]
    assert sub["soc_pct_lo"].to_numpy() == pytest.approx(series["soc_pct_lo"], abs=1e-9)
    assert sub["soc_pct_hi"].to_numpy() == pytest.approx(series["soc_pct_hi"], abs=1e-9)
    assert (df["soc_pct_lo"] <= df["soc_pct"] + 1e-6).all() and (df["soc_pct"] <= df["soc_pct_hi"] + 1e-6).all()


def test_events_hold_resyncs_anchors_and_notes_with_times(trip, capsys, tmp_path, report):
    out, obj = _export(trip, capsys, tmp_path, "events", "parquet")
    df = pd.read_parquet(out)
    assert len(df) == obj["rows"]
    resyncs = df[df["kind"] == "full_charge_resync"]
    expected = pd.to_datetime(pd.Series(report.extras["resyncs"]), utc=True)
    assert list(resyncs["t"]) == list(expected)
    assert (resyncs["t_end"] >= resyncs["t"]).all() and (resyncs["soc_pct"] == 100.0).all()
    anchors = df[df["kind"].isin(["ocv_anchor", "quasi_ocv_anchor"])]
    assert len(anchors) == len(report.extras["ocv_anchors"])
    notes = df[df["kind"] == "note"]
    assert list(notes["message"]) == list(report.data_quality["notes"])
    assert (notes["t"] == pd.Timestamp(report.period["start"])).all()
    findings = df[df["kind"] == "charging_finding"]
    assert list(findings["message"]) == list(report.extras["charging"]["findings"])
    # a day's notes, over that local day (the ledger's day bounds), the text report --json gives
    for kind, key in (("hidden_load", "hidden_load_note"), ("low_soc", "soc_min_pct_note"),
                      ("incomplete_day", "complete_why")):
        want = [d[key] for d in report.days if d.get(key) and (key != "complete_why" or not d["complete"])]
        got = df[df["kind"] == kind]
        assert sorted(got["message"]) == sorted(want), kind
        bounds = report.ledger_result.bounds_us
        starts = {int(b) for b in bounds[:-1]}
        assert {int(t.value // 1000) for t in got["t"]} <= starts
    assert df["t"].is_monotonic_increasing


def test_events_of_a_single_shunt_trip_hold_its_days_with_hidden_load(tmp_path, capsys):
    # one shunt: the load under charging is inferred, and such days say so (docs/single_shunt.md)
    log = tmp_path / "trip.csv"
    assert main(["simulate", "--scenario", "spring-truck", "--days", "4", "--interval", "60", "--single-shunt",
                 "--out", str(log)]) == 0
    assert main([*_base(tmp_path), "import", str(log)]) == 0
    capsys.readouterr()
    out, obj = _export(tmp_path, capsys, tmp_path, "events", "parquet")
    system = parse_system((tmp_path / "system.toml").read_text(encoding="utf-8"))
    with Store(tmp_path / "readings.sqlite", read_only=True) as st:
        report = build_report(st.read(), system)
    want = [d["hidden_load_note"] for d in report.days if d.get("hidden_load_note")]
    got = pd.read_parquet(out)
    hidden = got[got["kind"] == "hidden_load"]
    assert want and sorted(hidden["message"]) == sorted(want)
    day_starts = [int(b) for b in report.ledger_result.bounds_us[:-1]]
    assert all(int(t.value // 1000) in day_starts for t in hidden["t"])
    assert ((hidden["t_end"] - hidden["t"]) >= pd.Timedelta(hours=23)).all()


# -- foreign Parquet --------------------------------------------------------------------------------

def _foreign(tmp_path: Path, time_col: str, times) -> Path:
    n = len(times)
    cur = np.where(np.arange(n) % 20 < 10, -5.0, 3.0)
    df = pd.DataFrame({time_col: times, "Current (A)": cur, "volts": 13.2 + 0.01 * cur,
                       "Temp °C": np.full(n, 21.5), "Notes": ["ok"] * n})
    path = tmp_path / f"foreign-{re.sub(r'[^a-z]', '', time_col.lower())}.parquet"
    df.to_parquet(path)  # pandas' own writer: its schema metadata, its index
    return path


@pytest.mark.parametrize("time_col,times", [
    ("Time", pd.date_range("2025-06-01 12:00", periods=120, freq="1min")),  # naive: local (Oslo)
    ("timestamp", pd.date_range("2025-06-01 10:00", periods=120, freq="1min", tz="UTC")),
    ("Zeit", pd.date_range("2025-06-01 12:00", periods=120, freq="1min", tz="Europe/Oslo")),
    ("epoch_ms", 1748772000_000 + 60_000 * np.arange(120, dtype=np.int64)),
    ("datetime", [f"2025-06-01T{10 + m // 60:02d}:{m % 60:02d}:00Z" for m in range(120)]),
])
def test_a_foreign_parquet_with_other_column_names_imports(tmp_path, capsys, time_col, times):
    folder = tmp_path / "site"
    folder.mkdir()
    (folder / "system.toml").write_text(OSLO_LFP_SYSTEM, encoding="utf-8")
    path = _foreign(tmp_path, time_col, times)
    code, imp = run_json(capsys, [*_base(folder), "import", str(path), "--json"])
    assert code == 0
    e = imp["files"][0]
    assert e["rows_stored"] == 120 and e["rows_rejected"] == 0 and e["channels"] == ["battery"]
    assert e["columns"]["Current (A)"] == "battery.current_A" and e["columns"]["volts"] == "battery.voltage_V"
    assert any("Notes" in x for x in e["columns_ignored"])
    with Store(folder / "readings.sqlite", read_only=True) as st:
        df = st.read()
    assert df["t"].iloc[0] == pd.Timestamp("2025-06-01T10:00:00Z")  # 12:00 in Oslo in June
    assert df["current_A"].iloc[0] == pytest.approx(-5.0) and df["voltage_V"].iloc[0] == pytest.approx(13.15)
    assert df["temperature_C"].iloc[0] == pytest.approx(21.5)


def test_a_long_foreign_parquet_places_the_repeated_hour_per_channel(tmp_path, capsys):
    # Oslo, 2024-10-27: clocks go back 03:00 CEST -> 02:00 CET, so 02:30 happens twice (00:30Z, 01:30Z).
    wall = ["2024-10-27 02:30:00", "2024-10-27 02:45:00", "2024-10-27 02:30:00", "2024-10-27 02:45:00"]
    df = pd.DataFrame({"timestamp": wall * 2 + ["2024-10-27 03:00:00"],
                       "Channel": ["Battery"] * 4 + ["solar"] * 4 + ["not a name!"],
                       "Current (A)": [-1.0, -2.0, -1.0, -2.0, 3.0, 3.0, 3.0, 3.0, 1.0], "volts": 13.0})
    path = tmp_path / "long.parquet"
    df.to_parquet(path, index=False)
    code, imp = run_json(capsys, ["--store", str(tmp_path / "s.sqlite"), "import", str(path), "--tz",
                                  "Europe/Oslo", "--json"])
    assert code == 0
    e = imp["files"][0]
    assert e["channels"] == ["battery", "solar"] and e["rejected_by_reason"] == {"bad_channel": 1}
    with Store(tmp_path / "s.sqlite", read_only=True) as st:
        df = st.read()
    want = pd.to_datetime(["2024-10-27T00:30Z", "2024-10-27T00:45Z", "2024-10-27T01:30Z", "2024-10-27T01:45Z"])
    for ch in ("battery", "solar"):
        assert list(df.loc[df["channel"] == ch, "t"]) == list(want)


def test_a_parquet_with_bad_rows_counts_them_and_keeps_them_aside(tmp_path, capsys):
    n = 60
    t = pd.Series(pd.date_range("2025-06-01 10:00", periods=n, freq="1min", tz="UTC"))
    df = pd.DataFrame({"time": t, "battery_current_A": np.linspace(-5, 5, n), "battery_voltage_V": 13.0})
    df.loc[3, "time"] = pd.NaT                                   # no time
    df.loc[7, ["battery_current_A", "battery_voltage_V"]] = np.nan  # no value at all
    df.loc[11, "battery_voltage_V"] = 250.0                      # not a 12.8 V bank's voltage
    df = pd.concat([df, df.iloc[[20]]], ignore_index=True)       # a duplicate row, at the end
    path = tmp_path / "bad.parquet"
    df.to_parquet(path)
    folder = tmp_path / "site"
    folder.mkdir()
    (folder / "system.toml").write_text(OSLO_LFP_SYSTEM, encoding="utf-8")
    code, imp = run_json(capsys, [*_base(folder), "import", str(path), "--json"])
    assert code == 0
    e = imp["files"][0]
    assert e["data_lines"] == n + 1
    assert e["rejected_by_reason"] == {"bad_time": 1, "no_values": 1, "implausible_voltage": 1, "duplicate": 1}
    assert e["rows_stored"] + e["rows_rejected"] == e["data_lines"] and e["rows_stored"] == n - 3
    with open(e["quarantine"], newline="", encoding="utf-8") as f:
        kept = list(csv.DictReader(f))
    assert [(r["line"], r["reason"]) for r in kept] == [("4", "bad_time"), ("8", "no_values"),
                                                        ("12", "implausible_voltage"), ("61", "duplicate")]
    row = json.loads(kept[2]["text"])
    assert row["battery_voltage_V"] == 250.0 and row["time"].startswith("2025-06-01T10:11:00")
    code, status = run_json(capsys, [*_base(folder), "status", "--json"])
    assert code == 0 and status["rows_rejected"] == 4 and status["rows_stored"] == n - 3


def test_a_parquet_whose_every_row_is_rejected_stores_nothing_and_exits_2(tmp_path, capsys):
    df = pd.DataFrame({"time": pd.Series([pd.NaT] * 5, dtype="datetime64[us, UTC]"), "current_A": 1.0})
    path = tmp_path / "no-times.parquet"
    df.to_parquet(path)
    code, imp = run_json(capsys, ["--store", str(tmp_path / "s.sqlite"), "import", str(path), "--json"])
    assert code == 2
    e = imp["files"][0]
    assert e["usable"] is False and e["rejected_by_reason"] == {"bad_time": 5} and e["rows_stored"] == 0
    assert str(path) in e["error"] and Path(e["quarantine"]).is_file()
    with Store(tmp_path / "s.sqlite", read_only=True) as st:
        assert st.read().empty and st.imports() == []


def test_events_export_has_the_gaps_of_a_foreign_log(tmp_path, capsys):
    folder = tmp_path / "site"
    folder.mkdir()
    (folder / "system.toml").write_text(OSLO_LFP_SYSTEM, encoding="utf-8")
    t = pd.date_range("2025-06-01 10:00", periods=300, freq="1min", tz="UTC")
    t = t[(t < "2025-06-01T12:00Z") | (t >= "2025-06-01T13:00Z")]  # an hour lost
    pd.DataFrame({"time": t, "current_A": -2.0, "voltage_V": 13.1}).to_parquet(tmp_path / "gap.parquet")
    assert main([*_base(folder), "import", str(tmp_path / "gap.parquet")]) == 0
    out = tmp_path / "events.csv"
    capsys.readouterr()
    code, obj = run_json(capsys, [*_base(folder), "export", "events", "--out", str(out), "--json"])
    assert code == 0 and obj["format"] == "csv"
    gaps = [r for r in _csv_rows(out) if r["kind"] == "gap"]
    assert len(gaps) == 1
    # 11:59Z is 13:59 in Oslo (UTC+2): the CSV says local time with its offset
    assert gaps[0]["t"] == "2025-06-01T13:59:00+02:00" and gaps[0]["t_end"] == "2025-06-01T15:00:00+02:00"
    assert float(gaps[0]["duration_s"]) == 3660.0 and gaps[0]["channel"] == "battery"


# -- the command: --json, errors, atomic write ------------------------------------------------------

def test_export_json_keys_and_stdout_holds_only_the_object(trip, capsys, tmp_path):
    out = tmp_path / "r.parquet"
    code = main([*_base(trip), "export", "readings", "--out", str(out), "--json"])
    captured = capsys.readouterr()
    assert code == 0
    obj = json.loads(captured.out)
    assert set(obj) >= {"kind", "format", "path", "rows", "columns", "first", "last"}
    assert obj["kind"] == "readings" and obj["format"] == "parquet" and obj["path"] == str(out)
    assert obj["rows"] == pq.read_metadata(out).num_rows
    assert obj["columns"] == pq.read_schema(out).names
    df = pd.read_parquet(out)
    assert pd.Timestamp(obj["first"]) == df["t"].min() and pd.Timestamp(obj["last"]) == df["t"].max()
    assert [p.name for p in tmp_path.iterdir()] == ["r.parquet"]  # no temporary file left beside it


@pytest.mark.parametrize("argv,names", [
    (["export", "ledgers", "--format", "csv", "--out", "{tmp}/x.csv"], "KIND 'ledgers'"),
    (["export", "ledger", "--format", "xlsx", "--out", "{tmp}/x.xlsx"], "--format 'xlsx'"),
    (["export", "ledger", "--out", "{tmp}/x.txt"], "--format"),
    (["export", "ledger", "--format", "csv"], "--out"),
    (["export", "ledger", "--format", "csv", "--out", "{tmp}/no/such/folder/x.csv"], "--out {tmp}/no/such/folder/x.csv"),
    (["export", "ledger", "--format", "csv", "--out", "{tmp}"], "is a folder"),
    (["export", "ledger", "--format", "csv", "--out", "{tmp}/x.csv", "--from", "2026-13-01"], "--from '2026-13-01'"),
    (["export", "ledger", "--format", "csv", "--out", "{tmp}/x.csv", "--to", "yesterday"], "--to 'yesterday'"),
    (["export", "ledger", "--format", "csv", "--out", "{tmp}/x.csv", "--from", "2030-01-01"], "no readings"),
])
def test_bad_usage_exits_2_naming_the_option(trip, capsys, tmp_path, argv, names):
    argv = [a.replace("{tmp}", str(tmp_path)) for a in argv]
    code = main([*_base(trip), *argv])
    err = capsys.readouterr().err
    assert code == 2
    assert names.replace("{tmp}", str(tmp_path)) in err
    assert not list(tmp_path.glob("*.part")) and not list(tmp_path.glob(".*.part"))


def test_an_empty_store_exits_2(tmp_path, capsys):
    code = main(["--store", str(tmp_path / "none.sqlite"), "export", "readings", "--out", str(tmp_path / "r.csv")])
    assert code == 2 and "import a log first" in capsys.readouterr().err
    assert not (tmp_path / "r.csv").exists()


def test_a_failed_write_leaves_the_old_file_and_no_temporary(trip, capsys, tmp_path, monkeypatch):
    out = tmp_path / "ledger.parquet"
    out.write_bytes(b"the previous export")

    def broken(path, *a, **k):
        Path(path).write_bytes(b"half a fi")
        raise OSError(28, "No space left on device")

    monkeypatch.setattr(export_cmd, "_write_parquet", broken)
    code = main([*_base(trip), "export", "ledger", "--out", str(out)])
    err = capsys.readouterr().err
    assert code == 2 and f"--out {out}" in err and "No space left on device" in err
    assert out.read_bytes() == b"the previous export"
    assert [p.name for p in tmp_path.iterdir()] == ["ledger.parquet"]
