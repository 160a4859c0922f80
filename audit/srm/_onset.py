"""When a split broke: the maximum-likelihood single change point of the arm shares, with an interval.

The day a cumulative test first crosses its threshold comes days after the
break (it needs enough broken days to outweigh the healthy ones). The onset
is estimated instead from the daily counts of new units, per design version
when weights were ramped: before the change day every unit follows its
design's shares s_v; from that day on, arm j's share becomes proportional to
s_vj * r_j, one free factor per arm (a drop of 30 % in one arm is r = 0.7
there). The change day with the highest profile likelihood is the onset; the
interval holds every day whose likelihood ratio against it stays within the
chi-square(1) 95 % point, 3.841 (a profile-likelihood interval; for a change
point it is an approximation, see Hinkley, "Inference about the change-point
in a sequence of random variables", Biometrika 1970, from memory).

Units in an arm the design closes are impossible before the break, so the
first day with such units is the onset.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
from numpy.typing import ArrayLike
from scipy import special, stats

INTERVAL_LEVEL = 0.95
_ITERATIONS = 500


class Onset(NamedTuple):
    """Estimated first broken day (an index into the days given) and its interval, both ends included."""

    day: int
    low: int
    high: int
    log_likelihood_ratio: float  # of a break on that day against no break at all
    method: str  # "change-point" or "first-closed-arm-unit"


def onset(daily: ArrayLike, shares: ArrayLike) -> Onset | None:
    """The onset of a break in daily counts of new units.

    `daily[day][arm]` with `shares[arm]` for one design, or
    `daily[day][version][arm]` with `shares[version][arm]` for a ramp. None
    when there are no units.
    """
    counts = np.asarray(daily, dtype=float)
    design = np.asarray(shares, dtype=float)
    if counts.size == 0:
        return None
    if design.ndim == 1:
        design, counts = design[None, :], counts[:, None, :]
    if counts.ndim != 3 or counts.shape[1:] != design.shape:
        raise ValueError(f"daily counts of shape {counts.shape[1:]} for shares of shape {design.shape}")
    days = len(counts)
    if counts.sum() == 0:
        return None
    closed = (design == 0)[None, :, :] & (counts > 0)
    if closed.any():
        first = int(np.argmax(closed.any(axis=(1, 2))))
        return Onset(first, first, first, float("inf"), "first-closed-arm-unit")
    open_arms = (design > 0).any(axis=0)
    counts, design = counts[:, :, open_arms], design[:, open_arms]
    profile = _profile(counts, design)
    best = int(np.argmax(profile[:days]))
    cutoff = stats.chi2.ppf(INTERVAL_LEVEL, 1) / 2
    inside = np.flatnonzero(profile[:days] >= profile[best] - cutoff)
    return Onset(best, int(inside.min()), int(inside.max()), float(profile[best] - profile[days]), "change-point")


def _profile(counts: np.ndarray, design: np.ndarray) -> np.ndarray:
    """Log-likelihood of a break on each day 0..D-1, maximised over the arm factors; index D is no break.

    The factors r for a break on day t maximise sum over days >= t and
    versions of x_vj log(s_vj r_j / sum_i s_vi r_i); the minorise-maximise
    update r_j <- X_j / sum n_dv s_vj / (s_v . r) (Hunter, "MM algorithms for
    generalized Bradley-Terry models", Annals of Statistics 2004, from memory)
    climbs it for every t at once; with one version it is exact after one step.
    """
    days, versions, arms = counts.shape
    per_cell = counts.sum(axis=2)  # n_dv
    # design_ll[d]: log-likelihood of day d's units under the design.
    design_ll = special.xlogy(counts, design[None, :, :]).sum(axis=(1, 2))
    after = np.arange(days)[None, :] >= np.arange(days)[:, None]  # after[t, d]: day d is broken if the break is on t
    totals = np.einsum("td,dva->ta", after, counts)  # X_j for each t
    factors = np.ones((days, arms)) / arms
    for _ in range(_ITERATIONS):
        mixed = np.einsum("va,ta->tv", design, factors)  # s_v . r, per t and version
        weights = np.einsum("td,dv->tdv", after, per_cell) / np.maximum(mixed, 1e-300)[:, None, :]
        denominators = np.einsum("tdv,va->ta", weights, design)
        updated = np.divide(totals, denominators, out=np.zeros_like(totals), where=denominators > 0)
        updated /= np.maximum(updated.sum(axis=1, keepdims=True), 1e-300)
        converged = np.abs(updated - factors).max() < 1e-12
        factors = updated
        if converged:
            break
    broken_shares = design[None, :, :] * factors[:, None, :]
    broken_shares /= np.maximum(broken_shares.sum(axis=2, keepdims=True), 1e-300)
    with np.errstate(invalid="ignore"):  # days before the break may have -inf under a break's shares: masked out
        terms = special.xlogy(counts[None], broken_shares[:, None]).sum(axis=3)
    broken_ll = np.where(after[:, :, None], terms, 0.0).sum(axis=(1, 2))
    healthy_ll = np.concatenate([[0.0], np.cumsum(design_ll)])  # healthy_ll[t]: days before t follow the design
    return np.concatenate([healthy_ll[:days] + broken_ll, [healthy_ll[days]]])
