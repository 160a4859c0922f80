"""The SRM statistics, checked against published values and reference implementations (no files)."""

import numpy as np
import pytest
from statsmodels.stats.multitest import multipletests

from audit.srm import (
    arm_gaps, cumulative_tests, expected_shares, first_crossing, holm_adjust, leave_out, mixture_shares,
    proportion_test, share_interval, split_test,
)


def test_textbook_example_is_a_mismatch():
    # Kohavi, Tang & Xu, Trustworthy Online Controlled Experiments (2020), ch. 21:
    # 821,588 vs 815,482 units in a 50/50 test, p ≈ 1.8e-6.
    fit = split_test([821_588, 815_482], [0.5, 0.5])
    assert fit.df == 1
    assert fit.p_value == pytest.approx(1.8e-6, rel=0.05)
    assert fit.p_value < 0.0005


@pytest.mark.parametrize("critical, arms", [(5.991, 3), (7.815, 4)])
def test_large_counts_sit_at_the_handbook_critical_values(critical, arms):
    # NIST/SEMATECH e-Handbook of Statistical Methods, upper critical values of the chi-square
    # distribution at alpha = 0.05: 5.991 (2 df), 7.815 (3 df). With 10,000 expected units per arm the
    # chi-square runs; counts whose statistic sits just below and above the value give p either side of 0.05.
    base = 10_000

    def counts_for(statistic: float) -> list[int]:
        d = round((statistic * base / 2) ** 0.5)  # +d and -d in two arms: chi2 = 2 d^2 / base
        return [base + d, base - d] + [base] * (arms - 2)

    below, above = split_test(counts_for(critical - 0.05), [1 / arms] * arms), \
        split_test(counts_for(critical + 0.05), [1 / arms] * arms)
    assert below.test == above.test == "pearson-chi-square" and below.df == arms - 1
    assert below.p_value > 0.05 > above.p_value


def test_pearson_statistic_crosses_handbook_value_for_two_arms():
    # 1 df, 0.05: 3.841 (NIST/SEMATECH). 50/50 over n units with counts (n/2 + d, n/2 - d)
    # gives chi2 = 4 d^2 / n; n = 10,000, d = 98 -> 3.8416, d = 97 -> 3.7636.
    assert split_test([5098, 4902], [0.5, 0.5]).statistic == pytest.approx(3.8416)
    assert split_test([5097, 4903], [0.5, 0.5]).statistic == pytest.approx(3.7636)


def test_fit_with_three_arms_uses_two_degrees_of_freedom():
    fit = split_test([340, 330, 330], expected_shares([34, 33, 33]))
    assert fit.df == 2
    assert fit.statistic == pytest.approx(0.0, abs=1e-9)


def test_fit_without_units_is_not_a_mismatch():
    assert split_test([0, 0], [0.5, 0.5]).p_value == 1.0


def test_arms_with_zero_share_and_no_units_are_left_out():
    fit = split_test([500, 500, 0], [0.5, 0.5, 0.0])
    assert fit.df == 1 and fit.p_value == pytest.approx(1.0)


def test_fit_rejects_mismatched_lengths():
    with pytest.raises(ValueError):
        split_test([1, 2, 3], [0.5, 0.5])


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
    assert shift.test_without.p_value == pytest.approx(1.0)
    assert shift.explained == pytest.approx(1.0)


def test_cumulative_tests_accumulate_days_and_first_crossing():
    daily = [[100, 100], [100, 100], [300, 200], [300, 200]]
    fits = cumulative_tests(daily, [0.5, 0.5])
    assert fits[1].p_value == pytest.approx(1.0)
    assert fits[3] == split_test([800, 600], [0.5, 0.5])
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
    flagged = np.mean([split_test(list(d), [0.34, 0.33, 0.33]).p_value < alpha for d in draws])
    assert abs(flagged - alpha) < 0.015  # binomial s.d. at n=2000 is 0.005


def test_mixture_shares_weigh_each_version_by_its_units():
    # 100 units at 90/10 and 300 at 70/30: (100 x 0.1 + 300 x 0.3) / 400 = 0.25 in the second arm.
    assert mixture_shares([[90, 10], [210, 90]], [[0.9, 0.1], [0.7, 0.3]]) == pytest.approx([0.75, 0.25])
    assert mixture_shares([5, 5], [0.5, 0.5]) == [0.5, 0.5]
