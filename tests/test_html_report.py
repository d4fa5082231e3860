"""The self-contained HTML report draws the dashboard's own figures, offline, with text escaped.

The figures are read back out of the written HTML (the ``Plotly.newPlot(id, data, layout, config)``
calls plotly writes) and compared with what :mod:`dashboard.figures` builds for the same report, so
the test fails if the report ever draws its own plots again. A real headless chromium renders the
file to check that every plot is drawn with no network.
"""

from __future__ import annotations

import ast
import base64
import dataclasses
import json
import re
import shutil
import subprocess
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from plotly.offline import get_plotlyjs

from drawdown.analysis.report import build_report
from drawdown.dashboard import figures
from drawdown.dashboard.data import _report_days
from drawdown.dashboard.html_report import (
    SAFETY_CAUTION,
    render_html,
    report_figures,
    write_html,
)

import drawdown.collector.simulated as sim_mod  # noqa: E402

DAYS = 4


@pytest.fixture(scope="module")
def readings_and_system():
    """spring-truck, 4 days at 1 min: solar, alternator and load channels, full charges (resyncs)."""
    sim = sim_mod.simulate("spring-truck", days=DAYS)
    return sim_mod.to_canonical(sim, interval_s=60), sim.scenario.system


@pytest.fixture(scope="module")
def scenario(readings_and_system):
    readings, system = readings_and_system
    report = build_report(readings, system)
    from drawdown.analysis.solar import analyse_solar

    return report, system, analyse_solar(readings, system)


@pytest.fixture(scope="module")
def page(scenario):
    report, system, solar = scenario
    return render_html(report, system=system, solar=solar)


_DECODER = json.JSONDecoder()


def _plots(text: str) -> list[dict]:
    """Every ``Plotly.newPlot(id, data, layout, config)`` call in the page as {'data', 'layout'}."""
    out = []
    for m in re.finditer(r"Plotly\.newPlot\(", text):
        pos, args = m.end(), []
        for _ in range(3):  # id, data, layout
            while text[pos] in " \n\t\r,":
                pos += 1
            value, pos = _DECODER.raw_decode(text, pos)
            args.append(value)
        out.append({"data": args[1], "layout": args[2]})
    return out


def _values(v) -> np.ndarray:
    """A trace array as written by plotly (a list, or a base64 typed array {'dtype', 'bdata'})."""
    if isinstance(v, dict) and "bdata" in v:
        return np.frombuffer(base64.b64decode(v["bdata"]), dtype=np.dtype(v["dtype"]))
    return np.asarray(v, dtype=float)


def _title(plot: dict) -> str:
    t = plot["layout"].get("title") or {}
    return t.get("text", "") if isinstance(t, dict) else str(t)


def _by_title(text: str) -> dict[str, dict]:
    return {_title(p): p for p in _plots(text)}


def test_html_draws_the_dashboards_figures_in_page_order(page, scenario):
    report, system, solar = scenario
    expected = [_title(json.loads(f.to_json()))
                for part in report_figures(report, system=system, solar=solar).values() for f in part]
    assert [_title(p) for p in _plots(page)] == expected
    assert expected == ["State of charge", "Daily energy ledger", "Usable capacity", "Internal resistance",
                        "Peukert fit", "Solar per day: measured vs clear-sky expectation", "Solar power"]


def test_ledger_traces_are_figures_ledger_figure_names_colours_and_values(page, scenario):
    report, _, _ = scenario
    ref = figures.ledger_figure(_report_days(report))  # the trip page's call (dashboard/pages/trip.py)
    got = _by_title(page)["Daily energy ledger"]["data"]
    assert [(t["name"], t["marker"]["color"]) for t in got] == \
        [(t.name, t.marker.color) for t in ref.data]
    # spring-truck charges from solar and the alternator and uses every day: those traces are drawn.
    names = [t["name"] for t in got]
    assert {"solar", "alternator", "consumed"} <= set(names)
    assert got[names.index("solar")]["marker"]["color"] == figures.PALETTE["solar"]
    consumed = _values(got[names.index("consumed")]["y"])
    np.testing.assert_allclose(consumed, [-abs(d["consumed_Ah"]) for d in report.to_json()["days"]])


def test_soc_figure_marks_every_full_charge_resync_at_100_percent(page, scenario):
    report, _, _ = scenario
    resyncs = report.to_json()["resyncs"]
    assert resyncs, "spring-truck reaches full charge in its first days"
    traces = {t["name"]: t for t in _by_title(page)["State of charge"]["data"]}
    assert traces["estimated"]["line"]["color"] == figures.PALETTE["soc"]
    marks = traces["full charge (SoC set to 100 %)"]
    assert len(marks["x"]) == len(resyncs)
    np.testing.assert_allclose(_values(marks["y"]), 100.0)


def test_solar_power_plot_is_drawn_only_when_a_solar_analysis_is_given(scenario):
    report, system, _ = scenario
    titles = [_title(p) for p in _plots(render_html(report, system=system))]
    assert "Solar power" not in titles
    assert "Solar per day: measured vs clear-sky expectation" in titles


def test_without_a_system_the_report_still_renders_its_figures_in_utc(scenario):
    report, _, _ = scenario
    titles = [_title(p) for p in _plots(render_html(report))]
    assert titles[:4] == ["State of charge", "Daily energy ledger", "Usable capacity", "Internal resistance"]


def test_plotly_js_is_inline_exactly_once_and_nothing_points_at_a_network(page):
    js = get_plotlyjs()
    assert page.count(js) == 1
    assert page.count("<script") == 1 + len(_plots(page))  # plotly.js plus one call per figure
    rest = page.replace(js, "")
    assert not re.search(r"<script[^>]*\ssrc\s*=", page, flags=re.IGNORECASE)
    assert not re.search(r"<link\b", rest, flags=re.IGNORECASE)
    assert not re.search(r"(?:src|href)\s*=\s*[\"']?\s*(?:https?:)?//", rest, flags=re.IGNORECASE)
    assert not re.search(r"https?://", rest)  # no URL at all outside the plotly.js bundle


def test_report_text_is_escaped(scenario):
    report, system, _ = scenario
    bad = "<script>alert('x')</script> & <b>"
    dq = dict(report.data_quality, notes=[*report.data_quality.get("notes", []), bad])
    text = render_html(dataclasses.replace(report, data_quality=dq), system=system)
    assert bad not in text
    assert "&lt;script&gt;alert(&#x27;x&#x27;)&lt;/script&gt; &amp; &lt;b&gt;" in text


def test_a_gap_in_the_log_is_listed_under_data_quality(readings_and_system):
    readings, system = readings_and_system
    t = readings["t"]
    lo = t.min() + pd.Timedelta(days=1, hours=12)
    cut = readings[(t < lo) | (t >= lo + pd.Timedelta(hours=3))]  # 3 h with no readings on any channel
    report = build_report(cut, system)
    gaps = report.to_json()["data_quality"]["gaps"]
    assert gaps
    quality = render_html(report, system=system).split("<h2>Data quality</h2>", 1)[1].split("<h2>", 1)[0]
    assert f"{len(gaps)} gap{'' if len(gaps) == 1 else 's'} in the log" in quality and "(s)" not in quality
    assert "energy unknown" in quality and "marked partial" in quality


def test_page_has_the_sections_and_the_dashboard_footer_caution(page):
    for heading in ("Daily ledger", "Data quality", "Battery health", "Solar", "Summary"):
        assert f"<h2>{heading}</h2>" in page
    assert SAFETY_CAUTION in page


def test_safety_caution_is_word_for_word_the_dashboard_footer():
    # The footer text is a string literal inside html.Footer(...) in dashboard/app.py.
    tree = ast.parse((Path(__file__).resolve().parents[1] / "dashboard" / "app.py").read_text())
    footers = [n for n in ast.walk(tree) if isinstance(n, ast.Call) and getattr(n.func, "attr", "") == "Footer"]
    texts = [c.value for f in footers for n in ast.walk(f) if isinstance(n, ast.Constant)
             for c in [n] if isinstance(c.value, str) and "installer" in c.value]
    assert texts == [SAFETY_CAUTION]


@pytest.mark.skipif(shutil.which("chromium") is None, reason="needs Debian chromium")
def test_headless_chromium_draws_every_figure_offline(scenario, tmp_path):
    report, system, solar = scenario
    path = write_html(report, tmp_path / "sub" / "report.html", system=system, solar=solar)
    n_figures = sum(len(v) for v in report_figures(report, system=system, solar=solar).values())
    # A real browser, no network needed: the DOM after plotly ran has one drawn SVG plot per figure.
    dom = subprocess.run(
        ["chromium", "--headless", "--no-sandbox", "--disable-gpu", "--virtual-time-budget=8000",
         "--dump-dom", path.as_uri()], capture_output=True, text=True, timeout=180, check=True).stdout
    assert dom.count('class="main-svg"') >= n_figures
    assert dom.count("plot-container plotly") == n_figures
    # Mode bar: the image download stays; nothing that uploads the chart or links to a web site.
    assert dom.count('data-title="Download plot as a PNG"') == n_figures
    assert 'data-title="Share chart' not in dom and 'data-title="Produced with Plotly' not in dom
