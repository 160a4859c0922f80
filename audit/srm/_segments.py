"""Segments of an experiment: each tested on its own (Holm-adjusted), and the mismatch localised.

Pure functions over the small tables a counting engine gives: counts per
segment value and arm in, `SegmentResult`s and a `Localisation` out.
"""

from __future__ import annotations

from datetime import date, timedelta
from typing import Mapping, Sequence

from . import _stats
from ._designs import Design
from ._engine import ArmCounts, UnitTables
from ._results import DayResult, Localisation, SegmentResult

EXPLAINS_MOST = 0.5  # a segment that removes at least half of the overall chi-square carries the mismatch


def test_segments(design: Design, counts: ArmCounts,
                  grouped: Sequence[tuple[tuple[str, ...], Mapping[tuple[str, ...], ArmCounts]]],
                  threshold: float) -> list[SegmentResult]:
    """Every segment value of every term tested, Holm-adjusted together; mismatches first, the one explaining most first.

    `grouped` holds, per term (a tuple of attribute names), the arm counts of each value of the term.
    """
    tested = []
    for term, by_value in grouped:
        for values, arm_units in by_value.items():
            fit = _stats.chi_square_fit(arm_units, design.shares)
            shift = _stats.leave_out(counts, arm_units, design.shares)
            tested.append((dict(zip(term, values)), arm_units, fit, shift))
    adjusted = _stats.holm_adjust([fit.p_value for _, _, fit, _ in tested])
    segments = [SegmentResult(by, sum(arm_units), tuple(arm_units), fit.statistic, fit.p_value, p_adjusted=p,
                              srm=p < threshold, explained=shift.explained, p_without=shift.fit_without.p_value)
                for (by, arm_units, fit, shift), p in zip(tested, adjusted)]
    segments.sort(key=lambda s: (not s.srm, -s.explained if s.srm else s.p_value, s.p_value))
    return segments


def without_worst(design: Design, counts: ArmCounts, segments: Sequence[SegmentResult],
                  threshold: float) -> SegmentResult | None:
    """The overall test with the first (worst) segment left out."""
    if not segments:
        return None
    worst = segments[0]
    rest = [c - s for c, s in zip(counts, worst.arm_units)]
    fit = _stats.chi_square_fit(rest, design.shares)
    return SegmentResult(worst.by, sum(rest), tuple(rest), fit.statistic, fit.p_value, srm=fit.p_value < threshold)


def day_results(design: Design, by_day: Mapping[date, ArmCounts]) -> list[DayResult]:
    """Each day from the first to the last with new units: that day's test, the cumulative one, the anytime-valid one."""
    if not by_day:
        return []
    first, last = min(by_day), max(by_day)
    days = [first + timedelta(n) for n in range((last - first).days + 1)]
    daily = [list(by_day.get(d, [0] * len(design.arms))) for d in days]
    cumulative = _stats.cumulative_fits(daily, design.shares)
    sequential = _stats.sequential_p_values(daily, design.shares)
    return [DayResult(d, tuple(counts), _stats.chi_square_fit(counts, design.shares).p_value, fit.p_value, anytime)
            for d, counts, fit, anytime in zip(days, daily, cumulative, sequential)]


def localise(tables: UnitTables, experiment: int, design: Design, segments: Sequence[SegmentResult],
             names: Sequence[str], threshold: float) -> Localisation | None:
    """Drill down from the segment that explains most of the mismatch, one attribute at a time.

    At each step, the sub-segment (by another attribute) that carries most
    of the current segment's imbalance, and is itself a mismatch, narrows
    the segment; it stops when no attribute narrows it further.
    """
    start = next((s for s in segments if s.srm and s.explained >= EXPLAINS_MOST), None)
    if start is None:
        return None
    chosen = dict(start.by)
    counts = list(start.arm_units)
    while True:
        best = None
        for name in (n for n in names if n not in chosen):
            for (value,), sub in tables.segment_units(experiment, (name,), within=chosen).items():
                fit = _stats.chi_square_fit(sub, design.shares)
                shift = _stats.leave_out(counts, sub, design.shares)
                if fit.p_value < threshold and shift.explained >= EXPLAINS_MOST and \
                        (best is None or shift.explained > best[2]):
                    best = (name, value, shift.explained, sub)
        if best is None:
            break
        chosen[best[0]] = best[1]
        counts = best[3]
    rest = tables.arm_units(experiment, without=chosen)
    days = day_results(design, tables.day_units(experiment, within=chosen))
    crossing = _stats.first_crossing([d.cumulative_p for d in days], threshold)
    p_rest = _stats.chi_square_fit(rest, design.shares).p_value
    return Localisation(chosen, sum(counts), tuple(counts), _stats.chi_square_fit(counts, design.shares).p_value,
                        p_rest, p_rest < threshold, days[crossing].day if crossing is not None else None)
