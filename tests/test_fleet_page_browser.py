"""The Fleet page in a real headless Chromium (Debian's /usr/bin/chromium driven by playwright).

A small invented fleet (3 vans x 6 days, a reading every 120 s: `drawdown simulate --fleet`) is
ingested (`drawdown fleet ingest`) and served by a real `drawdown serve --dataset` process on a free
loopback port, whose fleet report runs in the background as it does for a user. The page's table is
compared with `drawdown fleet report --json` run on the same dataset by this test; a vehicle opened
from it must show, on its Trip review, what `drawdown report --json` says of the store the
dashboard wrote for it. Console errors, page errors and failed callbacks fail every test (the
helpers of tests/test_dashboard_browser.py). Screenshots go to artifacts/screenshots/.
"""

from __future__ import annotations

import contextlib
import io
import json
import os
import socket
import statistics
import subprocess
import sys
import time
from pathlib import Path

import pytest

from drawdown.cli import main
from drawdown.dashboard import labels
from test_dashboard_browser import CHROMIUM, ROOT, SHOTS, browser, demo, server, watched  # noqa: F401 (fixtures)
from test_security import _free_port, stop_server

pytestmark = [
    pytest.mark.browser,
    pytest.mark.slow,
    pytest.mark.skipif(not CHROMIUM.exists(), reason="needs Debian's chromium at /usr/bin/chromium "
                                                     "(apt-get install chromium; .ci/run does it)"),
]
pytest.importorskip("dask")

NBSP = "\u202f"  # between a figure and its unit on the pages
#: How long the page may take to show the table (the report analyses three vans) [ms]; a wait, not a check.
TABLE_WAIT_MS = 300_000

#: Per body row of the fleet table: the vehicle and every cell's text (closed details included).
ROWS_JS = """() => Array.from(document.querySelectorAll('#fleet-table tbody tr')).map(tr => ({
  vehicle: tr.dataset.vehicle, cls: tr.className,
  cells: Object.fromEntries(Array.from(tr.querySelectorAll('td')).map(td => [td.dataset.col || 'error',
                                                                              td.textContent.trim()]))}))"""


def _cli(*argv: str) -> str:
    buf = io.StringIO()
    with contextlib.redirect_stdout(buf):
        rc = main(list(argv))
    assert rc == 0, argv
    return buf.getvalue()


@pytest.fixture(scope="module")
def fleet(tmp_path_factory):
    """The fleet's dataset, its report as `drawdown fleet report --json` gives it, and a serving dashboard."""
    folder = tmp_path_factory.mktemp("fleet-browser")
    sim, ds, cache = folder / "sim", folder / "ds", folder / "cache"
    _cli("simulate", "--fleet", "3", "--days", "6", "--interval", "120", "--out", str(sim))
    _cli("fleet", "ingest", str(sim), "--dataset", str(ds))
    expected = json.loads(_cli("fleet", "report", "--dataset", str(ds), "--json"))
    port = _free_port()
    cmd = [sys.executable, "-m", "drawdown", "--store", str(folder / "own" / "readings.sqlite"), "serve",
           "--host", "127.0.0.1", "--port", str(port), "--dataset", str(ds), "--cache", str(cache)]
    proc = subprocess.Popen(cmd, cwd=ROOT, env={**os.environ, "PYBAMM_DISABLE_TELEMETRY": "true"},
                            stdout=subprocess.DEVNULL, stderr=subprocess.PIPE)
    deadline = time.monotonic() + 60
    while True:
        if proc.poll() is not None:
            raise RuntimeError(f"drawdown serve exited early: {proc.stderr.read().decode(errors='replace')}")
        try:
            with socket.create_connection(("127.0.0.1", port), timeout=0.5):
                break
        except OSError:
            if time.monotonic() > deadline:
                proc.kill()
                raise RuntimeError("drawdown serve did not start listening within 60 s") from None
            time.sleep(0.2)
    yield {"base": f"http://127.0.0.1:{port}", "dataset": ds, "cache": cache, "expected": expected}
    stop_server(proc)


def _table(watched, fleet, path: str = "/fleet", width: int = 1366):
    w = watched(width)
    assert w.page.goto(fleet["base"] + path).status == 200
    w.page.wait_for_selector("#fleet-table tbody tr", timeout=TABLE_WAIT_MS)
    w.settle()
    return w


def _usable(r: dict) -> list[str]:
    if r["usable_Ah"] is None:
        return ["unknown", labels.sentence(r["usable_Ah_why"])]
    lo, hi = r["usable_Ah_ci95"]
    return [f"{r['usable_Ah']:,.0f}{NBSP}Ah", f"95 %: {lo:.0f}–{hi:.0f} Ah"]


def _fade(r: dict) -> list[str]:
    if r["fade_pct_per_month"] is None:
        return ["unknown", labels.sentence(r["fade_why"])]
    lo, hi = r["fade_pct_per_month_ci95"]
    return [f"{r['fade_pct_per_month']:+.2f}{NBSP}%/month", f"95 %: {lo:+.2f} to {hi:+.2f}"]


def test_the_table_holds_every_vehicle_with_the_fleet_reports_figures(fleet, watched):
    w = _table(watched, fleet)
    rows = w.page.evaluate(ROWS_JS)
    want = fleet["expected"]["fleet"]
    assert [r["vehicle"] for r in rows] == [r["vehicle"] for r in want]  # most urgent first, as the report
    for got, r in zip(rows, want):
        cells = got["cells"]
        if r["error"]:
            assert "row-error" in got["cls"] and labels.for_people(r["error"]) in cells["error"]
            continue
        for text in _usable(r):
            assert text in cells["usable"], (r["vehicle"], text, cells["usable"])
        health = "–" if r["state_of_health_pct"] is None else f"{r['state_of_health_pct']:.0f}{NBSP}%"
        assert cells["health"].startswith(health) and f"of {r['rated_Ah']:g} Ah rated" in cells["health"]
        for text in _fade(r):
            assert text in cells["fade"], (r["vehicle"], text, cells["fade"])
        assert cells["use"].startswith(f"{r['daily_use_Ah_p50']:,.0f} / {r['daily_use_Ah_p90']:,.0f}{NBSP}Ah")
        assert f"{r['daily_use_Wh_p50']:,.0f} / {r['daily_use_Wh_p90']:,.0f}{NBSP}Wh" in cells["use"]
        ratio = r["solar_performance_ratio"]
        assert cells["solar"].startswith("–" if ratio is None else f"{ratio:.2f}")
        assert cells["parked"] == f"{r['days_parked_p50']:.1f} / {r['days_parked_p90']:.1f}{NBSP}days"
        for flag in r["flags"]:
            assert labels.sentence(r["flag_reasons"][flag]) in cells["urgency"]
        if not r["flags"]:
            assert cells["urgency"] == "none"
        assert f"{labels.plural(r['complete_days'], 'whole day')}" in cells["vehicle"]
    # The server's cached report is the same report, and it sits in --cache, not in the dataset.
    cached = list(fleet["cache"].glob("report-*.json"))
    assert len(cached) == 1
    assert json.loads(cached[0].read_text())["report"]["fleet"] == want
    assert not list(Path(fleet["dataset"]).rglob("report-*.json"))
    SHOTS.mkdir(parents=True, exist_ok=True)
    w.page.screenshot(path=str(SHOTS / "fleet-1366.png"), full_page=True)
    assert w.page.evaluate("() => document.documentElement.scrollWidth - window.innerWidth") <= 0
    cut = w.page.evaluate("() => { const b = document.querySelector('#fleet-table'); "
                          "return b.scrollWidth - b.clientWidth; }")
    assert cut <= 1, f"the fleet table is cut by {cut} px at 1366 px"
    assert w.errors == []


def _order(w) -> list[str]:
    return w.page.eval_on_selector_all("#fleet-table tbody tr", "trs => trs.map(tr => tr.dataset.vehicle)")


def _by(rows: list[dict], key: str, reverse: bool) -> list[str]:
    known = [r for r in rows if r.get(key) is not None]
    return [r["vehicle"] for r in sorted(known, key=lambda r: r[key], reverse=reverse)] + \
        [r["vehicle"] for r in rows if r.get(key) is None]


def test_a_column_header_sorts_the_table_and_a_second_click_reverses_it(fleet, watched):
    w = _table(watched, fleet)
    want = fleet["expected"]["fleet"]
    header = "#fleet-table th a.sort-link:has-text('Use per day')"
    w.page.click(header)
    w.page.wait_for_selector("#fleet-table th[aria-sort='descending'] a:has-text('Use per day')")
    w.settle()
    assert "sort=use&order=desc" in w.page.url
    assert _order(w) == _by(want, "daily_use_Ah_p50", reverse=True)
    w.page.click(header)
    w.page.wait_for_selector("#fleet-table th[aria-sort='ascending'] a:has-text('Use per day')")
    w.settle()
    assert _order(w) == _by(want, "daily_use_Ah_p50", reverse=False)
    w.page.click("#fleet-table th a.sort-link:has-text('Vehicle')")
    w.page.wait_for_selector("#fleet-table th[aria-sort='ascending'] a:has-text('Vehicle')")
    w.settle()
    assert _order(w) == sorted(r["vehicle"] for r in want)
    assert w.errors == []


def test_a_bad_sort_in_the_address_is_named_on_the_page(fleet, watched):
    w = _table(watched, fleet, "/fleet?sort=colour")
    assert "sort='colour' is not a column of the fleet table" in w.page.inner_text(".notice-warn")
    assert _order(w) == [r["vehicle"] for r in fleet["expected"]["fleet"]]
    assert w.errors == []


#: The value and note of the card labelled ``label`` (its label text exactly).
CARD_JS = """(label) => { const c = Array.from(document.querySelectorAll('.card'))
  .find(c => c.querySelector('.card-label') && c.querySelector('.card-label').textContent.trim() === label);
  return c ? [c.querySelector('.card-value').textContent.trim(),
              (c.querySelector('.card-note') || {textContent: ''}).textContent.trim()] : null; }"""


def test_opening_a_vehicle_shows_its_own_data_on_its_pages(fleet, watched):
    want = fleet["expected"]["fleet"]
    name = want[-1]["vehicle"]  # not the first row: the pages must follow the click, not the order
    w = _table(watched, fleet)
    w.page.click(f"#fleet-table a.vehicle-link:text-is('{name}')")
    w.page.wait_for_url("**/trip", timeout=120_000)
    w.page.wait_for_function(CARD_JS, arg="Used per whole day", timeout=120_000)
    w.settle()
    assert w.page.inner_text(".vehicle-bar").startswith(f"Vehicle {name}")
    # What `drawdown report --json` says of the store the dashboard wrote for this vehicle.
    stores = list((fleet["cache"] / "vehicles" / name).glob("*/readings.sqlite"))
    assert len(stores) == 1
    report = json.loads(_cli("--store", str(stores[0]), "--system", str(stores[0].parent / "system.toml"),
                             "report", "--json"))
    days = report["days"]
    whole = [abs(d["consumed_Ah"]) for d in days if d["complete"] and d["consumed_Ah"] is not None]
    assert w.page.evaluate(CARD_JS, "Days in range") == [f"{len(days)}", f"{len(whole)} whole"]
    used = w.page.evaluate(CARD_JS, "Used per whole day")[0]
    assert used == f"{statistics.median(whole):,.0f}{NBSP}Ah"
    row = next(r for r in want if r["vehicle"] == name)
    assert used == f"{row['daily_use_Ah_p50']:,.0f}{NBSP}Ah"  # and the fleet table's median use
    assert w.page.locator("#trip-days-table tbody tr").count() == len(days)
    assert w.errors == []
    # The other pages follow the same vehicle; the way back is in the bar.
    w.page.click("#app-nav a:has-text('Battery health')")
    w.page.wait_for_function(CARD_JS, arg="Usable capacity", timeout=120_000)
    w.settle()
    value = w.page.evaluate(CARD_JS, "Usable capacity")[0]
    b = report["battery"]
    assert value == ("–" if b["usable_Ah"] is None else f"{b['usable_Ah']:,.0f}{NBSP}Ah")
    assert w.page.inner_text(".vehicle-bar").startswith(f"Vehicle {name}")
    w.page.click(".vehicle-bar a:has-text('back to the fleet')")
    w.page.wait_for_selector(f"#fleet-table tr.row-open[data-vehicle='{name}']", timeout=60_000)
    assert "open now" in w.page.inner_text(f"#fleet-table tr[data-vehicle='{name}'] td:first-child")
    assert w.errors == []


def test_the_fleet_page_fits_a_phone_and_sorts_there_too(fleet, watched):
    w = _table(watched, fleet, width=390)
    SHOTS.mkdir(parents=True, exist_ok=True)
    w.page.screenshot(path=str(SHOTS / "fleet-390.png"), full_page=True)
    overflow = w.page.evaluate("() => document.documentElement.scrollWidth - window.innerWidth")
    assert overflow <= 0, f"the Fleet page scrolls sideways by {overflow} px at 390 px"
    wider = w.page.evaluate("""() => Array.from(document.querySelectorAll('#fleet-table td'))
        .map(td => td.getBoundingClientRect().right - window.innerWidth).filter(d => d > 0)""")
    assert wider == [], "a fleet card runs past the screen's edge"
    # Each row is a card with every value beside its column's name; the sort links are buttons above.
    labels_shown = w.page.eval_on_selector_all("#fleet-table tbody tr:first-child td",
                                               "tds => tds.map(td => getComputedStyle(td, '::before').content)")
    assert labels_shown[1].strip('"') == "Usable" and labels_shown[4].strip('"').startswith("Use per day")
    assert w.page.locator(".sort-bar").is_visible()
    w.page.click(".sort-bar a:has-text('Use')")
    w.page.wait_for_selector(".sort-bar a.active:has-text('Use')")
    w.settle()
    assert _order(w) == _by(fleet["expected"]["fleet"], "daily_use_Ah_p50", reverse=True)
    name = fleet["expected"]["fleet"][0]["vehicle"]
    w.page.click(f"#fleet-table a.vehicle-link:text-is('{name}')")
    w.page.wait_for_url("**/trip", timeout=120_000)
    w.page.wait_for_function(CARD_JS, arg="Used per whole day", timeout=120_000)
    w.settle()
    w.page.screenshot(path=str(SHOTS / "fleet-vehicle-trip-390.png"), full_page=True)
    assert w.page.evaluate("() => document.documentElement.scrollWidth - window.innerWidth") <= 0
    assert w.errors == []


def test_the_open_route_answers_a_bad_name_in_plain_words(fleet):
    import urllib.error
    import urllib.request

    with pytest.raises(urllib.error.HTTPError) as err:
        urllib.request.urlopen(fleet["base"] + "/fleet/open?vehicle=..%2F..%2Fetc", timeout=30)
    assert err.value.code == 400
    assert "use 1-80 letters, digits" in err.value.read().decode()


def test_without_a_dataset_the_fleet_page_says_how_to_start_and_is_not_in_the_links(server, watched):
    w = watched(390)
    assert w.page.goto(server + "/fleet").status == 200
    w.page.wait_for_selector(".notice-warn", timeout=60_000)
    w.settle()
    assert "No fleet dataset: start the dashboard with drawdown serve --dataset DIR" in w.page.inner_text(".notice-warn")
    assert w.page.locator("#app-nav a:has-text('Fleet')").count() == 0
    assert w.page.locator(".vehicle-bar").count() == 0
    assert w.errors == []
