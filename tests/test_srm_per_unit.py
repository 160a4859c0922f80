"""Duplicate-logging evidence with the unit as the sampling unit: the rank test against scipy, on clustered logs."""

import numpy as np
import pytest
from scipy import stats

from audit.srm import duplicate_logging_evidence, records_rank_test
from tests.srm_simulations import balanced_records


def histogram(per_arm: list[np.ndarray]) -> tuple[list[int], np.ndarray]:
    """records-per-unit values and table[arm][value index] = units, as the engine counts them."""
    values = sorted({int(v) for records in per_arm for v in records})
    table = np.array([[int((records == v).sum()) for v in values] for records in per_arm])
    return values, table


def test_rank_test_from_the_histogram_equals_scipy_kruskal_on_the_units():
    # Reference: scipy.stats.kruskal on the expanded data, one value per unit (ties corrected).
    rng = np.random.default_rng(2)
    for _ in range(20):
        per_arm = [rng.geometric(rng.uniform(0.2, 0.6), rng.integers(5, 400)) for _ in range(rng.integers(2, 5))]
        values, table = histogram(per_arm)
        ours = records_rank_test(values, table)
        reference = stats.kruskal(*per_arm)
        assert ours.statistic == pytest.approx(reference.statistic, rel=1e-9)
        assert ours.p_value == pytest.approx(reference.pvalue, rel=1e-9, abs=1e-300)


def test_two_arms_equal_the_mann_whitney_test_without_continuity_correction():
    # Reference: scipy.stats.mannwhitneyu(method="asymptotic", use_continuity=False), two-sided.
    rng = np.random.default_rng(9)
    a, b = rng.geometric(0.3, 300), rng.geometric(0.25, 280)
    values, table = histogram([a, b])
    reference = stats.mannwhitneyu(a, b, method="asymptotic", use_continuity=False)
    assert records_rank_test(values, table).p_value == pytest.approx(reference.pvalue, rel=1e-9)


def test_values_given_in_any_order_give_the_same_test():
    values, table = [1, 2, 5], np.array([[50, 20, 3], [45, 25, 9]])
    shuffled = records_rank_test([5, 1, 2], table[:, [2, 0, 1]])
    assert shuffled == records_rank_test(values, table)


def test_every_unit_with_the_same_count_is_nothing_to_compare():
    assert records_rank_test([1], [[100], [90]]).p_value == 1.0
    assert records_rank_test([1, 2], [[100, 4], [0, 0]]).p_value == 1.0


def test_an_arm_that_logs_twice_is_named():
    rng = np.random.default_rng(4)
    control = rng.geometric(0.4, 5000)
    doubled = rng.geometric(0.4, 5000) * np.where(rng.random(5000) < 0.5, 2, 1)
    values, table = histogram([control, doubled])
    evidence = duplicate_logging_evidence(values, table, [int(control.sum()), int(doubled.sum())], [0, 0], 0.0005)
    assert evidence.found and evidence.arm == 1 and evidence.basis == "records_per_unit"


def test_exact_repeats_are_evidence_on_their_own():
    values, table = [1, 2], [[900, 100], [900, 100]]
    evidence = duplicate_logging_evidence(values, table, [1100, 1100], [0, 40], 0.0005)
    assert evidence.found and evidence.arm == 1 and evidence.basis == "exact_repeats"
    assert evidence.repeat_shares[1] == pytest.approx(40 / 1100)


def test_repeats_every_arm_shares_alike_are_not_named():
    # A client retrying everywhere: 4 % exact repeats in both arms change neither arm's distinct units.
    values, table = [1, 2], [[900, 100], [900, 100]]
    evidence = duplicate_logging_evidence(values, table, [1100, 1100], [44, 40], 0.0005)
    assert not evidence.found and evidence.repeat_shares == pytest.approx((0.04, 40 / 1100))
    lopsided = duplicate_logging_evidence(values, table, [1100, 1100], [10, 40], 0.0005)
    assert lopsided.found and lopsided.arm == 1 and lopsided.basis == "exact_repeats"


def test_a_significant_but_immaterial_difference_is_not_named():
    # Many units, records per unit 1 % apart: significant, but under the 5 % materiality bar.
    values, table = [1, 2], [[800_000, 200_000], [792_000, 208_000]]
    evidence = duplicate_logging_evidence(values, table, [1_200_000, 1_208_000], [0, 0], 0.0005)
    assert evidence.rank_test.p_value < 0.0005 and not evidence.found


def test_heavy_tailed_healthy_logs_do_not_raise_the_cause_more_often_than_the_threshold():
    # 400 balanced logs of 4,000 units. The rank test's rate at alpha = 0.05 lies within
    # the binomial 99.9 % range of alpha (scipy.stats.binom.ppf), so it is calibrated, not just quiet; the
    # cause (which also needs a material difference) fires no more often, at 0.05 and at the default
    # 0.0005; a chi-square on records, which treats clustered records as independent, fires in most runs.
    rng = np.random.default_rng(2026)
    runs, alpha, default = 400, 0.05, 0.0005
    rank_crossed = fired = fired_at_default = records_chi_square = 0
    for _ in range(runs):
        values, table, records = balanced_records(rng, 4000)
        evidence = duplicate_logging_evidence(values, table, records, [0, 0], alpha)
        rank_crossed += evidence.rank_test.p_value < alpha
        fired += evidence.found
        fired_at_default += duplicate_logging_evidence(values, table, records, [0, 0], default).found
        records_chi_square += stats.chisquare(records).pvalue < alpha
    assert stats.binom.ppf(0.001, runs, alpha) <= rank_crossed <= stats.binom.ppf(0.999, runs, alpha)
    assert fired <= rank_crossed
    assert fired_at_default <= stats.binom.ppf(0.999, runs, default)
    assert records_chi_square > runs / 2
