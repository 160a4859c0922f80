"""Segments and days of an experiment: each segment tested (Holm-adjusted), the mismatch localised and dated.

Pure functions over the small tables a counting engine gives, reached
through a `Splits`: the units per arm of the experiment, of a segment, of a
day. A split is a vector of units per arm, or, when weights were ramped, a
matrix of units per design version and arm (see `_exact`); every test here
takes either.
"""

from __future__ import annotations

from datetime import date
from typing import Mapping, NamedTuple, Protocol, Sequence

import numpy as np

from . import _stats
from ._engine import Segment
from ._exact import split_test, split_tests
from ._onset import onset
from ._results import DayResult, Localisation, SegmentResult
from ._sequential import sequential_p_values

EXPLAINS_MOST = 0.5  # a segment that removes at least half of the overall chi-square carries the mismatch


class Splits(Protocol):
    """Units per arm (or per design version and arm) of an experiment, as its tests need them."""

    shares: np.ndarray  # (arms,) for one design, (versions, arms) for a ramp

    def split(self, within: Segment | None = None, without: Segment | None = None) -> np.ndarray:
        ...

    def daily(self, within: Segment | None = None) -> Mapping[date, np.ndarray]:
        """Units by day of first exposure."""
        ...

    def by_value(self, names: Sequence[str], within: Segment | None = None) -> Mapping[tuple[str, ...], np.ndarray]:
        """Units by value of the attributes `names`."""
        ...


def arm_totals(split: np.ndarray) -> tuple[int, ...]:
    """Units per arm of a split, whatever the design versions."""
    counts = np.asarray(split)
    return tuple(int(c) for c in (counts.sum(axis=0) if counts.ndim == 2 else counts))


def test_segments(splits: Splits, overall: np.ndarray,
                  grouped: Sequence[tuple[tuple[str, ...], Mapping[tuple[str, ...], np.ndarray]]],
                  threshold: float, anytime: bool = False) -> list[SegmentResult]:
    """Every segment value of every term tested, Holm-adjusted together; mismatches first, the one explaining most first.

    `grouped` holds, per term (a tuple of attribute names), the split of each value of the term. With
    `anytime`, Holm adjusts the segments' anytime-valid p-values instead (valid too: the first true
    segment wrongly flagged needs a p-value below threshold / m at some look, which Ville's inequality
    bounds by threshold / m per segment).
    """
    tested = [(dict(zip(term, values)), split) for term, by_value in grouped for values, split in by_value.items()]
    if not tested:
        return []
    tests = split_tests([split for _, split in tested], splits.shares)
    sequential = [_last_sequential(splits, by) for by, _ in tested] if anytime else None
    adjusted = _stats.holm_adjust(sequential if sequential is not None else [float(p) for p in tests.p_value])
    segments = []
    for index, ((by, split), p) in enumerate(zip(tested, adjusted)):
        test = tests.at(index)
        shift = _stats.leave_out(overall, split, splits.shares)
        arms = arm_totals(split)
        segments.append(SegmentResult(by, sum(arms), arms, test.statistic, test.p_value, p_adjusted=p,
                                      srm=p < threshold, explained=shift.explained,
                                      p_without=shift.test_without.p_value, test=test.test, mc_error=test.mc_error,
                                      closed_units=test.closed_units,
                                      sequential_p_value=sequential[index] if sequential is not None else None))
    segments.sort(key=lambda s: (not s.srm, -s.explained if s.srm else s.p_value, s.p_value, s.label))
    return segments


def _last_sequential(splits: Splits, within: Segment) -> float:
    """The anytime-valid p-value of a segment after its last day."""
    daily = splits.daily(within)
    return sequential_p_values(np.array([daily[day] for day in sorted(daily)]), splits.shares)[-1] if daily else 1.0


def without_worst(splits: Splits, overall: np.ndarray, segments: Sequence[SegmentResult],
                  threshold: float) -> SegmentResult | None:
    """The overall test with the first (worst) segment left out."""
    if not segments:
        return None
    worst = segments[0]
    rest = splits.split(without=worst.by)
    test = split_test(rest, splits.shares)
    arms = arm_totals(rest)
    return SegmentResult(worst.by, sum(arms), arms, test.statistic, test.p_value, srm=test.p_value < threshold,
                         test=test.test, mc_error=test.mc_error, closed_units=test.closed_units)


class Timeline(NamedTuple):
    """The days of an experiment (or segment), and when it broke."""

    days: list[DayResult]
    onset_day: date | None  # the estimated first broken day
    onset_interval: tuple[date, date] | None
    first_crossing: date | None  # the first day the cumulative test crossed the threshold


def timeline(splits: Splits, threshold: float, within: Segment | None = None, dated: bool = True) -> Timeline:
    """Each day with new units: its test, the cumulative one, the anytime-valid one; with `dated`, the onset.

    The onset is the maximum-likelihood change point of the arm shares over
    the days' new units (`_onset`); the crossing day is when the cumulative
    test first fell below the threshold, which comes later.
    """
    by_day = splits.daily(within)
    if not by_day:
        return Timeline([], None, None, None)
    # Days without new units are left out: they change no cumulative test nor the change point, and a record
    # dated years away must not cost a row for every day between.
    dates = sorted(by_day)
    daily = np.array([by_day[d] for d in dates])
    tests = split_tests(np.concatenate([daily, np.cumsum(daily, axis=0)]), splits.shares)  # one batch: days, then totals
    single, cumulative = tests.p_value[:len(dates)], tests.p_value[len(dates):]
    sequential = sequential_p_values(daily, splits.shares)
    days = [DayResult(d, arm_totals(counts), float(p), float(total), anytime)
            for d, counts, p, total, anytime in zip(dates, daily, single, cumulative, sequential)]
    crossing = _stats.first_crossing([d.cumulative_p for d in days], threshold)
    first_crossing = dates[crossing] if crossing is not None else None
    onset_day, interval = _onset_of(dates, daily, splits.shares) if dated else (None, None)
    return Timeline(days, onset_day, interval, first_crossing)


def with_onset(splits: Splits, undated: Timeline, within: Segment | None = None) -> Timeline:
    """`undated` (a timeline made with `dated=False`) with its onset, computed from the same days."""
    by_day = splits.daily(within)
    dates = sorted(by_day)
    onset_day, interval = _onset_of(dates, np.array([by_day[d] for d in dates]), splits.shares) if dates \
        else (None, None)
    return undated._replace(onset_day=onset_day, onset_interval=interval)


def _onset_of(dates: list[date], daily: np.ndarray, shares: np.ndarray) -> tuple[date | None, tuple[date, date] | None]:
    found = onset(daily, shares)
    if found is None:
        return None, None
    return dates[found.day], (dates[found.low], dates[found.high])


def localise(splits: Splits, start: SegmentResult, names: Sequence[str], threshold: float) -> Localisation:
    """Drill down from a mismatched segment, one attribute at a time, and date the break there.

    At each step, the sub-segment (by another attribute) that carries most
    of the current segment's imbalance, and is itself a mismatch, narrows
    the segment; it stops when no attribute narrows it further.
    """
    chosen = dict(start.by)
    current = splits.split(within=chosen)
    while True:
        best = None
        for name in (n for n in names if n not in chosen):
            for (value,), sub in splits.by_value((name,), within=chosen).items():
                shift = _stats.leave_out(current, sub, splits.shares)
                if shift.explained >= EXPLAINS_MOST and (best is None or shift.explained > best[2]) \
                        and split_test(sub, splits.shares).p_value < threshold:
                    best = (name, value, shift.explained, sub)
        if best is None:
            break
        chosen[best[0]] = best[1]
        current = best[3]
    rest = split_test(splits.split(without=chosen), splits.shares)
    dated = timeline(splits, threshold, within=chosen)
    arms = arm_totals(current)
    return Localisation(chosen, sum(arms), arms, split_test(current, splits.shares).p_value, rest.p_value,
                        rest.p_value < threshold, dated.first_crossing, dated.onset_day, dated.onset_interval,
                        tuple(dated.days))


def mismatch_start(segments: Sequence[SegmentResult], scope: str | None) -> SegmentResult | None:
    """Where localising starts: for an overall mismatch, the segment explaining most of it (at least half);
    for a mismatch seen in segments only, the most significant segment."""
    if scope == "overall":
        return next((s for s in segments if s.srm and s.explained >= EXPLAINS_MOST), None)
    if scope == "segment":
        return min((s for s in segments if s.srm), key=lambda s: (s.p_adjusted, s.p_value), default=None)
    return None
