"""One answer, four faces, in a real headless Chromium (issue 12, item 3).

The answer is built once per store; the command line's text, its JSON, the served pages' DOM
(Debian's Chromium driven by playwright) and the HTML report must show the same figures: the
usable capacity, the use per day, and for every cable run its mm², AWG and fuse. The store is
the bundled 'autumn-van' scenario served by a real ``drawdown serve`` process.
"""

from __future__ import annotations

import contextlib
import io
import json
import re

import pytest

from drawdown.dashboard import labels
from drawdown.cli import main
from test_dashboard_browser import CHROMIUM, browser, demo, server, watched  # noqa: F401 (fixtures)

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not CHROMIUM.exists(), reason="needs Debian's chromium at /usr/bin/chromium"),
]

NBSP = "\u202f"  # between a figure and its unit on the pages

#: Rows of the tables in a box, as lists of cell texts (header row left out).
ROWS_JS = """(sel) => Array.from(document.querySelectorAll(sel + ' tbody tr'))
  .map(tr => Array.from(tr.querySelectorAll('td')).map(td => td.textContent.trim()))"""

#: The value of the card labelled ``label`` (its label text exactly).
CARD_JS = """(label) => { const c = Array.from(document.querySelectorAll('.card'))
  .find(c => c.querySelector('.card-label') && c.querySelector('.card-label').textContent.trim() === label);
  return c ? [c.querySelector('.card-value').textContent.trim(),
              (c.querySelector('.card-note') || {textContent: ''}).textContent.trim()] : null; }"""


@pytest.fixture(scope="module")
def faces(demo, tmp_path_factory):
    """The command line's text and JSON and the HTML report, each made once from the demo store."""
    html_path = tmp_path_factory.mktemp("faces") / "r.html"
    # capsys is per test; this fixture serves the module, so each command writes into a buffer.

    def run(*argv: str) -> str:
        buf = io.StringIO()
        with contextlib.redirect_stdout(buf):
            rc = main(["--store", str(demo.store_path), "--system", str(demo.system_path), *argv])
        assert rc == 0
        return buf.getvalue()

    report = json.loads(run("report", "--json", "--html", str(html_path)))
    return {"report": report, "report_text": run("report"), "size": json.loads(run("size", "--json")),
            "html": html_path.read_text(encoding="utf-8"), "size_text": run("size")}


def _open(watched, server, path: str, ready: str):
    w = watched(1366)
    assert w.page.goto(server + path).status == 200
    w.page.wait_for_selector(ready, state="attached", timeout=60_000)
    w.settle()
    return w


def test_usable_capacity_is_the_same_on_every_face(server, watched, faces):
    b = faces["report"]["battery"]
    w = _open(watched, server, "/health", ".card-label")
    w.page.wait_for_function(CARD_JS, arg="Usable capacity", timeout=60_000)
    value, note = w.page.evaluate(CARD_JS, "Usable capacity")
    if b["usable_Ah"] is None:  # the figure is unknown: every face says so, with the same reason
        why = labels.for_people(b["usable_Ah_why"])
        assert value == "–" and note == why
        assert f"usable capacity: unknown - {why}" in faces["report_text"]
        assert why.replace(">", "&gt;") in faces["html"] or why in faces["html"]
        assert w.errors == []
        return
    assert value == f"{b['usable_Ah']:.0f}{NBSP}Ah"
    lo, hi = b["usable_Ah_ci95"]
    assert note == f"95 % interval {lo:.0f}–{hi:.0f} Ah"
    assert f"usable capacity {b['usable_Ah']:.1f} Ah (95 % interval {lo:.1f}-{hi:.1f} Ah)" in faces["report_text"]
    assert f"{b['usable_Ah']:.0f} Ah" in faces["html"]
    assert w.errors == []


def test_use_per_day_is_the_same_on_every_face(server, watched, faces):
    days = faces["report"]["days"]
    w = _open(watched, server, "/trip", ".table-wrap table")
    rows = {r[0]: r for r in w.page.evaluate(ROWS_JS, ".table-wrap") if r}
    for d in days:
        used = f"{abs(d['consumed_Ah']):.1f}"
        assert rows[d["date"]][1] == used, (d["date"], rows[d["date"]])  # the page's Used [Ah] column
        assert re.search(rf"^{d['date']}\s+\S+\s+{re.escape(used)}\s", faces["report_text"], re.M)
        assert f"<td>{d['consumed_Ah']:.1f}</td>" in faces["html"]
    assert len(rows) == len(days)
    assert w.errors == []


def test_every_cable_run_has_the_same_size_and_fuse_on_every_face(server, watched, faces):
    runs = faces["size"]["runs"]
    assert runs, "the demo system has cable runs to size"
    w = _open(watched, server, "/planner", "#plan-runs-table table")
    page_rows = w.page.evaluate(ROWS_JS, "#plan-runs-table")
    want = [[str(v) for v in row.values()] for row in labels.run_rows(runs)]
    assert page_rows == want  # name, current, length, mm², drop, AWG, drop, fuse: cell for cell
    for row in labels.run_rows(runs):
        assert "".join(f"<td>{v}</td>" for v in row.values()) in faces["html"]
        # The command line's cable table: the run's name, then its mm², AWG and fuse on one line.
        line = next(x for x in faces["size_text"].splitlines() if x.strip().startswith(str(row["name"])))
        for said in (f"-> {row['cross_section_mm2']} mm² ", f" or {row['awg']} AWG ", f"fuse {row['fuse_A']} A"):
            assert said in line, (said, line)
    battery, _ = w.page.evaluate(CARD_JS, "Battery")
    assert battery == f"{faces['size']['battery']['capacity_Ah']:,.0f}{NBSP}Ah"
    assert w.errors == []
