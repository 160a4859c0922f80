"""The choice and running of split tests: exact for small counts, closed arms, ramps, checked against scipy."""

import itertools
from dataclasses import replace

import numpy as np
import pytest
from scipy import stats

from audit import audit_logs
from audit.render import srm_text
from audit.render.html_report import srm_html
from audit.srm import binomial_p_values, split_test, split_tests
from tests.invented_logs import write_jsonl


def test_binomial_p_values_equal_scipy_binomtest():
    # Reference: scipy.stats.binomtest(k, n, p).pvalue, two-sided (PyPI scipy).
    rng = np.random.default_rng(7)
    n = rng.integers(1, 5000, 600)
    p = rng.choice([0.5, 0.1, 0.01, 0.99, 0.25], 600)
    k = rng.binomial(n, p) + rng.integers(-3, 4, 600) * (rng.random(600) < 0.5)
    k = np.clip(k, 0, n)
    ours = binomial_p_values(k, n, p)
    reference = np.array([stats.binomtest(int(a), int(b), float(c)).pvalue for a, b, c in zip(k, n, p)])
    assert np.allclose(ours, reference, rtol=1e-9, atol=1e-300)


def test_binomial_p_value_of_a_scalar_is_a_scalar():
    assert np.shape(binomial_p_values(3, 10, 0.5)) == ()
    assert float(binomial_p_values(5, 10, 0.5)) == 1.0


def test_small_skewed_segment_gets_the_exact_binomial():
    # 4 of 52 units in the 1 % arm: scipy.stats.binomtest(4, 52, 0.01) gives p = 0.00185
    # (the chi-square approximation says 1.2e-6, a false alarm after Holm).
    result = split_test([48, 4], [0.99, 0.01])
    assert result.test == "exact-binomial"
    assert result.p_value == pytest.approx(stats.binomtest(4, 52, 0.01).pvalue, rel=1e-12)
    assert result.p_value == pytest.approx(0.00185, abs=5e-5)
    assert stats.chisquare([48, 4], [51.48, 0.52]).pvalue < 1e-5  # what the old test said (scipy)


def test_textbook_mismatch_stays_a_mismatch_with_the_exact_test():
    # Kohavi, Tang & Xu, Trustworthy Online Controlled Experiments (2020), ch. 21:
    # 821,588 vs 815,482 units in a 50/50 test, p about 1.8e-6.
    result = split_test([821_588, 815_482], [0.5, 0.5])
    assert result.p_value == pytest.approx(1.8e-6, rel=0.05)
    assert result.statistic == pytest.approx(stats.chisquare([821_588, 815_482]).statistic, rel=1e-9)


def test_three_arms_with_large_counts_use_pearson_as_scipy_computes_it():
    # Reference: scipy.stats.chisquare (PyPI scipy).
    observed, shares = [3400, 3250, 3350], [0.34, 0.33, 0.33]
    result = split_test(observed, shares)
    reference = stats.chisquare(observed, np.array(shares) * sum(observed))
    assert result.test == "pearson-chi-square" and result.df == 2
    assert result.statistic == pytest.approx(reference.statistic, rel=1e-9)
    assert result.p_value == pytest.approx(reference.pvalue, rel=1e-9)


def test_exact_tests_run_wherever_affordable_and_the_chi_square_only_from_large_counts():
    small = split_test([122, 122, 5], [0.49, 0.49, 0.02])  # 249 units: outcomes few enough to enumerate
    middle = split_test([980, 11, 9], [0.98, 0.01, 0.01])  # 1,000 units: too many outcomes, 10 expected
    large = split_test([98_000, 1_010, 990], [0.98, 0.01, 0.01])  # 1,000 expected in the small arms
    assert (small.test, middle.test, large.test) == ("exact-multinomial", "exact-binomial-per-arm",
                                                      "pearson-chi-square")


def test_per_arm_test_is_bonferroni_over_scipy_binomtest():
    # Reference: scipy.stats.binomtest per arm; Bonferroni multiplies the smallest p-value by the arms.
    observed, shares = [962, 30, 8], [0.98, 0.01, 0.01]
    reference = min(stats.binomtest(k, 1000, s).pvalue for k, s in zip(observed, shares)) * 3
    assert split_test(observed, shares).p_value == pytest.approx(reference, rel=1e-9)


def test_chi_square_would_exceed_the_holm_level_where_the_exact_test_stays_within_it():
    # Every outcome (246,051) of a clean 98/1/1 segment of 700 units, weighted by scipy.stats.multinomial's
    # pmf: at the per-test level of Holm over 200 segments (0.0005 / 200), Pearson's chi-square (every
    # expected count >= 5, so Cochran's rule allows it: W. G. Cochran, "Some methods for strengthening the
    # common chi-square tests", Biometrics 1954, from memory) rejects about 18 times too often; the test that
    # runs stays within the level.
    shares, level = np.array([0.98, 0.01, 0.01]), 0.0005 / 200
    outcomes = np.array([(a, b, 700 - a - b) for a in range(701) for b in range(701 - a)])
    pmf = stats.multinomial.pmf(outcomes, 700, shares)
    chi_square = stats.chi2.sf(((outcomes - 700 * shares) ** 2 / (700 * shares)).sum(axis=1), 2)
    ours = split_tests(outcomes, shares).p_value
    assert pmf[chi_square < level].sum() > 10 * level
    assert pmf[ours < level].sum() <= level


def test_exact_multinomial_equals_brute_force_over_scipy_pmf():
    # Reference: every outcome's probability from scipy.stats.multinomial.pmf; the p-value sums those no
    # more likely than the one seen (the probability ordering, as scipy.stats.binomtest for two arms).
    shares = [0.7, 0.2, 0.1]
    for observed in ([14, 1, 5], [10, 6, 4], [20, 0, 0]):
        n = sum(observed)
        outcomes = [c for c in itertools.product(range(n + 1), repeat=3) if sum(c) == n]
        pmf = np.array([stats.multinomial.pmf(c, n, shares) for c in outcomes])
        seen = stats.multinomial.pmf(observed, n, shares)
        reference = pmf[pmf <= seen * (1 + 1e-7)].sum()
        result = split_test(observed, shares)
        assert result.test == "exact-multinomial"
        assert result.p_value == pytest.approx(reference, rel=1e-9)


def test_monte_carlo_estimate_lies_within_its_stated_error():
    # A three-arm ramp with 30,000 units and about 4.5 expected in each small arm: beyond the exact tests.
    # Reference: an independent simulation, 400,000 draws from another seed, with the statistic written the
    # textbook way: drop one arm and invert the (nonsingular) covariance of the other two (from memory).
    shares = np.array([[0.9998, 0.0001, 0.0001], [0.9996, 0.0002, 0.0002]])
    observed = np.array([[14_994, 4, 2], [14_990, 2, 8]])
    result = split_test(observed, shares)
    assert result.test == "monte-carlo-mixture"
    assert result.mc_error is not None and 0 < result.mc_error < 0.01
    small = shares[:, 1:]
    expected = 15_000 * small.sum(axis=0)
    covariance = sum(15_000 * (np.diag(s) - np.outer(s, s)) for s in small)
    inverse = np.linalg.inv(covariance)
    seen = observed.sum(axis=0)[1:] - expected
    assert result.statistic == pytest.approx(seen @ inverse @ seen, rel=1e-6)
    rng = np.random.default_rng(99)
    draws = sum(rng.multinomial(15_000, s, size=400_000)[:, 1:] for s in shares) - expected
    simulated = np.einsum("ij,jk,ik->i", draws, inverse, draws)
    reference = (simulated >= (seen @ inverse @ seen) * (1 - 1e-9)).mean()
    assert abs(result.p_value - reference) <= result.mc_error + 3 * np.sqrt(reference * (1 - reference) / 400_000)
    assert split_test(observed, shares).p_value == result.p_value  # seeded: the same on every run


def test_units_in_a_closed_arm_are_a_mismatch_whatever_the_open_arms_say():
    # 900 of 6,900 units in an arm of weight 0: impossible under the design.
    result = split_test([3000, 3000, 900], [0.5, 0.5, 0.0])
    assert result.p_value == 0.0 and result.closed_units == 900
    assert result.open_p_value == pytest.approx(1.0)
    assert split_test([3000, 3000, 0], [0.5, 0.5, 0.0]).p_value == pytest.approx(1.0)
    two_arms = split_test([500, 1], [1.0, 0.0])
    assert two_arms.p_value == 0.0 and two_arms.closed_units == 1 and two_arms.test == "none"


def test_a_healthy_ramp_is_balanced_against_the_mixture_and_not_against_the_latest_weights():
    # Week one at 90/10, week two at 75/25, units judged by the version at their first exposure.
    rng = np.random.default_rng(3)
    by_version = np.array([rng.multinomial(30_000, [0.9, 0.1]), rng.multinomial(30_000, [0.75, 0.25])])
    ramp = split_test(by_version, [[0.9, 0.1], [0.75, 0.25]])
    assert ramp.test == "mixture-chi-square" and ramp.p_value > 0.001
    assert split_test(by_version.sum(axis=0), [0.75, 0.25]).p_value < 1e-100


def test_poisson_binomial_equals_the_sum_over_joint_outcomes():
    # Reference: the joint pmf of two independent binomials from scipy.stats.binom.pmf, summed by hand.
    per_version, first_shares = [12, 9], [0.9, 0.6]
    observed = np.array([[11, 1], [2, 7]])
    joint: dict[int, float] = {}
    for a, b in itertools.product(range(13), range(10)):
        joint[a + b] = joint.get(a + b, 0.0) + stats.binom.pmf(a, 12, 0.9) * stats.binom.pmf(b, 9, 0.6)
    seen = joint[13]
    reference = sum(p for p in joint.values() if p <= seen * (1 + 1e-7))
    result = split_test(observed, [[0.9, 0.1], [0.6, 0.4]])
    assert sum(per_version) == observed.sum() and first_shares[0] == 0.9
    assert result.test == "exact-poisson-binomial"
    assert result.p_value == pytest.approx(reference, rel=1e-9)


def test_mixture_statistic_follows_its_chi_square_under_the_design():
    # Draws from a three-arm ramp: the p-values are uniform (Kolmogorov-Smirnov, scipy.stats.kstest),
    # while Pearson on pooled shares is conservative (its variance ignores the versions' spread).
    rng = np.random.default_rng(12)
    shares = np.array([[0.8, 0.1, 0.1], [0.4, 0.3, 0.3]])
    pvalues, pooled = [], []
    for _ in range(400):
        counts = np.array([rng.multinomial(4000, shares[0]), rng.multinomial(4000, shares[1])])
        pvalues.append(split_test(counts, shares).p_value)
        pooled.append(stats.chisquare(counts.sum(axis=0), 4000 * shares.sum(axis=0)).pvalue)
    assert stats.kstest(pvalues, "uniform").pvalue > 0.001
    assert np.mean(np.array(pooled) < 0.05) < np.mean(np.array(pvalues) < 0.05)


def test_three_arm_ramp_with_few_units_runs_the_exact_test_per_arm():
    # Reference: each arm's count over the joint outcomes of its two binomials (scipy.stats.binom.pmf),
    # likelihood-ordered, Bonferroni over the three arms.
    observed = np.array([[60, 2, 1], [30, 3, 4]])
    shares = np.array([[0.96, 0.02, 0.02], [0.9, 0.05, 0.05]])
    per_arm = []
    for arm in range(3):
        joint = np.zeros(63 + 37 + 1)
        outer = np.outer(stats.binom.pmf(np.arange(64), 63, shares[0, arm]),
                         stats.binom.pmf(np.arange(38), 37, shares[1, arm]))
        np.add.at(joint, np.add.outer(np.arange(64), np.arange(38)), outer)
        seen = joint[int(observed[:, arm].sum())]
        per_arm.append(joint[joint <= seen * (1 + 1e-7)].sum())
    result = split_test(observed, shares)
    assert result.test == "exact-poisson-binomial-per-arm"
    assert result.p_value == pytest.approx(min(1.0, 3 * min(per_arm)), rel=1e-9)


def test_many_segments_at_once_equal_one_at_a_time():
    rng = np.random.default_rng(5)
    n = rng.integers(0, 400, 50)
    first = rng.binomial(n, 0.1)
    rows = np.column_stack([first, n - first])
    together = split_tests(rows, [0.1, 0.9])
    assert [together.at(i) for i in range(len(rows))] == [split_test(list(r), [0.1, 0.9]) for r in rows]
    three_arms = split_tests(np.column_stack([rows, n // 10]), [0.1, 0.8, 0.1])
    assert [three_arms.at(i) for i in range(len(rows))] == [split_test(list(r) + [m // 10], [0.1, 0.8, 0.1])
                                                             for r, m in zip(rows, n)]


def test_shapes_and_shares_are_checked():
    with pytest.raises(ValueError, match="shape"):
        split_test([1, 2, 3], [0.5, 0.5])
    with pytest.raises(ValueError, match="sum to 1"):
        split_test([1, 2], [0.5, 0.6])


def test_no_units_is_nothing_to_test():
    result = split_test([0, 0, 0], [0.2, 0.3, 0.5])
    assert result.test == "none" and result.p_value == 1.0


def test_reports_state_the_monte_carlo_error_bound(tmp_path):
    """A Monte Carlo p-value is shown with its 99 % bound, in the text and the HTML (the JSON has `mc_error`)."""
    log = write_jsonl(tmp_path / "log.jsonl", [{"ts": "2026-11-04T09:00:00Z", "unit": f"U-{n}", "experiment": "exp-a",
                                              "arm": "left" if n % 2 else "right"} for n in range(200)])
    audited = audit_logs(log, expect=[50, 50])
    drawn = replace(audited.results[0], test="monte-carlo-mixture", mc_error=0.00031, srm=True, srm_scope="overall",
                    p_value=0.0002)
    shown = replace(audited, results=(drawn,))
    assert "p = 0.0002 (monte-carlo-mixture, 99 % bound +0.00031)" in srm_text(shown)
    assert "monte-carlo-mixture, 99 % bound +0.00031" in srm_html(shown)
