"""One answer on every face: the command line, its JSON, the pages and the HTML report agree (issue 12).

The answer is built once per store (``analysis.answers``, ``analysis.report.build_report``)
and each face renders it; these tests compare what the faces show for the same store.
The store is the bundled 'autumn-van' scenario (test_dashboard_figures.build_demo_store).
"""

from __future__ import annotations

import json
import re
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

from drawdown.cli import main
from test_dashboard_figures import build_demo_store

TARGETS = [(1.5, 90.0), (3.0, 90.0), (6.0, 75.0)]
#: A float printed with more decimals than any face shows, a Python repr, a library function name.
LONG_FLOAT = re.compile(r"\d\.\d{4,}")
REPR = ("{'", "['", "None", "nan")
LIBRARY_NAMES = ("pvlib", "sapm", "pvwatts", "get_total_irradiance", "Ineichen", "_Wm2", "poa Wm2",
                 "would lose percent", "insulated_back")


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    store_path, system_path = build_demo_store(tmp_path_factory.mktemp("one-answer"))
    return SimpleNamespace(store_path=store_path, system_path=system_path)


@pytest.fixture()
def app_ctx(demo):
    from drawdown.dashboard.app import create_app
    from drawdown.dashboard.data import clear_caches, current

    clear_caches()
    app = create_app(demo)
    with app.server.test_request_context():
        yield SimpleNamespace(app=app, source=current())


def _cli(capsys, demo, *args: str) -> tuple[int, str, str]:
    rc = main(["--store", str(demo.store_path), "--system", str(demo.system_path), *args])
    cap = capsys.readouterr()
    return rc, cap.out, cap.err


def _texts(component) -> list[str]:
    """Every string in a Dash component tree, in order (what the page DOM shows)."""
    out: list[str] = []

    def walk(c):
        if c is None:
            return
        if isinstance(c, str):
            out.append(c)
        elif isinstance(c, (list, tuple)):
            for x in c:
                walk(x)
        else:
            walk(getattr(c, "children", None))
    walk(component)
    return out


def _cards(component) -> dict[str, str]:
    """Card label -> value text of a page part."""
    found: dict[str, str] = {}

    def walk(c):
        if isinstance(c, (list, tuple)):
            for x in c:
                walk(x)
            return
        kids = getattr(c, "children", None)
        if getattr(c, "className", None) == "card":
            found[kids[0].children] = kids[1].children
            return
        if kids is not None and not isinstance(kids, str):
            walk(kids)
    walk(component)
    return found


def _table_rows(component) -> list[list[str]]:
    rows = []

    def walk(c):
        if isinstance(c, (list, tuple)):
            for x in c:
                walk(x)
            return
        if type(c).__name__ == "Tr" and all(type(td).__name__ == "Td" for td in c.children):
            rows.append([str(td.children) for td in c.children])
            return
        kids = getattr(c, "children", None)
        if kids is not None and not isinstance(kids, str):
            walk(kids)
    walk(component)
    return rows


# -- sizing: the planner and `drawdown size` -----------------------------------------------------

@pytest.mark.parametrize("days,percentile", TARGETS)
def test_planner_and_size_json_give_the_same_sizes_and_runs(app_ctx, demo, capsys, days, percentile):
    from drawdown.dashboard import labels
    from drawdown.dashboard.pages import planner

    rc, out, _err = _cli(capsys, demo, "size", "--json", "--autonomy-days", f"{days:g}",
                         "--percentile", f"{percentile:g}")
    assert rc == 0
    j = json.loads(out)
    cards, _fig, runs_view, _cautions = planner.render_plan(app_ctx.source, days, percentile, None)
    shown = _cards(cards)
    nb = "\u202f"
    assert shown["Battery"] == f"{j['battery']['capacity_Ah']:,.0f}{nb}Ah"
    assert shown["Solar array"] == f"{j['solar']['array_W']:,.0f}{nb}W"
    assert shown["DC-DC charger"] == f"{j['dc_dc_charger']['current_A']:,.0f}{nb}A"
    assert shown["Inverter"] == f"{j['inverter']['continuous_W']:,.0f}{nb}W"
    rows = _table_rows(runs_view)
    expected = labels.run_rows(j["runs"])
    assert len(rows) == len(expected) == len(j["runs"])
    keys = [k for k, _h in labels.RUN_COLUMNS]
    for row, want, run in zip(rows, expected, j["runs"]):
        got = dict(zip(keys, row))
        assert got["name"] == run["name"]
        assert got["cross_section_mm2"] == labels.mm2(run["cross_section_mm2"])
        assert got["awg"] == run["awg"]
        assert got["fuse_A"] == f"{run['fuse_A']:.0f}"
        assert got == {k: str(v) for k, v in want.items()}


def test_planner_sizes_from_the_same_days_as_size_not_the_trip_range(app_ctx):
    from drawdown.dashboard.pages import planner

    src = app_ctx.source
    full = src.full_range()
    one_day = {"start": full[0], "end": full[0]}
    a = planner.render_plan(src, 3, 90, None)
    b = planner.render_plan(src, 3, 90, one_day)
    assert _texts(a[0]) == _texts(b[0]) and _texts(a[2]) == _texts(b[2])


def test_sizing_inputs_are_gathered_by_one_function_for_both_faces():
    import inspect

    from drawdown.dashboard import data
    from drawdown.cli.commands import size

    # Both faces call analysis.answers: no face gathers the temperature or the peak load itself.
    assert "size_answer" in inspect.getsource(size.run)
    assert "sizing_inputs" in inspect.getsource(data._sizing_inputs_cached)
    for name in ("_from_readings", "_performance_ratio", "_ledger"):
        assert not hasattr(size, name)


def test_the_verdict_explains_extra_solar_when_the_present_system_meets_the_target(demo, capsys):
    rc, out, _ = _cli(capsys, demo, "size", "--json", "--autonomy-days", "1")
    j = json.loads(out)
    assert rc == 0 and j["present_system"]["autonomy"]["meets_target"]
    text = " ".join(j["verdict"])
    assert "already lasts" in text
    if j["solar"]["array_W"] > j["solar"]["present_W"]:
        assert "separate aim" in text and "refills one design day" in text


def test_a_battery_smaller_than_the_installed_one_is_said_so(demo, capsys):
    rc, out, _ = _cli(capsys, demo, "size", "--json", "--autonomy-days", "0.5")
    j = json.loads(out)
    assert rc == 0
    if j["battery"]["capacity_Ah"] < j["battery"]["present_Ah"]:
        assert any("keep your bank" in v for v in j["verdict"])


INVENTORY_NORTH = """
[site]
latitude_deg = 61.2
longitude_deg = 7.1
timezone = "Europe/Oslo"
[battery]
chemistry = "lifepo4"
nominal_voltage_V = 12.8
rated_capacity_Ah = 200
[[solar]]
peak_power_W = 360
[[charger]]
source = "alternator"
max_current_A = 30
[[load]]
name = "compressor fridge"
power_W = 45
hours_per_day = 6
[[load]]
name = "laptop"
power_W = 55
hours_per_day = 2
ac = true
[[load]]
name = "coffee machine"
power_W = 900
hours_per_day = 0.07
ac = true
"""


def test_size_with_only_an_inventory_sizes_an_array_and_a_battery(tmp_path, capsys):
    sysp = tmp_path / "system.toml"
    sysp.write_text(INVENTORY_NORTH, encoding="utf-8")
    base = ["--store", str(tmp_path / "none.sqlite"), "--system", str(sysp), "size"]
    assert main(base + ["--json"]) == 0
    j = json.loads(capsys.readouterr().out)
    assert j["solar"]["array_W"] is not None and j["battery"]["capacity_Ah"] > 0
    # The darkest months no roof array can cover are named, not sized into nonsense.
    assert j["solar"]["months_not_covered"] and "rely on alternator or shore" in j["solar"]["months_not_covered_why"]
    assert j["steps"]["array"] == [] and j["steps"]["array_why"]
    assert main(base) == 0
    text = capsys.readouterr().out
    assert "n/a" not in text and "+0.0 days" not in text
    assert "month 12" not in text and "month 2 " not in text
    cc = j["cross_check"]
    if any("agree" in e for e in cc["explanation"]):
        assert cc["array_W"] and cc["battery_capacity_Ah"] and j["solar"]["array_W"]


def test_cross_check_never_says_agree_without_two_answers():
    from drawdown.analysis.sizing import _explain_difference

    out = _explain_difference(1.0, None, None, None, 3.0, 0.0, 0.75)
    # The battery answers agree; for the array there is only one answer, so no overall "agree".
    assert not any(o.startswith("the data-driven and method answers agree") for o in out)
    assert any(o.startswith("array: no comparison") for o in out)
    assert any(o.startswith("battery: the two answers agree") for o in out)


def test_size_text_and_json_have_no_repr_and_no_long_floats(demo, capsys):
    rc, text, _ = _cli(capsys, demo, "size")
    assert rc == 0
    for bad in REPR + ("degC", "mm2", "lifepo4", "month 10"):
        assert bad not in text, bad
    assert not LONG_FLOAT.search(text)
    rc, out, _ = _cli(capsys, demo, "size", "--json")

    def floats(x):
        if isinstance(x, float):
            yield x
        elif isinstance(x, dict):
            for v in x.values():
                yield from floats(v)
        elif isinstance(x, list):
            for v in x:
                yield from floats(v)
    long = [f for f in floats(json.loads(out)) if abs(f) >= 0.01 and round(f, 3) != f]
    assert long == []


# -- the report: CLI text, JSON, HTML report and pages --------------------------------------------

def test_report_from_after_the_data_names_what_the_store_holds(demo, capsys):
    rc, out, err = _cli(capsys, demo, "report", "--from", "2099-01-01")
    assert rc == 2 and out == ""
    assert "import a log first" not in err
    assert "the store holds readings from" in err and "--from 2099-01-01" in err


def test_report_period_is_local_time_with_its_zone(demo, capsys):
    rc, out, _ = _cli(capsys, demo, "report")
    assert rc == 0
    period = out.splitlines()[0]
    assert "+00:00" not in period and re.search(r"\d{2}:\d{2} [A-Z]{3,4}", period), period


def test_every_face_shows_the_same_use_per_day_and_runs(app_ctx, demo, capsys, tmp_path):
    from drawdown.dashboard import labels
    from drawdown.dashboard.pages import trip

    rc, out, _ = _cli(capsys, demo, "report", "--json", "--html", str(tmp_path / "r.html"))
    assert rc == 0
    j = json.loads(out)
    page_html = (tmp_path / "r.html").read_text(encoding="utf-8")
    whole = [abs(d["consumed_Ah"]) for d in j["days"] if d["complete"]]
    median = float(np.median(whole))
    # Trip page card, HTML headline, CLI text: the same use per whole day.
    src = app_ctx.source
    full = src.full_range()
    cards = _cards(trip.render_trip(src, *full)[0])
    assert cards["Used per whole day"] == f"{median:,.0f}\u202fAh"
    assert f"{median:.0f} Ah" in page_html
    # Per day, the CLI table and the HTML table carry the same used Ah.
    rc, text, _ = _cli(capsys, demo, "report")
    for d in j["days"]:
        assert re.search(rf"{d['date']}\s+\S+\s+{abs(d['consumed_Ah']):.1f}", text)
        assert f"<td>{d['consumed_Ah']:.1f}</td>" in page_html
    # The HTML report's cable table is `drawdown size`'s at its default targets.
    rc, out, _ = _cli(capsys, demo, "size", "--json")
    size = json.loads(out)
    for row in labels.run_rows(size["runs"]):
        cells = "".join(f"<td>{v}</td>" for v in row.values())
        assert cells in page_html, row


def test_html_report_opens_with_the_headline_figures(demo, capsys, tmp_path):
    rc, _out, _ = _cli(capsys, demo, "report", "--html", str(tmp_path / "r.html"))
    page = (tmp_path / "r.html").read_text(encoding="utf-8")
    assert rc == 0
    glance = page.index("At a glance")
    for later in ("State of charge and daily ledger", "<pre>"):
        assert glance < page.index(later)
    for label in ("Use per whole day", "Usable capacity", "Solar performance ratio", "What to upgrade"):
        assert page.index(label) < page.index("<pre>")


# -- battery health: typed results ----------------------------------------------------------------

def _report(demo):
    from drawdown.analysis.report import build_report
    from drawdown.analysis.system import parse_system
    from drawdown.collector.store import Store

    system = parse_system(demo.system_path.read_text(encoding="utf-8"))
    with Store(demo.store_path) as store:
        readings = store.read()
    return build_report(readings, system), system


def test_report_carries_typed_results_for_every_face(demo):
    from drawdown.analysis.capacity import CapacityEstimate, PeukertEstimate, ResistanceEstimate
    from drawdown.analysis.ledger import LedgerResult
    from drawdown.analysis.runtime import RuntimeEstimate

    report, _system = _report(demo)
    assert isinstance(report.capacity, CapacityEstimate)
    assert isinstance(report.peukert, PeukertEstimate)
    assert isinstance(report.resistance, ResistanceEstimate)
    assert isinstance(report.runtime, RuntimeEstimate)
    assert isinstance(report.ledger_result, LedgerResult)
    assert report.to_json()["battery"]["peukert_k"] == pytest.approx(report.peukert.k, abs=1e-4)


def test_health_draws_each_discharge_with_its_95_percent_interval(demo):
    import dataclasses

    from drawdown.analysis.answers import pair_ci95_Ah
    from drawdown.dashboard import figures
    from drawdown.dashboard.data import _health_of

    from drawdown.analysis.capacity import AnchorPair, CapacityEstimate
    from drawdown.analysis.charge import Anchor

    report, system = _report(demo)
    if not report.capacity.pairs:
        # The five-day demo holds no discharge between two anchors: add two typed pairs (a full charge,
        # then a rested voltage at 30 %) as the capacity analysis makes them.
        t0 = int(pd.Timestamp("2026-10-01T06:00Z").value // 1000)
        full, ocv = Anchor(0, t0, 100.0, "full", 0.01), Anchor(10, t0 + 18 * 3_600_000_000, 30.0, "ocv", 0.03)
        pairs = tuple(AnchorPair(full, ocv, -0.7, -128.0 * (1 + k / 10), 130.0, 2.0, 6.5, 3.0, 0.03)
                      for k in range(2))
        report = dataclasses.replace(report, capacity=CapacityEstimate(None, None, "wide", None, pairs))
    h = _health_of(report, system)
    assert len(h.capacity_points) == len(report.capacity.pairs)
    for (_, row), pair in zip(h.capacity_points.iterrows(), report.capacity.pairs):
        lo, hi = pair_ci95_Ah(pair)
        assert row["lo_Ah"] == pytest.approx(lo) and row["hi_Ah"] == pytest.approx(hi)
        assert lo < row["usable_Ah"] < hi
    fig = figures.capacity_figure(h.capacity_points, rated_Ah=h.rated_Ah, tz=h.tz)
    points = next(t for t in fig.data if t.mode == "markers")
    assert points.error_y.array is not None and len(points.error_y.array) == len(h.capacity_points)
    # No label on the plot can sit on a point: the reference lines are legend entries.
    assert not fig.layout.annotations
    assert dataclasses.is_dataclass(report.capacity)


def test_health_of_reads_no_result_by_class_name():
    import inspect

    from drawdown.dashboard import data

    src = inspect.getsource(data)
    assert "_find_part" not in src and "SimpleNamespace" not in src and "__name__ ==" not in src
    assert "importlib" not in src


def test_peukert_plot_shows_no_measured_points_when_the_exponent_is_not_fitted(demo):
    from drawdown.dashboard import figures
    from drawdown.dashboard.data import _health_of

    report, system = _report(demo)
    h = _health_of(report, system)
    if report.peukert.source != "fitted":
        assert h.peukert_points == ()
        fig = figures.peukert_figure([], [], k=report.peukert.k, capacity_Ah=h.rated_Ah, rated_hours=h.rated_hours)
        assert not any("discharges" in (t.name or "") for t in fig.data)
        assert "no fit" in fig.layout.title.subtitle.text
    else:
        assert h.peukert_points == tuple(report.peukert.points)


def test_peukert_axis_ticks_are_one_two_five_steps():
    from drawdown.dashboard import figures

    fig = figures.peukert_figure([], [], k=1.1, capacity_Ah=200, rated_hours=20)
    ticks = list(fig.layout.xaxis.tickvals)
    assert ticks and all(f"{t:g}"[0] in "125" for t in ticks)


def test_capacity_time_axis_spans_days_in_local_time():
    from drawdown.dashboard import figures

    pts = pd.DataFrame({"t": pd.to_datetime(["2026-10-01 07:00", "2026-10-02 01:00"]).tz_localize("UTC"),
                        "usable_Ah": [183.0, 184.0], "lo_Ah": [115.0, 116.0], "hi_Ah": [251.0, 252.0]})
    fig = figures.capacity_figure(pts, rated_Ah=200, tz="Europe/Oslo")
    lo, hi = (pd.Timestamp(x) for x in fig.layout.xaxis.range)
    assert hi - lo >= pd.Timedelta(days=7)
    assert "Europe/Oslo" in fig.layout.xaxis.title.text
    assert pd.Timestamp(fig.data[0].x[0]) == pd.Timestamp("2026-10-01 09:00")  # CEST = UTC+2


# -- the Now page ---------------------------------------------------------------------------------

def test_now_page_says_both_runtime_figures_with_their_qualifiers(app_ctx):
    from drawdown.dashboard.pages import live

    src = app_ctx.source
    now = src.time_span()[1] + pd.Timedelta(minutes=1)
    _stamp, _alarm, _tiles, runtime, _fig = live.render_live(src, now=now)
    cards = _cards(runtime)
    text = " ".join(_texts(runtime))
    snap = src.live(now=now)
    assert "Days left with no charging" in cards and "Days left with typical charging" in cards
    if snap.runtime_no_charging_days is not None:
        assert cards["Days left with no charging"] == f"{snap.runtime_no_charging_days:.1f}\u202fdays"
        assert "nothing charges" in text
    if snap.runtime_typical_days is not None:
        assert "if the charging of the last fortnight continues" in text


def test_now_page_has_a_state_of_its_own_for_old_data(app_ctx):
    from drawdown.dashboard.pages import live

    src = app_ctx.source
    old = src.time_span()[1] + pd.Timedelta(days=51)
    stamp, alarm, _tiles, _runtime, fig = live.render_live(src, now=old)
    words = " ".join(_texts(stamp)) + " ".join(_texts(alarm))
    assert "Not live" in words and "51 days ago" in words
    assert "No alarm" not in words and "usual range" not in words
    assert "refreshes every" not in words
    fresh, alarm2, *_ = live.render_live(src, now=src.time_span()[1] + pd.Timedelta(minutes=1))
    assert "Not live" not in " ".join(_texts(fresh))


# -- the Solar page, Setup and the tables -----------------------------------------------------------

def test_solar_diagnostics_are_written_for_a_person(app_ctx):
    from drawdown.dashboard.pages import solar

    src = app_ctx.source
    *_rest, diag = solar.render_solar(src, None)
    text = " ".join(_texts(diag))
    assert "What was assumed" in text and "What was found" in text and "What to check on the roof" in text
    for name in LIBRARY_NAMES:
        assert name not in text, name
    assert not LONG_FLOAT.search(text)
    for bad in REPR:
        assert bad not in text


def test_setup_shows_local_times_with_their_zone(app_ctx):
    from drawdown.dashboard.pages import setup

    text = " ".join(_texts(setup.store_view(app_ctx.source)))
    assert "UTC" not in text and "Europe/Oslo" in text
    assert re.search(r"\d{2}:\d{2} CES?T", text)


def test_every_table_cell_carries_its_column_name_for_phone_cards():
    from drawdown.dashboard.pages._parts import table

    view = table([{"a": "x", "b": "1"}], [("a", "Run"), ("b", "Fuse [A]")], numeric=["b"])
    tds = view.children.children[1].children[0].children
    assert [td.to_plotly_json()["props"]["data-label"] for td in tds] == ["Run", "Fuse [A]"]
    assert "as-cards" in view.className
    css = (Path(__file__).resolve().parents[1] / "dashboard" / "assets" / "drawdown.css").read_text()
    assert "attr(data-label)" in css


def test_labels_spell_units_and_names_for_people():
    from drawdown.dashboard import labels

    assert labels.chemistry("lifepo4") == "LiFePO4"
    assert labels.for_people("below 0 degC; 4 mm2; 3 file(s); 1 gap(s)") == "below 0 °C; 4 mm²; 3 files; 1 gap"
    assert labels.local_time("2026-10-11T21:59:50+00:00", "Europe/Oslo") == "2026-10-11 23:59 CEST"
    assert labels.run_lengths({"battery-inverter": 1.5}) == "battery-inverter 1.5 m"


def test_notes_read_as_sentences_with_thousands_separated():
    # Common practice in written English: a sentence starts with a capital; 1,500 W groups its thousands.
    from drawdown.dashboard import labels

    said = labels.sentence("the measured consumption already includes any inverter; a new 1500 W inverter "
                           "left on adds about 360 Wh/day from 2026-09-21, 12000 Wh over 2026 days")
    assert said.startswith("The measured")
    assert "1,500 W" in said and "12,000 Wh" in said and "2026-09-21" in said and "2026 days" in said
    assert labels.sentence("LiFePO4 bank") == "LiFePO4 bank"
