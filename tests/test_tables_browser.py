"""Tables that read well at every width, in a real headless Chromium (issue 12, screenshot review).

At a desktop width every column of the Days and cable tables is in view; in a box narrower than
its table (a tablet) the first column stays pinned and a shadow on the right edge says there is
more; in the HTML report on a phone, a line above each wide table says to swipe sideways and the
first column stays pinned. The page itself never scrolls sideways.
"""

from __future__ import annotations

import pytest

from drawdown.cli import main
from test_dashboard_browser import CHROMIUM, browser, demo, server, watched  # noqa: F401 (fixtures)

pytestmark = [
    pytest.mark.browser,
    pytest.mark.skipif(not CHROMIUM.exists(), reason="needs Debian's chromium at /usr/bin/chromium"),
]

#: Per table box: how far its table reaches past the box [px].
OVERFLOW_JS = "() => Array.from(document.querySelectorAll('%s')).map(w => w.scrollWidth - w.clientWidth)"

#: After scrolling each wide box to its far right: how far the first cell of its first body row moved
#: from the box's left edge [px] (0 when the first column is pinned).
PINNED_JS = """(sel) => Array.from(document.querySelectorAll(sel)).filter(w => w.scrollWidth > w.clientWidth + 1)
  .map(w => { w.scrollLeft = w.scrollWidth; const td = w.querySelector('tbody tr td, tr + tr td');
              return Math.abs(td.getBoundingClientRect().left - w.getBoundingClientRect().left); })"""


def _open(watched, server, path, width):
    w = watched(width)
    assert w.page.goto(server + path).status == 200
    w.page.wait_for_selector(".table-wrap table", timeout=60_000)
    w.settle()
    return w


@pytest.mark.parametrize("path", ["/trip", "/planner"])
def test_tables_show_every_column_at_a_desktop_width(server, watched, path):
    w = _open(watched, server, path, 1366)
    cut = w.page.evaluate(OVERFLOW_JS % ".table-wrap")
    assert cut and max(cut) <= 1, f"{path}: a table is cut by {max(cut)} px at 1366 px with no hint"


def test_a_table_wider_than_its_box_keeps_its_first_column_and_a_scroll_cue(server, watched):
    w = _open(watched, server, "/trip", 640)  # above the phone width, where tables become cards
    assert max(w.page.evaluate(OVERFLOW_JS % ".table-wrap")) > 1  # the Days table is wider than its box here
    moved = w.page.evaluate(PINNED_JS, ".table-wrap")
    assert moved and max(moved) <= 2, f"the first column scrolled away by {moved} px"
    cue = w.page.evaluate("() => getComputedStyle(document.querySelector('.table-wrap')).backgroundAttachment")
    assert "local" in cue and "scroll" in cue  # the right-edge shadow that the scrolled content uncovers
    assert w.page.evaluate("() => document.documentElement.scrollWidth - window.innerWidth") <= 0


def test_html_report_on_a_phone_says_to_swipe_and_pins_the_first_column(demo, watched, tmp_path, capsys):
    out = tmp_path / "r.html"
    rc = main(["--store", str(demo.store_path), "--system", str(demo.system_path), "report", "--html", str(out)])
    capsys.readouterr()
    assert rc == 0
    phone = watched(390)
    phone.page.goto(out.as_uri())
    phone.page.wait_for_selector(".wide table")
    wide = phone.page.locator(".wide").count()
    assert wide >= 2  # the cable table and the daily ledger
    assert max(phone.page.evaluate(OVERFLOW_JS % ".wide")) > 1
    hints = phone.page.locator(".scroll-hint")
    assert hints.count() == wide and all(hints.nth(k).is_visible() for k in range(wide))
    moved = phone.page.evaluate(PINNED_JS, ".wide")
    assert moved and max(moved) <= 2, f"the first column scrolled away by {moved} px"
    assert phone.page.evaluate("() => document.documentElement.scrollWidth - window.innerWidth") <= 0
    desk = watched(1366)
    desk.page.goto(out.as_uri())
    desk.page.wait_for_selector(".wide table")
    assert not desk.page.locator(".scroll-hint").first.is_visible()  # no hint where nothing is cut


#: Per chart subtitle: how far it reaches past its chart's right edge [px].
SUBTITLE_JS = """() => Array.from(document.querySelectorAll('.js-plotly-plot')).flatMap(plot => {
  const right = plot.getBoundingClientRect().right;
  return Array.from(plot.querySelectorAll('.gtitle-subtitle')).map(t => t.getBoundingClientRect().right - right);
})"""


@pytest.mark.parametrize("path", ["/health", "/trip", "/planner"])
def test_chart_subtitles_stay_inside_their_chart_on_a_phone(server, watched, path):
    w = watched(390)
    assert w.page.goto(server + path).status == 200
    w.page.wait_for_selector(".js-plotly-plot .gtitle-subtitle", timeout=60_000)
    w.settle()
    past = w.page.evaluate(SUBTITLE_JS)
    assert past and max(past) <= 0, f"{path}: a chart subtitle runs {max(past):.0f} px past the chart at 390 px"


#: Per chart: [title top - chart box top, does the toolbar's box cross the title's box] after a hover.
TITLE_JS = """() => Array.from(document.querySelectorAll('.js-plotly-plot')).flatMap(plot => {
  const t = plot.querySelector('.gtitle'), m = plot.querySelector('.modebar');
  if (!t) return [];
  const box = plot.closest('.graph, .fig') || plot, b = box.getBoundingClientRect(), r = t.getBoundingClientRect();
  let crosses = false;
  if (m) { const q = m.getBoundingClientRect();
    crosses = q.width > 0 && q.left < r.right && r.left < q.right && q.top < r.bottom && r.top < q.bottom; }
  return [[r.top - b.top, crosses, r.left - b.left]];
})"""


@pytest.mark.parametrize("width", [1366, 390])
# Not /now: its live chart has no title while readings are fresh.
@pytest.mark.parametrize("path", ["/health", "/trip", "/solar", "/planner"])
def test_chart_titles_sit_at_the_top_of_their_box_clear_of_the_toolbar(server, watched, path, width):
    w = watched(width)
    assert w.page.goto(server + path).status == 200
    w.page.wait_for_selector(".js-plotly-plot .gtitle", timeout=60_000)
    w.settle()
    for k in range(w.page.locator(".js-plotly-plot").count()):  # the toolbar shows on hover
        w.page.locator(".js-plotly-plot").nth(k).hover()
        found = w.page.evaluate(TITLE_JS)
        assert found, f"{path}: no chart title"
        top, crosses, left = found[min(k, len(found) - 1)]
        assert not crosses, f"{path} at {width} px: the chart toolbar lies over a chart title"
        assert left >= 8, f"{path} at {width} px: a chart title touches its box's left edge ({left:.0f} px)"
        # On a wide screen the title opens the box; on a phone the toolbar's strip sits above it.
        assert top <= (24 if width > 700 else 52), f"{path} at {width} px: a chart title starts {top:.0f} px down"


#: Per chart annotation: how far it reaches past its chart's left and right edges [px].
ANNOTATION_JS = """() => Array.from(document.querySelectorAll('.js-plotly-plot')).flatMap(plot => {
  const b = plot.getBoundingClientRect();
  return Array.from(plot.querySelectorAll('.annotation-text')).map(t => {
    const r = t.getBoundingClientRect(); return Math.max(b.left - r.left, r.right - b.right); });
})"""


def test_a_chart_that_has_nothing_to_show_says_why_within_its_box_on_a_phone(server, watched):
    # The demo's Battery health page: no capacity or resistance estimate yet, each chart says why.
    w = watched(390)
    assert w.page.goto(server + "/health").status == 200
    w.page.wait_for_selector(".js-plotly-plot .annotation-text", timeout=60_000)
    w.settle()
    past = w.page.evaluate(ANNOTATION_JS)
    assert past and max(past) <= 0, f"a chart's message runs {max(past):.0f} px past its chart at 390 px"
