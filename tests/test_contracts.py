"""The docs/contracts.md contracts, end to end through the real command line.

One simulated trip goes through simulate -> import -> status -> report -> size, and a
wire run, each with --json; every key docs/contracts.md lists must be present, stdout must hold
exactly one JSON object, and the exit codes must be the contract's (0 ok, 2 bad input).
"""

from __future__ import annotations

import json

import pytest

from drawdown.cli import main


def run_json(capsys, argv: list[str]) -> tuple[int, dict]:
    code = main(argv)
    out = capsys.readouterr().out
    return code, json.loads(out)  # raises if stdout is not exactly one JSON document


@pytest.fixture(scope="module")
def trip(tmp_path_factory):
    folder = tmp_path_factory.mktemp("trip")
    log = folder / "trip.csv"
    assert main(["simulate", "--scenario", "spring-truck", "--days", "6", "--interval", "60",
                 "--out", str(log)]) == 0
    return folder, log


def _base(folder) -> list[str]:
    return ["--store", str(folder / "readings.sqlite"), "--system", str(folder / "system.toml")]


def test_import_json_has_the_contract_keys_and_is_idempotent(trip, capsys):
    folder, log = trip
    code, first = run_json(capsys, [*_base(folder), "import", str(log), "--json"])
    assert code == 0
    entry = first["files"][0]
    for key in ("path", "rows_stored", "rows_rejected", "rejected_by_reason", "already_imported", "channels",
                "sign_inverted", "sample_interval_s", "gaps", "quarantine"):
        assert key in entry, key
    assert entry["rows_stored"] > 0 and entry["already_imported"] is False
    code, again = run_json(capsys, [*_base(folder), "import", str(log), "--json"])
    assert code == 0 and again["files"][0]["already_imported"] is True


def test_status_json_lists_every_channel(trip, capsys):
    folder, log = trip
    main([*_base(folder), "import", str(log)])
    capsys.readouterr()
    code, status = run_json(capsys, [*_base(folder), "status", "--json"])
    assert code == 0 and "store" in status
    assert {"battery", "solar", "alternator"} <= set(status["channels"])
    for info in status["channels"].values():
        assert {"rows", "first", "last"} <= set(info)


def test_report_json_has_the_contract_keys(trip, capsys):
    folder, log = trip
    main([*_base(folder), "import", str(log)])
    capsys.readouterr()
    code, r = run_json(capsys, [*_base(folder), "report", "--json"])
    assert code == 0
    assert {"start", "end", "days"} <= set(r["period"])
    assert {"rows_stored", "rows_rejected", "gaps"} <= set(r["data_quality"])
    for day in r["days"]:
        assert {"date", "complete", "consumed_Ah", "consumed_Wh", "charged_Ah", "soc_min_pct",
                "soc_end_pct"} <= set(day)
        assert {"solar", "alternator", "shore", "other"} <= set(day["charged_Ah"])
    assert {"rated_Ah", "usable_Ah", "usable_Ah_ci95", "state_of_health_pct", "peukert_k",
            "internal_resistance_ohm"} <= set(r["battery"])
    assert {"performance_ratio", "days"} <= set(r["solar"])
    for day in r["solar"]["days"]:
        assert {"date", "measured_Wh", "expected_Wh", "performance_ratio", "saturated_fraction"} <= set(day)
    # A value that cannot be estimated is null with a reason beside it, never a made-up number.
    for section in (r["battery"], r["solar"], *r["days"], *r["solar"]["days"]):
        for key, value in section.items():
            if value is None and not key.endswith("_why"):
                assert f"{key}_why" in section, key


def test_size_json_has_the_contract_keys_and_safe_runs(trip, capsys):
    folder, log = trip
    main([*_base(folder), "import", str(log)])
    capsys.readouterr()
    code, s = run_json(capsys, [*_base(folder), "size", "--autonomy-days", "2", "--json"])
    assert code == 0
    assert {"capacity_Ah", "chemistry"} <= set(s["battery"])
    assert "array_W" in s["solar"] and "current_A" in s["dc_dc_charger"]
    assert "continuous_W" in s["inverter"]
    assert {"days_p50", "days_p90"} <= set(s["autonomy"])
    assert s["assumptions"] and s["cautions"]
    assert any("qualified installer" in c for c in s["cautions"])
    for run in s["runs"]:
        assert {"name", "current_A", "length_m", "cross_section_mm2", "awg", "voltage_drop_pct", "fuse_A"} <= set(run)
        if run["fuse_A"] is not None and run.get("ampacity_A") is not None:
            assert run["fuse_A"] <= run["ampacity_A"]  # a fuse never exceeds what its cable carries


def test_wire_json_has_the_contract_keys(capsys):
    code, w = run_json(capsys, ["wire", "--current", "20", "--length", "5", "--voltage", "12", "--json"])
    assert code == 0
    assert {"cross_section_mm2", "awg", "voltage_drop_pct", "fuse_A", "ampacity_A"} <= set(w)
    assert w["voltage_drop_pct"] <= 3.0 and 1.25 * 20 <= w["fuse_A"] <= w["ampacity_A"]


def test_bad_usage_exits_2(tmp_path, capsys):
    garbage = tmp_path / "garbage.csv"
    garbage.write_bytes(bytes(range(256)) * 8)
    assert main(["--store", str(tmp_path / "s.sqlite"), "import", str(garbage)]) == 2
    assert main(["wire", "--current", "20", "--length", "0", "--voltage", "12"]) == 2
    assert main(["simulate", "--scenario", "no-such-trip", "--days", "1", "--out", str(tmp_path / "x.csv")]) == 2
