"""system.toml validation: the docs/contracts.md#system-description schema is a contract."""

from __future__ import annotations

import pytest

from drawdown.analysis.system import SystemError_, parse_system

# The example from docs/contracts.md#system-description, verbatim: it must always validate.
DESIGN_EXAMPLE = """
[site]
latitude_deg = 61.2
longitude_deg = 7.1
timezone = "Europe/Oslo"
[battery]
chemistry = "lifepo4"
nominal_voltage_V = 12.8
rated_capacity_Ah = 200
rated_hours = 20
[[solar]]
peak_power_W = 300
tilt_deg = 0
azimuth_deg = 180
controller = "mppt"
[[charger]]
source = "alternator"
max_current_A = 30
[[load]]
name = "compressor fridge"
power_W = 45
hours_per_day = 9
"""


def test_design_example_validates():
    system = parse_system(DESIGN_EXAMPLE)
    assert system.site.timezone == "Europe/Oslo"
    assert system.battery.rated_current_A == pytest.approx(10.0)  # C20 / 20 h
    assert system.solar[0].peak_power_W == 300
    assert system.charger[0].source == "alternator"
    assert system.load[0].hours_per_day == 9


def test_unknown_key_is_an_error_naming_it():
    text = DESIGN_EXAMPLE.replace("rated_hours = 20", "rated_hours = 20\nrated_capasity_Ah = 100")
    with pytest.raises(SystemError_, match=r"battery\.rated_capasity_Ah: unknown key"):
        parse_system(text, source="van/system.toml")


def test_out_of_range_value_names_key_value_and_range():
    text = DESIGN_EXAMPLE.replace("latitude_deg = 61.2", "latitude_deg = 161.2")
    with pytest.raises(SystemError_, match=r"site\.latitude_deg = 161\.2: .*less than or equal to 90"):
        parse_system(text)


def test_bad_choice_lists_allowed_values():
    text = DESIGN_EXAMPLE.replace('chemistry = "lifepo4"', 'chemistry = "lithium"')
    with pytest.raises(SystemError_, match=r"battery\.chemistry = 'lithium'.*'lifepo4'"):
        parse_system(text)


def test_missing_required_key_is_named():
    text = DESIGN_EXAMPLE.replace("rated_capacity_Ah = 200\n", "")
    with pytest.raises(SystemError_, match=r"battery\.rated_capacity_Ah: required key is missing"):
        parse_system(text)


def test_error_in_second_array_names_its_index():
    text = DESIGN_EXAMPLE + '\n[[solar]]\npeak_power_W = -5\n'
    with pytest.raises(SystemError_, match=r"solar\[1\]\.peak_power_W = -5"):
        parse_system(text)


def test_unknown_timezone_is_rejected():
    text = DESIGN_EXAMPLE.replace("Europe/Oslo", "Europe/Atlantis")
    with pytest.raises(SystemError_, match=r"site\.timezone.*unknown IANA timezone"):
        parse_system(text)


def test_invalid_toml_names_the_file():
    with pytest.raises(SystemError_, match=r"^cabin\.toml: not valid TOML"):
        parse_system("[site\nlatitude_deg = 1", source="cabin.toml")


def test_chemistry_defaults_scale_with_bank_voltage():
    # Sources beside CHEMISTRY_DEFAULTS: LFP 3.50 V/cell (3.45-3.55 V/cell end of charge,
    # common practice) and 0.05 It (IEC 61960-3 standard charge, from memory); lead-acid
    # 2.20 V/cell (at or below every float setting) and 2 % of C (1-3 % in common use).
    lfp24 = parse_system(DESIGN_EXAMPLE.replace("nominal_voltage_V = 12.8", "nominal_voltage_V = 25.6"))
    assert lfp24.battery.effective_full_voltage_V == pytest.approx(8 * 3.50)
    assert lfp24.battery.effective_full_current_A == pytest.approx(0.05 * 200)
    agm = parse_system(DESIGN_EXAMPLE.replace('"lifepo4"', '"agm"').replace("12.8", "24"))
    assert agm.battery.effective_full_voltage_V == pytest.approx(12 * 2.20)
    assert 0.01 * 200 <= agm.battery.effective_full_current_A <= 0.03 * 200
    assert agm.battery.effective_max_dod == 0.5
    assert agm.battery.reserve_pct == pytest.approx(50.0)
    assert lfp24.battery.reserve_pct == pytest.approx(20.0)
    assert agm.battery.full_hold_s == 120


def test_every_chemistry_default_names_its_source():
    # Each value in CHEMISTRY_DEFAULTS carries its source on its own line (issue 13).
    import inspect

    import drawdown.analysis.system as system_module

    src = inspect.getsource(system_module)
    block = src[src.index("CHEMISTRY_DEFAULTS: dict"):src.index("FULL_HOLD_S_DEFAULT =")]
    value_lines = [ln for ln in block.splitlines() if ln.strip().startswith('"') and ":" in ln
                   and not ln.strip().endswith("{")]
    assert len(value_lines) == 4 * 5
    assert all("#" in ln and len(ln.split("#", 1)[1].strip()) > 10 for ln in value_lines)


def test_full_charge_overrides_win_over_defaults():
    text = DESIGN_EXAMPLE.replace("rated_hours = 20", "rated_hours = 20\nfull_voltage_V = 13.9\n"
                                  "full_current_pct = 3\nfull_hold_s = 300")
    b = parse_system(text).battery
    assert b.effective_full_voltage_V == 13.9
    assert b.effective_full_current_A == pytest.approx(6.0)  # 3 % of 200 Ah
    assert b.full_hold_s == 300


@pytest.mark.parametrize(("old", "new", "value"), [("charged_voltage_V", "full_voltage_V", "14.0"),
                                                   ("tail_current_pct", "full_current_pct", "4"),
                                                   ("detection_time_s", "full_hold_s", "120")])
def test_old_full_charge_key_is_an_error_naming_the_new_key(old, new, value):
    text = DESIGN_EXAMPLE.replace("rated_hours = 20", f"rated_hours = 20\n{old} = {value}")
    with pytest.raises(SystemError_, match=rf"battery\.{old}: this key is now called {new}") as info:
        parse_system(text, source="van/system.toml")
    assert str(info.value).startswith("van/system.toml: invalid system description")


def test_old_key_outside_the_battery_table_is_just_unknown():
    text = DESIGN_EXAMPLE.replace("timezone = ", "tail_current_pct = 3\ntimezone = ")
    with pytest.raises(SystemError_, match=r"site\.tail_current_pct: unknown key"):
        parse_system(text)


def test_overrides_win_over_chemistry_defaults():
    text = DESIGN_EXAMPLE.replace("rated_hours = 20", "rated_hours = 20\npeukert_k = 1.08\ncharge_efficiency = 0.97")
    b = parse_system(text).battery
    assert b.effective_peukert_k == 1.08
    assert b.effective_charge_efficiency == 0.97


@pytest.mark.parametrize(("old", "new"), [("charged_voltage_V", "full_voltage_V"),
                                          ("tail_current_pct", "full_current_pct"),
                                          ("detection_time_s", "full_hold_s")])
def test_cli_exits_2_naming_the_new_key(tmp_path, capsys, old, new):
    from drawdown.cli import main

    bad = tmp_path / "BAD.toml"
    bad.write_text(DESIGN_EXAMPLE.replace("rated_hours = 20", f"rated_hours = 20\n{old} = 3"))
    for command in (["status"], ["size", "--json"]):
        code = main(["--store", str(tmp_path / "s.sqlite"), "--system", str(bad), *command])
        err = capsys.readouterr().err
        assert code == 2, command
        assert f"battery.{old}: this key is now called {new}" in err and str(bad) in err
