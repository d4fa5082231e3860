"""The dashboard in a real headless Chromium (Debian's /usr/bin/chromium driven by playwright).

A real `drawdown serve` process runs on a free loopback port over a store built
from the simulated 'autumn-van' scenario. Each test collects the browser's
console errors, uncaught page errors and failed Dash callback responses
(``/_dash-update-component`` answering >= 400) and requires none.

Screenshots of every page at 1366 px and 390 px wide are written to
artifacts/screenshots/ (git-ignored) for people to look at.

Never run ``playwright install``: the tests use the system Chromium.
"""

from __future__ import annotations

import shutil
import time
from pathlib import Path
from types import SimpleNamespace

import pytest

from test_dashboard_figures import build_demo_store
from test_security import start_server, stop_server

CHROMIUM = Path("/usr/bin/chromium")
ROOT = Path(__file__).resolve().parents[1]
SHOTS = ROOT / "artifacts" / "screenshots"
TOKEN = "browser-test-token-0123456789"

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not CHROMIUM.exists(), reason="needs Debian's chromium at /usr/bin/chromium "
                                                     "(apt-get install chromium; .ci/run does it)"),
]

PAGES = [("/", "now"), ("/trip", "trip"), ("/health", "health"), ("/solar", "solar"), ("/planner", "planner"),
         ("/setup", "setup")]
WIDTHS = (1366, 390)


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    store_path, system_path = build_demo_store(tmp_path_factory.mktemp("browser"))
    return SimpleNamespace(store_path=store_path, system_path=system_path)


@pytest.fixture(scope="module")
def server(demo, tmp_path_factory):
    # A private copy: the upload test writes to the store.
    folder = tmp_path_factory.mktemp("served")
    store, system = folder / "readings.sqlite", folder / "system.toml"
    shutil.copy(demo.store_path, store)
    shutil.copy(demo.system_path, system)
    proc, base = start_server(store, system)
    yield base
    stop_server(proc)


@pytest.fixture(scope="module")
def browser():
    sync_api = pytest.importorskip("playwright.sync_api")
    with sync_api.sync_playwright() as p:
        b = p.chromium.launch(executable_path=str(CHROMIUM), args=[
            "--headless", "--no-sandbox", "--disable-gpu", "--disable-background-networking",
            "--disable-component-update", "--disable-sync", "--no-first-run", "--disable-quic"])
        yield b
        b.close()


class Watched:
    """A page with its console errors, page errors and failed callback responses collected."""

    def __init__(self, browser, width: int):
        self.context = browser.new_context(viewport={"width": width, "height": 900 if width > 500 else 844},
                                           device_scale_factor=1)
        self.page = self.context.new_page()
        self.errors: list[str] = []
        self.failed: list[str] = []  # every response >= 400, by URL (to say which one failed)
        self.page.on("console", lambda m: self.errors.append(f"console: {m.text}") if m.type == "error" else None)
        self.page.on("pageerror", lambda e: self.errors.append(f"page error: {e}"))
        self.page.on("response", self._response)

    def _response(self, r) -> None:
        if r.status >= 400:
            self.failed.append(f"{r.status} {r.url}")
        if "_dash-update-component" in r.url and r.status >= 400:
            self.errors.append(f"callback {r.status}: {r.request.post_data[:200] if r.request.post_data else ''}")

    def settle(self, timeout_s: float = 60) -> None:
        """Wait until Dash has no callback in flight (and the network is idle)."""
        self.page.wait_for_load_state("networkidle", timeout=timeout_s * 1000)
        deadline = time.monotonic() + timeout_s
        while time.monotonic() < deadline:
            busy = self.page.evaluate("() => document.querySelectorAll('[data-dash-is-loading=\"true\"]').length")
            if not busy:
                return
            time.sleep(0.2)
        raise AssertionError("Dash callbacks still running after the timeout")

    def dash_error_overlay(self) -> list[str]:
        return self.page.eval_on_selector_all(".dash-fe-error__title, .dash-error-card", "els => els.map(e => e.innerText)")

    def close(self) -> None:
        self.context.close()


@pytest.fixture()
def watched(browser):
    opened: list[Watched] = []

    def make(width: int = 1280) -> Watched:
        w = Watched(browser, width)
        opened.append(w)
        return w

    yield make
    for w in opened:
        w.close()


@pytest.mark.parametrize("width", WIDTHS)
@pytest.mark.parametrize("path,name", PAGES)
def test_page_loads_without_console_or_callback_errors(server, watched, path, name, width):
    w = watched(width)
    response = w.page.goto(server + path)
    assert response.status == 200
    w.page.wait_for_selector("h1", timeout=30_000)
    w.settle()
    assert w.errors == []
    assert w.dash_error_overlay() == []
    assert w.page.inner_text("h1").strip()
    if name != "setup":
        assert w.page.locator(".js-plotly-plot").count() >= 1
    SHOTS.mkdir(parents=True, exist_ok=True)
    w.page.screenshot(path=str(SHOTS / f"{name}-{width}.png"), full_page=True)
    # Usable on a phone: nothing wider than the screen (tables scroll inside their own box).
    overflow = w.page.evaluate("() => document.documentElement.scrollWidth - window.innerWidth")
    assert overflow <= 0, f"{path} scrolls sideways by {overflow} px at {width} px"


def _ledger_dates(w: Watched) -> list[str]:
    return w.page.evaluate("""() => {
        const el = document.querySelector('#trip-ledger-graph .js-plotly-plot');
        const bar = (el && el.data || []).find(t => t.name === 'consumed');
        return bar ? Array.from(bar.x) : [];
    }""")


def test_trip_range_picker_changes_the_ledger(server, watched):
    w = watched(1280)
    w.page.goto(server + "/trip")
    w.page.wait_for_selector("#trip-ledger-graph .js-plotly-plot")
    w.settle()
    before = _ledger_dates(w)
    assert len(before) >= 3
    # Dash 4's DatePickerRange: the id sits on the start input; the end input is its sibling.
    end_input = w.page.locator("input.dash-datepicker-end-date")
    end_input.click()
    end_input.fill(before[1])
    end_input.press("Enter")
    w.page.keyboard.press("Escape")
    w.page.wait_for_function("n => { const el = document.querySelector('#trip-ledger-graph .js-plotly-plot');"
                             " const b = (el && el.data || []).find(t => t.name === 'consumed');"
                             " return b && b.x.length !== n; }", arg=len(before), timeout=30_000)
    w.settle()
    after = _ledger_dates(w)
    assert after == before[:2]
    assert w.page.locator(f"#{'trip-days-table'} tbody tr").count() == 2
    assert w.errors == []


def test_planner_recomputes_when_a_target_changes(server, watched):
    w = watched(1280)
    w.page.goto(server + "/planner")
    w.page.wait_for_selector("#plan-result .card, #plan-result .notice")
    w.settle()
    assert w.page.locator("#plan-result .card").count() > 0, w.page.inner_text("#plan-result")
    before = w.page.inner_text("#plan-result")
    box = w.page.locator("#plan-autonomy-days")
    box.fill("6")
    box.press("Enter")
    w.page.wait_for_function("t => document.querySelector('#plan-result').innerText !== t", arg=before,
                             timeout=30_000)
    w.settle()
    after = w.page.inner_text("#plan-result")
    assert "For 6.0 days parked" in after
    assert after != before
    assert w.errors == []


def test_upload_of_a_bad_file_shows_its_error_message(server, watched):
    w = watched(1280)
    w.page.goto(server + "/setup")
    w.page.wait_for_selector("#setup-upload input[type=file]", state="attached")
    w.settle()
    w.page.set_input_files("#setup-upload input[type=file]", files=[
        {"name": "notes.csv", "mimeType": "text/csv", "buffer": b"dear diary\nwe drove to the fjord today\n"}])
    w.page.wait_for_selector("#setup-upload-result .notice-error", timeout=30_000)
    text = w.page.inner_text("#setup-upload-result")
    assert "Import failed" in text and "notes.csv:" in text
    assert w.errors == []


def test_setup_refuses_an_invalid_system_description(server, watched):
    w = watched(1280)
    w.page.goto(server + "/setup")
    w.page.wait_for_selector("#setup-system-text")
    w.settle()
    area = w.page.locator("#setup-system-text")
    area.fill(area.input_value().replace("rated_capacity_Ah = 200", "rated_capacity_Ah = -1"))
    w.page.click("#setup-save")
    w.page.wait_for_selector("#setup-messages .notice-error", timeout=30_000)
    text = w.page.inner_text("#setup-messages")
    assert "battery.rated_capacity_Ah" in text and "Nothing was written" in text
    assert w.errors == []


def test_request_without_the_token_is_refused_when_a_token_is_configured(demo, watched):
    # Served on 127.0.0.1 but configured as off loopback (--token): tests never bind another interface.
    proc, base = start_server(demo.store_path, demo.system_path, token=TOKEN)
    try:
        stranger = watched(1280)
        refused = stranger.page.goto(base + "/")
        assert refused.status == 401
        assert "access token" in stranger.page.inner_text("body")
        w = watched(1280)  # a fresh browser context: no cookie yet
        admitted = w.page.goto(f"{base}/?token={TOKEN}")
        assert admitted.status == 200
        w.page.wait_for_selector("#live-stamp:has-text('Newest reading')", timeout=30_000)
        w.settle()
        assert w.errors == [], w.failed  # the callbacks got through on the cookie alone
        w.page.goto(base + "/trip")  # later pages need no token in the address
        w.page.wait_for_selector("h1:has-text('Trip review')")
        assert w.errors == []
    finally:
        stop_server(proc)


def test_planner_page_dom_shows_what_size_json_says(server, demo, watched, capsys):
    """The planner's cards and cable table in the browser are `drawdown size --json`'s, run by run (issue 12)."""
    import json

    from drawdown.dashboard import labels
    from drawdown.cli import main

    assert main(["--store", str(demo.store_path), "--system", str(demo.system_path), "size", "--json",
                 "--autonomy-days", "2"]) == 0
    j = json.loads(capsys.readouterr().out)
    w = watched(390)
    w.page.goto(server + "/planner")
    w.page.wait_for_selector("#plan-runs-table tbody tr")
    w.settle()
    values = w.page.eval_on_selector_all("#plan-result .card .card-value", "els => els.map(e => e.innerText)")
    assert values[0].replace("\u202f", " ") == f"{j['battery']['capacity_Ah']:,.0f} Ah"
    assert values[1].replace("\u202f", " ") == f"{j['solar']['array_W']:,.0f} W"
    rows = w.page.eval_on_selector_all("#plan-runs-table tbody tr",
                                       "trs => trs.map(tr => Array.from(tr.cells).map(td => td.innerText))")
    want = [list(r.values()) for r in labels.run_rows(j["runs"])]
    assert [[c.strip() for c in r][:1] for r in rows] == [[w_[0]] for w_ in want]
    # On a phone each row is a card: every cell is visible and labelled with its column.
    labels_shown = w.page.eval_on_selector_all("#plan-runs-table tbody tr:first-child td",
                                               "tds => tds.map(td => getComputedStyle(td, '::before').content)")
    assert labels_shown[1].strip('"') == "Current [A]"
    for got, exp in zip(rows, want):
        assert [c.strip() for c in got] == exp
    assert w.errors == []
