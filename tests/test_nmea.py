"""NMEA 0183 checksum and XDR decoding.

Check values: docs/standards.md#check-values (computed with a checksum routine; the second is a
public example from an open-source NMEA header), NMEA 0183 XDR field layout
from secondary descriptions (the standard itself was not read).
"""

from __future__ import annotations

import pytest

from drawdown.collector import nmea

# docs/standards.md#check-values check sentences
BATTERY = "$IIXDR,U,12.85,V,BATT1,I,-4.2,A,BATT1,C,18.5,C,BATT1*40"
WATER = "$SDXDR,C,23.15,C,WTHI*70"


def test_checksum_reproduces_the_docs_battery_sentence():
    assert nmea.with_checksum("IIXDR,U,12.85,V,BATT1,I,-4.2,A,BATT1,C,18.5,C,BATT1") == BATTERY


def test_checksum_reproduces_the_public_water_temperature_example():
    assert nmea.checksum("SDXDR,C,23.15,C,WTHI") == 0x70


def test_wrong_checksum_is_rejected_naming_both_values():
    with pytest.raises(nmea.NmeaError, match="sentence says 41, computed 40"):
        nmea.split_sentence(BATTERY[:-2] + "41")


def test_missing_checksum_is_rejected_when_required_and_accepted_when_not():
    body = BATTERY.split("*")[0]
    with pytest.raises(nmea.NmeaError, match="no checksum"):
        nmea.split_sentence(body)
    assert nmea.split_sentence(body, require_checksum=False)[0] == "IIXDR"


def test_sentence_longer_than_82_characters_is_rejected():
    with pytest.raises(nmea.NmeaError, match="longer than 82"):
        nmea.split_sentence(nmea.with_checksum("IIXDR" + ",U,12.85,V,BATT1" * 6))


def test_xdr_battery_groups_decode_to_voltage_current_temperature_of_the_battery():
    ms = nmea.parse_xdr(nmea.split_sentence(BATTERY))
    assert [(m.channel, m.quantity, m.value) for m in ms] == [
        ("battery", "voltage_V", 12.85), ("battery", "current_A", -4.2), ("battery", "temperature_C", 18.5)]


def test_xdr_unknown_transducer_name_becomes_its_own_channel():
    (m,) = nmea.parse_xdr(nmea.split_sentence(WATER))
    assert (m.channel, m.quantity, m.value) == ("wthi", "temperature_C", 23.15)


def test_second_battery_keeps_its_number_in_the_channel_name():
    assert nmea.transducer_channel("BATT2", "battery") == "batt2"
    assert nmea.transducer_channel("SOLAR", "battery") == "solar"


def test_xdr_fahrenheit_and_kelvin_are_converted_to_celsius():
    # 64.4 degF = 18 degC; 291.65 K = 18.5 degC (SI definitions)
    ms = nmea.parse_xdr(nmea.split_sentence(nmea.with_checksum("IIXDR,C,64.4,F,BATT1,C,291.65,K,BATT1")))
    assert ms[0].value == pytest.approx(18.0)
    assert ms[1].value == pytest.approx(18.5)


def test_xdr_voltage_with_a_wrong_unit_is_rejected():
    with pytest.raises(nmea.NmeaError, match="expected V"):
        nmea.parse_xdr(nmea.split_sentence(nmea.with_checksum("IIXDR,U,12.8,A,BATT1")))


def test_xdr_with_incomplete_groups_is_rejected():
    with pytest.raises(nmea.NmeaError, match="groups of 4"):
        nmea.parse_xdr(nmea.split_sentence(nmea.with_checksum("IIXDR,U,12.8,V")))


def test_xdr_pressure_groups_are_skipped_not_rejected():
    assert nmea.parse_xdr(nmea.split_sentence(nmea.with_checksum("IIXDR,P,1.013,B,BARO"))) == []
