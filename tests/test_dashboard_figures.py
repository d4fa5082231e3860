"""Dashboard figures, data access and callbacks called as plain functions (no browser).

The demo store is the bundled 'autumn-van' scenario simulated for a few days and
stored in a real SQLite file (see :func:`build_demo_store`); the page callbacks
are called directly inside a Flask request context of a real app.
"""

from __future__ import annotations

import base64
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest

DEMO_DAYS = 5
DEMO_INTERVAL_S = 60.0


def build_demo_store(folder: Path, *, days: int = DEMO_DAYS, interval_s: float = DEMO_INTERVAL_S
                     ) -> tuple[Path, Path]:
    """Simulate the bundled 'autumn-van' scenario and import its log into a real store.

    Returns (store path, system.toml path). The log goes through the real
    importer (collector.csv_file.import_file) with the options `drawdown import`
    gives it (the system's timezone and nominal voltage).
    """
    from drawdown.collector.csv_file import import_file
    from drawdown.collector.simulated import simulate_to_file
    from drawdown.collector.store import Store

    folder.mkdir(parents=True, exist_ok=True)
    log, _truth, sim = simulate_to_file("autumn-van", folder / "autumn-van.csv", days=days, interval_s=interval_s)
    system_path = folder / "system.toml"
    system_path.write_text(sim.scenario.system_text, encoding="utf-8")
    store_path = folder / "readings.sqlite"
    with Store(store_path) as store:
        system = sim.scenario.system
        result = import_file(log, store, tz=system.site.timezone,
                             nominal_voltage_V=system.battery.nominal_voltage_V)
    assert result.rows_rejected == 0, result.rejected_by_reason  # the fixture itself must be whole
    return store_path, system_path


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    store_path, system_path = build_demo_store(tmp_path_factory.mktemp("demo"))
    return SimpleNamespace(store_path=store_path, system_path=system_path)


@pytest.fixture()
def app_ctx(demo):
    """A real app on the demo store, and a request context so callbacks can find their data source."""
    from drawdown.dashboard.app import create_app
    from drawdown.dashboard.data import clear_caches, current

    clear_caches()
    app = create_app(demo)
    with app.server.test_request_context():
        yield SimpleNamespace(app=app, source=current())


@pytest.fixture()
def copy_ctx(demo, tmp_path):
    """Like app_ctx but on a private copy of the store and system.toml (tests that write)."""
    import shutil

    from drawdown.dashboard.app import create_app
    from drawdown.dashboard.data import clear_caches, current

    clear_caches()
    ns = SimpleNamespace(store_path=tmp_path / "readings.sqlite", system_path=tmp_path / "system.toml")
    shutil.copy(demo.store_path, ns.store_path)
    shutil.copy(demo.system_path, ns.system_path)
    app = create_app(ns)
    with app.server.test_request_context():
        yield SimpleNamespace(app=app, source=current(), paths=ns)


# -- downsampling --------------------------------------------------------------------

def test_downsample_keeps_a_one_sample_spike_in_a_million_points():
    from drawdown.dashboard.figures import downsample

    t = pd.date_range("2026-01-01", periods=1_000_000, freq="1s", tz="UTC")
    y = np.sin(np.arange(t.size) / 5000.0)
    y[654_321] = 25.0
    y[123_456] = -30.0
    ts, ys = downsample(t, y, 2000)
    assert len(ts) <= 2000
    # MinMaxLTTB keeps each bucket's extremes (Van Der Donckt et al. 2023): numpy's max/min must survive.
    assert np.nanmax(ys) == pytest.approx(y.max())
    assert np.nanmin(ys) == pytest.approx(y.min())
    assert ts[np.nanargmax(ys)] == t[654_321]


def test_downsample_returns_a_short_series_whole():
    from drawdown.dashboard.figures import downsample

    t = pd.date_range("2026-01-01", periods=500, freq="1min", tz="UTC")
    y = np.arange(500.0)
    ts, ys = downsample(t, y, 2000)
    assert len(ts) == 500 and np.array_equal(ys, y)


def test_downsample_breaks_the_line_at_a_gap_in_the_log():
    from drawdown.dashboard.figures import downsample

    t = pd.date_range("2026-01-01", periods=100, freq="1min", tz="UTC")
    t = t[:50].append(t[50:] + pd.Timedelta(hours=6))
    ts, ys = downsample(t, np.ones(100), 2000)
    assert np.isnan(ys).sum() == 1
    gap_at = int(np.flatnonzero(np.isnan(ys))[0])
    assert t[49] < ts[gap_at] < t[50]


def test_relayout_zoom_is_read_as_local_time_of_the_system():
    from drawdown.dashboard.figures import relayout_x_range

    # Europe/Oslo is UTC+2 in September (CEST), from the IANA tz database via zoneinfo.
    lo, hi = relayout_x_range({"xaxis.range[0]": "2026-09-22 12:00:00", "xaxis.range[1]": "2026-09-22 13:30"},
                              tz="Europe/Oslo")
    assert lo == pd.Timestamp("2026-09-22T10:00:00Z")
    assert hi == pd.Timestamp("2026-09-22T11:30:00Z")


def test_relayout_double_click_resets_and_legend_click_is_ignored():
    from drawdown.dashboard.figures import relayout_x_range

    assert relayout_x_range({"xaxis.autorange": True}) == "reset"
    assert relayout_x_range({"legend.x": 0.3}) is None
    assert relayout_x_range(None) is None


# -- figures ------------------------------------------------------------------------------

def test_ledger_figure_stacks_charge_up_and_consumption_down():
    from drawdown.dashboard.figures import ledger_figure

    days = pd.DataFrame({"date": ["2026-09-21", "2026-09-22"], "complete": [True, False],
                         "consumed_Ah": [48.9, 61.9], "charged_solar_Ah": [18.6, 62.0],
                         "charged_alternator_Ah": [37.7, 0.0], "charged_shore_Ah": [0.0, 0.0],
                         "charged_other_Ah": [0.0, 0.0]})
    fig = ledger_figure(days)
    bars = {tr.name: tr for tr in fig.data if tr.type == "bar"}
    assert set(bars) == {"solar", "alternator", "consumed"}  # a source that delivered nothing is not drawn
    assert list(bars["consumed"].y) == [-48.9, -61.9]
    assert fig.layout.barmode == "relative"
    assert any(tr.name == "partial day" for tr in fig.data)


def test_peukert_line_matches_the_docs_check_values():
    from drawdown.dashboard.figures import peukert_figure

    # docs/peukert.md#check-values: C20 = 100 Ah, H = 20 h, k = 1.25 -> t(10 A) = 8.409 h, t(20 A) = 3.536 h,
    # t(50 A) = 1.125 h (tolerance 0.01). The line is straight on log-log axes, so log interpolation is exact.
    fig = peukert_figure([], [], k=1.25, capacity_Ah=100, rated_hours=20)
    line = next(tr for tr in fig.data if tr.name.startswith("k = 1.250"))
    x, y = np.log(np.asarray(line.x)), np.log(np.asarray(line.y))
    for current, hours in ((10, 8.409), (20, 3.536), (50, 1.125)):
        assert np.exp(np.interp(np.log(current), x, y)) == pytest.approx(hours, abs=0.01)


def test_solar_power_figure_shades_each_saturated_period():
    from drawdown.dashboard.figures import solar_power_figure

    t = pd.date_range("2026-09-22 06:00", periods=72, freq="10min", tz="UTC")
    sat = np.zeros(72, dtype=bool)
    sat[10:20] = True
    sat[40:41] = True
    sat[50:60] = True
    fig = solar_power_figure(t, np.full(72, 100.0), np.full(72, 150.0), saturated=sat, tz="Europe/Oslo")
    rects = [s for s in fig.layout.shapes if s.type == "rect"]
    assert len(rects) == 3
    assert any(tr.name == "battery full (held back)" for tr in fig.data)


def test_message_figure_says_why_there_is_nothing():
    from drawdown.dashboard.figures import message_figure

    fig = message_figure("not available yet (analysis.report)")
    assert fig.layout.annotations[0].text == "not available yet (analysis.report)"


# -- data access and caching --------------------------------------------------------------

def test_zoomed_window_comes_back_at_full_resolution(app_ctx, demo):
    from drawdown.collector.store import Store

    src = app_ctx.source
    span = src.time_span()
    lo = span[0] + pd.Timedelta(days=1)
    hi = lo + pd.Timedelta(hours=2)
    t, y, full = src.screen_series("battery", "voltage_V", lo, hi)
    with Store(demo.store_path) as store:
        raw = store.read(lo, hi, channels=["battery"])
    assert full
    assert len(t) == len(raw) == 120  # 2 h at 60 s: every stored reading
    assert np.allclose(y, raw["voltage_V"].to_numpy())


def test_whole_range_is_thinned_for_the_screen(app_ctx):
    t, y, full = app_ctx.source.screen_series("battery", "current_A", n_out=1000)
    assert not full
    assert len(t) <= 1000 + 10  # a few NaN gap breaks at most


def test_store_key_changes_when_readings_are_added(copy_ctx):
    from drawdown.collector.store import Store

    src = copy_ctx.source
    before = src.store_key()
    assert src.store_key() == before
    last = src.time_span()[1]
    with Store(src.store_path) as store:
        store.append(pd.DataFrame({"t": [last + pd.Timedelta(minutes=1)], "channel": ["battery"],
                                   "voltage_V": [13.2], "current_A": [-3.0], "temperature_C": [15.0],
                                   "soc_pct": [80.0]}))
    assert src.store_key() != before


def test_sizing_is_computed_once_per_range_and_targets(app_ctx):
    src = app_ctx.source
    rng = src.default_range()
    first = src.sizing(*rng, autonomy_days=2, percentile=90)
    assert first.ok, first.why
    assert src.sizing(*rng, autonomy_days=2, percentile=90).value is first.value
    assert src.sizing(*rng, autonomy_days=4, percentile=90).value is not first.value


def test_local_date_range_becomes_utc_half_open_bounds(app_ctx):
    lo, hi = app_ctx.source.utc_bounds("2026-09-22", "2026-09-23")
    # Oslo midnight in CEST is 22:00 UTC the day before (IANA tz database).
    assert pd.Timestamp(lo) == pd.Timestamp("2026-09-21T22:00:00Z")
    assert pd.Timestamp(hi) == pd.Timestamp("2026-09-23T22:00:00Z")


# -- live view -------------------------------------------------------------------------------

def _append_battery(path: Path, t0: pd.Timestamp, minutes: int, voltage_V: float, current_A: float) -> None:
    from drawdown.collector.store import Store

    t = t0 + pd.to_timedelta(np.arange(1, minutes + 1), unit="min")
    with Store(path) as store:
        store.append(pd.DataFrame({"t": t, "channel": "battery", "voltage_V": voltage_V, "current_A": current_A,
                                   "temperature_C": 15.0, "soc_pct": 60.0}))


def test_live_view_shows_the_newest_battery_reading(app_ctx, demo):
    from drawdown.collector.store import Store

    snap = app_ctx.source.live()
    with Store(demo.store_path) as store:
        bat = store.read(channels=["battery"])
    last = bat.iloc[-1]
    assert snap.t == last["t"]
    assert snap.voltage_V == pytest.approx(last["voltage_V"])
    assert snap.power_W == pytest.approx(last["voltage_V"] * last["current_A"])
    assert not snap.readings.empty


def test_runtime_at_this_draw_is_charge_left_over_the_draw(copy_ctx):
    src = copy_ctx.source
    _append_battery(src.store_path, src.time_span()[1], 10, 13.1, -8.0)
    snap = src.live()
    assert snap.draw_A == pytest.approx(-8.0, abs=1e-3)
    assert snap.remaining_Ah is not None
    assert snap.runtime_at_draw_h == pytest.approx(snap.remaining_Ah / 8.0, rel=1e-6)


def test_low_voltage_raises_the_alarm_line(copy_ctx):
    src = copy_ctx.source
    _append_battery(src.store_path, src.time_span()[1], 3, 11.6, -4.0)
    snap = src.live()
    # LiFePO4 4S: 3.0 V/cell = 12.0 V is the usual low-voltage level (common practice).
    assert snap.low_voltage_V == pytest.approx(12.0)
    assert any(a.startswith("Low voltage") for a in snap.alarms)


def test_unusual_draw_raises_the_alarm_line(copy_ctx):
    src = copy_ctx.source
    _append_battery(src.store_path, src.time_span()[1], 6, 13.0, -150.0)
    snap = src.live()
    assert any(a.startswith("Unusual draw") for a in snap.alarms)


def test_live_callback_renders_tiles_and_a_figure(app_ctx):
    from drawdown.dashboard.pages import live

    live.refresh(0)  # the callback itself runs (the demo's newest reading is old: the "not live" state)
    now = app_ctx.source.time_span()[1] + pd.Timedelta(minutes=1)
    stamp, alarm, tiles, runtime, fig = live.render_live(app_ctx.source, now=now)
    assert stamp.startswith("Live: newest reading")
    assert len(tiles) >= 4
    assert fig.layout.height == 440
    text = str(runtime)
    # The lowest planned state of charge is the reserve (issue 13): LiFePO4 default max_dod 0.8.
    assert "Charge left above the reserve" in text and "20 % state of charge" in text
    assert "floor" not in text.lower()


# -- setup: system.toml and upload -------------------------------------------------------------

def test_invalid_system_text_is_not_written_and_the_key_is_named(copy_ctx):
    src = copy_ctx.source
    before = src.system_path.read_text()
    bad = before.replace("rated_capacity_Ah = 200", "rated_capacity_Ah = -5")
    saved, message = src.save_system_text(bad)
    assert not saved
    assert "battery.rated_capacity_Ah" in message
    assert src.system_path.read_text() == before


def test_valid_system_text_is_written(copy_ctx):
    src = copy_ctx.source
    text = src.system_path.read_text().replace("rated_capacity_Ah = 200", "rated_capacity_Ah = 280")
    saved, message = src.save_system_text(text)
    assert saved, message
    assert "rated_capacity_Ah = 280" in src.system_path.read_text()
    assert src.system().value.battery.rated_capacity_Ah == 280


def test_setup_check_shows_the_full_charge_settings_and_reserve_in_use(copy_ctx):
    from drawdown.dashboard.pages import setup

    text = copy_ctx.source.system_path.read_text().replace("rated_hours = 20", "rated_hours = 20\nfull_hold_s = 300")
    out = str(setup.render_system_action(copy_ctx.source, "check", text))
    assert "notice-error" not in out
    # LiFePO4 defaults (analysis.system): 3.50 V/cell x 4, 0.05 It of 200 Ah; the hold as set.
    assert "14.00 V (full_voltage_V, default)" in out and "10.0 A (5 % of 200 Ah" in out
    assert "for 300 s (full_hold_s)" in out and "Reserve: 20 % state of charge" in out


def test_setup_check_names_the_new_key_for_an_old_one(copy_ctx):
    from drawdown.dashboard.pages import setup

    text = copy_ctx.source.system_path.read_text().replace("rated_hours = 20", "rated_hours = 20\ntail_current_pct = 4")
    out = str(setup.render_system_action(copy_ctx.source, "save", text))
    assert "notice-error" in out and "tail_current_pct: this key is now called full_current_pct" in out


def test_setup_callback_check_reports_validation_messages(copy_ctx):
    from drawdown.dashboard.pages import setup

    out = setup.render_system_action(copy_ctx.source, "check", "[battery]\nchemistry = 'nimh'\n")
    text = str(out)
    assert "notice-error" in text and "battery.chemistry" in text


def _data_url(raw: bytes) -> str:
    return "data:text/csv;base64," + base64.b64encode(raw).decode()


def test_upload_of_a_bad_file_returns_the_importer_message(copy_ctx):
    src = copy_ctx.source
    rows_before = sum(c["rows"] for c in src.channel_summary().values())
    out = src.import_upload("notes.csv", _data_url(b"dear diary\nwe drove to the fjord\n"))
    assert out["ok"] is False
    assert out["error"].startswith("notes.csv:")
    assert sum(c["rows"] for c in src.channel_summary().values()) == rows_before


def test_upload_over_the_size_limit_is_refused(copy_ctx, monkeypatch):
    import drawdown.dashboard.data as data

    monkeypatch.setattr(data, "MAX_UPLOAD_BYTES", 100)
    out = copy_ctx.source.import_upload("big.csv", _data_url(b"time,voltage_V\n" * 20))
    assert out["ok"] is False and "upload limit" in out["error"]


def test_upload_of_a_good_log_stores_its_rows(copy_ctx):
    src = copy_ctx.source
    last = src.time_span()[1]
    t = last + pd.to_timedelta(np.arange(1, 61), unit="min")
    lines = ["time,battery_voltage_V,battery_current_A"] + [
        f"{ts.strftime('%Y-%m-%dT%H:%M:%SZ')},{13.1 - i * 0.001:.3f},-4.2" for i, ts in enumerate(t)]
    out = src.import_upload("extra.csv", _data_url("\n".join(lines).encode() + b"\n"))
    assert out["ok"], out
    assert out["summary"]["rows_stored"] == 60
    assert src.time_span()[1] == t[-1]


def test_upload_of_a_parquet_file_uses_the_same_importer_as_the_command_line(copy_ctx, tmp_path):
    # A wide Parquet file written by pandas/pyarrow (not by drawdown): the page imports it like `drawdown import`.
    src = copy_ctx.source
    last = src.time_span()[1]
    t = last + pd.to_timedelta(np.arange(1, 31), unit="min")
    frame = pd.DataFrame({"time": t, "battery_voltage_V": 13.0, "battery_current_A": -3.5})
    path = tmp_path / "extra.parquet"
    frame.to_parquet(path)
    out = src.import_upload("extra.parquet", "data:application/octet-stream;base64,"
                            + base64.b64encode(path.read_bytes()).decode())
    assert out["ok"], out
    assert out["summary"]["rows_stored"] == 30
    assert src.time_span()[1] == t[-1]


def test_upload_callback_shows_an_error_notice_for_a_bad_file(copy_ctx):
    from drawdown.dashboard.pages import setup

    msg, _table = setup.render_upload(copy_ctx.source, _data_url(b"\x00\x01\x02 binary junk"), "junk.bin")
    assert "notice-error" in str(msg) and "Import failed" in str(msg)


# -- pages as plain functions ----------------------------------------------------------------------

def test_every_page_layout_builds(app_ctx):
    import dash

    for page in dash.page_registry.values():
        assert page["layout"]() is not None


def test_app_does_not_suppress_callback_exceptions(app_ctx):
    assert app_ctx.app.config.suppress_callback_exceptions is False


def test_trip_range_change_changes_the_ledger(app_ctx):
    from drawdown.dashboard.pages import trip

    src = app_ctx.source
    full = src.full_range()
    days = src.days(*full)
    assert days.ok, days.why
    _s, fig_all, _t, _q, stored = trip.render_trip(src, *full)
    _s, fig_two, _t, _q, _st = trip.render_trip(src, full[0], (pd.Timestamp(full[0]) + pd.Timedelta(days=1))
                                                .date().isoformat())
    assert stored == {"start": full[0], "end": full[1]}
    consumed_all = next(tr for tr in fig_all.data if tr.name == "consumed")
    consumed_two = next(tr for tr in fig_two.data if tr.name == "consumed")
    assert len(consumed_all.x) > len(consumed_two.x) == 2


def test_planner_recomputes_when_the_autonomy_target_changes(app_ctx):
    from drawdown.dashboard.pages import planner

    src = app_ctx.source
    sized = src.sizing(*src.default_range(), autonomy_days=1, percentile=90)
    assert sized.ok, sized.why
    one = str(planner.render_plan(src, 1, 90, None)[0])
    five = str(planner.render_plan(src, 5, 90, None)[0])
    assert one != five


def test_planner_rejects_an_out_of_range_target(app_ctx):
    from drawdown.dashboard.pages import planner

    out = planner.render_plan(app_ctx.source, 0, 90, None)
    assert "0.5 to 30" in str(out[0])


def test_readings_callback_redraws_a_zoom_at_full_resolution(app_ctx):
    from drawdown.dashboard.pages import trip

    src = app_ctx.source
    rng = src.full_range()
    wide = trip.render_readings(src, *rng)
    assert "thinned" in wide.layout.title.subtitle.text
    day = pd.Timestamp(rng[0]) + pd.Timedelta(days=1)
    zoom = {"xaxis.range[0]": f"{day.date()} 10:00:00", "xaxis.range[1]": f"{day.date()} 12:00:00"}
    narrow = trip.render_readings(src, *rng, relayout=zoom)
    assert "every stored reading" in narrow.layout.title.subtitle.text
    assert len(narrow.data[0].x) == 120


def test_range_cache_key_ignores_readings_written_after_the_range(copy_ctx):
    # A live collector appends "now": the analysis of earlier days must stay cached.
    src = copy_ctx.source
    span = src.time_span()
    lo, hi = span[0].isoformat(), (span[1] - pd.Timedelta(days=1)).isoformat()
    before = src.store_key(lo, hi)
    assert before[2] > 0  # the range's chunks are counted
    _append_battery(src.store_path, span[1], 5, 13.1, -3.0)
    assert src.store_key(lo, hi) == before
    assert src.store_key() != before
    # ...but a reading written inside the range does invalidate it (an import of that trip's log).
    _append_battery(src.store_path, span[0] + pd.Timedelta(hours=1, seconds=30), 1, 13.1, -3.0)
    assert src.store_key(lo, hi) != before


def test_live_state_of_charge_carried_forward_matches_a_full_analysis(copy_ctx):
    src = copy_ctx.source
    last = src.time_span()[1]
    _append_battery(src.store_path, last, 50, 13.0, -20.0)
    snap = src.live()
    assert snap.soc_source == "estimated by coulomb counting"
    # The same instant analysed in one piece by analysis.report over the whole store.
    full = src.soc(*src.full_range())
    assert full.ok, full.why
    series = full.value[0]
    assert snap.soc_pct == pytest.approx(float(series.iloc[-1]), abs=1.0)


def test_a_range_too_big_for_one_analysis_gets_a_message_not_a_crash(app_ctx, monkeypatch):
    import drawdown.dashboard.data as data

    monkeypatch.setattr(data, "MAX_ANALYSIS_READINGS", 1000)
    section = app_ctx.source.days(*app_ctx.source.full_range())
    assert not section.ok
    assert "pick a shorter range" in section.why


def test_day_adapters_carry_a_single_shunts_95_percent_range_and_nothing_otherwise():
    # The report JSON's consumed_Ah_pi95 (docs/contracts.md#report days keys) and the ledger's
    # consumed_Ah_pi95_lo/hi reach the dashboard's flat day frame as consumed_Ah_lo/hi.
    from drawdown.dashboard.data import _ledger_days, _report_days

    base = {"date": ["2026-09-21"], "complete": [True], "consumed_Ah": [48.2], "consumed_Wh": [644.0],
            "soc_min_pct": [80.0], "soc_end_pct": [89.0]}
    with_range = _ledger_days(pd.DataFrame(dict(base, consumed_Ah_pi95_lo=[43.2], consumed_Ah_pi95_hi=[53.9])))
    assert with_range.loc[0, "consumed_Ah_lo"] == 43.2 and with_range.loc[0, "consumed_Ah_hi"] == 53.9
    assert _ledger_days(pd.DataFrame(base))["consumed_Ah_lo"].isna().all()
    day = {"date": "2026-09-21", "complete": True, "consumed_Ah": 48.2, "consumed_Wh": 644.0,
           "charged_Ah": {"solar": 19.3}, "soc_min_pct": 80.0, "soc_end_pct": 89.0}
    rep = _report_days({"days": [dict(day, consumed_Ah_pi95=[43.2, 53.9])]})
    assert rep.loc[0, "consumed_Ah_lo"] == 43.2 and rep.loc[0, "consumed_Ah_hi"] == 53.9
    assert pd.isna(_report_days({"days": [day]}).loc[0, "consumed_Ah_lo"])


def test_trip_table_for_a_log_with_a_shunt_per_source_has_the_instrument_range_and_no_unseen_hours(app_ctx):
    # Every load measured: nothing was inferred, so no "load not seen" column; the range left
    # is the battery shunt's unseen zero offset and the gains (analysis/instrument.py).
    from drawdown.dashboard.pages import trip

    _s, _f, tab, _q, _st = trip.render_trip(app_ctx.source, *app_ctx.source.full_range())
    assert "95 % range" in str(tab)
    assert "Load not seen" not in str(tab)
