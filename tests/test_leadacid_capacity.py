"""Lead-acid usable capacity on the independent family: what is known about its low bias.

The flooded multi-channel capacity runs 7-9 % low on the independent family (docs/validation.md).
The cause, measured on the tune half (seeds 1, 3, 5, 7 of ``lead-deep`` and ``lead-deep-24``):

* the night-time (quasi-OCV) anchors read the state of charge low because drawdown's flooded
  table (analysis/ocv.py) sits 0.05-0.1 V above the generator's curve below 75 %: -2.5 points
  at 60-80 %, -5 at 40-60 %, -9 to -10 below 40 %; the unrelaxed polarisation adds only
  -0.3 to -1.7 points. The SoC spans are 12-22 % too large, the capacity too small;
* in the other direction the bank gives more ampere-hours per point of SoC at the ~C/90 night
  draw than at the 20 h rate the truth is stated at, which drawdown does not count (its Peukert
  correction is clamped at face value below the rated current): +5 to +18 % per pair.

Neither can be corrected alone, and correcting both leaves the figure resting on which published
flooded curve is assumed (they part by ~0.3 V per 12 V block at 25 %). These tests pin what
holds today (the interval holds the truth) and, strictly expected to fail, the target.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "fixtures"))
sys.path.insert(0, str(ROOT / "benchmarks"))

from drawdown.analysis import ocv  # noqa: E402
from independent.bank_empirical import EmpiricalBank  # noqa: E402
from independent.family import make_case  # noqa: E402
from independent_accuracy import analyse  # noqa: E402


def test_the_flooded_table_reads_the_independent_banks_rested_voltage_low_below_75_percent():
    # The first cause of the low bias, without a log: the generator's flooded curve (Linden's
    # V_cell = SG + 0.84, SG 1.270 full -> 1.115 empty) read through drawdown's flooded table.
    bank = EmpiricalBank("flooded", 225.0, 12.0)
    read = {s: float(ocv.soc_from_ocv(bank.ocv_at_soc_pct(s), "flooded", 12.0)) for s in (25, 50, 75, 95)}
    assert abs(read[95] - 95) < 2.0            # near full the curves agree
    assert 3.0 < 50 - read[50] < 8.0           # mid-range: ~5 points low
    assert 8.0 < 25 - read[25] < 16.0          # towards empty: ~12 points low


@pytest.fixture(scope="module")
def lead_deep_24(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("lead-deep-24")
    case = make_case("lead-deep-24", seed=5, out_dir=tmp / "case")
    report = analyse(Path(case.multi_csv), Path(case.system_toml).read_text(), tmp)
    return report["battery"], float(case.truth["battery"]["usable_Ah"])


@pytest.mark.slow
def test_flooded_multi_channel_capacity_interval_holds_the_truth(lead_deep_24):
    # Today's figure is -9.2 % (186.9 Ah against 205.8 Ah) but its 95 % interval holds the
    # truth: a wrong point, not a confidently wrong one. A fix must keep this.
    bat, true_Ah = lead_deep_24
    assert bat["usable_Ah"] is not None, bat.get("usable_Ah_why")
    lo, hi = bat["usable_Ah_ci95"]
    assert lo <= true_Ah <= hi


@pytest.mark.slow
@pytest.mark.xfail(strict=True, reason="flooded capacity runs ~9 % low on this log (table vs curve, "
                   "uncounted low-rate gain); see the module docstring and docs/validation.md")
def test_flooded_multi_channel_capacity_is_within_5_percent(lead_deep_24):
    bat, true_Ah = lead_deep_24
    assert bat["usable_Ah"] is not None
    assert abs(bat["usable_Ah"] / true_Ah - 1.0) <= 0.05
