"""``drawdown wire`` through drawdown.cli.main, stdout captured."""

from __future__ import annotations

import json

import pytest

from drawdown.cli import main


def run_json(capsys, *argv):
    rc = main(["wire", *argv, "--json"])
    out = capsys.readouterr().out
    return rc, json.loads(out)


def test_wire_json_has_the_contract_keys(capsys):
    rc, j = run_json(capsys, "--current", "20", "--length", "5", "--voltage", "12")
    assert rc == 0
    assert {"cross_section_mm2", "awg", "voltage_drop_pct", "fuse_A", "ampacity_A"} <= set(j)
    assert {"assumptions", "cautions", "voltage_drop_V", "resistance", "placement", "metric", "awg_choice"} <= set(j)


def test_wire_json_values_obey_the_fuse_and_drop_rules(capsys):
    # NEC 210.20(A) 125 % rule and NEC 240.4 (from memory); 3 % drop (ISO 10133 / ABYC E-11).
    rc, j = run_json(capsys, "--current", "20", "--length", "5", "--voltage", "12")
    assert j["fuse_A"] == 25
    assert j["fuse_A"] <= j["ampacity_A"]
    assert j["voltage_drop_pct"] <= 3
    assert j["metric"]["voltage_drop_pct"] <= 3 and j["awg_choice"]["voltage_drop_pct"] <= 3


def test_wire_inverter_example_gives_4awg_and_150A_fuse(capsys):
    # docs/chargers.md (self-made worked sizing): 108.2 A at cut-off -> 150 A fuse -> 4 AWG 105 degC (160 A).
    rc, j = run_json(capsys, "--current", "108.2", "--length", "1", "--voltage", "12", "--ambient", "20")
    assert j["fuse_A"] == 150
    assert j["awg"] == "4"
    assert j["awg_choice"]["ampacity_table_A"] == 160


def test_wire_bundling_and_insulation_change_the_answer(capsys):
    _, j1 = run_json(capsys, "--current", "60", "--length", "0.5", "--voltage", "12")
    _, j2 = run_json(capsys, "--current", "60", "--length", "0.5", "--voltage", "12", "--bundled", "4",
                     "--insulation", "60")
    assert j2["cross_section_mm2"] > j1["cross_section_mm2"]
    assert j2["assumptions"]["derate_factors"]["bundling"] == 0.60


def test_wire_engine_space_is_an_assumption_in_the_output(capsys):
    _, j = run_json(capsys, "--current", "40", "--length", "1", "--voltage", "12", "--engine-space", "--ambient", "50")
    assert j["assumptions"]["engine_space"] is True
    assert j["assumptions"]["derate_factors"]["engine_space"] == 0.85


def test_wire_ten_percent_names_its_non_critical_source(capsys):
    _, j = run_json(capsys, "--current", "5", "--length", "8", "--voltage", "12", "--max-drop", "10")
    assert j["max_drop_pct"] == 10
    assert "non-critical" in j["drop_limit_source"]


def test_wire_impossible_run_exits_0_with_nulls_and_why(capsys):
    rc, j = run_json(capsys, "--current", "600", "--length", "10", "--voltage", "12")
    assert rc == 0
    assert j["cross_section_mm2"] is None and j["fuse_A"] is None
    assert "parallel" in j["cross_section_mm2_why"]


@pytest.mark.parametrize("argv,option", [
    (["--current", "-5", "--length", "2", "--voltage", "12"], "--current"),
    (["--current", "5", "--length", "0", "--voltage", "12"], "--length"),
    (["--current", "5", "--length", "2", "--voltage", "0"], "--voltage"),
    (["--current", "5", "--length", "2", "--voltage", "12", "--max-drop", "0"], "--max-drop"),
    (["--current", "5", "--length", "2", "--voltage", "12", "--bundled", "0"], "--bundled"),
    (["--current", "nan", "--length", "2", "--voltage", "12"], "--current"),
])
def test_wire_bad_input_exits_2_naming_the_option(capsys, argv, option):
    rc = main(["wire", *argv])
    cap = capsys.readouterr()
    assert rc == 2
    assert option in cap.err
    assert cap.out == ""


def test_wire_human_output_has_units_assumptions_and_caution(capsys):
    rc = main(["wire", "--current", "30", "--length", "3", "--voltage", "24"])
    out = capsys.readouterr().out
    assert rc == 0
    assert "mm²" in out and "mm2" not in out and "AWG" in out and " A" in out and " V" in out
    assert "Assumptions:" in out
    assert "qualified installer" in out
    assert "ABYC E-11" in out
