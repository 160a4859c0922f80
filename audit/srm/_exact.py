"""Which split test to run and running it: exact tests for small counts, closed arms, ramps (mixtures).

A split is the count of units per arm. Under the design each unit lands in
arm j with the share of the design version in force at its first exposure,
so the counts are a sum of independent multinomials, one per version (a
mixture when the weights were ramped; a plain multinomial with one version).
`split_test` picks the test and returns a small named result, scipy.stats
style; `split_tests` runs it over many segments at once.

Which test runs (the `test` field of the result). Cochran's rule (Cochran
1954: chi-square when every expected count is at least 5) is about the 5 %
level; after Holm over 200 segments each test runs near 0.0005 / 200 =
2.5e-6, where the chi-square tail is far too thin when an arm expects few
units: it rejects a clean 99/1 segment of 1,000 units with probability
4.2e-5, a clean 98/1/1 one with 3.9e-5, not 2.5e-6 (exact sizes from the
binomial and multinomial pmfs). From 1,000 expected units in every arm the
excess is about 5 % (LARGE_EXPECTED). So exact tests run wherever they are
affordable, the chi-square only where it is accurate:

- ``exact-binomial``: two arms, one design, any count: the two-sided
  likelihood-ordering p-value of ``scipy.stats.binomtest``, computed for
  many segments at once.
- ``exact-multinomial``: three or more arms, one design, few enough outcomes
  to enumerate (MULTINOMIAL_OUTCOMES): the sum of the probabilities of every
  outcome no more likely than the one seen.
- ``pearson-chi-square`` / ``mixture-chi-square``: every expected count at
  least LARGE_EXPECTED. With several versions the statistic uses the
  mixture's covariance (sum over versions of n_v (diag(s_v) - s_v s_v')),
  exact to first order; with one version it is Pearson's statistic.
- ``exact-binomial-per-arm``: three or more arms, one design, otherwise:
  each arm's count against its share with the exact binomial test,
  Bonferroni over the arms (k times the smallest p-value).
- ``exact-poisson-binomial`` (two arms) / ``exact-poisson-binomial-per-arm``
  (more, Bonferroni): several design versions, up to MIXTURE_EXACT_UNITS
  units: an arm's count is then a sum of binomials, one per version.
- Several versions beyond that: ``mixture-chi-square`` when every expected
  count is at least 5, else ``monte-carlo-mixture``: the share of
  MONTE_CARLO_DRAWS seeded draws from the design whose chi-square is at
  least the one seen; `mc_error` is how far the 99 % Clopper-Pearson upper
  bound lies above that estimate.

An arm whose designed share is 0 (closed) cannot hold a unit: any unit there
makes p = 0 (`closed_units` counts them); `open_p_value` is the test on the
open arms alone.
"""

from __future__ import annotations

import math
from typing import NamedTuple, Sequence

import numpy as np
from numpy.typing import ArrayLike
from scipy import special, stats

COCHRAN_MINIMUM = 5.0  # Cochran (1954): chi-square when every expected count is at least 5
LARGE_EXPECTED = 1_000.0  # the chi-square tail is within about 5 % of exact at 2.5e-6 from here (measured, see above)
MULTINOMIAL_OUTCOMES = 200_000  # enumerate the exact multinomial when it has at most this many outcomes
MIXTURE_EXACT_UNITS = 20_000  # exact Poisson-binomial up to this many units
MONTE_CARLO_DRAWS = 100_000
MONTE_CARLO_SEED = 20261202  # fixed: the same counts give the same p-value on every run
MONTE_CARLO_CONFIDENCE = 0.99
_TIES = 1 + 1e-7  # outcomes this close in probability count as equally likely (as scipy.stats.binomtest does)


class SplitTest(NamedTuple):
    """The test of one split against its design."""

    test: str  # which test ran, see the module docstring; "none" when fewer than two open arms hold units
    p_value: float  # 0 when a closed arm holds units
    statistic: float  # chi-square statistic of the open arms (Pearson's, or the mixture's), for reading
    df: int
    mc_error: float | None  # Monte Carlo only: the 99 % upper bound of the p-value minus the estimate
    closed_units: int  # units in arms the design closes (share 0)
    open_p_value: float  # the test on the open arms alone


def binomial_p_values(successes, trials, share) -> np.ndarray:
    """Two-sided exact binomial p-values, elementwise (as `scipy.stats.binomtest(k, n, p).p_value`).

    The p-value sums the probabilities of every count no more likely than the
    one seen. The other tail's edge is found by bisection on the log pmf, for
    all distinct (k, n, p) at once, so 400,000 segments take about a second.
    """
    shape = np.broadcast_shapes(np.shape(successes), np.shape(trials), np.shape(share))
    triples = np.column_stack([np.broadcast_to(np.asarray(a, dtype=float), shape).ravel()
                               for a in (successes, trials, share)])
    if len(triples) <= FEW:
        distinct, back = triples, np.arange(len(triples))
    else:
        order = np.lexsort(triples.T[::-1])
        starts = np.ones(len(order), dtype=bool)
        starts[1:] = (np.diff(triples[order], axis=0) != 0).any(axis=1)
        distinct = triples[order][starts]
        back = np.empty(len(order), dtype=np.int64)
        back[order] = np.cumsum(starts) - 1
    k, n, p = distinct[:, 0].astype(np.int64), distinct[:, 1].astype(np.int64), distinct[:, 2]
    pvalues = np.ones(len(distinct))
    # An even split (the commonest design) is symmetric: the counts as likely as k are k and n - k, so the
    # p-value is twice the smaller tail, with no edge to search for.
    even = (p == 0.5) & (2 * k != n)
    if even.any():
        pvalues[even] = 2 * _binomial_cdf(np.minimum(k[even], n[even] - k[even]), n[even], p[even])
    below, above = (k < n * p) & ~even & (p != 0.5), (k > n * p) & ~even & (p != 0.5)
    if below.any():
        # k below the mean: the first count above the mode no more likely than k (the pmf falls there).
        kb, nb, pb = k[below], n[below], p[below]
        pmf = _binomial_logpmf(nb, pb)
        limit = pmf(kb) + math.log(_TIES)
        edge = _first_true(np.ceil(nb * pb).astype(np.int64), nb + 1, lambda x: pmf(x) <= limit)
        pvalues[below] = _binomial_cdf(kb, nb, pb) + _binomial_sf(edge - 1, nb, pb)
    if above.any():
        # k above the mean: the last count below the mode no more likely than k (the pmf rises there).
        ka, na, pa = k[above], n[above], p[above]
        pmf = _binomial_logpmf(na, pa)
        limit = pmf(ka) + math.log(_TIES)
        edge = _first_true(np.zeros_like(na), np.floor(na * pa).astype(np.int64) + 1, lambda x: pmf(x) > limit) - 1
        pvalues[above] = _binomial_cdf(edge, na, pa) + _binomial_sf(ka - 1, na, pa)
    return np.minimum(1.0, pvalues)[back].reshape(shape)


def _binomial_cdf(k: np.ndarray, n: np.ndarray, p: np.ndarray) -> np.ndarray:
    """P(X <= k), elementwise: what `scipy.stats.binom.cdf` gives, without its argument checks, which cost a
    hundred times the computation (an audit of 10,000 experiments makes tens of thousands of these calls)."""
    inside = k >= 0
    return np.where(inside, stats.binom._cdf(np.maximum(k, 0), n, p), 0.0)


def _binomial_sf(k: np.ndarray, n: np.ndarray, p: np.ndarray) -> np.ndarray:
    """P(X > k), elementwise, as `scipy.stats.binom.sf` (see `_binomial_cdf`)."""
    inside = k < n
    return np.where(inside, stats.binom._sf(np.minimum(k, n), n, p), 0.0)


def _binomial_logpmf(n: np.ndarray, p: np.ndarray):
    """log P(X = x) for X ~ Binomial(n, p), elementwise in x; 0 < p < 1."""
    log_n_factorial, log_p, log_q = special.gammaln(n + 1), np.log(p), np.log1p(-p)

    def logpmf(x: np.ndarray) -> np.ndarray:
        inside = (x >= 0) & (x <= n)
        x = np.clip(x, 0, n)
        value = log_n_factorial - special.gammaln(x + 1) - special.gammaln(n - x + 1) + x * log_p + (n - x) * log_q
        return np.where(inside, value, -np.inf)

    return logpmf


FEW = 256  # up to this many tests, `binomial_p_values` computes repeated ones again rather than sorting them out
ENUMERATE_UP_TO = 1 << 16  # below this many (element, x) pairs, `_first_true` evaluates every x at once


def _first_true(low: np.ndarray, high: np.ndarray, predicate) -> np.ndarray:
    """Per element, the smallest x in [low, high) where a predicate monotone in x (False, then True) holds; high if none.

    Small searches evaluate the predicate on every x of the ranges in one step; larger ones bisect.
    """
    width = int((high - low).max(initial=0))
    if 0 < width and len(low) * width <= ENUMERATE_UP_TO:
        x = low[:, None] + np.arange(width)[None, :]
        holds = predicate(x.T).T & (x < high[:, None])  # x.T: one row per x, as the elements' arrays broadcast
        return np.where(holds.any(axis=1), low + holds.argmax(axis=1), high)
    low, high = low.copy(), high.copy()
    while np.any(low < high):
        middle = (low + high) // 2
        holds = predicate(middle)
        searching = low < high
        high = np.where(searching & holds, middle, high)
        low = np.where(searching & ~holds, middle + 1, low)
    return low


def split_test(observed: ArrayLike, shares: ArrayLike, *, seed: int = MONTE_CARLO_SEED) -> SplitTest:
    """Test units per arm against the design: one row of counts and shares, or one row per design version."""
    return split_tests(np.asarray(observed)[None], shares, seed=seed).at(0)


class SplitTests(NamedTuple):
    """`SplitTest` for many splits at once, one array per field."""

    test: np.ndarray
    p_value: np.ndarray
    statistic: np.ndarray
    df: np.ndarray
    mc_error: np.ndarray  # NaN where no Monte Carlo ran
    closed_units: np.ndarray
    open_p_value: np.ndarray

    def at(self, index: int) -> SplitTest:
        error = float(self.mc_error[index])
        return SplitTest(str(self.test[index]), float(self.p_value[index]), float(self.statistic[index]),
                         int(self.df[index]), None if math.isnan(error) else error, int(self.closed_units[index]),
                         float(self.open_p_value[index]))

    @classmethod
    def of(cls, tests: Sequence[SplitTest]) -> SplitTests:
        columns = list(zip(*tests)) if tests else [()] * len(cls._fields)
        mc_error = [math.nan if e is None else e for e in columns[4]]
        return cls(np.array(columns[0], dtype=object), np.array(columns[1], dtype=float),
                   np.array(columns[2], dtype=float), np.array(columns[3], dtype=np.int64),
                   np.array(mc_error, dtype=float), np.array(columns[5], dtype=np.int64),
                   np.array(columns[6], dtype=float))


def split_tests(observed: ArrayLike, shares: ArrayLike, *, seed: int = MONTE_CARLO_SEED) -> SplitTests:
    """`split_test` over many splits (segments) that share a design: observed[segment][(version,)] arm."""
    counts = np.asarray(observed, dtype=np.int64)
    design = np.asarray(shares, dtype=float)
    if counts.size == 0:
        return SplitTests.of([])
    if design.ndim == 1 and counts.ndim == 2:
        design, counts = design[None, :], counts[:, None, :]
    if counts.ndim != 3 or counts.shape[1:] != design.shape:
        raise ValueError(f"counts of shape {counts.shape[1:]} for shares of shape {design.shape}")
    if design.min() < 0 or np.abs(design.sum(axis=1) - 1.0).max() > 1e-8:
        raise ValueError(f"each version's shares must be non-negative and sum to 1, found {design.tolist()}")
    if len(design) == 1 and design.min() > 0:
        return _one_design_tests(counts[:, 0, :], design[0])
    return SplitTests.of([_mixture_test(c, design, seed) for c in counts])


def _one_design_tests(counts: np.ndarray, shares: np.ndarray) -> SplitTests:
    """One design, every arm open: the test of each split chosen and run for all splits at once."""
    size, arms = counts.shape
    n = counts.sum(axis=1)
    expected = n[:, None] * shares[None, :]
    tested = n > 0
    statistic = np.where(tested, ((counts - expected) ** 2 / np.where(tested[:, None], expected, 1.0)).sum(axis=1), 0.0)
    names = np.full(size, "exact-binomial" if arms == 2 else "exact-binomial-per-arm", dtype=object)
    # Each arm's count against its share, exactly; with three or more arms, Bonferroni over them (with two,
    # both arms' tests are one test).
    per_arm = binomial_p_values(counts, n[:, None], shares[None, :]).min(axis=1) * (arms if arms > 2 else 1)
    p_values = np.minimum(1.0, per_arm)
    if arms > 2:
        large = expected.min(axis=1) >= LARGE_EXPECTED
        names[large] = "pearson-chi-square"
        p_values[large] = stats.chi2.sf(statistic[large], arms - 1)
        outcomes = {total: math.comb(total + arms - 1, arms - 1) for total in np.unique(n).tolist()}
        rows = np.flatnonzero([outcomes[total] <= MULTINOMIAL_OUTCOMES for total in n.tolist()] & tested)
        names[rows] = "exact-multinomial"
        p_values[rows] = _exact_multinomial_p_values(counts[rows], shares)
    names[~tested] = "none"
    p_values[~tested] = 1.0
    return SplitTests(names, p_values, statistic, np.where(tested, arms - 1, 0), np.full(size, math.nan),
                      np.zeros(size, dtype=np.int64), p_values)


def _with_closed(test: SplitTest, closed_units: int) -> SplitTest:
    return test._replace(p_value=0.0, closed_units=closed_units) if closed_units else test


def _mixture_test(counts: np.ndarray, shares: np.ndarray, seed: int) -> SplitTest:
    """One split, counts per (version, arm)."""
    closed_cells = shares == 0
    closed_units = int(counts[closed_cells].sum())
    counts = np.where(closed_cells, 0, counts)
    used = counts.sum(axis=1) > 0
    counts, shares = counts[used], shares[used]
    open_arms = (shares > 0).any(axis=0) if len(shares) else np.zeros(0, dtype=bool)
    counts, shares = counts[:, open_arms], shares[:, open_arms]
    if counts.shape[1] < 2 or counts.sum() == 0:
        return _with_closed(SplitTest("none", 1.0, 0.0, 0, None, 0, 1.0), closed_units)
    statistic, df = _chi_square(counts, shares)
    one_design = len(shares) == 1
    arms = counts.shape[1]
    per_version = counts.sum(axis=1)
    expected = per_version @ shares
    if math.isinf(statistic):
        test = SplitTest("mixture-chi-square", 0.0, statistic, df, None, 0, 0.0)
    elif one_design:
        test = _one_design_tests(counts, shares[0]).at(0)
    elif expected.min() >= LARGE_EXPECTED or (per_version.sum() > MIXTURE_EXACT_UNITS
                                              and expected.min() >= COCHRAN_MINIMUM):
        p = float(stats.chi2.sf(statistic, df))
        test = SplitTest("mixture-chi-square", p, statistic, df, None, 0, p)
    elif per_version.sum() <= MIXTURE_EXACT_UNITS:
        # Each arm's count against the sum of its binomials, exactly; Bonferroni over three or more arms.
        arm_p = min(_poisson_binomial_p_value(int(counts[:, arm].sum()), per_version, shares[:, arm])
                    for arm in range(arms))
        p = min(1.0, arm_p * (arms if arms > 2 else 1))
        test = SplitTest("exact-poisson-binomial" + ("-per-arm" if arms > 2 else ""), p, statistic, df, None, 0, p)
    else:
        p, error = _monte_carlo_p_value(counts, shares, statistic, seed)
        test = SplitTest("monte-carlo-mixture", p, statistic, df, error, 0, p)
    return _with_closed(test, closed_units)


def _chi_square(counts: np.ndarray, shares: np.ndarray) -> tuple[float, int]:
    """Quadratic form of the deviations in the inverse of their covariance under the design.

    The covariance of the arm totals is the sum over versions of
    n_v (diag(s_v) - s_v s_v'); with one version its generalised inverse gives
    Pearson's statistic exactly. Its eigen-decomposition gives that inverse;
    eigenvalues below 1e-9 of the largest are zero (the all-ones direction,
    along which the deviations always sum to 0). A deviation along such a
    direction is one the design cannot produce: an infinite statistic.
    """
    per_version = counts.sum(axis=1)
    deviation = counts.sum(axis=0) - per_version @ shares
    eigenvalues, eigenvectors = np.linalg.eigh(_covariance(per_version, shares))
    kept = eigenvalues > 1e-9 * eigenvalues.max()
    components = eigenvectors.T @ deviation
    if np.abs(components[~kept]).max(initial=0.0) > 1e-6 * max(1.0, np.abs(deviation).max()):
        return math.inf, int(kept.sum())
    return float((components[kept] ** 2 / eigenvalues[kept]).sum()), int(kept.sum())


def _covariance(per_version: np.ndarray, shares: np.ndarray) -> np.ndarray:
    """Covariance of the arm totals under the design: a sum of one multinomial covariance per version."""
    return sum(n * (np.diag(s) - np.outer(s, s)) for n, s in zip(per_version, shares))


def _likelihood_ordering_p_value(pmf: np.ndarray, seen: float) -> float:
    """Sum of the probabilities of the outcomes no more likely than the one seen."""
    return float(min(1.0, pmf[pmf <= seen * _TIES].sum()))


def _poisson_binomial_p_value(count: int, per_version: np.ndarray, arm_shares: np.ndarray) -> float:
    """Exact two-sided p-value of an arm's count when version v contributes Binomial(n_v, s_v) to it."""
    pmf = np.ones(1)
    for n, s in zip(per_version, arm_shares):
        pmf = np.convolve(pmf, stats.binom.pmf(np.arange(n + 1), n, s))
    return _likelihood_ordering_p_value(pmf, pmf[count])


def compositions(total: int, parts: int) -> np.ndarray:
    """Every way to put `total` units into `parts` arms, one row each (C(total + parts - 1, parts - 1) rows).

    Built one arm at a time: each partial row is repeated once per count its
    next arm can take (0 to what is left), so no Python loop runs per row.
    """
    rows = np.zeros((1, 0), dtype=np.int64)
    left = np.array([total], dtype=np.int64)
    for _ in range(parts - 1):
        choices = left + 1
        parent = np.repeat(np.arange(len(rows)), choices)
        taken = np.arange(choices.sum()) - np.repeat(np.cumsum(choices) - choices, choices)
        rows = np.column_stack([rows[parent], taken])
        left = left[parent] - taken
    return np.column_stack([rows, left])


def _multinomial_logpmf(rows: np.ndarray, shares: np.ndarray) -> np.ndarray:
    n = rows.sum(axis=1)
    return special.gammaln(n + 1) + (special.xlogy(rows, shares) - special.gammaln(rows + 1)).sum(axis=1)


def _exact_multinomial_p_values(observed: np.ndarray, shares: np.ndarray) -> np.ndarray:
    """Per row of counts, the probability of every outcome with its total no more likely than the row's.

    The outcomes of each distinct total are enumerated once and their
    probabilities sorted; each row's p-value is then a prefix sum of them.
    """
    p_values = np.ones(len(observed))
    totals = observed.sum(axis=1)
    for total in np.unique(totals).tolist():
        rows = np.flatnonzero(totals == total)
        logpmf = np.sort(_multinomial_logpmf(compositions(total, observed.shape[1]), shares))
        running = np.cumsum(np.exp(logpmf))
        seen = _multinomial_logpmf(observed[rows], shares)
        index = np.searchsorted(logpmf, seen + math.log(_TIES), side="right")
        p_values[rows] = np.minimum(1.0, np.where(index > 0, running[np.maximum(index - 1, 0)], 0.0))
    return p_values


def _monte_carlo_p_value(counts: np.ndarray, shares: np.ndarray, statistic: float, seed: int) -> tuple[float, float]:
    """Share of seeded draws from the mixture whose chi-square is at least the one seen, and its error bound."""
    rng = np.random.default_rng(seed)
    per_version = counts.sum(axis=1)
    draws = sum(rng.multinomial(n, s, size=MONTE_CARLO_DRAWS) for n, s in zip(per_version, shares))
    deviations = draws - per_version @ shares
    eigenvalues, eigenvectors = np.linalg.eigh(_covariance(per_version, shares))
    kept = eigenvalues > 1e-9 * eigenvalues.max()
    simulated = ((deviations @ eigenvectors[:, kept]) ** 2 / eigenvalues[kept]).sum(axis=1)
    extreme = int((simulated >= statistic * (1 - 1e-9)).sum())
    # (1 + hits) / (1 + draws) counts the split seen as one of the draws, so the estimate is a valid p-value.
    estimate = (1 + extreme) / (1 + MONTE_CARLO_DRAWS)
    upper = float(stats.beta.ppf(MONTE_CARLO_CONFIDENCE, extreme + 1, MONTE_CARLO_DRAWS - extreme))
    return estimate, max(upper - estimate, 0.0)
