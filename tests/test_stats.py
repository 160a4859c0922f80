"""The SRM statistics, checked against published values and reference implementations (no files)."""

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from audit.srm import (
    arm_gaps, chi_square_fit, chi_square_p_value, cumulative_fits, expected_shares, first_crossing, holm_adjust,
    leave_out, proportion_test, share_interval,
)


def test_textbook_example_is_a_mismatch():
    # Kohavi, Tang & Xu, Trustworthy Online Controlled Experiments (2020), ch. 21:
    # 821,588 vs 815,482 units in a 50/50 test, p ≈ 1.8e-6.
    fit = chi_square_fit([821_588, 815_482], [0.5, 0.5])
    assert fit.df == 1
    assert fit.p_value == pytest.approx(1.8e-6, rel=0.05)
    assert fit.p_value < 0.0005


@pytest.mark.parametrize("df, critical", [(1, 3.841), (2, 5.991), (3, 7.815)])
def test_handbook_critical_values_sit_at_five_percent(df, critical):
    # NIST/SEMATECH e-Handbook of Statistical Methods, table of upper critical values
    # of the chi-square distribution, alpha = 0.05.
    assert chi_square_p_value(critical - 0.01, df) > 0.05
    assert chi_square_p_value(critical + 0.01, df) < 0.05
    assert chi_square_p_value(critical, df) == pytest.approx(0.05, abs=2e-4)


def test_fit_statistic_crosses_handbook_value_for_two_arms():
    # 1 df, 0.05: 3.841 (NIST/SEMATECH). 50/50 over n units with counts (n/2 + d, n/2 - d)
    # gives chi2 = 4 d^2 / n; n = 10,000, d = 98 -> 3.8416, d = 97 -> 3.7636.
    assert chi_square_fit([5098, 4902], [0.5, 0.5]).p_value < 0.05
    assert chi_square_fit([5097, 4903], [0.5, 0.5]).p_value > 0.05


def test_fit_with_three_arms_uses_two_degrees_of_freedom():
    fit = chi_square_fit([340, 330, 330], expected_shares([34, 33, 33]))
    assert fit.df == 2
    assert fit.statistic == pytest.approx(0.0, abs=1e-9)


def test_fit_without_units_is_not_a_mismatch():
    assert chi_square_fit([0, 0], [0.5, 0.5]).p_value == 1.0


def test_arms_with_zero_share_are_left_out():
    fit = chi_square_fit([500, 500, 0], [0.5, 0.5, 0.0])
    assert fit.df == 1 and fit.p_value == pytest.approx(1.0)


def test_fit_rejects_mismatched_lengths():
    with pytest.raises(ValueError):
        chi_square_fit([1, 2, 3], [0.5, 0.5])


def test_expected_shares_normalise_weights():
    assert expected_shares([20, 80]) == pytest.approx([0.2, 0.8])
    with pytest.raises(ValueError):
        expected_shares([0, 0])


def test_holm_matches_statsmodels():
    rng = np.random.default_rng(4)
    for size in (1, 2, 7, 40):
        pvalues = list(rng.uniform(0, 0.2, size)) + [1e-9, 0.5]
        expected = multipletests(pvalues, method="holm")[1]
        assert holm_adjust(pvalues) == pytest.approx(list(expected))


def test_arm_gaps_report_missing_units():
    short, control = arm_gaps([400, 600], [0.5, 0.5])
    assert short.expected == 500 and short.excess == -100 and short.ratio == pytest.approx(0.8)
    assert control.observed_share == pytest.approx(0.6)


def test_leaving_out_the_faulty_segment_removes_the_imbalance():
    total = [5600, 5000]
    faulty = [600, 0]
    shift = leave_out(total, faulty, [0.5, 0.5])
    assert shift.fit_without.p_value == pytest.approx(1.0)
    assert shift.explained == pytest.approx(1.0)


def test_cumulative_fits_accumulate_days_and_first_crossing():
    daily = [[100, 100], [100, 100], [300, 200], [300, 200]]
    fits = cumulative_fits(daily, [0.5, 0.5])
    assert fits[1].p_value == pytest.approx(1.0)
    assert fits[3].statistic == pytest.approx(chi_square_fit([800, 600], [0.5, 0.5]).statistic)
    assert first_crossing([f.p_value for f in fits], 0.0005) == 3
    assert first_crossing([0.5, 0.2], 0.05) is None


def test_wilson_interval_matches_a_known_value():
    # Wilson score interval for 50 of 100 at 95 %: (0.4038, 0.5962), from memory
    # (Newcombe 1998 gives the same construction).
    low, high = share_interval(50, 100)
    assert low == pytest.approx(0.4038, abs=1e-4) and high == pytest.approx(0.5962, abs=1e-4)
    assert share_interval(0, 0) == (0.0, 1.0)


def test_proportion_test_flags_a_concentrated_difference():
    assert proportion_test(300, 1000, 10, 10000) < 1e-10
    assert proportion_test(10, 1000, 100, 10000) > 0.5


def test_false_alarm_rate_stays_near_the_threshold_on_simulated_splits():
    # Multinomial draws from the design itself: the share flagged at alpha should be about alpha.
    rng = np.random.default_rng(11)
    alpha = 0.05
    draws = rng.multinomial(20_000, [0.34, 0.33, 0.33], size=2000)
    flagged = np.mean([chi_square_fit(list(d), [0.34, 0.33, 0.33]).p_value < alpha for d in draws])
    assert abs(flagged - alpha) < 0.015  # binomial s.d. at n=2000 is 0.005
