"""Long simulations of the SRM statistics' error rates, and the speed of the batched exact test.

The test suite runs shorter versions with the same code (tests/srm_simulations.py);
here the runs are long enough to read the rates to a useful precision.
"""

from __future__ import annotations

import time

import numpy as np
from scipy import stats

from audit.srm import DEFAULT_THRESHOLD, binomial_p_values, onset, sequential_p_values, split_tests
from tests.srm_simulations import duplicate_cause_fires, segment_alarms

COCHRAN_MINIMUM = 5  # Cochran (1954): the chi-square approximation wants every expected count >= 5

SEGMENT_RUNS = 20_000
DUPLICATE_RUNS = 2_000
ONSET_SEEDS = 200
DESIGNS = [(0.5, 0.5), (0.9, 0.1), (0.99, 0.01)]
THREE_ARM_RUNS = 2_000
THREE_ARM_DESIGNS = [(0.34, 0.33, 0.33), (0.8, 0.1, 0.1), (0.98, 0.01, 0.01)]


def _cochran_only(rows: np.ndarray, shares: tuple[float, float]) -> np.ndarray:
    """The rule the issue first proposed: chi-square when both expected counts reach 5, else exact binomial."""
    n = rows.sum(axis=1)
    large = np.minimum(n * shares[0], n * shares[1]) >= COCHRAN_MINIMUM
    with np.errstate(divide="ignore", invalid="ignore"):
        chi2 = stats.chi2.sf((rows[:, 0] - n * shares[0]) ** 2 / (n * shares[0] * shares[1]), 1)
    return np.where(large, chi2, np.where(n > 0, binomial_p_values(rows[:, 0], n, shares[0]), 1.0))


def _bound(runs: int, rate: float) -> float:
    return float(stats.binom.ppf(0.999, runs, rate)) / runs


def _segments() -> list[str]:
    lines = [f"## Clean logs, 200 segments, Holm, threshold {DEFAULT_THRESHOLD} ({SEGMENT_RUNS:,} runs per design)",
             "", "| design | family-wise false alarms | chi-square where expected >= 5 | bound (99.9 %) |",
             "|---|---|---|---|"]
    for index, shares in enumerate(DESIGNS):
        ours = segment_alarms(shares, SEGMENT_RUNS, DEFAULT_THRESHOLD, seed=100 + index)[:, 0].mean()
        cochran = segment_alarms(shares, SEGMENT_RUNS, DEFAULT_THRESHOLD, seed=100 + index,
                                 pvalues_of=_cochran_only)[:, 0].mean()
        lines.append(f"| {shares[0]:.0%}/{shares[1]:.0%} | {ours:.4%} | {cochran:.4%} | "
                     f"{_bound(SEGMENT_RUNS, DEFAULT_THRESHOLD):.4%} |")
    lines += ["", f"## Three arms: clean logs, 200 segments, Holm ({THREE_ARM_RUNS:,} runs per design)", "",
              "| design | family-wise false alarms | bound (99.9 %) |", "|---|---|---|"]
    for index, shares in enumerate(THREE_ARM_DESIGNS):
        ours = segment_alarms(shares, THREE_ARM_RUNS, DEFAULT_THRESHOLD, seed=300 + index)[:, 0].mean()
        lines.append(f"| {'/'.join(f'{s:.0%}' for s in shares)} | {ours:.4%} | "
                     f"{_bound(THREE_ARM_RUNS, DEFAULT_THRESHOLD):.4%} |")
    return lines


def _duplicates() -> list[str]:
    fired = duplicate_cause_fires(DUPLICATE_RUNS, 10_000, DEFAULT_THRESHOLD, seed=200)
    loose = duplicate_cause_fires(DUPLICATE_RUNS, 10_000, 0.05, seed=201)
    return ["", f"## Duplicate-logging cause on balanced Pareto(1.3) logs ({DUPLICATE_RUNS:,} logs of 10,000 units)", "",
            f"- at {DEFAULT_THRESHOLD}: fired {fired} times ({fired / DUPLICATE_RUNS:.3%}; "
            f"bound {_bound(DUPLICATE_RUNS, DEFAULT_THRESHOLD):.3%})",
            f"- at 0.05: fired {loose} times ({loose / DUPLICATE_RUNS:.2%}; bound {_bound(DUPLICATE_RUNS, 0.05):.2%})"]


def _onsets() -> list[str]:
    lines = ["", f"## Onset of planted breaks (50/50, 28 days, a 20-40 % drop in one arm; {ONSET_SEEDS} seeds)", "",
             "| new units per day | within one day | interval holds the truth |", "|---|---|---|"]
    for per_day in (2000, 400, 100):
        close = covered = 0
        for seed in range(ONSET_SEEDS):
            rng = np.random.default_rng(seed)
            truth, drop = int(rng.integers(4, 24)), rng.uniform(0.2, 0.4)
            daily = [rng.multinomial(rng.poisson(per_day), np.array([1, 1 - drop if d >= truth else 1])
                                     / (2 - (drop if d >= truth else 0))) for d in range(28)]
            found = onset(daily, [0.5, 0.5])
            close += abs(found.day - truth) <= 1
            covered += found.low <= truth <= found.high
        lines.append(f"| {per_day:,} | {close / ONSET_SEEDS:.1%} | {covered / ONSET_SEEDS:.1%} |")
    return lines


def _sequential() -> list[str]:
    rng = np.random.default_rng(300)
    shares = np.array([[0.9, 0.1], [0.75, 0.25]])
    runs, alpha, crossed = 2000, 0.05, 0
    for _ in range(runs):
        daily = np.zeros((30, 2, 2), dtype=np.int64)
        daily[:10, 0] = rng.multinomial(400, shares[0], size=10)
        daily[10:, 1] = rng.multinomial(400, shares[1], size=20)
        crossed += min(sequential_p_values(daily, shares)) < alpha
    return ["", f"## Anytime-valid test over a healthy ramp, 30 daily looks ({runs:,} runs)", "",
            f"- ever below {alpha}: {crossed / runs:.2%} (Ville's bound {alpha:.0%})"]


def _speed() -> list[str]:
    rng = np.random.default_rng(400)
    n = rng.integers(20, 3000, 400_000)
    rows = np.column_stack([rng.binomial(n, 0.1), n])
    rows[:, 1] -= rows[:, 0]
    started = time.perf_counter()
    split_tests(rows, [0.1, 0.9])
    batched = (time.perf_counter() - started) / len(rows)
    started = time.perf_counter()
    for first, second in rows[:4000]:
        stats.binomtest(int(first), int(first + second), 0.1)
    one_by_one = (time.perf_counter() - started) / 4000
    return ["", "## Exact binomial over many segments", "",
            f"- batched split_tests: {batched * 1e6:.2f} us per segment; scipy.stats.binomtest one at a time: "
            f"{one_by_one * 1e6:.1f} us ({one_by_one / batched:.0f}x the batched time)"]


def run() -> str:
    return "\n".join(["# SRM statistics: error rates", "", *_segments(), *_duplicates(), *_onsets(), *_sequential(),
                      *_speed()]) + "\n"
