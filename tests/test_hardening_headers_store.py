"""Hardening, items 11-14: security headers, the upload limit said one way, a store that keeps one
copy of re-imported readings, and ``status`` on a read-only store or a full disk.

Real parts: a served dashboard over HTTP (and in headless Chromium), a real SQLite store, the
real ``drawdown`` command in a subprocess, and a real read-only file system / full disk made with
a private mount namespace (``unshare``) where the machine allows it.
"""

from __future__ import annotations

import base64
import json
import shutil
import sqlite3
import subprocess
import urllib.error
import urllib.request
from pathlib import Path
from types import SimpleNamespace

import pytest

from test_dashboard_figures import build_demo_store
from test_hardening import _log_lines, drawdown
from test_security import start_server, stop_server

ROOT = Path(__file__).resolve().parents[1]
TOKEN = "header-test-token-0123456789abcdef"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    store_path, system_path = build_demo_store(tmp_path_factory.mktemp("hdr"), days=2)
    return SimpleNamespace(store_path=store_path, system_path=system_path)


@pytest.fixture(scope="module")
def served(demo, tmp_path_factory):
    folder = tmp_path_factory.mktemp("hdr-served")
    store, system = folder / "readings.sqlite", folder / "system.toml"
    shutil.copy(demo.store_path, store)
    shutil.copy(demo.system_path, system)
    proc, base = start_server(store, system)
    yield base
    stop_server(proc)


def _fetch(url: str, *, data: bytes | None = None, headers: dict[str, str] | None = None):
    """(status, headers, body) of a real HTTP request; HTTP errors are answers too."""
    req = urllib.request.Request(url, data=data, headers=headers or {}, method="POST" if data is not None else "GET")
    try:
        with urllib.request.urlopen(req, timeout=120) as r:
            return r.status, r.headers, r.read()
    except urllib.error.HTTPError as exc:
        return exc.code, exc.headers, exc.read()


def _csp(headers) -> dict[str, list[str]]:
    out = {}
    for part in headers.get("Content-Security-Policy", "").split(";"):
        words = part.split()
        if words:
            out[words[0]] = words[1:]
    return out


# -- 11. security headers --------------------------------------------------------------------

def test_every_answer_carries_a_csp_that_forbids_framing_and_no_server_banner(served):
    port = served.rsplit(":", 1)[1]
    page = _fetch(f"{served}/trip")
    assert page[0] == 200
    scripts = [s.decode() for s in page[2].split(b'src="')[1:] if s.startswith(b"/_dash-component-suites/")]
    asset = _fetch(served + scripts[0].split('"')[0])
    foreign = _fetch(f"{served}/", headers={"Host": f"evil.example.com:{port}"})
    assert asset[0] == 200 and foreign[0] == 403
    for status, headers, _body in (page, asset, foreign):
        csp = _csp(headers)
        assert csp["frame-ancestors"] == ["'none'"], (status, headers)
        assert "'unsafe-inline'" not in csp["script-src"] and "'unsafe-eval'" not in csp["script-src"]
        assert csp["default-src"] == ["'self'"] and csp["object-src"] == ["'none'"]
        assert headers["X-Content-Type-Options"] == "nosniff"
        assert headers["Referrer-Policy"] == "no-referrer"
        assert headers.get("Server") is None, headers.get("Server")  # no name or version banner


def test_token_bearing_answers_are_never_stored_by_a_cache(demo):
    proc, base = start_server(demo.store_path, demo.system_path, token=TOKEN)
    try:
        first = _fetch(f"{base}/?token={TOKEN}")
        assert first[0] == 200 and "drawdown_token=" in first[1].get("Set-Cookie", "")
        assert first[1]["Cache-Control"] == "no-store"
        cookie = {"Cookie": f"drawdown_token={TOKEN}"}
        for path in ("/", "/_dash-layout", "/_dash-dependencies"):
            status, headers, _ = _fetch(base + path, headers=cookie)
            assert status == 200 and headers["Cache-Control"] == "no-store", path
        assert _fetch(f"{base}/", headers={"Authorization": f"Bearer {TOKEN}"})[1]["Cache-Control"] == "no-store"
        assert _fetch(f"{base}/")[0] == 401
    finally:
        stop_server(proc)


CHROMIUM = Path("/usr/bin/chromium")


@pytest.mark.browser
@pytest.mark.skipif(not CHROMIUM.exists(), reason="needs Debian's chromium at /usr/bin/chromium")
def test_pages_load_and_run_their_callbacks_under_the_content_security_policy(served):
    sync_api = pytest.importorskip("playwright.sync_api")
    with sync_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM),
                                    args=["--headless", "--no-sandbox", "--disable-gpu"])
        try:
            page = browser.new_page()
            page.add_init_script("window.__violations = [];"
                                 "document.addEventListener('securitypolicyviolation',"
                                 " e => window.__violations.push(e.violatedDirective + ' ' + e.blockedURI));")
            errors: list[str] = []
            page.on("console", lambda m: errors.append(m.text) if m.type == "error" else None)
            for path, ready in (("/trip", "#trip-ledger-graph .js-plotly-plot"),
                                ("/planner", "#plan-result .card, #plan-result .notice"),
                                ("/setup", "#setup-store-table table")):
                answer = page.goto(served + path)
                assert "frame-ancestors 'none'" in answer.headers["content-security-policy"]
                page.wait_for_selector(ready, timeout=60_000)  # drawn by a callback: callbacks ran
                page.wait_for_load_state("networkidle")
                assert page.evaluate("window.__violations") == [], path
            assert errors == []
        finally:
            browser.close()


# -- 12. the upload limit: one figure, the page's own words, no server paths -------------------

def test_the_upload_limit_is_one_figure_said_the_same_way_everywhere():
    from drawdown.dashboard import data
    from drawdown.dashboard.security import MAX_UPLOAD_BYTES, UPLOAD_LIMIT_TEXT, upload_refusal

    assert MAX_UPLOAD_BYTES == 50_000_000 and UPLOAD_LIMIT_TEXT == "50 MB"
    assert data.MAX_UPLOAD_BYTES == MAX_UPLOAD_BYTES
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    assert f"up to {UPLOAD_LIMIT_TEXT}" in readme and "MiB" not in readme and "52 MB" not in readme
    said = upload_refusal("big.csv", MAX_UPLOAD_BYTES + 500_000)
    assert "50.5 MB, over the 50 MB upload limit" in said and "nothing was stored" in said
    page = (ROOT / "dashboard" / "pages" / "setup.py").read_text(encoding="utf-8")
    assert "1024 * 1024" not in page and "UPLOAD_LIMIT_TEXT" in page


def test_a_body_over_the_limit_is_refused_in_the_pages_own_words_not_a_bare_413(served):
    from drawdown.dashboard.security import MAX_CALLBACK_BODY

    body = b'{"output":"..setup-upload-result.children...setup-store-table.children..","contents":"' + \
        b"A" * (MAX_CALLBACK_BODY + 1000) + b'"}'
    port = served.rsplit(":", 1)[1]
    own = {"Content-Type": "application/json", "Host": f"127.0.0.1:{port}", "Origin": f"http://127.0.0.1:{port}"}
    status, headers, answer = _fetch(f"{served}/_dash-update-component", data=body, headers=own)
    assert status == 200 and headers["Content-Type"].startswith("application/json")
    shown = json.dumps(json.loads(answer)["response"]["setup-upload-result"])
    assert "over the 50 MB upload limit" in shown and "Import failed. Nothing was stored." in shown
    assert "<html" not in answer.decode().lower()


def test_the_plain_refusal_of_a_too_big_body_says_the_limit_not_a_generic_page():
    import flask

    from drawdown.dashboard.security import MAX_CALLBACK_BODY, install_body_limit

    app = flask.Flask("t")
    app.add_url_rule("/echo", "echo", lambda: str(len(flask.request.get_data())), methods=["POST"])
    install_body_limit(app)
    r = app.test_client().post("/echo", data=b"x" * (MAX_CALLBACK_BODY + 10))
    assert r.status_code == 413 and r.mimetype == "text/plain"
    assert b"over the 50 MB upload limit" in r.data and b"<html" not in r.data.lower()


@pytest.mark.browser
@pytest.mark.skipif(not CHROMIUM.exists(), reason="needs Debian's chromium at /usr/bin/chromium")
def test_an_upload_over_the_limit_is_refused_on_the_setup_page(served, tmp_path):
    big = tmp_path / "huge-log.csv"
    with open(big, "wb") as f:
        f.write(b"time,voltage_V,current_A\n")
        f.write(b"2024-06-04T10:00:00Z,12.80,-1.50\n" * (51_000_000 // 33))
    sync_api = pytest.importorskip("playwright.sync_api")
    with sync_api.sync_playwright() as p:
        browser = p.chromium.launch(executable_path=str(CHROMIUM),
                                    args=["--headless", "--no-sandbox", "--disable-gpu"])
        try:
            page = browser.new_page()
            failed: list[int] = []
            page.on("response", lambda r: failed.append(r.status) if r.status >= 400 else None)
            page.goto(served + "/setup")
            page.wait_for_selector("#setup-upload input[type=file]", state="attached")
            page.set_input_files("#setup-upload input[type=file]", str(big))
            page.wait_for_selector("#setup-upload-result .notice-error", timeout=120_000)
            text = page.inner_text("#setup-upload-result")
            assert "over the 50 MB upload limit" in text and "Nothing was stored" in text
            assert failed == []  # refused in the page's words, not a 413 the page cannot show
        finally:
            browser.close()


def _data_url(raw: bytes) -> str:
    return "data:text/csv;base64," + base64.b64encode(raw).decode()


@pytest.fixture()
def upload_page(demo, tmp_path):
    """The System setup page's functions on a private copy of the store, inside an app."""
    from drawdown.dashboard.app import create_app
    from drawdown.dashboard.data import clear_caches, current

    clear_caches()
    ns = SimpleNamespace(store_path=tmp_path / "readings.sqlite", system_path=tmp_path / "system.toml")
    shutil.copy(demo.store_path, ns.store_path)
    shutil.copy(demo.system_path, ns.system_path)
    app = create_app(ns)
    with app.server.test_request_context():
        from drawdown.dashboard.pages.setup import render_upload

        yield current(), render_upload


def test_upload_messages_show_no_server_path_and_advise_no_flag(upload_page, tmp_path):
    src, render_upload = upload_page
    no_time = src.import_upload("amps.csv", _data_url(b"when,current_A\nyesterday,1.0\ntoday,2.0\n"))
    no_qty = src.import_upload("notes.csv", _data_url(b"time,comment\n2024-06-04T10:00:00Z,hello\n"))
    for out in (no_time, no_qty):
        assert out["ok"] is False
        assert "/" not in out["error"].replace("e.g.", ""), out["error"]  # no folder of the server
        assert "--" not in out["error"] and "drawdown-upload-" not in out["error"], out["error"]
    assert no_time["error"].startswith("amps.csv: no time column")
    # an accepted file with a rejected line: the page says where in words, not by path
    rows = _log_lines(30, start="2025-03-01")
    rows[4] += ",surplus"
    contents = _data_url(("\n".join(rows) + "\n").encode())
    box, _table = render_upload(src, contents, "trip.csv")
    shown = json.dumps(box.to_plotly_json(), default=lambda o: o.to_plotly_json())
    assert "29 lines stored, 1 rejected" in shown and "quarantine folder" in shown
    assert str(tmp_path) not in shown and "/tmp" not in shown and str(src.store_path.parent) not in shown


def test_the_importer_says_flags_only_to_the_command_line(tmp_path):
    from drawdown.collector.csv_file import UnusableInput, import_file
    from drawdown.collector.store import Store

    log = tmp_path / "nameless.csv"
    log.write_text("when,current_A\nyesterday,1.0\n", encoding="utf-8")
    with Store(tmp_path / "s.sqlite") as st, pytest.raises(UnusableInput) as err:
        import_file(log, st)
    assert "--map COLUMN=time" in str(err.value)
    assert "--" not in err.value.page_message and "header line" in err.value.page_message


# -- 13. the store keeps one copy of readings it already holds --------------------------------

def _chunk_rows(store: Path) -> int:
    with sqlite3.connect(store) as db:
        return db.execute("SELECT COALESCE(SUM(n), 0) FROM chunks").fetchone()[0]


def test_reimporting_the_same_readings_from_a_file_differing_in_trailing_newlines_stores_nothing_new(tmp_path):
    rows = _log_lines(60)
    store = tmp_path / "s.sqlite"
    paths = []
    for k, tail in enumerate(["\n", "\n\n\n", "\r\n"]):
        p = tmp_path / f"copy{k}.csv"
        p.write_text(("\n".join(rows) + tail).replace("\n", "\r\n") if tail == "\r\n" else "\n".join(rows) + tail,
                     encoding="utf-8")
        paths.append(p)
    first = drawdown("--store", str(store), "import", "--json", str(paths[0]))
    assert first.returncode == 0, first.stderr
    f0 = json.loads(first.stdout)["files"][0]
    assert (f0["rows_stored"], f0["rows_already_held"], f0["rows_added"]) == (60, 0, 60)
    again = drawdown("--store", str(store), "import", "--json", str(paths[1]), str(paths[2]))
    assert again.returncode == 0, again.stderr
    for f in json.loads(again.stdout)["files"]:
        # the import contract's keys are all still there; the new ones say what was held
        assert {"path", "rows_stored", "rows_rejected", "rejected_by_reason", "already_imported", "channels",
                "sign_inverted", "sample_interval_s", "gaps", "quarantine"} <= set(f)
        assert f["already_imported"] is False  # another file (hash), the same readings (content)
        assert (f["rows_stored"], f["rows_rejected"], f["rows_already_held"], f["rows_added"]) == (60, 0, 60, 0)
        assert f["rows_stored"] + f["rows_rejected"] == f["data_lines"]
    assert _chunk_rows(store) == 60  # one copy on disk, not three
    human = drawdown("--store", str(store), "import", str(paths[0]).replace("copy0", "copy0"))
    assert "already imported" in human.stdout


def test_an_overlapping_log_adds_only_the_readings_not_yet_held(tmp_path):
    from drawdown.collector.csv_file import import_file
    from drawdown.collector.store import Store

    rows = _log_lines(60)
    a, b = tmp_path / "a.csv", tmp_path / "b.csv"
    a.write_text("\n".join(rows[:41]) + "\n", encoding="utf-8")            # lines 1..40
    changed = rows[30].rsplit(",", 1)[0] + ",-9.9"                          # same time, a different value
    b.write_text("\n".join([rows[0], *rows[21:30], changed, *rows[31:]]) + "\n", encoding="utf-8")  # 21..60
    with Store(tmp_path / "s.sqlite") as st:
        import_file(a, st)
        r = import_file(b, st)
        df = st.read()
    assert (r.rows_stored, r.rows_already_held, r.rows_added) == (40, 19, 21)
    assert _chunk_rows(tmp_path / "s.sqlite") == 40 + 21
    assert len(df) == 60 and float(df["current_A"].iloc[29]) == pytest.approx(-9.9)  # the newer value wins


def test_the_import_summary_says_how_many_rows_were_already_held(tmp_path):
    rows = _log_lines(30)
    (tmp_path / "a.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    (tmp_path / "b.csv").write_text("\n".join(rows) + "\n\n", encoding="utf-8")
    store = str(tmp_path / "s.sqlite")
    assert drawdown("--store", store, "import", str(tmp_path / "a.csv")).returncode == 0
    r = drawdown("--store", store, "import", str(tmp_path / "b.csv"))
    assert r.returncode == 0, r.stderr
    assert "stored 30, rejected 0" in r.stdout and "30 of the stored lines were already held" in r.stdout
    assert "0 added - nothing new" in r.stdout


# -- 14. status on a read-only store, a full disk -----------------------------------------------

def _store_with_readings(folder: Path) -> Path:
    folder.mkdir(parents=True, exist_ok=True)
    log = folder / "trip.csv"
    log.write_text("\n".join(_log_lines(30)) + "\n", encoding="utf-8")
    store = folder / "s.sqlite"
    r = drawdown("--store", str(store), "import", str(log))
    assert r.returncode == 0, r.stderr
    return store


def _in_private_mounts(script: str) -> subprocess.CompletedProcess:
    """Run ``script`` in a private user + mount namespace (root there, nobody's files touched)."""
    return subprocess.run(["unshare", "-rm", "sh", "-ec", script], capture_output=True, text=True, timeout=240)


def _namespaces_work() -> str | None:
    if shutil.which("unshare") is None:
        return "no unshare(1) on this machine"
    probe = subprocess.run(["unshare", "-rm", "true"], capture_output=True, text=True)
    return None if probe.returncode == 0 else f"unprivileged mount namespaces refused: {probe.stderr.strip()}"


def test_a_read_only_store_opens_for_reading_and_refuses_writes_itself(tmp_path):
    from drawdown.collector.store import Store

    store = _store_with_readings(tmp_path / "ro")
    before = store.read_bytes()
    with Store(store, read_only=True) as st:
        assert len(st.read()) == 30 and st.imports()[0]["rows_stored"] == 30
        with pytest.raises(sqlite3.OperationalError, match="readonly"):
            st.execute("INSERT INTO events (t_us, kind, detail_json) VALUES (0, 'x', '{}')")
    assert store.read_bytes() == before


def test_status_on_a_read_only_file_system_works_and_says_read_only(tmp_path):
    why = _namespaces_work()
    if why:
        pytest.skip(f"a read-only file system needs a private mount namespace: {why}")
    folder = tmp_path / "ro"
    store = _store_with_readings(folder)
    exe = drawdown.__globals__["_ENTRY"]
    cmd = f"'{exe}'" if exe.exists() else "python -m drawdown.cli"
    r = _in_private_mounts(
        f"mount --bind '{folder}' '{folder}'; mount -o remount,bind,ro '{folder}'; "
        f"touch '{folder}/probe' 2>/dev/null && echo WRITABLE; "
        f"{cmd} --store '{store}' status; echo rc=$?; "
        f"{cmd} --store '{store}' status --json; "
        f"{cmd} --store '{store}' import '{folder}/trip.csv' || echo import-rc=$?")
    out = r.stdout
    assert "WRITABLE" not in out, "the bind mount did not make the folder read-only"
    assert "rc=0" in out and "battery" in out and "read-only" in out, (out, r.stderr)
    assert "is it a drawdown store" not in out + r.stderr
    j = json.loads(out[out.index("{"): out.rindex("}") + 1])
    assert j["writable"] is False and j["channels"]["battery"]["rows"] == 30
    assert "import-rc=2" in out and "read-only" in r.stderr and "Traceback" not in r.stderr


def test_import_onto_a_full_disk_says_disk_full_and_status_says_so_too(tmp_path):
    why = _namespaces_work()
    if why:
        pytest.skip(f"a small full disk needs a private mount namespace (tmpfs): {why}")
    disk = tmp_path / "disk"
    disk.mkdir()
    big = tmp_path / "big.csv"
    big.write_text("\n".join(_log_lines(1)[:1] + [f"2024-06-0{1 + i // 86400}T{i // 3600 % 24:02d}:{i // 60 % 60:02d}:"
                                                  f"{i % 60:02d}Z,{12 + i / 1e5:.5f},-2.0" for i in range(20_000)])
                   + "\n", encoding="utf-8")
    small = tmp_path / "small.csv"
    small.write_text("\n".join(_log_lines(30)) + "\n", encoding="utf-8")
    exe = drawdown.__globals__["_ENTRY"]
    cmd = f"'{exe}'" if exe.exists() else "python -m drawdown.cli"
    r = _in_private_mounts(
        f"mount -t tmpfs -o size=400k tmpfs '{disk}'; "
        f"{cmd} --store '{disk}/s.sqlite' import '{small}' > /dev/null; "
        f"head -c 300000 /dev/zero > '{disk}/filler' || true; "
        f"{cmd} --store '{disk}/s.sqlite' import '{big}' || echo import-rc=$?; "
        f"{cmd} --store '{disk}/s.sqlite' status; echo status-rc=$?; "
        f"sqlite3 '{disk}/s.sqlite' 'PRAGMA integrity_check' 2>/dev/null || true")
    assert "import-rc=2" in r.stdout, (r.stdout, r.stderr)
    assert "the disk is full" in r.stderr and "Traceback" not in r.stderr and "internal error" not in r.stderr
    assert "status-rc=0" in r.stdout and "disk full" in r.stdout


def test_a_file_that_is_not_a_store_is_named_so_by_status(tmp_path):
    junk = tmp_path / "s.sqlite"
    junk.write_bytes(b"this is not a database at all " * 100)
    r = drawdown("--store", str(junk), "status")
    assert r.returncode == 2 and "Traceback" not in r.stderr
    assert "not a drawdown store" in r.stderr and str(junk) in r.stderr
