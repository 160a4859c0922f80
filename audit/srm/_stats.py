"""The statistics of the SRM audit: pure functions over counts, no files, no database.

Each test returns a small named result, in the manner of scipy.stats. The
default threshold, p < 0.0005, follows Fabijan et al., "Diagnosing Sample
Ratio Mismatch in Online Controlled Experiments", KDD 2019: a split this
unlikely under the design is treated as broken rather than unlucky.
"""

from __future__ import annotations

import math
from typing import NamedTuple, Sequence

from scipy import stats

from .._errors import AuditError

DEFAULT_THRESHOLD = 0.0005


class FitResult(NamedTuple):
    """Pearson chi-square goodness of fit of observed counts to expected shares."""

    statistic: float
    df: int
    p_value: float


class ArmGap(NamedTuple):
    """One arm's observed count against what the design expects from the same total."""

    observed: int
    expected: float
    observed_share: float
    expected_share: float
    ratio: float
    excess: float  # observed - expected; negative means units missing


class SegmentShift(NamedTuple):
    """What leaving one segment out does to the overall test."""

    fit_without: FitResult
    explained: float  # share of the overall chi-square statistic that goes away without the segment


def expected_shares(weights: Sequence[float]) -> list[float]:
    """Weights (percent or any positive scale) as shares summing to 1."""
    total = float(sum(weights))
    if total <= 0 or any(w < 0 for w in weights):
        raise AuditError(f"weights must be non-negative with a positive sum, found {list(weights)}")
    return [w / total for w in weights]


def chi_square_fit(observed: Sequence[int], shares: Sequence[float]) -> FitResult:
    """Pearson chi-square test that `observed` counts follow `shares`.

    Arms with an expected share of zero are left out of the test; with fewer
    than two arms left, or no units, there is nothing to test (p = 1).
    """
    if len(observed) != len(shares):
        raise AuditError(f"{len(observed)} observed counts for {len(shares)} expected shares")
    pairs = [(o, s) for o, s in zip(observed, shares) if s > 0]
    total = sum(o for o, _ in pairs)
    if len(pairs) < 2 or total == 0:
        return FitResult(0.0, max(len(pairs) - 1, 0), 1.0)
    scale = sum(s for _, s in pairs)
    expected = [total * s / scale for _, s in pairs]
    statistic, p_value = stats.chisquare([o for o, _ in pairs], expected)
    return FitResult(float(statistic), len(pairs) - 1, float(p_value))


def chi_square_p_value(statistic: float, df: int) -> float:
    """Upper-tail p-value of a chi-square statistic."""
    return float(stats.chi2.sf(statistic, df))


def arm_gaps(observed: Sequence[int], shares: Sequence[float]) -> list[ArmGap]:
    """Per arm: observed and expected counts and shares, their ratio, units in excess (or missing)."""
    total = sum(observed)
    gaps = []
    for count, share in zip(observed, shares):
        expected = total * share
        gaps.append(ArmGap(
            observed=count,
            expected=expected,
            observed_share=count / total if total else 0.0,
            expected_share=share,
            ratio=count / expected if expected else math.nan,
            excess=count - expected,
        ))
    return gaps


def holm_adjust(p_values: Sequence[float]) -> list[float]:
    """Holm-Bonferroni adjusted p-values, in the order given (step-down, made monotone, capped at 1)."""
    m = len(p_values)
    order = sorted(range(m), key=lambda i: p_values[i])
    adjusted = [0.0] * m
    running = 0.0
    for rank, index in enumerate(order):
        running = max(running, min(1.0, (m - rank) * p_values[index]))
        adjusted[index] = running
    return adjusted


def leave_out(total: Sequence[int], segment: Sequence[int], shares: Sequence[float]) -> SegmentShift:
    """The overall test without one segment's units, and how much of the imbalance that removes."""
    rest = [t - s for t, s in zip(total, segment)]
    overall = chi_square_fit(total, shares)
    without = chi_square_fit(rest, shares)
    explained = 1 - without.statistic / overall.statistic if overall.statistic > 0 else 0.0
    return SegmentShift(without, explained)


def cumulative_fits(daily: Sequence[Sequence[int]], shares: Sequence[float]) -> list[FitResult]:
    """The test on the counts accumulated up to each day (counts of units new that day)."""
    running = [0] * len(shares)
    fits = []
    for counts in daily:
        running = [r + c for r, c in zip(running, counts)]
        fits.append(chi_square_fit(running, shares))
    return fits


def first_crossing(p_values: Sequence[float], threshold: float) -> int | None:
    """Index of the first p-value below the threshold, or None."""
    return next((i for i, p in enumerate(p_values) if p < threshold), None)


def share_interval(count: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a share count/total; (0, 1) when there are no units."""
    if total <= 0:
        return (0.0, 1.0)
    z = float(stats.norm.ppf(0.5 + confidence / 2))
    p = count / total
    denominator = 1 + z * z / total
    centre = (p + z * z / (2 * total)) / denominator
    half = z * math.sqrt(p * (1 - p) / total + z * z / (4 * total * total)) / denominator
    return (max(0.0, centre - half), min(1.0, centre + half))


def proportion_test(hits: int, total: int, rest_hits: int, rest_total: int) -> float:
    """Two-sided p-value that a share hits/total differs from rest_hits/rest_total (chi-square on a 2x2 table)."""
    if total == 0 or rest_total == 0 or hits + rest_hits == 0 or hits + rest_hits == total + rest_total:
        return 1.0
    table = [[hits, total - hits], [rest_hits, rest_total - rest_hits]]
    return float(stats.chi2_contingency(table, correction=False)[1])


DEFAULT_CONCENTRATION = 1000.0  # prior share SD about 1.6 points at 50/50: tuned to the small imbalances SRM is about


def sequential_p_values(daily: Sequence[Sequence[int]], shares: Sequence[float],
                       concentration: float = DEFAULT_CONCENTRATION) -> list[float]:
    """Anytime-valid p-values of the split after each day, safe to look at every day.

    A chi-square test repeated every day crosses any threshold by chance more
    often than the threshold says. This test does not: it is the Bayes factor
    of a Dirichlet-multinomial alternative centred on the design (prior
    Dirichlet(concentration x shares)) against the design's multinomial, and
    its running minimum of 1/BF is a p-value valid at every look (Ville's
    inequality; the construction follows Lindon & Malek, "Anytime-valid
    inference for multinomial count data", NeurIPS 2022). `daily` holds the
    counts of units new each day, per arm.
    """
    kept = [i for i, s in enumerate(shares) if s > 0]
    alphas = [concentration * shares[i] for i in kept]
    logs = [math.log(shares[i]) for i in kept]
    running = [0] * len(kept)
    best, out = 1.0, []
    for counts in daily:
        running = [r + counts[i] for r, i in zip(running, kept)]
        n = sum(running)
        log_bf = math.lgamma(concentration) - math.lgamma(concentration + n)
        for a, x, log_share in zip(alphas, running, logs):
            log_bf += math.lgamma(a + x) - math.lgamma(a) - x * log_share
        best = min(best, math.exp(-log_bf) if log_bf > -700 else 1.0)
        out.append(best)
    return out
