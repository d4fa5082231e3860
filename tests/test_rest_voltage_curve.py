"""``[battery] rest_voltage_curve``: the bank's own rested-voltage curve instead of the chemistry's table.

Outside reference: the independent generator's flooded bank follows Linden's rule V_cell = SG + 0.84
(Linden, Handbook of Batteries) on a 1.270 -> 1.115 specific-gravity span; read through the typical
flooded table it reads 5 points low at 50 % and ~12 low at 25 % (tests/test_leadacid_capacity.py).
Given as the bank's datasheet curve, the same voltages must read back to their own SoC.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT / "fixtures"))

from drawdown.analysis import ocv  # noqa: E402
from drawdown.analysis.system import SystemError_ as DrawdownSystemError  # noqa: E402
from drawdown.analysis.system import parse_system  # noqa: E402
from independent.bank_empirical import EmpiricalBank  # noqa: E402

BASE = """[site]
latitude_deg = 50
longitude_deg = 5
[battery]
chemistry = "flooded"
nominal_voltage_V = 12
rated_capacity_Ah = 225
"""


def _with(curve: str) -> str:
    return BASE + f"rest_voltage_curve = {curve}\n"


def test_a_declared_curve_is_read_instead_of_the_table():
    bank = EmpiricalBank("flooded", 225.0, 12.0)
    socs = [0, 10, 25, 40, 50, 60, 75, 90, 100]
    curve = "[" + ", ".join(f"[{s}, {float(bank.ocv_at_soc_pct(s)):.4f}]" for s in socs) + "]"
    system = parse_system(_with(curve))
    b = system.battery
    for s in (25, 50, 75):
        v = float(bank.ocv_at_soc_pct(s))
        assert float(ocv.soc_from_ocv(v, b.chemistry, b.nominal_voltage_V, b.rest_voltage_curve)) == pytest.approx(s, abs=0.6)
        assert float(ocv.soc_from_ocv(v, b.chemistry, b.nominal_voltage_V)) < s - 2  # the table reads it low
        assert float(ocv.ocv_from_soc(s, b.chemistry, b.nominal_voltage_V, b.rest_voltage_curve)) == pytest.approx(v, abs=0.01)
    # a declared curve leaves less room for the maker's spread: a tighter anchor
    v50 = float(bank.ocv_at_soc_pct(50))
    assert (ocv.soc_sigma_from_ocv(v50, "flooded", 12.0, b.rest_voltage_curve)
            < 0.7 * ocv.soc_sigma_from_ocv(v50, "flooded", 12.0))


@pytest.mark.parametrize("curve,words", [
    ("[[0, 11.8], [100, 12.7]]", "at least 3"),
    ("[[0, 11.8], [60, 12.3], [50, 12.2], [100, 12.7]]", "must rise from 0"),
    ("[[0, 11.8], [50, 12.3], [100, 12.2]]", "voltages"),
    ("[[0, 1.95], [50, 2.05], [100, 2.12]]", "whole bank, not per cell"),
    ("[[30, 12.0], [50, 12.2], [100, 12.7]]", "at most 10 %"),
])
def test_a_bad_curve_is_refused_naming_the_key(curve, words):
    with pytest.raises(DrawdownSystemError) as err:
        parse_system(_with(curve))
    assert "rest_voltage_curve" in str(err.value) and words in str(err.value)
