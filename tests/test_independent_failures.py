"""The five failures found on logs drawdown's own simulator did not make, pinned (issue 11).

Every log here comes from the independent generator in ``fixtures/independent/`` (its own
bank models, measured irradiance from pvlib's bundled typical-year files, instant charger
regulation, irregular sampling, sensor offsets; no code or constants shared with
``collector/sim_*``), is imported with the real importer into a store and analysed as
``drawdown report`` does. The truth is the generator's own truth JSON.
"""

from __future__ import annotations

import re
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "fixtures"))
sys.path.insert(0, str(ROOT / "benchmarks"))

from independent.family import make_case  # noqa: E402
from independent_accuracy import analyse  # noqa: E402

pytestmark = pytest.mark.slow


def _run(tmp_path: Path, name: str, *, seed: int, days: float, layout: str = "single"):
    case = make_case(name, seed=seed, days=days, out_dir=tmp_path / name)
    csv = case.single_csv if layout == "single" else case.multi_csv
    report = analyse(Path(csv), Path(case.system_toml).read_text(), tmp_path)
    truth = {d["date"]: d for d in case.truth["days"]}
    days_ = [(d, truth[d["date"]]) for d in report["days"]
             if d["date"] in truth and d["complete"] and truth[d["date"]]["complete"]]
    return report, case.truth, days_


def test_a_full_bank_at_float_hides_a_daytime_load_and_each_day_says_so_with_a_range_that_holds_it(tmp_path):
    # An AGM bank the solar controller holds at float on sunny days while an inverter load
    # runs only on the grey ones: the load under the hold leaves no trace in one shunt's log.
    # Before: +37..+50 % on every full-bank day with intervals of +-0.7 Ah that missed.
    report, _, days = _run(tmp_path, "lead-float", seed=1, days=6)
    assert len(days) >= 4
    misses = []
    for d, t in days:
        lo, hi = d["consumed_Ah_pi95"]
        if not lo <= t["consumed_Ah"] <= hi:
            misses.append((d["date"], lo, hi, t["consumed_Ah"]))
        if abs(d["consumed_Ah"] / t["consumed_Ah"] - 1) > 0.08:
            assert d["hidden_load_h"] >= 1.0 and "not seen" in d["hidden_load_note"]
        assert 0.0 <= d["observed_load_share"] <= 1.0
    # A 95 % range may miss one day in twenty; here at most one of the five (measured: the
    # drive day 2024-05-20, whose inverter load ran hidden under the alternator, misses by 6 %).
    assert len(misses) <= 1, misses


def test_a_full_bank_resting_with_the_array_off_is_a_rest_not_a_charger_hold(tmp_path):
    # A LiFePO4 bank resting full for hours (array switched off, ~0.05 A drawn): the bank
    # feeds its own small load and its voltage relaxes; no charger holds it. Before: the
    # rest was booked as solar plus a typical day's hidden load (+24 % that day).
    import numpy as np
    import pandas as pd

    from drawdown.analysis.readings import split_channels
    from drawdown.analysis.single_shunt import _hidden_masks
    from drawdown.analysis.system import parse_system
    from drawdown.collector.csv_file import import_file
    from drawdown.collector.store import Store

    case = make_case("lfp-rest", seed=1, days=6, out_dir=tmp_path / "rest")
    system = parse_system(Path(case.system_toml).read_text())
    store = Store(tmp_path / "rest.sqlite")
    try:
        import_file(Path(case.single_csv), store, tz=system.site.timezone)
        bat = split_channels(store.read())["battery"]
    finally:
        store.close()
    t = pd.DatetimeIndex(bat.t_us.view("M8[us]")).tz_localize("UTC")
    frame = pd.DataFrame({"net": bat.current_A, "v": bat.voltage_V}, index=t).resample("60s").mean()
    drive = case.drive
    resting = (~drive["array_connected"].astype(bool)).resample("60s").min().reindex(frame.index).fillna(False)
    assert resting.sum() >= 120  # at least two hours of rest in this log
    _, hidden = _hidden_masks(frame["net"].fillna(-1.0).to_numpy(), frame["v"].to_numpy(), system, 60.0,
                              rest_draw_A=0.0)
    # Inside the rests (an hour in, once the first relaxation is under way) the load is seen, not hidden.
    settled = resting & resting.shift(60, fill_value=False)
    assert settled.sum() > 0
    assert np.mean(hidden[settled.to_numpy()]) < 0.2


def test_with_no_charger_declared_no_charge_is_booked_to_an_alternator_or_shore(tmp_path):
    # The van drives and plugs in, but system.toml declares only the roof array. Before: 280 Ah
    # 'alternator' and 294 Ah 'shore' over 14 days. Undeclared charge is 'other'.
    report, truth, days = _run(tmp_path, "no-charger", seed=1, days=7)
    assert sum(t["charged_Ah"]["alternator"] + t["charged_Ah"]["shore"] for _, t in days) > 5  # it did charge
    for d in report["days"]:
        assert d["charged_Ah"]["alternator"] == 0 and d["charged_Ah"]["shore"] == 0


def test_lifepo4_capacity_on_a_bank_whose_knees_sit_low_is_right_or_unknown_never_confidently_wrong(tmp_path):
    # A 200 Ah LiFePO4 bank at ~91 % health whose curve sits 0.1-0.3 V below the trade table
    # near the knees, discharged to ~15 %. Before: 171 Ah (-15 %), health 78 %, an interval that
    # missed the truth, and a lowest SoC of 0.2 % on a day the truth was 16 %.
    report, truth, days = _run(tmp_path, "lfp-low-knee", seed=1, days=14, layout="multi")
    b, true_ah = report["battery"], truth["battery"]["usable_Ah"]
    if b["usable_Ah"] is not None:
        lo, hi = b["usable_Ah_ci95"]
        assert lo <= true_ah <= hi
        assert b["usable_Ah"] == pytest.approx(true_ah, rel=0.10)
    else:
        lo, hi = (float(x) for x in re.findall(r"(\d+)-(\d+) Ah", b["usable_Ah_why"])[0])
        assert lo <= true_ah <= hi
    for d, t in days:
        assert abs(d["soc_min_pct"] - t["soc_min_pct"]) <= 10.0, (d["date"], d["soc_min_pct"], t["soc_min_pct"])
        if d["soc_min_pct"] < 10:
            assert d["soc_min_pct_note"]


def test_lead_acid_single_shunt_capacity_is_within_10_percent_or_unknown_with_a_range_that_holds_it(tmp_path):
    # A flooded bank (Peukert ~1.2, charge efficiency ~0.87) with near-full-to-25 % discharges,
    # one shunt. Before: +19 % (health 105 %) from one short anchor pair.
    report, truth, _ = _run(tmp_path, "lead-deep", seed=1, days=14)
    b, true_ah = report["battery"], truth["battery"]["usable_Ah"]
    if b["usable_Ah"] is not None:
        assert b["usable_Ah"] == pytest.approx(true_ah, rel=0.10)
        lo, hi = b["usable_Ah_ci95"]
        assert lo <= true_ah <= hi
        if b["state_of_health_pct"] > 100:
            assert b["state_of_health_pct_note"]
    else:
        lo, hi = (float(x) for x in re.findall(r"(\d+)-(\d+) Ah", b["usable_Ah_why"])[0])
        assert lo <= true_ah <= hi


def test_a_battery_shunts_unseen_zero_offset_stays_inside_each_multi_channel_day_range(tmp_path):
    # Every load and source on its own shunt still leaves the battery shunt's zero offset,
    # which no log shows (that shunt never idles). The generator's loggers draw offsets of
    # 10-60 mA per channel; this log's consumed figure runs ~3 % high on every day (+60 mA
    # on ~48 Ah days). Before: no range at all on multi-channel days.
    report, _, days = _run(tmp_path, "lead-float", seed=5, days=5, layout="multi")
    assert len(days) >= 3
    for d, t in days:
        lo, hi = d["consumed_Ah_pi95"]
        assert lo <= t["consumed_Ah"] <= hi, (d["date"], lo, hi, t["consumed_Ah"])
        assert lo <= d["consumed_Ah"] <= hi
        # A range, not a blanket: the instruments alone leave a few per cent.
        assert (hi - lo) / 2 < 0.1 * d["consumed_Ah"]
    assert any("zero offset" in n and "zeroing" in n for n in report["data_quality"]["notes"])
