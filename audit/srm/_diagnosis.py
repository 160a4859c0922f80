"""Why an experiment's split is off: a tuple of small cause functions, most specific first.

Each cause function looks at one experiment's result (and the causes named
before it) and returns a `Cause` or None; `diagnose` runs them in order,
like a chain of processors. Adding a cause is adding a function to `CAUSES`.
"""

from __future__ import annotations

from typing import Callable

from . import _stats
from ._results import Cause, ExperimentResult, SegmentResult, segment_label

ARM_MISMATCH_NOTABLE = 0.01  # replayed units whose logged arm differs from the config: above 1 % is a cause
ARM_MISMATCH_P = 0.0005  # a segment's replay mismatch stands out from the rest's below this p-value
TWO_ARM_SHARE = 0.001  # units in two arms worth naming: from one in a thousand

CauseFunction = Callable[[ExperimentResult, float, tuple[Cause, ...]], "Cause | None"]


def _rest_mismatch(segment: SegmentResult, result: ExperimentResult) -> float:
    checked = result.replay_checked - segment.replay_checked
    return (result.replay_mismatched - segment.replay_mismatched) / checked if checked else 0.0


def _arm_mismatch_stands_out(segment: SegmentResult, result: ExperimentResult) -> bool:
    share = segment.replay_mismatch_share or 0.0
    rest_checked = result.replay_checked - segment.replay_checked
    if share <= ARM_MISMATCH_NOTABLE or rest_checked <= 0:
        return False
    p = _stats.proportion_test(segment.replay_mismatched, segment.replay_checked,
                               result.replay_mismatched - segment.replay_mismatched, rest_checked)
    return share > 3 * _rest_mismatch(segment, result) and p < ARM_MISMATCH_P


def arm_mismatch(result: ExperimentResult, threshold: float, earlier: tuple[Cause, ...]) -> Cause | None:
    """Units logged in an arm the config does not give them: in one segment above all, or everywhere alike."""
    standing_out = [s for s in result.segments if s.replay_checked and _arm_mismatch_stands_out(s, result)]
    if standing_out:
        worst = max(standing_out, key=lambda s: (s.replay_mismatch_share or 0.0, -s.units))
        return Cause("arm_mismatch",
            f"{worst.replay_mismatched} of {worst.replay_checked} replayed units in {worst.label} "
            f"({worst.replay_mismatch_share:.1%}) were logged in an arm the config does not give them, against "
            f"{_rest_mismatch(worst, result):.1%} elsewhere: this segment serves a stale or wrong arm, "
            f"which is a cause of the mismatch, not a symptom", worst.by)
    if (result.replay_mismatch_share or 0) > ARM_MISMATCH_NOTABLE:
        return Cause("arm_mismatch",
            f"{result.replay_mismatch_share:.1%} of replayed units were logged in an arm the config does not give "
            f"them, in every segment alike: check that the logs and the config are the same version")
    return None


def localised_shortfall(result: ExperimentResult, threshold: float, earlier: tuple[Cause, ...]) -> Cause | None:
    """The arm short in the localised segment: lost exposures, or units logged in a stale arm named before."""
    loc = result.localisation
    if loc is None or not result.srm:
        return None
    gaps = _stats.arm_gaps(loc.arm_units, [a.expected_share for a in result.arms])
    short_arm, gap = min(enumerate(gaps), key=lambda item: item[1].excess)
    since = ""
    if loc.onset_day is not None and loc.onset_interval is not None:
        low, high = (d.isoformat() for d in loc.onset_interval)
        since = f" since {loc.onset_day.isoformat()}" + (f" (between {low} and {high})" if low != high else "")
    rest = "the rest of the experiment is balanced" if not loc.srm_rest else "the rest still shows a mismatch"
    arm = result.arms[short_arm].arm
    shortfall = (f"in {loc.label}, arm {arm!r} has {-gap.excess:,.0f} units fewer than "
                 f"expected ({gap.ratio:.0%} of its expected count){since}; {rest} (p = {loc.p_rest:.2g})")
    stale = [c.segment for c in earlier if c.kind == "arm_mismatch" and c.segment is not None]
    if stale and stale[0].items() <= loc.by.items():
        return Cause("arm_mismatch", f"{shortfall}: its units are logged in another arm there (the stale or wrong "
                                     f"arm above), not lost", loc.by)
    return Cause("dropped_exposures", f"{shortfall}: exposures of {arm!r} are being lost in this segment", loc.by)


def duplicate_logging(result: ExperimentResult, threshold: float, earlier: tuple[Cause, ...]) -> Cause | None:
    """One arm logs its exposures more than once: exact repeats, or more records per unit on a test per unit.

    The evidence comes from `_per_unit`: records cluster within units, so
    only a comparison that treats the unit as the sampling unit (a rank test
    of records per unit) or exact repeats are evidence.
    """
    heavy = next((a for a in result.arms if a.arm == result.duplicate_arm), None)
    if heavy is None:
        return None
    if result.duplicate_basis == "exact_repeats":
        return Cause("duplicate_logging",
            f"arm {heavy.arm!r} has {heavy.duplicate_records:,} records that repeat another exactly "
            f"({heavy.duplicate_records / heavy.records:.1%} of its records): exposures are logged more than once "
            f"in that arm (count units, not records)")
    lightest = min((a for a in result.arms if a.units), key=lambda a: a.records_per_unit)
    return Cause("duplicate_logging",
        f"arm {heavy.arm!r} logs {heavy.records_per_unit:.2f} records per unit against {lightest.records_per_unit:.2f} "
        f"in {lightest.arm!r} (rank test of records per unit, p = {result.records_p_value:.2g}): exposures are "
        f"logged more than once in that arm (count units, not records)")


def closed_arm(result: ExperimentResult, threshold: float, earlier: tuple[Cause, ...]) -> Cause | None:
    """Units in an arm of weight 0: impossible under the design, whatever the other arms show."""
    closed = [a for a in result.arms if a.expected_share == 0 and a.units]
    if not closed:
        return None
    names = ", ".join(repr(a.arm) for a in closed)
    units = sum(a.units for a in closed)
    where = result.localisation.by if result.localisation is not None else None
    inside = f", most of them in {segment_label(where)}" if where else ""
    return Cause("closed_arm",
        f"{units:,} units ({units / result.units:.1%}) are in arm {names}, whose weight is 0{inside}: the design "
        f"gives it no unit, so the arm is still being served (a stale config, or a forced or cached arm)", where)


def units_in_two_arms(result: ExperimentResult, threshold: float, earlier: tuple[Cause, ...]) -> Cause | None:
    if not result.multi_arm_units or result.multi_arm_units < TWO_ARM_SHARE * max(result.units, 1):
        return None
    return Cause("units_in_two_arms",
        f"{result.multi_arm_units:,} units were logged in more than one arm (left out of the test): "
        f"an assignment that changes over time, or a unit id shared by several people")


def outside_window(result: ExperimentResult, threshold: float, earlier: tuple[Cause, ...]) -> Cause | None:
    count = result.outside_window_records
    if not count:
        return None
    return Cause("outside_window", f"{count:,} record{'s' if count != 1 else ''} "
                                   f"{'fall' if count != 1 else 'falls'} outside the experiment's dates (left out)")


def unexplained(result: ExperimentResult, threshold: float, earlier: tuple[Cause, ...]) -> Cause | None:
    if not result.srm or earlier:
        return None
    return Cause("unexplained",
        "the split is off but no segment, arm replay, duplicate or two-arm pattern explains it; "
        "try more segments, or combinations such as platform+app_version")


CAUSES: tuple[CauseFunction, ...] = (
    closed_arm, arm_mismatch, localised_shortfall, duplicate_logging, units_in_two_arms, outside_window, unexplained,
)


def diagnose(result: ExperimentResult, threshold: float,
             causes: tuple[CauseFunction, ...] = CAUSES) -> tuple[Cause, ...]:
    """The causes of `causes` that apply, in order; each sees those named before it."""
    found: tuple[Cause, ...] = ()
    for cause in causes:
        named = cause(result, threshold, found)
        if named is not None:
            found += (named,)
    return found
