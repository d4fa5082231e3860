"""A faded LiFePO4 bank whose capacity the log cannot pin: what the SoC series may claim.

The log comes from the independent generator in ``fixtures/independent/`` (its own bank
model, no code shared with ``collector/sim_*``), imported with the real importer and analysed
as ``drawdown report`` does; the truth is the generator's truth JSON. Seed 3 is on the tune
half. ``lfp-low-knee`` seed 3: 200 Ah rated, 177 Ah usable (~89 % health), knees 0.1-0.3 V
below the trade table, discharged to ~16 %. The capacity is null (the data allow 102-226 Ah)
and the count is divided by the rating, so the deepest point reads 29 % where the truth is
16 % (12.9 points; docs/validation.md, "SoC within 10 points"). Weighing the anchors' loose
fit against the rating was tried and not kept (it fixes this log and breaks two lead-acid
ones): the band must hold the truth, and the point's target is pinned as a strict xfail.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "fixtures"))
sys.path.insert(0, str(ROOT / "benchmarks"))

from independent.family import make_case  # noqa: E402
from independent_accuracy import analyse  # noqa: E402

pytestmark = pytest.mark.slow


@pytest.fixture(scope="module")
def faded(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("faded")
    case = make_case("lfp-low-knee", seed=3, days=None, out_dir=tmp / "case")
    report = analyse(Path(case.multi_csv), Path(case.system_toml).read_text(), tmp)
    s = report["soc_series"]
    t_ours = pd.DatetimeIndex(pd.to_datetime(s["t"], utc=True)).as_unit("us").asi8
    t_true = pd.DatetimeIndex(pd.to_datetime(case.truth["soc"]["t"], utc=True)).as_unit("us").asi8
    inside = (t_true >= t_ours[0]) & (t_true <= t_ours[-1])
    true_soc = np.asarray(case.truth["soc"]["soc_pct"], float)[inside]
    at = t_true[inside]
    est, lo, hi = (np.interp(at, t_ours, np.asarray(s[k], float)) for k in ("soc_pct", "soc_pct_lo", "soc_pct_hi"))
    return report, case.truth, true_soc, est, lo, hi


def test_a_faded_bank_with_unpinned_capacity_has_a_soc_band_that_holds_the_truth(faded):
    report, truth, true_soc, est, lo, hi = faded
    assert true_soc.min() < 20                                   # the log does go deep
    assert report["battery"]["usable_Ah"] is None                # not pinned: said so, not guessed
    lo_c, hi_c = report["soc_series"]["band_capacity_Ah"]
    assert lo_c <= truth["battery"]["usable_Ah"] <= hi_c          # the band's capacity range holds it
    assert np.mean((true_soc >= lo - 0.5) & (true_soc <= hi + 0.5)) >= 0.95
    # The band is wide where the count is deep (the capacity's range scales the excursion).
    deep = np.argmin(true_soc)
    assert hi[deep] - lo[deep] >= 20.0


@pytest.mark.xfail(strict=True, reason="counted against the rating: 12.9 points off at the deepest point "
                   "(docs/validation.md); passes once the count's capacity follows the faded bank")
def test_a_faded_bank_with_unpinned_capacity_keeps_its_soc_within_10_points(faded):
    _, _, true_soc, est, _, _ = faded
    assert np.max(np.abs(est - true_soc)) <= 10.0
