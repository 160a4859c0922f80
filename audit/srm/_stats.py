"""The statistics of the SRM audit: pure functions over counts, no files, no database.

Each test returns a small named result, in the manner of scipy.stats. The
default threshold, p < 0.0005, follows Fabijan et al., "Diagnosing Sample
Ratio Mismatch in Online Controlled Experiments", KDD 2019: a split this
unlikely under the design is treated as broken rather than unlucky.
"""

from __future__ import annotations

import math
from typing import NamedTuple, Sequence

import numpy as np
from numpy.typing import ArrayLike
from scipy import special, stats

from .._errors import AuditError
from ._exact import SplitTest, split_test, split_tests

DEFAULT_THRESHOLD = 0.0005


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

    test_without: SplitTest
    explained: float  # share of the overall chi-square statistic that goes away without the segment


def expected_shares(weights: Sequence[float]) -> list[float]:
    """Weights (percent or any positive scale) as shares summing to 1."""
    total = float(sum(weights))
    if total <= 0 or any(w < 0 for w in weights):
        raise AuditError(f"weights must be non-negative with a positive sum, found {list(weights)}")
    return [w / total for w in weights]


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


def leave_out(total: ArrayLike, segment: ArrayLike, shares: ArrayLike) -> SegmentShift:
    """The overall test without one segment's units, and how much of the imbalance that removes.

    Counts per arm, or per design version and arm with shares per version (see `split_test`).
    """
    rest = np.asarray(total) - np.asarray(segment)
    overall = split_test(total, shares)
    without = split_test(rest, shares)
    explained = 1 - without.statistic / overall.statistic if overall.statistic > 0 else 0.0
    return SegmentShift(without, explained)


def cumulative_tests(daily: ArrayLike, shares: ArrayLike) -> list[SplitTest]:
    """The test on the units accumulated up to each day, from the units new each day."""
    running = np.cumsum(np.asarray(daily, dtype=np.int64), axis=0)
    tests = split_tests(running, shares)
    return [tests.at(day) for day in range(len(running))]


def mixture_shares(counts: ArrayLike, shares: ArrayLike) -> list[float]:
    """The expected share of each arm: per design version, its units times its shares, summed, over all units.

    One row of counts and shares (one design) gives the shares themselves.
    """
    matrix = np.atleast_2d(np.asarray(shares, dtype=float))
    per_version = np.atleast_2d(np.asarray(counts, dtype=float)).sum(axis=1)
    if per_version.sum() == 0:  # no units: every version weighs the same
        per_version = np.ones(len(matrix))
    return [float(s) for s in per_version @ matrix / per_version.sum()]


def first_crossing(p_values: Sequence[float], threshold: float) -> int | None:
    """Index of the first p-value below the threshold, or None."""
    return next((i for i, p in enumerate(p_values) if p < threshold), None)


def share_interval(count: int, total: int, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a share count/total; (0, 1) when there are no units."""
    if total <= 0:
        return (0.0, 1.0)
    z = float(special.ndtri(0.5 + confidence / 2))  # the normal quantile, as stats.norm.ppf computes it
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
