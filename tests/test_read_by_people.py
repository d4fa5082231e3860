"""Times and words as a person reads them on the command line and in the HTML report (issue 12).

A person reads the site's local time with its zone abbreviation (CEST/CET for Europe/Oslo, IANA tz
database: UTC+2 in summer); ``--json`` keeps UTC ISO 8601. Units as the trade writes them
(°C, mm², mΩ, LiFePO4) and no 'N thing(s)' or '1 header lines'. JSON keys and enum values
(``"chemistry": "lifepo4"``) stay machine names.
"""

from __future__ import annotations

import json
import re

import pytest

from drawdown.cli import main
from systems import OSLO_LFP_SYSTEM
from test_dashboard_figures import build_demo_store

#: The trade's spelling, never the machine's, in text a person reads.
MACHINE_WORDS = ("degC", "mm2", "mOhm", "lifepo4", "(s)", "header lines", "1 gaps", "1 files")
LOCAL = re.compile(r"\d{4}-\d{2}-\d{2} \d{2}:\d{2}(:\d{2})? CES?T")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return build_demo_store(tmp_path_factory.mktemp("people"))


def _run(capsys, *args):
    rc = main([*args])
    cap = capsys.readouterr()
    return rc, cap.out, cap.err


def _gappy_log(path):
    """Two hours at 10 s in UTC (offsets in the file), with one 30-minute hole."""
    lines = ["time,battery_voltage_V,battery_current_A"]
    for k in range(720):
        if 300 <= k < 480:
            continue
        m, s = divmod(k * 10, 60)
        h, m = divmod(m, 60)
        lines.append(f"2026-06-01T{10 + h:02d}:{m:02d}:{s:02d}Z,13.2,-2.5")
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def test_status_text_shows_local_times_with_their_zone_and_json_stays_utc(demo, capsys):
    store, system = demo
    rc, out, _ = _run(capsys, "--store", str(store), "--system", str(system), "status")
    assert rc == 0
    assert "UTC" not in out and "+00:00" not in out
    assert "Europe/Oslo" in out and LOCAL.search(out), out
    assert "1 file imported" in out and "file(s)" not in out
    rc, out, _ = _run(capsys, "--store", str(store), "--system", str(system), "status", "--json")
    first = next(iter(json.loads(out)["channels"].values()))["first"]
    assert first.endswith("+00:00")  # JSON: UTC ISO 8601


def test_status_without_a_system_says_its_times_are_utc(demo, tmp_path, capsys):
    import shutil

    store, _system = demo
    lone = tmp_path / "lone.sqlite"  # no system.toml beside it
    shutil.copy(store, lone)
    rc, out, _ = _run(capsys, "--store", str(lone), "status")
    assert rc == 0 and "times in UTC" in out and "+00:00" not in out


def test_import_summary_says_local_time_with_its_zone_and_one_header_line(tmp_path, capsys):
    (tmp_path / "system.toml").write_text(OSLO_LFP_SYSTEM, encoding="utf-8")
    log = _gappy_log(tmp_path / "gappy.csv")
    rc, out, _ = _run(capsys, "--store", str(tmp_path / "r.sqlite"), "--system", str(tmp_path / "system.toml"),
                      "import", str(log))
    assert rc == 0
    assert "1 header line" in out and "header lines" not in out
    span = next(line for line in out.splitlines() if "time span:" in line)
    # 10:00 UTC in June is 12:00 in Oslo (CEST = UTC+2).
    assert "2026-06-01 12:00:00 CEST" in span and "+00:00" not in span and "Europe/Oslo" in span
    gap = next(line for line in out.splitlines() if line.strip().startswith("2026-06-01") and ".." in line)
    assert "2026-06-01 12:49:50 CEST" in gap and "+00:00" not in gap, gap
    rc, out, _ = _run(capsys, "--store", str(tmp_path / "r.sqlite"), "--system", str(tmp_path / "system.toml"),
                      "import", "--json", str(_gappy_log(tmp_path / "again.csv")))
    entry = json.loads(out)["files"][0]
    assert entry["time_span"]["start"].endswith(("Z", "+00:00"))  # JSON stays UTC


def test_report_text_spells_units_plurals_and_chemistry_for_people(demo, capsys):
    store, system = demo
    rc, out, _ = _run(capsys, "--store", str(store), "--system", str(system), "report")
    assert rc == 0
    for bad in MACHINE_WORDS:
        assert bad not in out, bad
    assert "battery (LiFePO4)" in out
    rc, out, _ = _run(capsys, "--store", str(store), "--system", str(system), "report", "--json")
    assert json.loads(out)["battery"]["chemistry"] == "lifepo4"  # the JSON enum value is unchanged


def test_html_report_says_no_machine_words_and_local_gap_times(demo, capsys, tmp_path):
    import pandas as pd

    from drawdown.analysis.report import build_report
    from drawdown.analysis.system import parse_system
    from drawdown.collector.store import Store
    from drawdown.dashboard.html_report import render_html

    store, system_path = demo
    system = parse_system(system_path.read_text(encoding="utf-8"))
    with Store(store) as st:
        readings = st.read()
    t = readings["t"]
    lo = t.min() + pd.Timedelta(days=1, hours=12)
    cut = readings[(t < lo) | (t >= lo + pd.Timedelta(hours=3))]
    page = render_html(build_report(cut, system), system=system)
    text = re.sub(r"<script.*?</script>", "", page, flags=re.S)
    text = re.sub(r"<[^>]+>", " ", text)
    for bad in MACHINE_WORDS:
        assert bad not in text, bad
    quality = page.split("<h2>Data quality</h2>", 1)[1].split("<h2>", 1)[0]
    gap = next(li for li in quality.split("<li>") if li.startswith("gap on"))
    assert "+00:00" not in gap and LOCAL.search(gap), gap
    assert LOCAL.search(page.split("</header>", 1)[0])  # the period line too


def test_for_people_makes_one_singular_but_not_a_tenth_or_other_words():
    from drawdown.dashboard import labels

    assert labels.for_people("1 gap(s), 21 gap(s), 0 file(s)") == "1 gap, 21 gaps, 0 files"
    # '0.1 days' and '1 class T fuse' are not plurals to undo.
    assert labels.for_people("0.1 days; 1 class T fuse") == "0.1 days; 1 class T fuse"


def test_analysis_sentences_spell_degrees_and_cite_no_internal_documents():
    from drawdown.analysis.cautions import build_cautions
    from drawdown.analysis.wiring import size_run

    cautions = " ".join(build_cautions(chemistry="lifepo4", min_temperature_C=-3.0))
    assert "-3.0 °C" in cautions and "below 0 °C" in cautions and "degC" not in cautions
    run = size_run(30, 3, 12)
    words = json.dumps(run.to_json(), ensure_ascii=False)
    assert "degC" not in words and "ohm mm2" not in words


def test_size_assumptions_say_degrees_and_cite_no_internal_document(demo, capsys):
    store, system = demo
    rc, out, _ = _run(capsys, "--store", str(store), "--system", str(system), "size", "--json")
    j = json.loads(out)
    assert rc == 0
    src = j["assumptions"]["temperature_factor_source"]
    assert "degC" not in src and ("FIELD" + "REF") not in src


def test_wire_text_spells_mm2_and_degrees(capsys):
    rc, out, _ = _run(capsys, "wire", "--current", "30", "--length", "3", "--voltage", "12")
    assert rc == 0
    for bad in ("degC", "mm2", "mOhm"):
        assert bad not in out, bad
    assert "mm²" in out and "°C" in out


def test_demo_prints_its_period_in_local_time_and_no_n_a(tmp_path, capsys):
    rc, out, _ = _run(capsys, "--store", str(tmp_path / "d" / "readings.sqlite"), "demo", "--no-serve",
                      "--days", "2")
    assert rc == 0
    head = next(line for line in out.splitlines() if line.startswith("drawdown demo:"))
    assert LOCAL.search(head) and "Z" not in head.split(":", 1)[1].replace("CEST", "").replace("CET", ""), head
    assert "n/a" not in out


def test_html_ledger_has_no_load_not_seen_column_when_every_load_is_measured(demo, capsys, tmp_path):
    store, system = demo
    out = tmp_path / "r.html"
    rc, text, _ = _run(capsys, "--store", str(store), "--system", str(system), "report", "--html", str(out))
    assert rc == 0 and "mode: multi-channel" in text and "unseen h" not in text
    page = out.read_text(encoding="utf-8")
    assert "95 % range" in page and "load not seen" not in page  # the same columns as the command line
