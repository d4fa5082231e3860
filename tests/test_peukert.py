"""Peukert's law against docs/peukert.md check values (Peukert 1897 rated form, computed checks)."""

from __future__ import annotations

import numpy as np
import pytest

from drawdown.analysis.peukert import (
    capacity_at_current,
    effective_current,
    fit_exponent,
    peukert_capacity,
    runtime_h,
)

# docs/peukert.md#check-values (computed): C20 = 100 Ah, H = 20 h, I_H = 5 A, k = 1.25; tolerance +-0.01.
C, H, K = 100.0, 20.0, 1.25


@pytest.mark.parametrize("current_A, hours, ah", [(10, 8.409, 84.09), (20, 3.536, 70.71), (50, 1.125, 56.23)])
def test_runtime_and_capacity_match_peukert_1897_rated_form_worked_example(current_A, hours, ah):
    # Peukert 1897 form t = H (C/(I H))^k; values: docs/peukert.md#check-values.
    assert runtime_h(C, H, current_A, K) == pytest.approx(hours, abs=0.01)
    assert capacity_at_current(C, H, current_A, K) == pytest.approx(ah, abs=0.01)


def test_peukert_capacity_matches_docs_check():
    # docs/peukert.md#check-values: C_p = H I_H^k = 149.53 A^k h.
    assert peukert_capacity(C, H, K) == pytest.approx(149.53, abs=0.01)


def test_effective_current_at_20A_removes_28_28_percent_per_hour():
    # docs/peukert.md#check-values: I_eff(20 A) = 28.28 A, so 1 h at 20 A removes 28.28 % of 100 Ah.
    assert float(effective_current(20.0, 5.0, K)) == pytest.approx(28.28, abs=0.01)


def test_effective_current_is_clamped_to_at_least_the_real_current_below_the_rated_rate():
    # docs/peukert.md: below I_H the formula credits more than C_H; we clamp I_eff >= |I| (documented).
    assert float(effective_current(-2.0, 5.0, K)) == pytest.approx(2.0)
    assert float(effective_current(-2.0, 5.0, K, clamp=False)) < 2.0


def test_two_test_exponent_matches_docs():
    # docs/peukert.md#check-values: 5 A for 20 h and 25 A for 2.8 h give k = 1.2216.
    k, _ = fit_exponent([5.0, 25.0], [20.0, 2.8])
    assert k == pytest.approx(1.2216, abs=0.01)


def test_log_log_fit_recovers_exponent_and_peukert_capacity():
    # docs/peukert.md#check-values: five synthetic points generated with k = 1.2 give k = 1.2000, C_p = 137.97.
    i = np.array([2.0, 5.0, 10.0, 20.0, 50.0])
    cp = 20.0 * 5.0 ** 1.2
    k, cp_fit = fit_exponent(i, cp / i ** 1.2)
    assert k == pytest.approx(1.2, abs=0.01)
    assert cp_fit == pytest.approx(137.97, abs=0.01)


def test_fit_exponent_refuses_a_single_rate():
    with pytest.raises(ValueError, match="distinct currents"):
        fit_exponent([5.0, 5.0], [20.0, 19.0])


def test_bad_exponent_is_refused_with_its_value():
    with pytest.raises(ValueError, match="2.5"):
        runtime_h(C, H, 10.0, 2.5)
