"""Column-name and unit detection (collector.columns)."""

from __future__ import annotations

import pytest

from drawdown.collector.columns import MAP_QUANTITIES, ColumnSpec, classify_column, normalise_channel, parse_map_option


@pytest.mark.parametrize(
    ("name", "expected"),
    [
        ("battery_current_A", ColumnSpec("battery", "current_A", 1.0)),
        ("solar_current_A", ColumnSpec("solar", "current_A", 1.0)),
        ("fridge_current_A", ColumnSpec("fridge", "current_A", 1.0)),
        ("house_voltage_mV", ColumnSpec("battery", "voltage_V", 0.001)),
        ("Current (mA)", ColumnSpec(None, "current_A", 0.001)),
        ("U[V]", ColumnSpec(None, "voltage_V", 1.0)),
        ("Volt", ColumnSpec(None, "voltage_V", 1.0)),
        ("voltage", ColumnSpec(None, "voltage_V", 1.0)),
        ("I", ColumnSpec(None, "current_A", 1.0)),
        ("amps", ColumnSpec(None, "current_A", 1.0)),
        ("Temp °C", ColumnSpec(None, "temperature_C", 1.0)),
        ("Temperature [°C]", ColumnSpec(None, "temperature_C", 1.0)),
        ("SOC %", ColumnSpec(None, "soc_pct", 1.0)),
        ("State of charge", ColumnSpec(None, "soc_pct", 1.0)),
        ("PV W", ColumnSpec("solar", "power_W", 1.0)),
        ("Power (kW)", ColumnSpec(None, "power_W", 1000.0)),
        ("Battery Voltage (V)", ColumnSpec("battery", "voltage_V", 1.0)),
        ("BatteryVoltage", ColumnSpec("battery", "voltage_V", 1.0)),
        ("time", ColumnSpec(None, "time", 1.0)),
        ("timestamp", ColumnSpec(None, "time", 1.0)),
        ("date time", ColumnSpec(None, "time", 1.0)),
        ("epoch_ms", ColumnSpec(None, "time", 0.001)),
    ],
)
def test_classify_column_recognises_common_headers(name, expected):
    assert classify_column(name) == expected


@pytest.mark.parametrize("name", ["Consumed Ah", "notes", "", "   ", "Energy (Wh)", "relay", "voltage (A)"])
def test_classify_column_returns_none_for_what_is_not_stored(name):
    assert classify_column(name) is None


def test_milliamps_scale_turns_raw_value_into_amps():
    spec = classify_column("Strom (mA)")
    assert spec is not None and spec.quantity == "current_A"
    assert -4200 * spec.scale == pytest.approx(-4.2)


def test_parse_map_option_plain_quantity():
    assert parse_map_option("Amps=current_A") == ("Amps", ColumnSpec(None, "current_A", 1.0))


def test_parse_map_option_with_channel_and_milli_unit():
    assert parse_map_option("I_sol=solar.current_mA") == ("I_sol", ColumnSpec("solar", "current_A", 0.001))


def test_parse_map_option_keeps_equals_sign_in_column_name():
    assert parse_map_option("a=b=voltage_V")[0] == "a=b"


def test_parse_map_option_unknown_quantity_lists_allowed():
    with pytest.raises(ValueError, match=r"--map 'x=furlongs'.*allowed: time, epoch_s"):
        parse_map_option("x=furlongs")


def test_parse_map_option_without_equals_names_the_option():
    with pytest.raises(ValueError, match=r"--map 'Amps'.*COLUMN=QUANTITY"):
        parse_map_option("Amps")


def test_every_map_quantity_parses():
    for q in MAP_QUANTITIES:
        assert parse_map_option(f"c={q}")[1].quantity in {"time", "voltage_V", "current_A", "power_W",
                                                           "temperature_C", "soc_pct", "ignore"}


def test_normalise_channel_rejects_unusable_names():
    with pytest.raises(ValueError, match="not usable"):
        normalise_channel("3; DROP TABLE")
    assert normalise_channel(" Solar ") == "solar"
