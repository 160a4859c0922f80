"""The SRM audit's results: frozen dataclasses, and `to_dict()` giving the JSON output's fields.

Plain data: nothing here reads logs or loads a counting engine, so a caller
(or a renderer) can import the results without DuckDB or Spark.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date
from typing import Any, Mapping


def _share(part: int, whole: int) -> float | None:
    return part / whole if whole else None


def _number(value: float | None) -> float | None:
    """A float for JSON: NaN and infinities (a ratio to an expected 0) become null."""
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return None
    return value


def _day(value: date | None) -> str | None:
    return value.isoformat() if value else None


def _interval(value: tuple[date, date] | None) -> list[str] | None:
    return [value[0].isoformat(), value[1].isoformat()] if value else None


def segment_label(by: Mapping[str, str]) -> str:
    return ", ".join(f"{k}={v}" for k, v in by.items())


@dataclass(frozen=True)
class MalformedExample:
    """One record that could not be used, located by file and line (line None when unknown)."""

    kind: str  # unparseable | truncated | missing_field | wrong_type
    file: str
    line: int | None
    detail: str
    text: str | None = None


@dataclass(frozen=True)
class Malformed:
    """Records that could not be used, counted by kind, with a few located examples."""

    counts: Mapping[str, int] = field(default_factory=dict)
    examples: tuple[MalformedExample, ...] = ()

    @property
    def total(self) -> int:
        return sum(self.counts.values())

    def to_dict(self) -> dict[str, Any]:
        return {
            "total": self.total,
            "counts": dict(sorted(self.counts.items())),
            "examples": [{"kind": e.kind, "file": e.file, "line": e.line, "detail": e.detail, "text": e.text}
                         for e in self.examples],
        }


@dataclass(frozen=True)
class ArmResult:
    arm: str
    units: int
    expected_share: float
    observed_share: float
    expected_units: float
    excess_units: float  # negative: units missing
    ratio: float
    share_low: float
    share_high: float
    records: int
    duplicate_records: int

    @property
    def records_per_unit(self) -> float:
        return self.records / self.units if self.units else 0.0

    def to_dict(self) -> dict[str, Any]:
        return {
            "arm": self.arm, "units": self.units, "expected_share": self.expected_share,
            "observed_share": self.observed_share, "expected_units": self.expected_units,
            "excess_units": self.excess_units, "ratio": _number(self.ratio),
            "observed_share_interval": [self.share_low, self.share_high], "records": self.records,
            "duplicate_records": self.duplicate_records,
        }


@dataclass(frozen=True)
class SegmentResult:
    by: Mapping[str, str]
    units: int
    arm_units: tuple[int, ...]
    chi2: float
    p_value: float
    p_adjusted: float = 1.0
    srm: bool = False
    explained: float = 0.0  # share of the overall chi-square that goes away without this segment
    p_without: float = 1.0  # overall test with this segment left out
    replay_checked: int = 0
    replay_mismatched: int = 0
    test: str = "none"  # which test ran (see `audit.srm._exact`)
    mc_error: float | None = None  # Monte Carlo only: 99 % upper bound of the p-value minus the estimate
    closed_units: int = 0  # units in an arm the design closes (weight 0)
    sequential_p_value: float | None = None  # anytime-valid p-value of the segment, when the verdict rests on them

    @property
    def label(self) -> str:
        return segment_label(self.by)

    @property
    def replay_mismatch_share(self) -> float | None:
        return _share(self.replay_mismatched, self.replay_checked)

    def to_dict(self, arms: tuple[str, ...]) -> dict[str, Any]:
        return {
            "by": dict(self.by), "units": self.units, "test": self.test, "p_value": self.p_value,
            "mc_error": self.mc_error, "p_adjusted": self.p_adjusted, "closed_arm_units": self.closed_units,
            "sequential_p_value": self.sequential_p_value,
            "srm": self.srm, "chi2": self.chi2, "arm_units": dict(zip(arms, self.arm_units)),
            "explained": self.explained, "p_value_without": self.p_without,
            "replay_checked": self.replay_checked, "replay_mismatch_share": self.replay_mismatch_share,
        }


@dataclass(frozen=True)
class DayResult:
    day: date
    arm_units: tuple[int, ...]  # units first exposed that day
    p_value: float  # that day's new units alone
    cumulative_p: float  # every unit up to and including that day
    sequential_p: float = 1.0  # anytime-valid: safe to read every day

    def to_dict(self, arms: tuple[str, ...]) -> dict[str, Any]:
        return {"day": self.day.isoformat(), "new_units": dict(zip(arms, self.arm_units)), "p_value": self.p_value,
                "cumulative_p_value": self.cumulative_p, "sequential_p_value": self.sequential_p}


@dataclass(frozen=True)
class Localisation:
    """The intersection of the segments that carry the mismatch, tested alone and without it."""

    by: Mapping[str, str]
    units: int
    arm_units: tuple[int, ...]
    p_value: float
    p_rest: float
    srm_rest: bool
    first_srm_day: date | None  # the first day the segment's cumulative test crossed the threshold
    onset_day: date | None = None  # the estimated first broken day of the segment
    onset_interval: tuple[date, date] | None = None
    days: tuple[DayResult, ...] = ()  # the segment's days, as the experiment's

    @property
    def label(self) -> str:
        return segment_label(self.by)

    def to_dict(self, arms: tuple[str, ...]) -> dict[str, Any]:
        return {"by": dict(self.by), "units": self.units, "arm_units": dict(zip(arms, self.arm_units)),
                "p_value": self.p_value, "p_value_rest": self.p_rest, "srm_rest": self.srm_rest,
                "first_srm_day": _day(self.first_srm_day), "onset_day": _day(self.onset_day),
                "onset_interval": _interval(self.onset_interval), "days": [d.to_dict(arms) for d in self.days]}


@dataclass(frozen=True)
class Cause:
    """A diagnosed reason for a mismatch (or a data problem worth a look), in words and as a tag."""

    kind: str  # closed_arm | arm_mismatch | dropped_exposures | duplicate_logging | units_in_two_arms | outside_window | unexplained
    message: str
    segment: Mapping[str, str] | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"kind": self.kind, "message": self.message,
                "segment": None if self.segment is None else dict(self.segment)}


@dataclass(frozen=True)
class ReplaySummary:
    """Units whose arm was recomputed with the SDK, how many were logged in another arm, a few examples."""

    checked: int = 0
    mismatched: int = 0
    examples: tuple[Mapping[str, Any], ...] = ()


@dataclass(frozen=True)
class ExperimentResult:
    layer: str
    experiment: str
    units: int
    arms: tuple[ArmResult, ...]
    chi2: float
    df: int
    p_value: float
    srm: bool
    records: int
    duplicate_records: int
    multi_arm_units: int
    multi_arm_examples: tuple[Mapping[str, Any], ...]
    forced_units: int
    outside_window_records: int
    days: tuple[DayResult, ...] = ()
    first_srm_day: date | None = None
    sequential_p_value: float = 1.0
    first_sequential_srm_day: date | None = None
    segments: tuple[SegmentResult, ...] = ()
    without_worst: SegmentResult | None = None
    localisation: Localisation | None = None
    records_p_value: float = 1.0
    replay_checked: int = 0
    replay_mismatched: int = 0
    replay_examples: tuple[Mapping[str, Any], ...] = ()
    causes: tuple[Cause, ...] = ()
    test: str = "none"  # which test ran (see `audit.srm._exact`)
    mc_error: float | None = None  # Monte Carlo only: 99 % upper bound of the p-value minus the estimate
    closed_arm_units: int = 0  # units in an arm the design closes (weight 0): impossible under the design
    srm_scope: str | None = None  # "overall" or "segment" for a mismatch, else None
    verdict: str = "fixed"  # what `srm` rests on: "fixed" (fixed-horizon tests) or "anytime" (anytime-valid ones)
    duplicate_arm: str | None = None  # the arm that logs its exposures more than once, on valid evidence
    duplicate_basis: str | None = None  # "exact_repeats" or "records_per_unit"
    onset_day: date | None = None  # for a mismatch: the estimated first broken day (change point)
    onset_interval: tuple[date, date] | None = None
    moved_with_version_units: int = 0  # changed arm only with a config version change: counted at first exposure

    @property
    def replay_mismatch_share(self) -> float | None:
        return _share(self.replay_mismatched, self.replay_checked)

    def break_estimate(self) -> tuple[date, tuple[date, date], str | None] | None:
        """The day the split broke, its interval, and the segment dated (None: the whole experiment).

        The segment where the mismatch is localised, when it was dated there; else the experiment's own onset.
        """
        where = self.localisation
        if where is not None and where.onset_day is not None and where.onset_interval is not None:
            return where.onset_day, where.onset_interval, where.label
        if self.onset_day is not None and self.onset_interval is not None:
            return self.onset_day, self.onset_interval, None
        return None

    @property
    def arm_names(self) -> tuple[str, ...]:
        return tuple(a.arm for a in self.arms)

    def to_dict(self) -> dict[str, Any]:
        names = self.arm_names
        worst = self.without_worst
        return {
            "layer": self.layer,
            "experiment": self.experiment,
            "units": self.units,
            "arms": [a.to_dict() for a in self.arms],
            "test": self.test,
            "chi2": self.chi2,
            "df": self.df,
            "p_value": self.p_value,
            "mc_error": self.mc_error,
            "closed_arm_units": self.closed_arm_units,
            "srm": self.srm,
            "srm_scope": self.srm_scope,
            "verdict": self.verdict,
            "onset_day": _day(self.onset_day),
            "onset_interval": _interval(self.onset_interval),
            "records": self.records,
            "records_p_value": self.records_p_value,
            "multi_arm_units": self.multi_arm_units,
            "multi_arm_examples": [dict(e) for e in self.multi_arm_examples],
            "moved_with_version_units": self.moved_with_version_units,
            "duplicate_records": self.duplicate_records,
            "forced_units": self.forced_units,
            "outside_window_records": self.outside_window_records,
            "replay_checked": self.replay_checked,
            "replay_mismatch_share": self.replay_mismatch_share,
            "replay_examples": [dict(e) for e in self.replay_examples],
            "first_srm_day": _day(self.first_srm_day),
            "sequential_p_value": self.sequential_p_value,
            "first_sequential_srm_day": _day(self.first_sequential_srm_day),
            "days": [d.to_dict(names) for d in self.days],
            "segments": [s.to_dict(names) for s in self.segments],
            "without_worst_segment": None if worst is None else {
                "left_out": dict(worst.by), "units": worst.units, "p_value": worst.p_value, "srm": worst.srm},
            "localised": None if self.localisation is None else self.localisation.to_dict(names),
            "causes": [c.to_dict() for c in self.causes],
        }


@dataclass(frozen=True)
class UnknownRecords:
    """Records naming an experiment or an arm that the design does not have."""

    experiment: str
    arm: str | None
    layer: str | None
    records: int
    reason: str  # unknown_experiment | unknown_arm

    def to_dict(self) -> dict[str, Any]:
        return {"reason": self.reason, "layer": self.layer, "experiment": self.experiment, "arm": self.arm,
                "records": self.records}


@dataclass(frozen=True)
class AuditResult:
    """The whole audit: one `ExperimentResult` per experiment, mismatches first, and what could not be used."""

    threshold: float
    files: tuple[str, ...]
    records: int
    results: tuple[ExperimentResult, ...]
    malformed: Malformed
    unknown: tuple[UnknownRecords, ...] = ()
    segment_terms: tuple[tuple[str, ...], ...] = ()
    notes: tuple[str, ...] = ()
    unreadable_files: tuple[tuple[str, str], ...] = ()  # (file, why) of the files skipped because they cannot be read

    @property
    def any_srm(self) -> bool:
        return any(r.srm for r in self.results)

    def to_dict(self) -> dict[str, Any]:
        """The JSON output of `sortition srm --format json`, as Python values."""
        return {
            "threshold": self.threshold,
            "srm": self.any_srm,
            "files": list(self.files),
            "records": self.records,
            "segments_by": [list(term) for term in self.segment_terms],
            "results": [r.to_dict() for r in self.results],
            "malformed": self.malformed.to_dict(),
            "unknown": [u.to_dict() for u in self.unknown],
            "unreadable_files": [{"file": file, "reason": why} for file, why in self.unreadable_files],
            "notes": list(self.notes),
        }
