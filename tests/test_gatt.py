"""Bluetooth LE GATT decoding against the Bluetooth SIG GATT Specification Supplement (GSS).

Byte strings are built from the GSS formats (little-endian; docs/standards.md#bluetooth-gatt,
checked there via a docs mirror of the GSS): Voltage 0x2B18 uint16 in 1/64 V,
Electric Current 0x2AEE uint16 in 0.01 A, Power 0x2B05 uint24 in 0.1 W,
Temperature 0x2A6E sint16 in 0.01 degC, Battery Level 0x2A19 uint8 %.
"""

from __future__ import annotations

import struct

import pytest

from drawdown.analysis.system import parse_system
from drawdown.collector import gatt


def test_voltage_36_03_is_12_84375_V():
    # GSS Voltage: 0x0336 = 822, 822/64 = 12.84375 V (docs/standards.md#check-values)
    assert gatt.decode_voltage(bytes.fromhex("3603")) == 12.84375


def test_electric_current_d2_04_is_12_34_A():
    # GSS Electric Current: 0x04D2 = 1234 x 0.01 A
    assert gatt.decode_electric_current(bytes.fromhex("D204")) == pytest.approx(12.34)


def test_temperature_30_f8_is_minus_20_degC():
    # GSS Temperature: sint16 0xF830 = -2000 x 0.01 degC
    assert gatt.decode_temperature(bytes.fromhex("30F8")) == pytest.approx(-20.00)


def test_power_d2_04_00_is_123_4_W():
    # GSS Power: uint24 0x0004D2 = 1234 x 0.1 W
    assert gatt.decode_power(bytes.fromhex("D20400")) == pytest.approx(123.4)


def test_ffff_means_voltage_and_current_not_known():
    assert gatt.decode_voltage(b"\xff\xff") is None
    assert gatt.decode_electric_current(b"\xff\xff") is None


def test_temperature_8000_and_power_fffffe_ffffff_mean_not_known():
    assert gatt.decode_temperature(bytes.fromhex("0080")) is None
    assert gatt.decode_power(bytes.fromhex("FEFFFF")) is None
    assert gatt.decode_power(bytes.fromhex("FFFFFF")) is None


def test_battery_level_above_100_is_invalid():
    assert gatt.decode_battery_level(bytes([87])) == 87.0
    assert gatt.decode_battery_level(bytes([101])) is None


def test_short_value_is_an_error_naming_the_characteristic():
    with pytest.raises(gatt.GattError, match="Voltage: 1 bytes, the GSS format needs 2"):
        gatt.decode_voltage(b"\x36")


def test_unsigned_current_takes_its_sign_from_the_channel_role():
    """GSS Electric Current is unsigned: a charge source delivers (+), a load draws (-), and on the
    battery channel the direction is unknown, so nothing is stored (documented in collector.gatt)."""
    data = bytes.fromhex("D204")
    assert gatt.decode_standard("0x2AEE", data, channel="solar").current_A == pytest.approx(12.34)
    assert gatt.decode_standard("0x2AEE", data, channel="load").current_A == pytest.approx(-12.34)
    d = gatt.decode_standard("0x2AEE", data, channel="battery")
    assert d.current_A is None and d.direction_unknown


def test_uuid_forms_normalise_to_the_128_bit_form():
    full = "00002b18-0000-1000-8000-00805f9b34fb"
    assert gatt.normalise_uuid("0x2B18") == full
    assert gatt.normalise_uuid("2b18") == full
    assert gatt.normalise_uuid(0x2B18) == full
    assert gatt.normalise_uuid(full.upper()) == full


def test_user_layout_from_system_toml_decodes_a_signed_current_and_a_voltage():
    """A device's own characteristic: int16 current in mA (signed: direction included) at offset 0,
    uint16 voltage in mV at offset 2, little-endian, described in system.toml [ble]."""
    system = parse_system("""
[site]
latitude_deg = 61.2
longitude_deg = 7.1
[battery]
chemistry = "lifepo4"
nominal_voltage_V = 12.8
rated_capacity_Ah = 200
[[ble.characteristic]]
uuid = "0000ff01-0000-1000-8000-00805f9b34fb"
channel = "battery"
[[ble.characteristic.fields]]
quantity = "current_A"
offset = 0
type = "i16"
scale = 0.001
[[ble.characteristic.fields]]
quantity = "voltage_V"
offset = 2
type = "u16"
scale = 0.001
""")
    layouts = gatt.layouts_from_system(system.ble)
    channel, fields = layouts["0000ff01-0000-1000-8000-00805f9b34fb"]
    d = gatt.decode_layout(struct.pack("<hH", -4200, 13280), fields)
    assert channel == "battery"
    assert d.current_A == pytest.approx(-4.2)
    assert d.voltage_V == pytest.approx(13.28)


def test_user_layout_big_endian_u24_and_f32_fields():
    f24 = gatt.FieldLayout("power_W", 0, "u24", 0.1, big_endian=True)
    f32 = gatt.FieldLayout("temperature_C", 3, "f32")
    data = bytes.fromhex("0004D2") + struct.pack("<f", 18.5)
    assert gatt.decode_field(data, f24) == pytest.approx(123.4)
    assert gatt.decode_field(data, f32) == pytest.approx(18.5)


def test_user_layout_all_ones_field_is_not_known():
    assert gatt.decode_field(b"\xff\xff", gatt.FieldLayout("voltage_V", 0, "u16", 0.001)) is None


def test_user_layout_shorter_than_its_fields_is_an_error_naming_the_offset():
    with pytest.raises(gatt.GattError, match="offset 2 \\(u16\\) needs 4 bytes, the value has 3"):
        gatt.decode_field(b"\x00\x01\x02", gatt.FieldLayout("voltage_V", 2, "u16"))
