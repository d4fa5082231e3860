"""system.toml validation: the DESIGN.md schema is a contract."""

from __future__ import annotations

import pytest

from analysis.system import SystemError_, parse_system

# The example from DESIGN.md, verbatim: it must always validate.
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
    # Common practice (FIELDREF §2): LFP charged threshold ~14.0 V per 12 V
    # block; lead-acid ~13.2 V per 12 V block; tail 2-5 % of C.
    lfp24 = parse_system(DESIGN_EXAMPLE.replace("nominal_voltage_V = 12.8", "nominal_voltage_V = 25.6"))
    assert lfp24.battery.effective_charged_voltage_V == pytest.approx(28.0)
    agm = parse_system(DESIGN_EXAMPLE.replace('"lifepo4"', '"agm"').replace("12.8", "24"))
    assert agm.battery.effective_charged_voltage_V == pytest.approx(26.4)
    assert agm.battery.effective_max_dod == 0.5
    assert 0.02 * 200 <= lfp24.battery.effective_tail_current_A <= 0.05 * 200


def test_overrides_win_over_chemistry_defaults():
    text = DESIGN_EXAMPLE.replace("rated_hours = 20", "rated_hours = 20\npeukert_k = 1.08\ncharge_efficiency = 0.97")
    b = parse_system(text).battery
    assert b.effective_peukert_k == 1.08
    assert b.effective_charge_efficiency == 0.97
