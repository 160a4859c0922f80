"""Simulated exposure counts for the SRM statistics' error-rate checks (fixed seeds; invented data).

Shared by the quick versions in the test suite and the long ones in `make bench`.
"""

from __future__ import annotations

import numpy as np

from audit.srm import duplicate_logging_evidence, holm_adjust, split_tests

SEGMENTS = 200


def segment_sizes(rng: np.random.Generator, segments: int = SEGMENTS) -> np.ndarray:
    """Units per segment: log-normal, median 200, from a handful to several thousand (invented)."""
    return np.maximum(5, rng.lognormal(np.log(200), 1.2, segments)).astype(np.int64)


def audit_pvalues(rows: np.ndarray, shares: tuple[float, ...]) -> np.ndarray:
    """The audit's segment p-values: `split_tests`, which picks the test per segment."""
    return split_tests(rows, list(shares)).p_value


def segment_alarms(shares: tuple[float, ...], runs: int, threshold: float, seed: int,
                   broken_units: int = 0, pvalues_of=audit_pvalues) -> np.ndarray:
    """Per run, whether any Holm-adjusted segment test crosses the threshold; and whether segment 0 does.

    Every run draws clean counts for SEGMENTS segments, over as many arms as
    `shares` has. With `broken_units`, segment 0 holds that many units and
    its last arm loses three quarters of its units. `pvalues_of(rows, shares)`
    tests the segments (the audit's tests unless a benchmark compares
    another). Returns an array (runs, 2): any alarm, segment 0 flagged.
    """
    rng = np.random.default_rng(seed)
    sizes = segment_sizes(rng)
    design = np.tile(np.asarray(shares, dtype=float), (len(sizes), 1))
    if broken_units:
        sizes[0] = broken_units
        design[0, -1] *= 0.25
        design[0] /= design[0].sum()
    rows = rng.multinomial(sizes, design, size=(runs, len(sizes))).reshape(-1, len(shares))
    pvalues = pvalues_of(rows, shares).reshape(runs, len(sizes))
    alarms = np.zeros((runs, 2), dtype=bool)
    # Holm's smallest adjusted p-value is m times the smallest p-value, and the others are no smaller:
    # only runs below the threshold there can alarm, so only they need the full adjustment.
    for run in np.flatnonzero(pvalues.min(axis=1) * len(sizes) < threshold):
        adjusted = np.array(holm_adjust(list(pvalues[run])))
        alarms[run] = (adjusted < threshold).any(), adjusted[0] < threshold
    return alarms


def balanced_records(rng: np.random.Generator, units: int) -> tuple[list[int], np.ndarray, list[int]]:
    """Two balanced arms whose units log Pareto(shape 1.3) records each (heavy-tailed, clustered).

    Returns the records-per-unit values, the table units[arm][value] and the records per arm.
    """
    arms = rng.integers(0, 2, units)
    records = np.floor(rng.pareto(1.3, units) + 1).astype(np.int64)
    values, inverse = np.unique(records, return_inverse=True)
    table = np.zeros((2, len(values)), dtype=np.int64)
    np.add.at(table, (arms, inverse), 1)
    return values.tolist(), table, [int(records[arms == a].sum()) for a in (0, 1)]


def duplicate_cause_fires(runs: int, units: int, threshold: float, seed: int) -> int:
    """How many of `runs` balanced heavy-tailed logs name duplicate logging."""
    rng = np.random.default_rng(seed)
    fired = 0
    for _ in range(runs):
        values, table, records = balanced_records(rng, units)
        fired += duplicate_logging_evidence(values, table, records, [0, 0], threshold).found
    return fired
