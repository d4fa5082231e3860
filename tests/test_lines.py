"""Line parsers: delimited with a header or fixed columns, key=value, JSON lines, NMEA, detection.

Column meaning comes from collector.columns.classify_column (shared with the
file importer); these tests check the live parsers use it and handle what a
serial line really delivers: repeated headers, garbage, cut lines, units.
"""

from __future__ import annotations

import math

import pytest

from drawdown.collector.columns import ColumnSpec
from drawdown.collector.lines import (AutoParser, DelimitedParser, JsonLinesParser, KeyValueParser, NmeaParser,
                             first_line_is_whole, guess_format, parse_columns_option, parse_time)

T0 = 1_767_225_600.0  # 2026-01-01T00:00:00Z


def test_csv_header_with_units_is_classified_and_scaled():
    p = DelimitedParser()
    assert p.feed("time,Voltage (V),Current (mA),Temp (°C)", 1.0) == ([], [])
    (r,), rejects = p.feed(f"{T0},12.84,-4200,18.5", 5.0)
    assert rejects == []
    assert (r.t_s, r.voltage_V, r.current_A, r.temperature_C) == (T0, 12.84, pytest.approx(-4.2), 18.5)
    assert not r.host_stamped


def test_csv_multi_channel_header_gives_one_reading_per_channel():
    p = DelimitedParser()
    p.feed("battery_voltage_V;battery_current_A;solar_current_A", 1.0)
    readings, _ = p.feed("13.1;2.5;6.0", 7.0)
    assert {(r.channel, r.current_A) for r in readings} == {("battery", 2.5), ("solar", 6.0)}
    assert all(r.host_stamped and r.t_s == 7.0 for r in readings)


def test_csv_repeated_header_is_neither_data_nor_rejected():
    p = DelimitedParser()
    p.feed("voltage_V,current_A", 1.0)
    p.feed("12.8,-1", 2.0)
    assert p.feed("voltage_V,current_A", 3.0) == ([], [])


def test_csv_line_before_any_header_is_rejected_asking_for_columns():
    _, rejects = DelimitedParser().feed("12.8,-1.0", 1.0)
    assert "pass --columns" in rejects[0][1]


def test_csv_fixed_columns_option_with_a_skipped_column_and_milliamps():
    p = DelimitedParser(columns=parse_columns_option("voltage_V,-,solar.current_mA"))
    (r1, r2), _ = p.feed("12.8,999,1500", 1.0)
    assert (r1.channel, r1.voltage_V) == ("battery", 12.8)
    assert (r2.channel, r2.current_A) == ("solar", pytest.approx(1.5))


def test_columns_option_with_an_unknown_name_says_what_is_allowed():
    with pytest.raises(ValueError, match="is not a quantity; use \\[CHANNEL.\\]NAME"):
        parse_columns_option("voltage_V,wobble")


def test_csv_noise_that_looks_like_a_header_does_not_replace_the_header():
    p = DelimitedParser()
    p.feed("voltage_V,current_A", 1.0)
    for noise in ('$IIXDR,U,12.85,V,BATT1*00', '{"voltage_V": 12.', "U,V"):
        p.feed(noise, 2.0)
    (r,), _ = p.feed("12.9,-2", 3.0)
    assert r.voltage_V == 12.9


def test_csv_wrong_field_count_and_non_numbers_are_rejected_with_reasons():
    p = DelimitedParser()
    p.feed("voltage_V,current_A", 1.0)
    assert "3 fields, the header has 2" in p.feed("1,2,3", 1.0)[1][0][1]
    assert "not a number" in p.feed("12.x,2", 1.0)[1][0][1]


def test_csv_power_without_current_becomes_current_from_the_channel_voltage():
    p = DelimitedParser()
    p.feed("voltage_V,power_W", 1.0)
    (r,), _ = p.feed("12.5,50", 1.0)
    assert r.current_A == pytest.approx(4.0)  # I = P / V


def test_keyvalue_short_keys_units_and_an_ignored_key():
    (r,), rejects = KeyValueParser().feed("V=12.84 I=-4200mA T=18.5 SOC=87 seq=5", 3.0)
    assert rejects == []
    assert (r.voltage_V, r.current_A, r.temperature_C, r.soc_pct) == (12.84, pytest.approx(-4.2), 18.5, 87.0)


def test_keyvalue_t_with_an_epoch_is_the_device_time():
    (r,), _ = KeyValueParser().feed(f"t={T0:.0f},V=12.8", 3.0)
    assert r.t_s == T0 and not r.host_stamped


def test_keyvalue_line_with_nothing_we_store_is_rejected():
    _, rejects = KeyValueParser().feed("status=OK relay=1", 1.0)
    assert "no key=value pair we store" in rejects[0][1]


def test_jsonl_nested_channels_and_iso_time():
    line = '{"time": "2026-01-01T00:00:00Z", "battery": {"voltage_V": 13.2}, "solar": {"current_A": 5}}'
    readings, _ = JsonLinesParser().feed(line, 9.0)
    assert {(r.channel, r.t_s) for r in readings} == {("battery", T0), ("solar", T0)}


def test_jsonl_channel_key_and_epoch_milliseconds():
    (r,), _ = JsonLinesParser().feed(f'{{"channel": "fridge", "t": {T0 * 1000:.0f}, "current_A": -3.1}}', 9.0)
    assert (r.channel, r.t_s, r.current_A) == ("fridge", T0, -3.1)


def test_jsonl_invalid_json_and_non_objects_are_rejected():
    assert JsonLinesParser().feed('{"voltage_V": 12.', 1.0)[1][0][1] == "not valid JSON"
    assert "must be an object" in JsonLinesParser().feed("[1, 2]", 1.0)[1][0][1]


def test_nmea_parser_skips_other_sentences_and_rejects_a_bad_checksum():
    p = NmeaParser()
    assert p.feed("$GPGGA,123519,4807.038,N,01131.000,E,1,08,0.9,545.4,M,46.9,M,,*47", 1.0) == ([], [])
    assert "checksum mismatch" in p.feed("$SDXDR,C,23.15,C,WTHI*71", 1.0)[1][0][1]


def test_nmea_parser_reads_the_docs_battery_sentence():
    # docs/standards.md#check-values sentence (checksum 0x40)
    (r,), _ = NmeaParser().feed("$IIXDR,U,12.85,V,BATT1,I,-4.2,A,BATT1,C,18.5,C,BATT1*40", 4.0)
    assert (r.channel, r.voltage_V, r.current_A, r.temperature_C) == ("battery", 12.85, -4.2, 18.5)


@pytest.mark.parametrize("line, fmt", [
    ("$IIXDR,U,12.85,V,BATT1*3B", "nmea"),
    ('{"voltage_V": 12.8}', "jsonl"),
    ("V=12.8 I=-3", "keyvalue"),
    ("12.8,-3.0,18", "csv"),
    ("", None),
])
def test_guess_format_of_one_line(line, fmt):
    assert guess_format(line) == fmt


def test_auto_parser_votes_over_noise_and_parses_the_held_lines():
    detected = []
    p = AutoParser(vote_lines=3, on_detect=detected.append)
    out = [p.feed(line, float(k)) for k, line in enumerate(
        ["!!##", "V=12.1 I=1", "V=12.2 I=1", "garbage here", "V=12.3 I=1"])]
    assert detected == ["keyvalue"]
    readings = [r for got, _ in out for r in got]
    assert [r.voltage_V for r in readings] == [12.1, 12.2, 12.3]
    assert [r.t_s for r in readings] == [1.0, 2.0, 4.0]  # each line keeps its arrival time


def test_first_line_after_connect_is_trusted_only_when_it_marks_its_own_start():
    assert first_line_is_whole("$IIXDR,U,12.85,V,BATT1*40")
    assert first_line_is_whole('{"voltage_V": 12.8}')
    assert first_line_is_whole("Voltage (V),Current (A)")
    assert not first_line_is_whole("2.85,-4.2")
    assert not first_line_is_whole("age_V=12.8")


def test_parse_time_counter_values_are_not_times():
    assert parse_time(12345) is None  # an uptime counter, not an epoch
    assert parse_time("2026-01-01T01:00:00+01:00") == T0
    assert parse_time(T0 * 1000) == T0


def test_line_longer_than_the_limit_is_rejected_not_parsed():
    _, rejects = KeyValueParser().feed("V=1 " * 2000, 1.0)
    assert "longer than" in rejects[0][1]


def test_classifier_from_collector_columns_is_what_the_header_uses():
    p = DelimitedParser()
    p.feed("PV W,Battery Voltage", 1.0)
    assert p.columns == [ColumnSpec("solar", "power_W", 1.0), ColumnSpec("battery", "voltage_V", 1.0)]
    readings, _ = p.feed("60,12", 1.0)
    # solar power without a solar voltage: its current stays missing (never guessed), not an error
    assert {r.channel for r in readings} == {"battery"}
    assert not math.isnan(readings[0].voltage_V)
