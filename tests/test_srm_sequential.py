"""The anytime-valid test over a ramp: a product of per-version Bayes factors, checked against scipy and Ville."""

import math

import numpy as np
import pytest
from scipy import stats

from audit.srm import sequential_p_values


def test_one_design_is_the_dirichlet_multinomial_bayes_factor():
    # Reference: scipy.stats.dirichlet_multinomial and scipy.stats.multinomial (PyPI scipy); the Bayes
    # factor of the Dirichlet-multinomial alternative is the ratio of their pmfs.
    shares, concentration, counts = [0.5, 0.3, 0.2], 100.0, [61, 22, 17]
    bf = (stats.dirichlet_multinomial.pmf(counts, np.array(shares) * concentration, sum(counts))
          / stats.multinomial.pmf(counts, sum(counts), shares))
    assert sequential_p_values([counts], shares, concentration)[0] == pytest.approx(min(1.0, 1 / bf), rel=1e-9)


def test_a_ramp_multiplies_the_bayes_factors_of_its_versions():
    # Reference: the same scipy pmfs, one ratio per version, multiplied.
    shares = np.array([[0.9, 0.1], [0.7, 0.3]])
    concentration = 50.0
    day_one = [[80, 20], [0, 0]]
    day_two = [[10, 2], [55, 33]]
    totals = np.array(day_one) + np.array(day_two)
    bf = 1.0
    for counts, version in zip(totals, shares):
        n = int(counts.sum())
        bf *= stats.dirichlet_multinomial.pmf(counts, version * concentration, n) / stats.multinomial.pmf(counts, n, version)
    pvalues = sequential_p_values([day_one, day_two], shares, concentration)
    assert pvalues[-1] == pytest.approx(min(pvalues[0], 1 / bf), rel=1e-9)


def test_daily_looks_at_a_healthy_ramp_stay_within_ville():
    # Ville's inequality: an anytime-valid p-value drops below alpha at any of the looks with probability
    # at most alpha. 30 daily looks at a ramp from 90/10 to 75/25 on day 10; the bound is checked with the
    # binomial 99.9 % quantile of the runs (scipy.stats.binom.ppf).
    rng = np.random.default_rng(21)
    shares = np.array([[0.9, 0.1], [0.75, 0.25]])
    runs, alpha = 300, 0.05
    crossed = 0
    for _ in range(runs):
        daily = np.zeros((30, 2, 2), dtype=np.int64)
        daily[:10, 0] = rng.multinomial(400, shares[0], size=10)
        daily[10:, 1] = rng.multinomial(400, shares[1], size=20)
        crossed += min(sequential_p_values(daily, shares)) < alpha
    assert crossed <= stats.binom.ppf(0.999, runs, alpha)


def test_a_drop_after_the_ramp_is_found():
    rng = np.random.default_rng(4)
    shares = np.array([[0.9, 0.1], [0.75, 0.25]])
    daily = np.zeros((30, 2, 2), dtype=np.int64)
    daily[:10, 0] = rng.multinomial(2000, shares[0], size=10)
    broken = shares[1] * [1.0, 0.7]
    daily[10:, 1] = rng.multinomial(2000, broken / broken.sum(), size=20)
    assert sequential_p_values(daily, shares)[-1] < 0.0005


def test_p_values_never_rise():
    rng = np.random.default_rng(6)
    pvalues = sequential_p_values(rng.multinomial(500, [0.52, 0.48], size=20), [0.5, 0.5])
    assert all(later <= earlier for earlier, later in zip(pvalues, pvalues[1:]))


def test_a_unit_in_a_closed_arm_makes_p_zero_from_that_day():
    assert sequential_p_values([[10, 0, 10], [10, 1, 10], [10, 0, 10]], [0.5, 0.0, 0.5])[1:] == [0.0, 0.0]
    open_only = sequential_p_values([[10, 0, 10]], [0.5, 0.0, 0.5])
    assert open_only == sequential_p_values([[10, 10]], [0.5, 0.5])
    assert not math.isnan(open_only[0])


def test_no_days_no_p_values():
    assert sequential_p_values([], [0.5, 0.5]) == []
