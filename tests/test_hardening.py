"""Hardening: every bad input is a clear exit 2, valid inputs are not refused, the dashboard trusts no Host.

Exit codes are checked on real ``drawdown`` processes, imports on real files into a real
SQLite store, and the Host/Origin checks with real HTTP requests to a served dashboard.
"""

from __future__ import annotations

import csv
import json
import os
import socket
import sqlite3
import subprocess
import sys
import textwrap
import time
import urllib.error
import urllib.request
from pathlib import Path

import pytest

from test_dashboard_figures import build_demo_store
from test_security import start_server, stop_server

ROOT = Path(__file__).resolve().parents[1]
_ENTRY = Path(sys.executable).with_name("drawdown")


def drawdown(*argv: str, env: dict[str, str] | None = None, timeout: float = 180) -> subprocess.CompletedProcess:
    """Run the real command line in a subprocess (the installed entry point when there is one)."""
    cmd = [str(_ENTRY)] if _ENTRY.exists() else [sys.executable, "-m", "drawdown"]
    full_env = {**os.environ, "PYBAMM_DISABLE_TELEMETRY": "true", **(env or {})}
    return subprocess.run([*cmd, *argv], cwd=ROOT, env=full_env, capture_output=True, text=True, timeout=timeout)


def assert_clean_refusal(r: subprocess.CompletedProcess, *words: str) -> None:
    """Exit 2, no traceback, and the message names what it should."""
    assert r.returncode == 2, (r.returncode, r.stderr)
    assert "Traceback" not in r.stderr and "internal error" not in r.stderr, r.stderr
    for w in words:
        assert w in r.stderr, (w, r.stderr)


def _log_lines(n: int = 30, *, start: str = "2024-06-04", sep: str = ",", offset: str = "Z") -> list[str]:
    rows = [f"time{sep}voltage_V{sep}current_A"]
    for i in range(n):
        t = f"{start}T10:{i // 6:02d}:{(i % 6) * 10:02d}{offset}"
        rows.append(f"{t}{sep}{12.5 + i / 100:.2f}{sep}{-2.0 - i / 10:.1f}")
    return rows


def _quarantine_rows(path: str) -> list[dict[str, str]]:
    with open(path, newline="", encoding="utf-8") as f:
        return list(csv.DictReader(f))


# -- 1. a malformed time is a rejected line, never a crash -------------------------------------

def _semicolon_local_log(path: Path, first_time: str) -> Path:
    rows = ["time;voltage_V;current_A", f"{first_time};12,80;-1,50"]
    for i in range(1, 30):
        rows.append(f"2024-06-04 15:{20 + i // 6:02d}:{(i % 6) * 10:02d};12,{80 - i:02d};-1,{50 + i}")
    path.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("first_time", ["2024-06-04 15:19:0Z", "2024-05-22 15-21:48"])
def test_malformed_first_time_of_a_decimal_comma_local_log_is_a_bad_time_line(tmp_path, first_time):
    log = _semicolon_local_log(tmp_path / "trip.csv", first_time)
    r = drawdown("--store", str(tmp_path / "s.sqlite"), "import", "--tz", "Europe/Oslo", "--json", str(log))
    assert r.returncode == 0, r.stderr
    f = json.loads(r.stdout)["files"][0]
    assert f["rows_stored"] == 29 and f["rejected_by_reason"] == {"bad_time": 1}
    assert _quarantine_rows(f["quarantine"]) == [{"line": "2", "reason": "bad_time",
                                                   "text": f"{first_time};12,80;-1,50"}]


def test_text_that_is_not_a_time_is_bad_time_and_a_time_without_offset_is_named_so(tmp_path):
    from drawdown.collector.csv_file import import_file
    from drawdown.collector.store import Store

    rows = _log_lines(30)
    rows[5] = "not a time," + rows[5].split(",", 1)[1]
    rows[9] = "2024-06-04 10:01:20," + rows[9].split(",", 1)[1]   # a real time, but no offset
    log = tmp_path / "offsets.csv"
    log.write_text("\n".join(rows) + "\n", encoding="utf-8")
    with Store(tmp_path / "s.sqlite") as store:
        r = import_file(log, store)
    assert r.rejected_by_reason == {"bad_time": 1, "time_without_offset": 1}
    assert {(q["line"], q["reason"]) for q in _quarantine_rows(r.quarantine)} == {
        ("6", "bad_time"), ("10", "time_without_offset")}


def test_the_careful_time_parser_turns_what_pandas_refuses_into_missing_times():
    import pandas as pd

    from drawdown.collector.csv_file import _to_datetime

    mixed = pd.Series(["2024-06-04 15:19:00", "2024-06-04 15:19:00Z", None, "15-21:48"])
    with pytest.raises(ValueError, match="[Mm]ixed"):  # what the importer used to hit
        pd.to_datetime(mixed, format="ISO8601", errors="coerce")
    local = _to_datetime(mixed, format="ISO8601")
    assert local.isna().tolist() == [False, True, True, True]  # an offset where local time was expected
    assert _to_datetime(mixed, format="ISO8601", utc=True).isna().tolist() == [False, False, True, True]


# -- 2. report --html: a folder, a missing folder, a place that cannot be written --------------

@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    store_path, system_path = build_demo_store(tmp_path_factory.mktemp("hard"), days=2)
    return store_path, system_path


def test_report_html_to_a_folder_exits_2(demo, tmp_path):
    store, system = demo
    r = drawdown("--store", str(store), "--system", str(system), "report", "--html", str(tmp_path))
    assert_clean_refusal(r, "--html", "is a folder")


def test_report_html_in_a_missing_folder_exits_2_and_creates_no_folder(demo, tmp_path):
    store, system = demo
    target = tmp_path / "no" / "such" / "dir" / "x.html"
    r = drawdown("--store", str(store), "--system", str(system), "report", "--html", str(target))
    assert_clean_refusal(r, "does not exist")
    assert not (tmp_path / "no").exists()


@pytest.mark.skipif(not Path("/proc/self").is_dir(), reason="needs Linux /proc")
def test_report_html_where_nothing_can_be_written_exits_2(demo):
    store, system = demo
    r = drawdown("--store", str(store), "--system", str(system), "report", "--html", "/proc/x.html")
    assert_clean_refusal(r, "/proc/x.html")


# -- 3. serve on a busy port ------------------------------------------------------------------

def test_serve_on_a_busy_port_exits_2_naming_the_port(tmp_path):
    with socket.socket() as busy:
        busy.bind(("127.0.0.1", 0))
        busy.listen()
        port = busy.getsockname()[1]
        r = drawdown("--store", str(tmp_path / "s.sqlite"), "serve", "--port", str(port), timeout=60)
    assert_clean_refusal(r, f"--port {port}", "in use", f"--port {port + 1}")


# -- 4. a ValueError inside the analysis is a bug (exit 1), not bad input ----------------------

def test_a_value_error_inside_the_analysis_is_exit_1_not_usage(demo, tmp_path):
    store, system = demo
    # A real process whose analysis has a bug: sitecustomize runs before the command does.
    (tmp_path / "sitecustomize.py").write_text(textwrap.dedent("""
        import drawdown.analysis.report

        def build_report(*args, **kwargs):
            raise ValueError("a bug in the analysis, not the user's input")

        drawdown.analysis.report.build_report = build_report
    """), encoding="utf-8")
    path = os.pathsep.join([str(tmp_path), os.environ.get("PYTHONPATH", "")]).rstrip(os.pathsep)
    r = drawdown("--store", str(store), "--system", str(system), "report", env={"PYTHONPATH": path})
    assert r.returncode == 1, (r.returncode, r.stderr)
    assert "internal error" in r.stderr and "a bug in the analysis" in r.stderr


# -- 5. old logs, unset clocks and files of which nothing can be stored -------------------------

def test_a_log_from_1986_is_stored(tmp_path):
    log = tmp_path / "archive-1986.csv"
    log.write_text("\n".join(_log_lines(30, start="1986-07-14")) + "\n", encoding="utf-8")
    r = drawdown("--store", str(tmp_path / "s.sqlite"), "import", "--json", str(log))
    assert r.returncode == 0, r.stderr
    f = json.loads(r.stdout)["files"][0]
    assert f["rows_stored"] == 30 and f["time_span"]["start"].startswith("1986-07-14")


def test_a_log_whose_clock_was_never_set_exits_2_with_the_reasons_counted(tmp_path):
    log = tmp_path / "unset-clock.csv"
    log.write_text("\n".join(_log_lines(30, start="1970-01-01")) + "\n", encoding="utf-8")
    store = tmp_path / "s.sqlite"
    r = drawdown("--store", str(store), "import", "--json", str(log))
    assert_clean_refusal(r, "unset-clock.csv", "30 time_out_of_range", "clock")
    f = json.loads(r.stdout)["files"][0]
    assert f["usable"] is False and f["rows_stored"] == 0 and f["rows_rejected"] == 30
    assert f["rejected_by_reason"] == {"time_out_of_range": 30}
    assert len(_quarantine_rows(f["quarantine"])) == 30  # kept aside, not lost
    with sqlite3.connect(store) as db:
        assert db.execute("SELECT COUNT(*) FROM imports").fetchone()[0] == 0  # may be imported again


def test_a_file_whose_every_line_is_rejected_exits_2_naming_each_reason(tmp_path):
    rows = _log_lines(10)
    rows[1:6] = [r.replace(",12.", ",twelve.") for r in rows[1:6]]
    rows[6:] = [r + ",extra" for r in rows[6:]]
    log = tmp_path / "all-bad.csv"
    log.write_text("\n".join(rows) + "\n", encoding="utf-8")
    r = drawdown("--store", str(tmp_path / "s.sqlite"), "import", str(log))
    assert_clean_refusal(r)
    assert "UNUSABLE" in r.stdout and "non_numeric" in r.stdout and "wrong_field_count" in r.stdout


# -- 6. an explicitly named system file that is missing; bank voltages -------------------------

def test_an_explicit_system_file_that_does_not_exist_exits_2_and_stores_nothing(tmp_path):
    log = tmp_path / "trip.csv"
    log.write_text("\n".join(_log_lines(30)) + "\n", encoding="utf-8")
    r = drawdown("--store", str(tmp_path / "s.sqlite"), "--system", str(tmp_path / "nosuch.toml"), "import", str(log))
    assert_clean_refusal(r, "nosuch.toml", "no such file")
    assert not (tmp_path / "s.sqlite").exists()


@pytest.mark.parametrize("volts", ["0.5", "5.9", "60.1", "230"])
def test_wire_voltage_outside_a_6_to_60_volt_bank_exits_2(volts):
    r = drawdown("wire", "--current", "10", "--length", "2", "--voltage", volts, timeout=60)
    assert_clean_refusal(r, f"--voltage {volts}", "6 to 60 V")


@pytest.mark.parametrize("volts", ["6", "60"])
def test_wire_voltage_at_the_ends_of_the_range_is_sized(volts):
    r = drawdown("wire", "--current", "10", "--length", "2", "--voltage", volts, "--json", timeout=60)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["voltage_V"] == float(volts)


# -- 7. --json everywhere results are printed; usage errors in the subcommand's words -----------

def test_simulate_json_prints_one_object_naming_the_files(tmp_path):
    out = tmp_path / "trip.csv"
    r = drawdown("simulate", "--scenario", "autumn-van", "--days", "1", "--interval", "60", "--out", str(out),
                 "--json", timeout=120)
    assert r.returncode == 0, r.stderr
    j = json.loads(r.stdout)
    assert j["out"] == str(out) and Path(j["truth"]).exists() and Path(j["system"]).exists()
    assert j["rows"] == 1440 and j["scenario"] == "autumn-van"


def test_demo_json_prints_one_object_with_the_report_keys(tmp_path):
    store = tmp_path / "demo" / "readings.sqlite"
    r = drawdown("--store", str(store), "demo", "--no-serve", "--days", "2", "--json", timeout=300)
    assert r.returncode == 0, r.stderr
    j = json.loads(r.stdout)  # stdout is the one object, nothing else
    assert j["scenario"] == "autumn-van" and j["days"] == 2 and j["serving"] is False
    assert j["import"]["rows_stored"] > 0 and Path(j["log"]).exists() and Path(j["truth"]).exists()
    rep = drawdown("--store", str(store), "report", "--json", timeout=300)
    assert rep.returncode == 0, rep.stderr
    assert set(j["report"]) == set(json.loads(rep.stdout))  # the same keys as `report --json`
    again = json.loads(drawdown("--store", str(store), "demo", "--no-serve", "--days", "2", "--json",
                                timeout=300).stdout)
    assert again["import"]["already_imported"] is True


def test_serve_json_prints_the_address_once_listening(tmp_path):
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    cmd = [str(_ENTRY)] if _ENTRY.exists() else [sys.executable, "-m", "drawdown"]
    proc = subprocess.Popen([*cmd, "--store", str(tmp_path / "s.sqlite"), "serve", "--port", str(port), "--json"],
                            cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.DEVNULL, text=True,
                            env={**os.environ, "PYBAMM_DISABLE_TELEMETRY": "true"})
    try:
        text = ""
        deadline = time.monotonic() + 60
        while time.monotonic() < deadline and not text.rstrip().endswith("}"):
            line = proc.stdout.readline()
            if not line:
                break
            text += line
        j = json.loads(text)
        assert j == {"url": f"http://127.0.0.1:{port}/", "host": "127.0.0.1", "port": port, "token_required": False}
        with urllib.request.urlopen(j["url"], timeout=30) as page:
            assert page.status == 200
    finally:
        stop_server(proc)


def test_an_unknown_option_prints_the_subcommands_usage():
    r = drawdown("wire", "--current", "10", "--length", "2", "--voltage", "12", "--colour", "red", timeout=60)
    assert r.returncode == 2
    assert r.stderr.startswith("usage: drawdown wire ") and "--colour" in r.stderr


# -- 8. UTF-16 and CR-only logs are read -------------------------------------------------------

def _stored(store_path: Path) -> list[tuple]:
    with sqlite3.connect(store_path) as db:
        tables = {r[0] for r in db.execute("SELECT name FROM sqlite_master WHERE type='table'")}
        assert "imports" in tables
    from drawdown.collector.store import Store

    with Store(store_path) as st:
        df = st.read()
    return list(df[["t", "channel", "voltage_V", "current_A"]].itertuples(index=False, name=None))


@pytest.mark.parametrize("encoding,line_end", [("utf-16", "\n"), ("utf-16-le", "\r\n"), ("utf-16-be", "\n"),
                                               ("utf-8", "\r"), ("utf-16", "\r")])
def test_utf16_and_cr_only_logs_import_like_their_utf8_lf_copy(tmp_path, encoding, line_end):
    from drawdown.collector.csv_file import import_file
    from drawdown.collector.store import Store

    rows = _log_lines(40)
    rows[7] = rows[7] + ",surplus"  # one damaged line: its line number must survive the conversion
    text = "\n".join(rows) + "\n"
    plain = tmp_path / "plain.csv"
    plain.write_bytes(text.encode("utf-8"))
    odd = tmp_path / "odd.csv"
    odd.write_bytes(text.replace("\n", line_end).encode(encoding))  # "utf-16" writes a BOM
    with Store(tmp_path / "a.sqlite") as st:
        ra = import_file(plain, st)
    with Store(tmp_path / "b.sqlite") as st:
        rb = import_file(odd, st)
    assert (rb.rows_stored, rb.rows_rejected) == (ra.rows_stored, ra.rows_rejected) == (39, 1)
    assert _stored(tmp_path / "b.sqlite") == _stored(tmp_path / "a.sqlite")
    assert [(q["line"], q["reason"]) for q in _quarantine_rows(rb.quarantine)] == [("8", "wrong_field_count")]
    assert rb.encoding.startswith(encoding.replace("utf-16", "utf-16-le") if encoding == "utf-16" else encoding)
    assert not list(tmp_path.glob(".import-*"))  # the converted scratch copy is gone


def test_a_utf16_log_imports_through_the_command(tmp_path):
    log = tmp_path / "windows-export.csv"
    log.write_bytes(("\r\n".join(_log_lines(30)) + "\r\n").encode("utf-16"))
    r = drawdown("--store", str(tmp_path / "s.sqlite"), "import", str(log))
    assert r.returncode == 0, r.stderr
    assert "stored 30, rejected 0" in r.stdout and "UTF-16" in r.stdout


def test_a_killed_conversion_leaves_no_lasting_scratch_copy(tmp_path):
    """A UTF-16 import killed mid-way leaves its converted copy; the next import removes it."""
    import signal

    big = tmp_path / "big-utf16.csv"
    big.write_bytes(("\r\n".join(_log_lines(200_000)) + "\r\n").encode("utf-16"))
    store = tmp_path / "s.sqlite"
    proc = subprocess.Popen([sys.executable, "-m", "drawdown", "--store", str(store), "import", str(big)],
                            cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        for _ in range(600):  # the scratch folder lives from the conversion to the end of the import
            if list(tmp_path.glob(".import-*/owner.pid")) or proc.poll() is not None:
                break
            time.sleep(0.05)
        assert proc.poll() is None, "the import ended before it could be killed; make the log bigger"
        proc.send_signal(signal.SIGKILL)
    finally:
        proc.wait(30)
    left = list(tmp_path.glob(".import-*"))
    assert len(left) == 1  # what a kill leaves behind ...
    live = tmp_path / ".import-still-running"
    live.mkdir()
    (live / "owner.pid").write_text(str(os.getpid()))  # ... and a folder whose import still runs
    small = tmp_path / "small-utf16.csv"
    small.write_bytes(("\r\n".join(_log_lines(30, start="2024-07-01")) + "\r\n").encode("utf-16"))
    r = drawdown("--store", str(store), "import", str(small))
    assert r.returncode == 0, r.stderr
    assert not left[0].exists()  # the orphan is gone
    assert live.exists()  # a running import's copy is left alone


def test_the_dashboard_reads_a_utf16_system_toml(tmp_path):
    from drawdown.dashboard.data import DataSource

    sysp = tmp_path / "system.toml"
    sysp.write_bytes(SYSTEM.encode("utf-16"))
    section = DataSource(tmp_path / "s.sqlite", sysp).system()
    assert section.why is None and section.value.battery.rated_capacity_Ah == 200
    assert DataSource(tmp_path / "s.sqlite", sysp).system_text().lstrip("\ufeff").startswith("\n[site]")
    missing = DataSource(tmp_path / "s.sqlite", tmp_path / "none.toml").system()
    assert missing.value is None and "none.toml" in missing.why and str(tmp_path) not in missing.why


# -- 9. system.toml: strict numbers, finite numbers, UTF-16 files -------------------------------

SYSTEM = """
[site]
latitude_deg = 61.2
longitude_deg = 7.1
timezone = "Europe/Oslo"
[battery]
chemistry = "lifepo4"
nominal_voltage_V = 12.8
rated_capacity_Ah = 200
[[solar]]
peak_power_W = 300
"""


@pytest.mark.parametrize("old,new,key,says", [
    ("peak_power_W = 300", "peak_power_W = true", "solar[0].peak_power_W = true", "expected a number"),
    ("rated_capacity_Ah = 200", 'rated_capacity_Ah = "200"', "battery.rated_capacity_Ah = '200'",
     "write it without quotes"),
    ("rated_capacity_Ah = 200", "rated_capacity_Ah = nan", "battery.rated_capacity_Ah = nan", "finite number"),
    ("rated_capacity_Ah = 200", "rated_capacity_Ah = inf", "battery.rated_capacity_Ah = inf", "finite number"),
])
def test_system_toml_numbers_are_strict_and_finite(old, new, key, says):
    from drawdown.analysis.system import SystemError_, parse_system

    with pytest.raises(SystemError_) as err:
        parse_system(SYSTEM.replace(old, new))
    assert key in str(err.value) and says in str(err.value)
    assert "20000" not in str(err.value)


def test_an_integer_is_still_a_valid_number_in_system_toml():
    from drawdown.analysis.system import parse_system

    assert parse_system(SYSTEM).solar[0].peak_power_W == 300.0


@pytest.mark.parametrize("encoding", ["utf-16", "utf-16-le", "utf-8-sig"])
def test_a_utf16_or_bom_system_toml_is_read(tmp_path, encoding):
    sysp = tmp_path / "system.toml"
    sysp.write_bytes(SYSTEM.encode(encoding))
    r = drawdown("--store", str(tmp_path / "s.sqlite"), "--system", str(sysp), "status", "--json", timeout=60)
    assert r.returncode == 0, r.stderr
    assert json.loads(r.stdout)["system"] == str(sysp)
    sysp.write_bytes(SYSTEM.replace("= 300", "= true").encode(encoding))
    r = drawdown("--store", str(tmp_path / "s.sqlite"), "--system", str(sysp), "status", timeout=60)
    assert_clean_refusal(r, "solar[0].peak_power_W")


# -- 10. the dashboard answers only to this computer's names; changes only from its own page ---

def _save_callback(text: str) -> bytes:
    """The System setup page's Save button, as the browser posts it."""
    return json.dumps({
        "output": "setup-messages.children", "outputs": {"id": "setup-messages", "property": "children"},
        "inputs": [{"id": "setup-validate", "property": "n_clicks", "value": None},
                   {"id": "setup-save", "property": "n_clicks", "value": 1}],
        "changedPropIds": ["setup-save.n_clicks"],
        "state": [{"id": "setup-system-text", "property": "value", "value": text}]}).encode()


def _post(url: str, body: bytes, headers: dict[str, str]) -> int:
    req = urllib.request.Request(url, data=body, method="POST",
                                 headers={"Content-Type": "application/json", **headers})
    try:
        with urllib.request.urlopen(req, timeout=60) as r:
            return r.status
    except urllib.error.HTTPError as exc:
        return exc.code


def _get(url: str, headers: dict[str, str]) -> int:
    try:
        with urllib.request.urlopen(urllib.request.Request(url, headers=headers), timeout=60) as r:
            return r.status
    except urllib.error.HTTPError as exc:
        return exc.code


@pytest.fixture()
def served(demo, tmp_path):
    store, system = demo
    own_system = tmp_path / "system.toml"
    own_system.write_bytes(system.read_bytes())
    proc, base = start_server(store, own_system)
    try:
        yield base, own_system
    finally:
        stop_server(proc)


def test_a_rebound_foreign_host_cannot_save_system_toml(served):
    base, system = served
    before = system.read_bytes()
    port = base.rsplit(":", 1)[1]
    evil = {"Host": f"evil.example.com:{port}", "Origin": f"http://evil.example.com:{port}"}
    changed = before.decode().replace("rated_capacity_Ah = ", "rated_capacity_Ah = 1")
    assert _post(f"{base}/_dash-update-component", _save_callback(changed), evil) == 403
    assert _get(f"{base}/", {"Host": f"evil.example.com:{port}"}) == 403
    assert system.read_bytes() == before
    # The same request from the dashboard's own page does save: the refusal above is the guard's.
    own = {"Host": f"127.0.0.1:{port}", "Origin": f"http://127.0.0.1:{port}"}
    assert _post(f"{base}/_dash-update-component", _save_callback(changed), own) == 200
    assert system.read_bytes() != before


def test_a_change_posted_from_another_sites_page_is_refused(served):
    base, system = served
    before = system.read_bytes()
    port = base.rsplit(":", 1)[1]
    for origin in ("http://evil.example.com", f"http://localhost:{int(port) + 1}", "null"):
        hdrs = {"Host": f"127.0.0.1:{port}", "Origin": origin}
        assert _post(f"{base}/_dash-update-component", _save_callback("x = 1"), hdrs) == 403, origin
    assert system.read_bytes() == before


@pytest.mark.parametrize("host", ["127.0.0.1", "localhost", "LOCALHOST", "127.0.0.1", "van.localhost"])
def test_this_computers_own_names_are_admitted(served, host):
    base, _ = served
    port = base.rsplit(":", 1)[1]
    assert _get(f"{base}/", {"Host": f"{host}:{port}"}) == 200


def test_host_check_unit():
    from drawdown.dashboard.security import allowed_host, same_origin

    assert allowed_host("[::1]:8050", "127.0.0.1") and allowed_host("127.3.4.5", "127.0.0.1")
    assert not allowed_host("evil.example.com:8050", "127.0.0.1")
    assert not allowed_host("127.0.0.1.evil.example.com", "127.0.0.1")
    assert not allowed_host("", "127.0.0.1")
    assert allowed_host("van.lan:8050", "van.lan") and not allowed_host("evil.example.com", "0.0.0.0")
    assert same_origin("http://127.0.0.1:8050", "127.0.0.1:8050")
    assert same_origin("http://localhost", "localhost:80")
    assert not same_origin("http://127.0.0.1:8051", "127.0.0.1:8050")
    assert not same_origin("null", "127.0.0.1:8050")
