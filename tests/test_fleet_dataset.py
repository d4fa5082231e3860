"""The fleet dataset (collector.fleet_dataset) and ``drawdown fleet ingest``, on real stores and exports.

One simulated vehicle (the project's simulator, spring-truck: 3 days at 60 s from
2026-04-05T23:00Z, Africa/Casablanca, UTC+1 in April 2026) is imported into a real SQLite store
and exported with ``drawdown export readings``; every dataset is a real folder in tmp_path or
fsspec's in-memory file system. Outside references: a UTC calendar month begins at 00:00Z of
its first day (ISO 8601); 23:30Z on 31 March is 00:30 on 1 April at UTC+1 (IANA tz database:
Morocco keeps UTC+1 outside Ramadan); a Parquet file begins with the bytes ``PAR1`` (Apache
Parquet format specification).
"""

from __future__ import annotations

import json
import shutil
import uuid
from pathlib import Path

import numpy as np
import pandas as pd
import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from drawdown.cli import main
from drawdown.cli.commands.export import SCHEMAS
from drawdown.collector import fleet_dataset as fd
from drawdown.collector.canonical import VALUE_COLUMNS, to_epoch_us
from drawdown.collector.store import Store

DAY_US = 86_400_000_000


def run_json(capsys, argv: list[str]) -> tuple[int, dict]:
    code = main(argv)
    out = capsys.readouterr().out
    return code, json.loads(out)  # raises unless stdout is exactly one JSON document


def _store_args(folder: Path) -> list[str]:
    return ["--store", str(folder / "readings.sqlite"), "--system", str(folder / "system.toml")]


@pytest.fixture(scope="module")
def van(tmp_path_factory) -> Path:
    """A vehicle folder as a vehicle sends it home: system.toml, readings.sqlite, readings.parquet,
    and two overlapping daily exports (local 6-7 April and 7-8 April)."""
    folder = tmp_path_factory.mktemp("fleet") / "van-001"
    folder.mkdir()
    log = folder / "log.csv"
    assert main(["simulate", "--scenario", "spring-truck", "--days", "3", "--interval", "60", "--out", str(log)]) == 0
    assert main([*_store_args(folder), "import", str(log)]) == 0
    assert main([*_store_args(folder), "export", "readings", "--out", str(folder / "readings.parquet")]) == 0
    for name, d0, d1 in (("a", "2026-04-06", "2026-04-07"), ("b", "2026-04-07", "2026-04-08")):
        assert main([*_store_args(folder), "export", "readings", "--from", d0, "--to", d1,
                     "--out", str(folder / f"export-{name}.parquet")]) == 0
    return folder


@pytest.fixture(scope="module")
def stored(van) -> pd.DataFrame:
    with Store(van / "readings.sqlite", read_only=True) as st:
        return st.read()


def assert_same_readings(got: pd.DataFrame, want: pd.DataFrame) -> None:
    """The same rows in the same order, times to the microsecond and float32 values bit for bit."""
    assert list(got.columns) == list(want.columns)
    assert [str(d) for d in got.dtypes] == [str(d) for d in want.dtypes]
    assert len(got) == len(want)
    assert np.array_equal(to_epoch_us(got["t"]), to_epoch_us(want["t"]))
    assert got["channel"].astype(str).tolist() == want["channel"].astype(str).tolist()
    for c in VALUE_COLUMNS:
        a, b = got[c].to_numpy(), want[c].to_numpy()
        assert a.dtype == b.dtype == np.float32
        assert np.array_equal(np.isnan(a), np.isnan(b)), c
        ok = ~np.isnan(a)
        assert np.array_equal(a[ok].view(np.uint32), b[ok].view(np.uint32)), c


def _parts(ds: Path, vehicle: str) -> dict[str, list[str]]:
    return {m.name: sorted(p.name for p in m.glob("part-*.parquet"))
            for m in sorted((ds / f"vehicle={vehicle}").glob("month=*"))}


def _copy_vehicle(van: Path, dst: Path, readings: str = "readings.parquet", as_name: str | None = None) -> Path:
    dst.mkdir(parents=True, exist_ok=True)
    shutil.copy(van / readings, dst / (as_name or readings))
    shutil.copy(van / "system.toml", dst / "system.toml")
    return dst


# --------------------------------------------------------------------------------------------

def test_a_store_and_its_export_give_the_stores_rows(van, stored, tmp_path):
    from_store = fd.ingest([van / "readings.sqlite"], tmp_path / "a")
    from_export = fd.ingest([van / "readings.parquet"], tmp_path / "b")
    for res in (from_store, from_export):
        (r,) = res.sources
        assert r.error is None and r.vehicle == "van-001"  # the folder holds a system.toml: its name
        assert r.rows == r.rows_added == len(stored) and r.months == ["2026-04"]
    assert from_store.sources[0].kind == "store" and from_export.sources[0].kind == "parquet"
    for ds in ("a", "b"):
        assert fd.vehicles(tmp_path / ds) == ["van-001"]
        assert_same_readings(fd.read_vehicle(tmp_path / ds, "van-001"), stored)
    # a part is a readings export of schema v1: same columns and types, and its metadata
    (part,) = (tmp_path / "a" / "vehicle=van-001" / "month=2026-04").glob("part-*.parquet")
    pf = pq.ParquetFile(part)
    assert pf.schema_arrow.names == [c.name for c in SCHEMAS["readings"]]
    assert pf.schema_arrow.field("t").type == pa.timestamp("us", tz="UTC")
    meta = pf.schema_arrow.metadata
    assert meta[b"drawdown.kind"] == b"readings" and meta[b"drawdown.schema_version"] == b"1"
    assert meta[b"drawdown.timezone"] == b"Africa/Casablanca"
    assert meta[b"drawdown.fleet.vehicle"] == b"van-001"
    # and drawdown's own importer takes it back as an export
    assert main(["--store", str(tmp_path / "back.sqlite"), "import", str(part)]) == 0
    with Store(tmp_path / "back.sqlite", read_only=True) as st:
        assert_same_readings(st.read(), stored)


def test_read_vehicle_selects_a_time_range(van, stored, tmp_path):
    fd.ingest([van / "readings.parquet"], tmp_path)
    start, end = "2026-04-06T10:00:00Z", pd.Timestamp("2026-04-07 03:30")  # naive is UTC, as Store.read
    with Store(van / "readings.sqlite", read_only=True) as st:
        want = st.read(start, end)
    got = fd.read_vehicle(tmp_path, "van-001", start, end)
    assert 0 < len(got) < len(stored)
    assert_same_readings(got, want)
    assert fd.read_vehicle(tmp_path, "van-001", "2027-01-01").empty


def test_the_same_export_twice_adds_nothing(van, stored, tmp_path):
    first = fd.ingest([van / "readings.parquet"], tmp_path).sources[0]
    parts = _parts(tmp_path, "van-001")
    part = tmp_path / "vehicle=van-001" / "month=2026-04" / parts["month=2026-04"][0]
    stamp = part.stat().st_mtime_ns
    second = fd.ingest([van / "readings.parquet"], tmp_path).sources[0]
    assert first.rows_added == len(stored)
    assert second.already_ingested and second.rows_added == 0 and second.months_rewritten == []
    assert second.rows_already_held == len(stored)
    assert _parts(tmp_path, "van-001") == parts and part.stat().st_mtime_ns == stamp  # not even rewritten
    # the store holding the same readings (another file, another sha256): merged, nothing added
    third = fd.ingest([van / "readings.sqlite"], tmp_path).sources[0]
    assert not third.already_ingested and third.rows_added == 0 and third.rows_already_held == len(stored)
    assert third.months_rewritten == [] and part.stat().st_mtime_ns == stamp
    ledger = json.loads((tmp_path / fd.LEDGER).read_text())
    shas = [s["sha256"] for s in ledger["vehicles"]["van-001"]["sources"]]
    assert shas == [first.sha256, third.sha256]  # the repeat is not recorded twice
    assert_same_readings(fd.read_vehicle(tmp_path, "van-001"), stored)


def test_overlapping_exports_hold_each_reading_once(van, tmp_path):
    a = pq.read_table(van / "export-a.parquet").to_pandas()
    b = pq.read_table(van / "export-b.parquet").to_pandas()
    overlap = a.merge(b, on=["channel", "t"]).shape[0]
    assert overlap > 0  # local 7 April is in both
    ra, rb = fd.ingest([van / "export-a.parquet", van / "export-b.parquet"], tmp_path, vehicle=None).sources
    assert ra.rows_added == len(a)
    assert rb.rows_added == len(b) - overlap and rb.rows_already_held == overlap and rb.rows_replaced == 0
    got = fd.read_vehicle(tmp_path, "van-001")
    assert not got.duplicated(["channel", "t"]).any()
    with Store(van / "readings.sqlite", read_only=True) as st:
        want = st.read(a["t"].min(), b["t"].max() + pd.Timedelta(microseconds=1))
    assert_same_readings(got, want)
    assert len(_parts(tmp_path, "van-001")["month=2026-04"]) == 1


def test_the_newest_ingest_wins_a_reading_both_hold(van, tmp_path):
    a = pq.read_table(van / "export-a.parquet")
    t_us = a.column("t").cast(pa.int64()).to_numpy()
    late = t_us >= np.median(t_us)
    current = a.column("current_A").to_numpy(zero_copy_only=False).copy()
    current[late] += np.float32(1.0)  # a corrected re-export of the later half
    fixed = a.set_column(a.schema.get_field_index("current_A"), a.schema.field("current_A"),
                         pa.array(current, pa.float32(), from_pandas=True)).filter(pa.array(late))
    pq.write_table(fixed, tmp_path / "fixed.parquet")
    ds = tmp_path / "ds"
    fd.ingest([van / "export-a.parquet"], ds, vehicle="van-001")
    r = fd.ingest([tmp_path / "fixed.parquet"], ds, vehicle="van-001").sources[0]
    replaced = int(np.count_nonzero(~np.isnan(current[late])))
    assert r.rows_added == 0 and r.rows_replaced == replaced and r.rows_already_held == fixed.num_rows - replaced
    got = fd.read_vehicle(ds, "van-001")
    want = a.to_pandas()
    want.loc[late, "current_A"] = current[late]
    want = want.sort_values(["channel", "t"], kind="stable").reset_index(drop=True)
    assert np.array_equal(got["current_A"].to_numpy(), want["current_A"].to_numpy().astype(np.float32),
                          equal_nan=True)


def test_a_month_boundary_splits_partitions_in_utc(van, stored, tmp_path):
    # the same trip moved to start at 2026-03-31T12:00Z: its readings cross into April at 00:00Z
    shift = pd.Timestamp("2026-03-31T12:00Z") - stored["t"].min()
    moved = stored.copy()
    moved["t"] = moved["t"] + shift
    folder = tmp_path / "truck-7"
    folder.mkdir()
    with Store(folder / "readings.sqlite") as st:
        st.append(moved)
        want = st.read()
    r = fd.ingest([folder / "readings.sqlite"], tmp_path / "ds").sources[0]
    assert r.vehicle == "truck-7" and r.system is None  # no system.toml beside it: readings only
    assert r.months == ["2026-03", "2026-04"] and r.rows_added == len(want)
    april = pd.Timestamp("2026-04-01T00:00Z")
    counts = {}
    for month, expect in (("2026-03", lambda t: (t >= pd.Timestamp("2026-03-01T00:00Z")) & (t < april)),
                          ("2026-04", lambda t: (t >= april) & (t < pd.Timestamp("2026-05-01T00:00Z")))):
        (part,) = (tmp_path / "ds" / "vehicle=truck-7" / f"month={month}").glob("part-*.parquet")
        t = pq.read_table(part).column("t").to_pandas()
        assert expect(t).all(), month
        counts[month] = len(t)
    assert counts["2026-03"] == int((want["t"] < april).sum()) and sum(counts.values()) == len(want)
    # midnight UTC itself opens April; 23:30Z on 31 March (00:30 local at UTC+1) stays in March
    (apr,) = (tmp_path / "ds" / "vehicle=truck-7" / "month=2026-04").glob("part-*.parquet")
    assert pq.read_table(apr).column("t").to_pandas().min() == april
    assert (want["t"] == pd.Timestamp("2026-03-31T23:30Z")).any() and counts["2026-03"] > 0
    assert_same_readings(fd.read_vehicle(tmp_path / "ds", "truck-7"), want)
    start, end = "2026-03-31T20:00Z", "2026-04-01T04:00Z"
    with Store(folder / "readings.sqlite", read_only=True) as st:
        assert_same_readings(fd.read_vehicle(tmp_path / "ds", "truck-7", start, end), st.read(start, end))


def test_system_toml_lands_beside_the_partition_and_the_latest_wins(van, tmp_path, capsys):
    src = _copy_vehicle(van, tmp_path / "src" / "van-9")
    ds = tmp_path / "ds"
    r = fd.ingest([src / "readings.parquet"], ds).sources[0]
    assert r.vehicle == "van-9" and r.system == "new"
    text = (van / "system.toml").read_text(encoding="utf-8")
    assert (ds / "vehicle=van-9" / "system.toml").read_text(encoding="utf-8") == text
    assert fd.vehicle_system_text(ds, "van-9") == text
    changed = text.replace("rated_capacity_Ah = 230", "rated_capacity_Ah = 200")
    assert changed != text
    (src / "system.toml").write_text(changed, encoding="utf-8")
    code, out = run_json(capsys, ["fleet", "ingest", str(src / "readings.parquet"), "--dataset", str(ds), "--json"])
    assert code == 0
    (r,) = out["sources"]
    assert r["system"] == "changed" and r["already_ingested"] and r["rows_added"] == 0
    assert fd.vehicle_system_text(ds, "van-9") == changed
    with pytest.raises(FileNotFoundError, match="no system.toml"):
        fd.vehicle_system_text(ds, "van-nobody")


def test_the_cli_says_when_the_system_changes(van, tmp_path, capsys):
    src = _copy_vehicle(van, tmp_path / "src" / "van-3")
    ds = tmp_path / "ds"
    assert main(["fleet", "ingest", str(src / "readings.parquet"), "--dataset", str(ds)]) == 0
    out = capsys.readouterr()
    assert "van-3:" in out.out and "readings added" in out.out and "changed" not in out.err
    (src / "system.toml").write_text((van / "system.toml").read_text() + "\n# moved to a new bank\n")
    assert main(["fleet", "ingest", str(src / "readings.parquet"), "--dataset", str(ds)]) == 0
    err = capsys.readouterr().err
    assert "van-3: the system description changed" in err


def test_a_folder_with_fleet_json_ingests_every_vehicle(van, stored, tmp_path, capsys):
    fleet = tmp_path / "sim"
    names = ["van-001", "van-002", "bus-x"]
    for name in names:
        _copy_vehicle(van, fleet / f"v/{name}")
        (fleet / f"v/{name}" / "truth.json").write_text("{}")
    (fleet / "fleet.json").write_text(json.dumps({"vehicles": [{"name": n, "path": f"v/{n}"} for n in names],
                                                  "seed": 1}))
    ds = tmp_path / "ds"
    code, out = run_json(capsys, ["fleet", "ingest", str(fleet), "--dataset", str(ds), "--json"])
    assert code == 0 and out["ingested"] == 3 and out["failed"] == 0
    assert [s["vehicle"] for s in out["sources"]] == names  # the manifest's names and order
    assert all(s["rows_added"] == len(stored) and s["months"] == ["2026-04"] for s in out["sources"])
    assert out["rows_added"] == 3 * len(stored)
    assert fd.vehicles(ds) == sorted(names)
    for n in names:
        assert_same_readings(fd.read_vehicle(ds, n), stored)
        assert (ds / f"vehicle={n}" / "system.toml").is_file()
    # one vehicle's file, named by the manifest one folder up
    r = fd.ingest([fleet / "v" / "bus-x" / "readings.parquet"], tmp_path / "ds2").sources[0]
    assert r.vehicle == "bus-x"


def test_a_folder_of_vehicle_subfolders_without_manifest(van, stored, tmp_path):
    fleet = tmp_path / "home"
    _copy_vehicle(van, fleet / "camper-a")
    _copy_vehicle(van, fleet / "boat-b", readings="readings.sqlite")
    (fleet / "notes").mkdir()  # not a vehicle: neither system.toml nor readings
    (fleet / "readme.txt").write_text("nightly uploads\n")
    res = fd.ingest([fleet], tmp_path / "ds")
    assert sorted((s.vehicle, s.kind) for s in res.sources) == [("boat-b", "store"), ("camper-a", "parquet")]
    assert res.failed == 0
    for n in ("boat-b", "camper-a"):
        assert_same_readings(fd.read_vehicle(tmp_path / "ds", n), stored)


def test_bad_sources_are_reported_and_the_others_ingest(van, stored, tmp_path, capsys):
    bad = tmp_path / "bad"
    bad.mkdir()
    shutil.copy(van / "log.csv", bad / "log.csv")
    assert main([*_store_args(van), "export", "ledger", "--out", str(bad / "ledger.parquet")]) == 0
    capsys.readouterr()
    data = (van / "readings.parquet").read_bytes()
    (bad / "cut.parquet").write_bytes(data[: len(data) // 2])  # PAR1 at the start, no footer
    (bad / "empty-folder").mkdir()
    pq.write_table(pa.table({"when": pa.array([1, 2]), "x": pa.array([1.0, 2.0])}), bad / "other.parquet")
    with Store(bad / "empty.sqlite") as st:
        st.execute("SELECT 1")
    sources = [bad / "log.csv", bad / "ledger.parquet", bad / "cut.parquet", bad / "empty-folder",
               bad / "other.parquet", bad / "empty.sqlite", bad / "no-such-file.parquet", van / "readings.parquet"]
    code, out = run_json(capsys, ["fleet", "ingest", *map(str, sources), "--dataset", str(tmp_path / "ds"), "--json"])
    assert code == 0  # something was ingested
    assert out["ingested"] == 1 and out["failed"] == len(sources) - 1
    errors = {Path(s["source"]).name: s["error"] for s in out["sources"] if s["error"]}
    assert "neither a drawdown store" in errors["log.csv"]
    assert "ledger export holds no readings" in errors["ledger.parquet"]
    assert "cannot read it as Parquet" in errors["cut.parquet"]
    assert "no vehicles" in errors["empty-folder"]
    assert "not a drawdown readings export" in errors["other.parquet"]
    assert "holds no readings" in errors["empty.sqlite"]
    assert "no such file" in errors["no-such-file.parquet"]
    good = [s for s in out["sources"] if not s["error"]]
    assert good[0]["vehicle"] == "van-001" and good[0]["rows_added"] == len(stored)
    assert fd.vehicles(tmp_path / "ds") == ["van-001"]  # failed sources leave no vehicle behind
    # nothing ingestable: exit 2, each reason said on stderr
    assert main(["fleet", "ingest", str(bad / "log.csv"), str(bad / "ledger.parquet"),
                 "--dataset", str(tmp_path / "ds3")]) == 2
    err = capsys.readouterr().err
    assert "log.csv: not ingested" in err and "ledger.parquet: not ingested" in err


def test_vehicle_names_are_checked(van, tmp_path, capsys):
    for name in ("../up", "a/b", "", ".hidden", "x=y"):
        with pytest.raises(fd.FleetInputError, match="vehicle name"):
            fd.ingest([van / "readings.parquet"], tmp_path, vehicle=name)
    assert main(["fleet", "ingest", str(van / "readings.parquet"), "--dataset", str(tmp_path), "--vehicle",
                 "../up"]) == 2
    assert "--vehicle: vehicle name '../up'" in capsys.readouterr().err
    assert main(["fleet", "ingest", str(van / "export-a.parquet"), str(van / "export-b.parquet"),
                 "--dataset", str(tmp_path), "--vehicle", "van-1"]) == 2
    assert "one store or export" in capsys.readouterr().err
    assert not list(tmp_path.glob("vehicle=*"))
    # a bad name from a manifest is that source's error, not the run's
    fleet = tmp_path / "sim"
    _copy_vehicle(van, fleet / "ok")
    _copy_vehicle(van, fleet / "bad")
    (fleet / "fleet.json").write_text(json.dumps({"vehicles": [{"name": "ok", "path": "ok"},
                                                               {"name": "no/slash", "path": "bad"}]}))
    res = fd.ingest([fleet], tmp_path / "ds")
    assert [s.error is None for s in res.sources] == [True, False]
    assert "vehicle name 'no/slash'" in (res.sources[1].error or "")


def test_an_interrupted_rewrite_leaves_the_month_whole(van, stored, tmp_path):
    ds = tmp_path / "ds"
    fd.ingest([van / "export-a.parquet"], ds, vehicle="van-001")
    month = ds / "vehicle=van-001" / "month=2026-04"
    (old,) = month.glob("part-*.parquet")
    keep = tmp_path / old.name
    shutil.copy(old, keep)
    fd.ingest([van / "export-b.parquet"], ds, vehicle="van-001")
    (new,) = month.glob("part-*.parquet")
    assert new.name != old.name  # content-addressed: another month's content, another name
    assert json.loads(pq.read_schema(new).metadata[b"drawdown.fleet.supersedes"]) == [old.name]
    whole = fd.read_vehicle(ds, "van-001")
    # as if the run had stopped after the rename but before removing the part it replaced,
    # with a half-written temporary file beside them
    shutil.copy(keep, old)
    (month / f".part-{'0' * 32}.parquet.tmp-abc").write_bytes(b"PAR1 half")
    assert_same_readings(fd.read_vehicle(ds, "van-001"), whole)
    # the next ingest touching the month leaves one part again
    r = fd.ingest([van / "readings.sqlite"], ds, vehicle="van-001").sources[0]
    assert r.error is None and "2026-04" in r.months_rewritten
    assert [p.name for p in month.glob("part-*.parquet")] == [f"part-{_hash_of(stored)}.parquet"]
    assert_same_readings(fd.read_vehicle(ds, "van-001"), stored)


def _hash_of(frame: pd.DataFrame) -> str:
    """The part name a month holding exactly ``frame`` gets (the readings' sha256, not the file's)."""
    names = sorted(frame["channel"].astype(str).unique())
    codes = frame["channel"].astype(str).map({n: i for i, n in enumerate(names)}).to_numpy(np.int32)
    block = fd._Block(names, codes, to_epoch_us(frame["t"]),
                      [frame[c].to_numpy(np.float32) for c in VALUE_COLUMNS])
    return block.content_hash()


def test_memory_url_dataset_and_sources(van, stored):
    import fsspec

    mem = fsspec.filesystem("memory")
    root = f"/fleet-test-{uuid.uuid4().hex[:8]}"
    try:
        mem.pipe_file(f"{root}/in/bus-2/readings.parquet", (van / "readings.parquet").read_bytes())
        mem.pipe_file(f"{root}/in/bus-2/system.toml", (van / "system.toml").read_bytes())
        mem.pipe_file(f"{root}/in/bus-3/readings.sqlite", (van / "readings.sqlite").read_bytes())
        url = f"memory://{root}/ds"
        res = fd.ingest([van / "readings.parquet", f"memory://{root}/in"], url, vehicle=None)
        assert [(s.vehicle, s.error) for s in res.sources] == [("van-001", None), ("bus-2", None), ("bus-3", None)]
        assert fd.vehicles(url) == ["bus-2", "bus-3", "van-001"]
        for n in fd.vehicles(url):
            assert_same_readings(fd.read_vehicle(url, n), stored)
        assert mem.isfile(f"{root}/ds/vehicle=bus-2/system.toml") and mem.isfile(f"{root}/ds/_fleet.json")
        parts = mem.glob(f"{root}/ds/vehicle=bus-2/month=2026-04/part-*.parquet")
        assert len(parts) == 1
        again = fd.ingest([f"memory://{root}/in/bus-2/readings.parquet"], url, vehicle="bus-2").sources[0]
        assert again.already_ingested and again.rows_added == 0
        assert fd.vehicle_system_text(url, "bus-2") == (van / "system.toml").read_text(encoding="utf-8")
        assert not mem.glob(f"{root}/ds/**/.*tmp*")
    finally:
        mem.rm(root, recursive=True)


def test_the_cli_names_the_fleet_extra_when_fsspec_is_missing(van, tmp_path, monkeypatch, capsys):
    import sys

    monkeypatch.setitem(sys.modules, "fsspec", None)  # import fsspec -> ModuleNotFoundError
    assert main(["fleet", "ingest", str(van / "readings.parquet"), "--dataset", str(tmp_path / "ds")]) == 2
    assert "pip install 'drawdown[fleet]'" in capsys.readouterr().err
    assert not (tmp_path / "ds").exists()


def test_fleet_needs_a_subcommand(capsys):
    with pytest.raises(SystemExit) as exc:
        main(["fleet"])
    assert exc.value.code == 2
    assert "SUBCOMMAND" in capsys.readouterr().err
