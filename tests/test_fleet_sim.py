"""``drawdown simulate --fleet`` (collector.sim_fleet) and the simulator's capacity fade, through the real CLI.

A small fleet (4 vehicles x 10 days at 60 s, from 26 September 2025: the run spans two calendar
months) is written once per module. Outside references: the Parquet format begins and ends a file
with the magic bytes ``PAR1`` (Apache Parquet format specification); a 24 V lead-acid bank is two
12 V blocks in series and a 24 V LiFePO4 bank two 4-cell 12.8 V blocks (common practice).
"""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pyarrow.parquet as pq
import pytest

from drawdown.analysis.system import parse_system
from drawdown.cli import main
from drawdown.cli.commands.export import PARQUET_OPTIONS, SCHEMAS
from drawdown.collector import sim_fleet
from drawdown.collector.simulated import simulate

N, DAYS, INTERVAL = 4, 10, 60


def _fleet(folder: Path, seed: int, capsys) -> dict:
    code = main(["--quiet", "simulate", "--fleet", str(N), "--days", str(DAYS), "--interval", str(INTERVAL),
                 "--seed", str(seed), "--out", str(folder), "--json"])
    assert code == 0
    return json.loads(capsys.readouterr().out)


@pytest.fixture(scope="module")
def fleet(tmp_path_factory):
    folder = tmp_path_factory.mktemp("fleet") / "fleet"
    assert main(["--quiet", "simulate", "--fleet", str(N), "--days", str(DAYS), "--interval", str(INTERVAL),
                 "--seed", "7", "--out", str(folder)]) == 0
    return folder


def _truths(folder: Path) -> dict[str, dict]:
    manifest = json.loads((folder / "fleet.json").read_text())
    return {v["name"]: json.loads((folder / v["path"] / "truth.json").read_text()) for v in manifest["vehicles"]}


def test_layout_and_manifest(fleet):
    manifest = json.loads((fleet / "fleet.json").read_text())
    assert manifest["vehicles"] == [{"name": f"van-{k:03d}", "path": f"van-{k:03d}"} for k in range(1, N + 1)]
    assert (manifest["days"], manifest["seed"], manifest["interval_s"]) == (DAYS, 7, float(INTERVAL))
    for v in manifest["vehicles"]:
        folder = fleet / v["path"]
        system = parse_system((folder / "system.toml").read_text(encoding="utf-8"))
        raw = (folder / "readings.parquet").read_bytes()
        assert raw[:4] == b"PAR1" and raw[-4:] == b"PAR1"  # Parquet format specification
        truth = json.loads((folder / "truth.json").read_text())
        assert truth["vehicle"] == v["name"]
        assert truth["site"]["timezone"] == system.site.timezone
        assert truth["rated_Ah"] == system.battery.rated_capacity_Ah
        assert truth["chemistry"] == system.battery.chemistry
        assert len(truth["consumed_Ah_by_day"]) == DAYS
        assert all(d["consumed_Ah"] > 0 for d in truth["consumed_Ah_by_day"])
        for key in ("usable_Ah_start", "usable_Ah_by_month", "fade_pct_per_month", "nominal_V", "site"):
            assert key in truth


def test_readings_file_is_a_readings_export(fleet):
    pf = pq.ParquetFile(fleet / "van-001" / "readings.parquet")
    schema = pf.schema_arrow
    assert schema.names == [c.name for c in SCHEMAS["readings"]]
    meta = {k.decode(): v.decode() for k, v in schema.metadata.items()}
    assert meta["drawdown.kind"] == "readings" and meta["drawdown.schema_version"] == "1"
    truth = json.loads((fleet / "van-001" / "truth.json").read_text())
    assert meta["drawdown.timezone"] == truth["site"]["timezone"]
    col = pf.metadata.row_group(0).column(schema.names.index("t"))
    assert PARQUET_OPTIONS["column_encoding"]["t"] in col.encodings
    channels = set(pf.read(columns=["channel"]).column("channel").to_pylist())
    assert {"battery", "solar", "load", "alternator"} <= channels
    assert pf.metadata.num_rows == truth["readings"]["rows"] == len(channels) * DAYS * 86400 // INTERVAL


def test_each_vehicle_imports_with_nothing_rejected_and_round_trips(fleet, tmp_path, capsys):
    for name in ("van-001", "van-002", "van-003", "van-004"):
        src = fleet / name / "readings.parquet"
        base = ["--store", str(tmp_path / f"{name}.sqlite"), "--system", str(fleet / name / "system.toml")]
        assert main([*base, "import", "--json", str(src)]) == 0
        got = json.loads(capsys.readouterr().out)["files"][0]
        assert got["rows_rejected"] == 0
        assert got["rows_stored"] == pq.ParquetFile(src).metadata.num_rows
        assert main([*base, "report", "--json"]) == 0
        report = json.loads(capsys.readouterr().out)
        assert len(report["days"]) >= DAYS - 1
        assert report["battery"]["rated_Ah"] == json.loads((fleet / name / "truth.json").read_text())["rated_Ah"]
        back = tmp_path / f"{name}-back.parquet"
        assert main([*base, "export", "readings", "--format", "parquet", "--out", str(back)]) == 0
        capsys.readouterr()
        # the same rows, the same metadata: the file was written as the export writes
        assert pq.read_table(back).equals(pq.read_table(src))
        assert pq.ParquetFile(back).schema_arrow.metadata == pq.ParquetFile(src).schema_arrow.metadata
        assert back.read_bytes() == src.read_bytes()


def test_truth_capacity_fades_month_over_month_by_the_stated_fade(fleet):
    for name, t in _truths(fleet).items():
        months = t["usable_Ah_by_month"]
        assert [m["month"] for m in months] == ["2025-09", "2025-10"], name
        assert sum(m["days"] for m in months) == DAYS
        per_day = t["rated_Ah"] * t["fade_pct_per_month"] / 100.0 / 30.4375
        assert t["fade_Ah_per_day"] == pytest.approx(per_day)
        days_between = months[0]["days"]  # first day of September's part to 1 October
        assert months[1]["usable_Ah_start"] == pytest.approx(months[0]["usable_Ah_start"] - per_day * days_between)
        assert t["usable_Ah_end"] == pytest.approx(t["usable_Ah_start"] - per_day * (DAYS - 1))
        if t["fade_pct_per_month"] > 0:
            assert months[1]["usable_Ah_mean"] < months[0]["usable_Ah_mean"]
        assert t["battery"]["usable_Ah"] == pytest.approx(t["usable_Ah_start"])


def test_vehicles_differ(fleet):
    truths = _truths(fleet)
    kinds = {(t["chemistry"], t["nominal_V"]) for t in truths.values()}
    assert len(kinds) >= 3
    assert len({t["rated_Ah"] for t in truths.values()}) >= 2 or len({t["chemistry"] for t in truths.values()}) >= 2
    assert len({t["fade_pct_per_month"] for t in truths.values()}) == N
    for t in truths.values():  # a 24 V bank is two 12 V blocks
        assert t["nominal_V"] == pytest.approx((12.8 if t["chemistry"] == "lifepo4" else 12.0) * t["blocks_12V"])


def test_same_seed_same_fleet_other_seed_other_fleet(fleet, tmp_path, capsys):
    again = _fleet(tmp_path / "again", 7, capsys)
    other = _fleet(tmp_path / "other", 8, capsys)
    assert [v["name"] for v in again["vehicles"]] == [v["name"] for v in other["vehicles"]]
    for v in again["vehicles"]:
        a = (tmp_path / "again" / v["path"])
        assert (a / "readings.parquet").read_bytes() == (fleet / v["path"] / "readings.parquet").read_bytes()
        assert (a / "truth.json").read_text() == (fleet / v["path"] / "truth.json").read_text()
        assert (a / "system.toml").read_text() == (fleet / v["path"] / "system.toml").read_text()
    t7, t8 = _truths(fleet), _truths(tmp_path / "other")
    assert [t["fade_pct_per_month"] for t in t7.values()] != [t["fade_pct_per_month"] for t in t8.values()]
    assert [t["consumed_Ah_by_day"] for t in t7.values()] != [t["consumed_Ah_by_day"] for t in t8.values()]


def test_a_vehicle_is_the_same_in_a_smaller_fleet():
    big, small = sim_fleet.fleet_specs(9, 3), sim_fleet.fleet_specs(2, 3)
    assert big[:2] == small


def test_fade_is_in_the_physics():
    """The state of charge moves by I dt / C(t): on small discharge currents (below the Peukert reference
    current I_H = C/20, where the correction is 1; docs/peukert.md) the implied capacity is the day's."""
    fade = 3.0  # Ah a day: large, to be seen over a few days
    sim = simulate("autumn-van", days=6, capacity_fade_Ah_per_day=fade)
    run = sim.run
    soc_start = np.concatenate([[sim.soc0], run.soc_end[:-1]])
    dsoc = run.soc_end - soc_start
    c0 = sim.bank.capacity_Ah
    small = (run.net_A < -0.5) & (-run.net_A < 0.9 * (c0 - 6 * fade) / 20) & (soc_start < 0.999) & (run.soc_end > 0.03)
    implied = run.net_A * sim.dt_s / 3600.0 / np.where(dsoc != 0, dsoc, np.nan)
    by_day = sim.truth["battery"]["usable_Ah_by_day"]
    assert [round(d["usable_Ah"], 6) for d in by_day] == [round(c0 - fade * d, 6) for d in range(6)]
    starts = [int(round((np.datetime64(d["from"][:-1]) - np.datetime64(sim.truth["start"][:-1]))
                        / np.timedelta64(60, "s"))) for d in by_day] + [len(dsoc)]
    for d in range(6):
        sel = small[starts[d]:starts[d + 1]]
        assert sel.sum() > 50
        assert np.nanmedian(implied[starts[d]:starts[d + 1]][sel]) == pytest.approx(c0 - fade * d, rel=1e-6)
    # and the faded bank ends lower than the same trip on the unfaded bank
    plain = simulate("autumn-van", days=6)
    assert run.soc_end[-1] < plain.run.soc_end[-1]
    assert "usable_Ah_by_day" not in plain.truth["battery"]


def test_no_fade_is_the_old_simulator():
    a = simulate("spring-truck", days=3)
    b = simulate("spring-truck", days=3, capacity_fade_Ah_per_day=0.0)
    assert np.array_equal(a.run.soc_end, b.run.soc_end) and a.truth == b.truth


@pytest.mark.parametrize("argv, words", [
    (["--fleet", "0", "--days", "3"], ["--fleet", "at least 1"]),
    (["--fleet", "2", "--days", "0"], ["--days", "at least 1"]),
    (["--fleet", "2", "--days", "3", "--interval", "0"], ["--interval"]),
    (["--days", "3"], ["--scenario", "--fleet"]),
])
def test_bad_input_exits_2_naming_the_option(argv, words, tmp_path, capsys):
    assert main(["simulate", *argv, "--out", str(tmp_path / "f")]) == 2
    err = capsys.readouterr().err
    for w in words:
        assert w in err
    assert not (tmp_path / "f" / "fleet.json").exists()


def test_out_that_is_a_file_exits_2(tmp_path, capsys):
    f = tmp_path / "a-file"
    f.write_text("x")
    assert main(["simulate", "--fleet", "2", "--days", "2", "--out", str(f)]) == 2
    err = capsys.readouterr().err
    assert "--out" in err and "folder" in err
    assert f.read_text() == "x"


@pytest.mark.slow
def test_deep_cycling_vans_get_a_capacity_estimate(tmp_path, capsys):
    """Over 30 days, the project's own capacity estimate sees most banks, and its 95 % interval holds the
    true (faded) capacity of the period on most of those (docs/capacity.md)."""
    folder = tmp_path / "fleet"
    assert main(["--quiet", "simulate", "--fleet", "6", "--days", "30", "--interval", "60", "--seed", "1",
                 "--out", str(folder)]) == 0
    estimated = held = 0
    for name, t in _truths(folder).items():
        base = ["--store", str(tmp_path / f"{name}.sqlite"), "--system", str(folder / name / "system.toml")]
        assert main([*base, "import", str(folder / name / "readings.parquet")]) == 0
        capsys.readouterr()
        assert main([*base, "report", "--json"]) == 0
        b = json.loads(capsys.readouterr().out)["battery"]
        if b["usable_Ah"] is not None:
            estimated += 1
            lo, hi = b["usable_Ah_ci95"]
            held += lo - 0.05 * t["rated_Ah"] <= t["usable_Ah_start"] and t["usable_Ah_end"] <= hi + 0.05 * t["rated_Ah"]
    assert estimated >= 4
    assert held >= estimated - 1
