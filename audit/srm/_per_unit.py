"""Evidence of duplicate logging that stays valid when records cluster within units.

Counting records per arm with a chi-square treats every record as an
independent draw; records come in bursts per unit, so on healthy logs that
test fires far too often. Here the unit is the sampling unit: the number of
records of each unit is compared between arms with a rank test (Kruskal-Wallis;
with two arms it equals the two-sided Mann-Whitney test without continuity
correction), computed from a small table: units per arm and records-per-unit
value. Exact repeats (the same record logged twice) are evidence on their own.
"""

from __future__ import annotations

from typing import NamedTuple, Sequence

import numpy as np
from scipy import stats

MATERIAL_RATIO = 1.05  # records per unit must differ by more than 5 % between arms to be named (common practice, no source)
REPEAT_SHARE = 0.01  # exact repeats above 1 % of an arm's records are named as duplicate logging (common practice, no source)
REPEAT_RATIO = 2.0  # ... when that arm repeats at least twice the share of the arm that repeats least (no source)


class RankTest(NamedTuple):
    """Kruskal-Wallis test of records per unit between arms, ties corrected."""

    statistic: float
    df: int
    p_value: float
    mean_ranks: tuple[float, ...]  # per arm; the arm whose units log more records ranks higher


class DuplicateEvidence(NamedTuple):
    """Whether the logs show an arm logging its exposures more than once, and on what evidence."""

    found: bool
    arm: int | None  # the arm that logs more (index), when found
    basis: str | None  # "exact_repeats" or "records_per_unit"
    rank_test: RankTest
    records_per_unit: tuple[float, ...]
    repeat_shares: tuple[float, ...]  # exact repeats / records, per arm


def records_rank_test(values: Sequence[int], table: Sequence[Sequence[int]]) -> RankTest:
    """Kruskal-Wallis H of records per unit, from table[arm][i] = units of that arm with values[i] records.

    Each distinct value is one tie group: its units share the mid-rank of the
    group. H = 12 / (N (N + 1)) * sum_arm R_arm^2 / n_arm - 3 (N + 1), divided
    by the tie correction 1 - sum(t^3 - t) / (N^3 - N) (Kruskal & Wallis 1952;
    the same formulas as scipy.stats.kruskal).
    """
    order = np.argsort(np.asarray(values))
    counts = np.asarray(table, dtype=float)[:, order]
    arm_units = counts.sum(axis=1)
    kept = arm_units > 0
    counts, arm_units = counts[kept], arm_units[kept]
    ties = counts.sum(axis=0)
    total = ties.sum()
    empty = RankTest(0.0, max(int(kept.sum()) - 1, 0), 1.0, tuple(0.0 for _ in kept))
    if len(arm_units) < 2:
        return empty
    mid_ranks = np.cumsum(ties) - ties + (ties + 1) / 2
    rank_sums = counts @ mid_ranks
    correction = 1 - float((ties ** 3 - ties).sum()) / (total ** 3 - total)
    if correction <= 0:  # every unit has the same number of records: nothing to compare
        return empty
    h = (12 / (total * (total + 1)) * float((rank_sums ** 2 / arm_units).sum()) - 3 * (total + 1)) / correction
    mean_ranks = iter(rank_sums / arm_units)
    df = len(arm_units) - 1
    return RankTest(h, df, float(stats.chi2.sf(h, df)),
                    tuple(float(next(mean_ranks)) if k else 0.0 for k in kept))


def duplicate_logging_evidence(values: Sequence[int], table: Sequence[Sequence[int]], records: Sequence[int],
                               repeats: Sequence[int], threshold: float) -> DuplicateEvidence:
    """Name duplicate logging only on evidence valid for clustered records.

    Either an arm's exact repeats reach REPEAT_SHARE of its records and
    REPEAT_RATIO times the share of the arm that repeats least, or the
    rank test of records per unit crosses the threshold and the arm that
    ranks highest logs at least MATERIAL_RATIO times the records per unit of
    the lowest. `records` and `repeats` are per arm; `table` as in
    `records_rank_test`.
    """
    units = np.asarray(table).sum(axis=1)
    per_unit = tuple(float(r / u) if u else 0.0 for r, u in zip(records, units))
    repeat_shares = tuple(float(d / r) if r else 0.0 for d, r in zip(repeats, records))
    test = records_rank_test(values, table)
    heaviest_repeats = int(np.argmax(repeat_shares))
    lightest_repeats = min((share for share, u in zip(repeat_shares, units) if u), default=0.0)
    # Repeats every arm shares alike (a client's retries everywhere) change no arm's count of distinct units:
    # they are listed, not named as the cause.
    if repeat_shares[heaviest_repeats] >= REPEAT_SHARE and \
            repeat_shares[heaviest_repeats] >= REPEAT_RATIO * lightest_repeats:
        return DuplicateEvidence(True, heaviest_repeats, "exact_repeats", test, per_unit, repeat_shares)
    logged = [i for i, u in enumerate(units) if u]
    if test.p_value < threshold and len(logged) >= 2:
        heavy = max(logged, key=lambda i: test.mean_ranks[i])
        light = min(logged, key=lambda i: per_unit[i])
        if per_unit[heavy] > MATERIAL_RATIO * per_unit[light]:
            return DuplicateEvidence(True, heavy, "records_per_unit", test, per_unit, repeat_shares)
    return DuplicateEvidence(False, None, None, test, per_unit, repeat_shares)
