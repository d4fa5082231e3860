"""Importing delimited text logs (collector.csv_file) and the ``drawdown import``/``status`` commands.

Every test uses a real SQLite store in a temporary folder and the hand-written sample logs in
fixtures/logs/. Outside references: UTC offsets and DST transitions from the IANA tz database
(via zoneinfo/pandas) -- Europe/Oslo is UTC+2 in summer, clocks go back 03:00 -> 02:00 on
2024-10-27 and forward 02:00 -> 03:00 on 2024-03-31; Unix epoch 1717236000 s is
2024-06-01T10:00:00Z (POSIX time definition).
"""

from __future__ import annotations

import csv
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from drawdown.collector.columns import parse_map_option
from drawdown.collector.csv_file import UnusableInput, import_file
from drawdown.collector.store import Store
from drawdown.cli import main
from systems import OSLO_LFP_SYSTEM

LOGS = Path(__file__).resolve().parent.parent / "fixtures" / "logs"



@pytest.fixture()
def store(tmp_path):
    with Store(tmp_path / "readings.sqlite") as st:
        yield st


def _quarantine_rows(path: str) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


# -- formats -----------------------------------------------------------------------------------

def test_semicolon_decimal_comma_milliamps_local_time(store):
    r = import_file(LOGS / "semicolon_decimal_comma_mA_local.csv", store, tz="Europe/Oslo")
    assert (r.delimiter, r.decimal) == (";", ",")
    assert r.rows_stored == 60 and r.rows_rejected == 0
    df = store.read(channels=["battery"])
    # 12:00 in Oslo in June is 10:00 UTC (CEST = UTC+2, IANA tz database)
    assert df["t"].iloc[0] == pd.Timestamp("2024-06-01T10:00:00Z")
    assert df["current_A"].iloc[0] == pytest.approx(-4.2, abs=1e-5)  # -4200 mA
    assert df["voltage_V"].iloc[0] == pytest.approx(12.600, abs=1e-5)
    assert df["temperature_C"].iloc[0] == pytest.approx(21.5, abs=1e-5)  # header in Latin-1 'Temp °C'
    assert r.sample_interval_s == pytest.approx(10.0)


def test_iso_offsets_multichannel(store):
    r = import_file(LOGS / "iso_offset_multichannel.csv", store)
    assert r.channels == ["alternator", "battery", "solar"]
    assert r.rows_stored == 8
    df = store.read()
    bat = df[df["channel"] == "battery"]
    # 08:00+02:00 and 06:03:00Z in one file both land on UTC, 30 s apart
    assert list(bat["t"].iloc[[0, 6]]) == [pd.Timestamp("2024-07-01T06:00:00Z"), pd.Timestamp("2024-07-01T06:03:00Z")]
    assert np.all(np.diff(bat["t"].astype("int64")) > 0)
    sol = df[df["channel"] == "solar"]
    assert sol["current_A"].iloc[3] == pytest.approx(5.5, abs=1e-5)
    assert bat["soc_pct"].iloc[0] == pytest.approx(81.0)
    assert np.isnan(sol["voltage_V"]).all()


def test_epoch_milliseconds_detected_by_magnitude(store):
    r = import_file(LOGS / "epoch_ms.csv", store)
    assert r.rows_stored == 5
    assert store.read()["t"].iloc[0] == pd.Timestamp("2024-06-01T10:00:00Z")  # 1717236000000 ms
    assert r.sample_interval_s == pytest.approx(1.0)


def test_epoch_seconds_detected_by_magnitude(store, tmp_path):
    p = tmp_path / "epoch_s.csv"
    p.write_text("unix,voltage_V,current_A\n1717236000,12.8,-1\n1717236060,12.8,-1\n")
    import_file(p, store)
    assert list(store.read()["t"]) == [pd.Timestamp("2024-06-01T10:00:00Z"), pd.Timestamp("2024-06-01T10:01:00Z")]


def test_separate_date_and_time_columns_and_power_to_current(store):
    r = import_file(LOGS / "power_only_solar.csv", store, tz="Europe/Oslo")
    assert r.channels == ["battery", "solar"]
    sol = store.read(channels=["solar"])
    assert sol["t"].iloc[0] == pd.Timestamp("2024-06-01T10:00:00Z")
    # 264 W at the bank's 13.20 V is 20.0 A (I = P / V)
    assert sol["current_A"].iloc[0] == pytest.approx(20.0, rel=1e-5)


def test_map_option_overrides_detection(store, tmp_path):
    p = tmp_path / "odd.csv"
    p.write_text("when,X1,X2\n2024-06-01T10:00:00Z,12.5,-3500\n2024-06-01T10:00:01Z,12.4,-3600\n")
    cmap = dict(parse_map_option(o) for o in ["when=time", "X1=voltage_V", "X2=house.current_mA"])
    r = import_file(p, store, column_map=cmap)
    assert r.channels == ["battery", "house"]
    assert store.read(channels=["house"])["current_A"].iloc[1] == pytest.approx(-3.6, abs=1e-5)


def test_channel_option_names_unnamed_columns(store):
    r = import_file(LOGS / "epoch_ms.csv", store, channel="house")
    assert r.channels == ["house"]


# -- data quality --------------------------------------------------------------------------------

def test_repeated_header_truncated_and_error_lines_counted_and_quarantined(store):
    r = import_file(LOGS / "repeated_header_truncated_error.csv", store, tz="Europe/Oslo")
    assert r.data_lines == 17
    assert r.header_lines == 2 and r.blank_lines == 1 and r.preamble_lines == 2
    assert r.rows_stored + r.rows_rejected == r.data_lines
    assert r.rejected_by_reason == {"bad_time": 1, "duplicate": 1, "implausible_voltage": 2,
                                    "non_numeric": 1, "wrong_field_count": 1}
    rows = _quarantine_rows(r.quarantine)
    assert [(int(x["line"]), x["reason"]) for x in rows] == [
        (6, "wrong_field_count"), (7, "non_numeric"), (12, "implausible_voltage"),
        (13, "implausible_voltage"), (15, "duplicate"), (18, "bad_time")]
    assert rows[0]["text"] == "2024-05-10 09:00:20,12.8"
    assert rows[1]["text"] == "2024-05-10 09:00:30,ERR,-2.6,95"
    assert Path(r.quarantine).parent == store.quarantine_dir


def test_out_of_order_rows_are_sorted_and_gaps_reported(store):
    r = import_file(LOGS / "repeated_header_truncated_error.csv", store, tz="UTC")
    assert r.out_of_order_rows == 1
    t = store.read()["t"]
    assert t.is_monotonic_increasing
    assert pd.Timestamp("2024-05-10T09:00:50Z") in set(t)
    assert [(g.start, g.seconds) for g in r.gaps] == [("2024-05-10T09:01:40+00:00", 480.0)]


def test_conflicting_lines_at_the_same_time_keep_the_first(store, tmp_path):
    p = tmp_path / "conflict.csv"
    p.write_text("time,voltage_V\n2024-06-01T10:00:00Z,12.5\n2024-06-01T10:00:00Z,12.9\n2024-06-01T10:00:01Z,12.5\n")
    r = import_file(p, store)
    assert r.rejected_by_reason == {"duplicate_time": 1}
    assert store.read()["voltage_V"].iloc[0] == pytest.approx(12.5)


def test_bounds_scale_with_nominal_voltage(store, tmp_path):
    p = tmp_path / "v.csv"
    p.write_text("time,voltage_V\n2024-06-01T10:00:00Z,12.5\n2024-06-01T10:00:01Z,30.0\n")
    assert import_file(p, store).rows_rejected == 0  # 30 V may be a 24 V bank charging
    with Store(tmp_path / "other.sqlite") as st2:
        r = import_file(p, st2, nominal_voltage_V=12.8)  # not on a 12 V bank (16 V is its ceiling)
    assert r.rejected_by_reason == {"implausible_voltage": 1}


def test_solar_array_voltage_is_not_held_to_the_bank_bound(store, tmp_path):
    # An MPPT controller's array side sits well above the bank: a 36-cell module's
    # Vmp is ~18 V and two in series ~36 V on a 12 V bank (common practice).
    p = tmp_path / "mppt.csv"
    p.write_text("time,battery_voltage_V,battery_current_A,solar_voltage_V,solar_current_A\n"
                 "2024-06-01T10:00:00Z,13.4,8.0,36.5,10.0\n"
                 "2024-06-01T10:00:01Z,13.4,8.1,36.4,10.1\n")
    r = import_file(p, store, nominal_voltage_V=12.8)
    assert r.rows_rejected == 0
    solar = store.read(channels=["solar"])
    assert solar["voltage_V"].iloc[0] == pytest.approx(36.5, abs=1e-4)


def test_solar_power_becomes_bank_current_at_the_bank_voltage(store, tmp_path):
    # I = P / V at the bank: 134 W into a 13.4 V bank is 10.0 A, whatever the array voltage.
    p = tmp_path / "mppt_power.csv"
    p.write_text("time,battery_voltage_V,solar_voltage_V,solar_power_W\n"
                 "2024-06-01T10:00:00Z,13.4,36.0,134.0\n")
    import_file(p, store, nominal_voltage_V=12.8)
    assert store.read(channels=["solar"])["current_A"].iloc[0] == pytest.approx(10.0, rel=1e-5)


def test_line_numbers_stay_right_across_blocks(store, tmp_path):
    lines = ["time,voltage_V,current_A"]
    bad = {57: "oops", 400: "", 733: "2024-06-01T10:00:00Z,12.0,-1.0,extra"}
    for k in range(2, 1002):
        if k in bad:
            lines.append(bad[k])
            continue
        lines.append(f"{(pd.Timestamp('2024-06-01T00:00:00Z') + pd.Timedelta(seconds=k)).isoformat()},12.{k % 10},-1.5")
    p = tmp_path / "blocks.csv"
    p.write_text("\n".join(lines) + "\n")
    r = import_file(p, store, block_bytes=4096)
    assert r.data_lines == 999 and r.blank_lines == 1
    assert r.rows_stored == 997
    got = [(int(x["line"]), x["reason"]) for x in _quarantine_rows(r.quarantine)]
    assert got == [(57, "wrong_field_count"), (733, "wrong_field_count")]


def test_dst_fall_back_repeated_hour_is_placed_in_order(store):
    r = import_file(LOGS / "dst_local_oslo.csv", store, tz="Europe/Oslo")
    assert r.rows_rejected == 0
    t = store.read()["t"]
    # 02:00 and 02:30 happen twice on 2024-10-27 in Oslo: first at UTC+2, then at UTC+1
    assert list(t) == list(pd.date_range("2024-10-26T23:30:00Z", periods=6, freq="30min"))


def test_dst_spring_forward_nonexistent_time_is_rejected(store):
    r = import_file(LOGS / "dst_spring_gap_oslo.csv", store, tz="Europe/Oslo")
    assert r.rejected_by_reason == {"nonexistent_local_time": 1}
    assert _quarantine_rows(r.quarantine)[0]["text"].startswith("2024-03-31 02:30:00")


def test_dst_ambiguous_time_without_order_evidence_is_rejected(store, tmp_path):
    p = tmp_path / "amb.csv"
    p.write_text("time,voltage\n2024-10-27 01:30:00,12.7\n2024-10-27 02:30:00,12.6\n2024-10-27 03:30:00,12.5\n")
    r = import_file(p, store, tz="Europe/Oslo")
    assert r.rejected_by_reason == {"ambiguous_local_time": 1}


def test_local_times_without_zone_are_read_as_utc_and_say_so(store):
    r = import_file(LOGS / "dst_local_oslo.csv", store)
    assert r.timezone_assumed and r.timezone_used == "UTC"


# -- sign --------------------------------------------------------------------------------------

def test_reversed_sign_is_detected_and_flipped(store, tmp_path):
    # V = OCV + I R: with the shunt reversed, voltage falls when the logged current rises
    r = import_file(LOGS / "sign_reversed.csv", store)
    assert r.sign_inverted == ["battery", "solar"]
    with Store(tmp_path / "ref.sqlite") as ref:
        assert import_file(LOGS / "sign_correct.csv", ref).sign_inverted == []
        expected = ref.read()
    got = store.read()
    np.testing.assert_allclose(got["current_A"], expected["current_A"], atol=1e-5)


def test_invert_option_forces_the_flip(store):
    r = import_file(LOGS / "sign_correct.csv", store, invert={"battery"})
    assert r.sign_inverted == ["battery"]
    assert "--invert" in r.sign_evidence["battery"]


# -- unusable input and idempotence ----------------------------------------------------------------

def test_binary_file_is_unusable_and_nothing_is_stored(store):
    with pytest.raises(UnusableInput, match=r"garbage\.bin.*binary"):
        import_file(LOGS / "garbage.bin", store)
    assert store.read().empty and store.imports() == []


def test_empty_file_is_unusable(store):
    with pytest.raises(UnusableInput, match=r"empty\.csv.*empty"):
        import_file(LOGS / "empty.csv", store)


def test_no_time_column_is_unusable(store, tmp_path):
    p = tmp_path / "notime.csv"
    p.write_text("voltage_V,current_A\n12.5,-1\n12.4,-2\n")
    with pytest.raises(UnusableInput, match=r"notime\.csv: no time column"):
        import_file(p, store)


def test_no_quantity_column_is_unusable(store, tmp_path):
    p = tmp_path / "noqty.csv"
    p.write_text("time,notes\n2024-06-01T10:00:00Z,hello\n")
    with pytest.raises(UnusableInput, match=r"noqty\.csv: no voltage, current"):
        import_file(p, store)


def test_header_without_data_lines_is_unusable(store, tmp_path):
    p = tmp_path / "hdr.csv"
    p.write_text("time,voltage_V\n")
    with pytest.raises(UnusableInput, match="no data lines"):
        import_file(p, store)
    assert store.imports() == []


def test_reimporting_the_same_file_adds_nothing(store):
    first = import_file(LOGS / "iso_offset_multichannel.csv", store)
    before = store.channel_summary()
    again = import_file(LOGS / "iso_offset_multichannel.csv", store)
    assert not first.already_imported and again.already_imported
    assert again.rows_stored == 0
    assert store.channel_summary() == before and len(store.imports()) == 1


def test_failed_write_rolls_back_everything(store, monkeypatch):
    # Fault injection on the real store (no real fault can be provoked on demand): the second
    # channel's write fails; the first channel's chunks and the import record must vanish.
    real = store.append_arrays
    calls = []

    def failing(channel, *a, **kw):
        calls.append(channel)
        if len(calls) == 2:
            raise OSError("disk full (injected)")
        return real(channel, *a, **kw)

    monkeypatch.setattr(store, "append_arrays", failing)
    with pytest.raises(OSError, match="injected"):
        import_file(LOGS / "iso_offset_multichannel.csv", store)
    assert store.read().empty and store.imports() == []


def test_import_record_keeps_the_summary(store):
    r = import_file(LOGS / "repeated_header_truncated_error.csv", store, tz="UTC")
    rec = store.imports()[0]
    assert (rec["rows_stored"], rec["rows_rejected"]) == (r.rows_stored, r.rows_rejected)
    assert rec["summary"]["rejected_by_reason"] == r.rejected_by_reason


# -- command line ----------------------------------------------------------------------------------

def _run(capsys, *argv):
    code = main(list(argv))
    out = capsys.readouterr()
    return code, out.out, out.err


def test_cli_import_json_is_pure_and_exit_zero(tmp_path, capsys):
    code, out, _ = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", "--json",
                        str(LOGS / "iso_offset_multichannel.csv"))
    assert code == 0
    doc = json.loads(out)
    f = doc["files"][0]
    for key in ("path", "rows_stored", "rows_rejected", "rejected_by_reason", "already_imported", "channels",
                "sign_inverted", "sample_interval_s", "gaps", "quarantine"):
        assert key in f
    assert f["rows_stored"] == 8


def test_cli_reimport_exits_zero_already_imported(tmp_path, capsys):
    args = ("--store", str(tmp_path / "s.sqlite"), "import", "--json", str(LOGS / "epoch_ms.csv"))
    _run(capsys, *args)
    code, out, _ = _run(capsys, *args)
    assert code == 0 and json.loads(out)["files"][0]["already_imported"] is True


def test_cli_unusable_file_exits_two_but_imports_the_others(tmp_path, capsys):
    code, out, err = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", "--json",
                          str(LOGS / "garbage.bin"), str(LOGS / "epoch_ms.csv"))
    assert code == 2
    files = json.loads(out)["files"]
    assert [f["usable"] for f in files] == [False, True]
    assert "binary" in files[0]["error"] and "garbage.bin" in err
    assert files[1]["rows_stored"] == 5


def test_cli_missing_file_exits_two(tmp_path, capsys):
    code, out, _ = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", str(tmp_path / "nope.csv"))
    assert code == 2 and "nope.csv" in out


def test_cli_bad_map_option_exits_two(tmp_path, capsys):
    code, _, err = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", "--map", "Amps=furlongs",
                        str(LOGS / "epoch_ms.csv"))
    assert code == 2 and "allowed" in err


def test_cli_unknown_timezone_exits_two(tmp_path, capsys):
    code, _, err = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", "--tz", "Mars/Olympus",
                        str(LOGS / "epoch_ms.csv"))
    assert code == 2 and "Mars/Olympus" in err


def test_cli_uses_system_timezone_and_nominal_voltage(tmp_path, capsys):
    (tmp_path / "system.toml").write_text(OSLO_LFP_SYSTEM)
    code, out, _ = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", "--json",
                        str(LOGS / "semicolon_decimal_comma_mA_local.csv"))
    f = json.loads(out)["files"][0]
    assert code == 0 and f["timezone_used"] == "Europe/Oslo"
    assert f["time_span"]["start"] == "2024-06-01T10:00:00+00:00"


def test_cli_human_summary_names_rejections_and_quarantine(tmp_path, capsys):
    code, out, _ = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", "--tz", "UTC",
                        str(LOGS / "repeated_header_truncated_error.csv"))
    assert code == 0
    assert "stored 11, rejected 6" in out and "wrong_field_count" in out and "quarantine" in out


def test_cli_status_json_lists_channels(tmp_path, capsys):
    store = str(tmp_path / "s.sqlite")
    _run(capsys, "--store", store, "import", str(LOGS / "iso_offset_multichannel.csv"))
    code, out, _ = _run(capsys, "--store", store, "status", "--json")
    doc = json.loads(out)
    assert code == 0 and doc["store"] == store
    assert doc["channels"]["solar"] == {"rows": 8, "first": "2024-07-01T06:00:00+00:00",
                                        "last": "2024-07-01T06:03:30+00:00"}
    assert doc["imports"] == 1


def test_cli_status_of_missing_store_does_not_create_it(tmp_path, capsys):
    code, out, _ = _run(capsys, "--store", str(tmp_path / "none.sqlite"), "status", "--json")
    assert code == 0 and json.loads(out)["channels"] == {}
    assert not (tmp_path / "none.sqlite").exists()


@pytest.mark.parametrize("block_bytes", [700, 1700, 2900])
def test_dst_repeated_hour_straddling_blocks_is_placed(store, tmp_path, block_bytes):
    # one reading a minute through the night clocks go back in Oslo (IANA tz database):
    # 00:00-01:59 CEST, 02:00-02:59 CEST, 02:00-02:59 CET, 03:00-03:59 CET = 5 h of readings
    utc = pd.date_range("2024-10-26T22:00:00Z", "2024-10-27T02:59:00Z", freq="1min")
    wall = utc.tz_convert("Europe/Oslo").tz_localize(None)
    p = tmp_path / "night.csv"
    p.write_text("time,voltage_V\n" + "".join(f"{w:%Y-%m-%d %H:%M:%S},12.5\n" for w in wall))
    r = import_file(p, store, tz="Europe/Oslo", block_bytes=block_bytes)  # 25-100 lines a block
    assert r.rows_rejected == 0
    assert list(store.read()["t"]) == list(utc)


def test_tab_delimited_with_utf8_bom(store, tmp_path):
    p = tmp_path / "tab.tsv"
    p.write_bytes("\ufefftime\tVolt\tAmps\n2024-06-01T10:00:00Z\t12,5\t-3,25\n2024-06-01T10:00:01Z\t12,4\t-3,5\n"
                  .encode("utf-8"))
    r = import_file(p, store)
    assert (r.delimiter, r.decimal, r.rows_stored) == ("\t", ",", 2)
    assert store.read()["current_A"].iloc[0] == pytest.approx(-3.25)


def test_time_without_offset_in_an_offset_file_is_rejected_not_guessed(store, tmp_path):
    p = tmp_path / "mixed.csv"
    rows = [f"2024-06-01T10:00:{k:02d}+02:00,12.5" for k in range(10)]
    rows.insert(5, "2024-06-01 10:00:30,12.5")
    p.write_text("time,voltage_V\n" + "\n".join(rows) + "\n")
    r = import_file(p, store)
    assert r.rejected_by_reason == {"time_without_offset": 1}


def test_already_imported_result_names_the_previous_import(store):
    import_file(LOGS / "epoch_ms.csv", store)
    again = import_file(LOGS / "epoch_ms.csv", store)
    assert again.previous_import["rows_stored"] == 5


def test_separate_date_and_time_columns_bad_date_is_rejected(store, tmp_path):
    p = tmp_path / "dt.csv"
    rows = [f"01.06.2024;12:00:{k:02d};12,5" for k in range(0, 60, 10)]
    rows[2] = "31.02.2024;12:00:20;12,5"  # no 31 February
    p.write_text("Date;Time;U (V)\n" + "\n".join(rows) + "\n")
    r = import_file(p, store, tz="Europe/Oslo")
    assert r.rejected_by_reason == {"bad_time": 1}
    t = store.read()["t"]
    assert len(t) == 5 and t.iloc[0] == pd.Timestamp("2024-06-01T10:00:00Z")


def test_nul_padding_left_by_a_power_cut_is_quarantined_not_fatal(store, tmp_path):
    good = [f"2024-06-01T10:00:{k:02d}Z,12.5,-1.0" for k in range(20)]
    data = ("time,voltage_V,current_A\n" + "\n".join(good[:10]) + "\n").encode()
    data += b"\x00" * 4096 + ("\n" + "\n".join(good[10:]) + "\n").encode()
    p = tmp_path / "powercut.csv"
    p.write_bytes(data)
    r = import_file(p, store)
    assert r.rows_stored == 20 and r.rejected_by_reason == {"binary_garbage": 1}
    assert _quarantine_rows(r.quarantine)[0]["text"] == "<4096 NUL bytes>"


def test_file_of_only_nul_bytes_is_unusable(store, tmp_path):
    p = tmp_path / "zeros.csv"
    p.write_bytes(b"\x00" * 5000)
    with pytest.raises(UnusableInput, match="only NUL bytes"):
        import_file(p, store)


def test_bad_lines_in_a_big_block_are_found_by_halving_with_right_line_numbers(store, tmp_path):
    t0 = pd.Timestamp("2024-06-01T00:00:00Z")
    lines = [f"{(t0 + pd.Timedelta(seconds=k)).isoformat()},12.5,-1.0" for k in range(20_000)]  # ~900 kB
    lines[1234] = "time,voltage_V,current_A"  # a logger restart
    lines[9876] = "2024-06-01T02:44:36+00:00,twelve,-1.0"
    lines[15000] = ""
    p = tmp_path / "big.csv"
    p.write_text("time,voltage_V,current_A\n" + "\n".join(lines) + "\n")
    r = import_file(p, store)
    assert (r.header_lines, r.blank_lines, r.data_lines, r.rows_stored) == (2, 1, 19_998, 19_997)
    # list index k is file line k + 2 (the header is line 1)
    assert [(int(x["line"]), x["reason"]) for x in _quarantine_rows(r.quarantine)] == [(9878, "non_numeric")]
    assert len(store.read()) == 19_997


def test_cli_invert_and_channel_options(tmp_path, capsys):
    code, out, _ = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", "--json", "--channel", "house",
                        "--invert", "house", str(LOGS / "epoch_ms.csv"))
    f = json.loads(out)["files"][0]
    assert code == 0 and f["channels"] == ["house"] and f["sign_inverted"] == ["house"]
    with Store(tmp_path / "s.sqlite") as st:
        assert st.read()["current_A"].iloc[0] == pytest.approx(5.2, abs=1e-5)  # -5.2 A flipped


def test_cli_map_option_reaches_the_importer(tmp_path, capsys):
    p = tmp_path / "odd.csv"
    p.write_text("when,X1\n2024-06-01T10:00:00Z,12.5\n2024-06-01T10:00:01Z,12.4\n")
    code, out, _ = _run(capsys, "--store", str(tmp_path / "s.sqlite"), "import", "--json",
                        "--map", "when=time", "--map", "X1=voltage_V", str(p))
    assert code == 0 and json.loads(out)["files"][0]["columns"] == {"when": "time", "X1": "battery.voltage_V"}


def test_local_dates_without_zero_padding(store, tmp_path):
    p = tmp_path / "unpadded.csv"
    p.write_text("Date;Time;U (V)\n1.6.2024;9:00:00;12,5\n1.6.2024;9:00:10;12,4\n")
    r = import_file(p, store, tz="Europe/Oslo")
    assert r.rows_stored == 2
    assert store.read()["t"].iloc[0] == pd.Timestamp("2024-06-01T07:00:00Z")
