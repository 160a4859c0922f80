"""The SRM audit's results: plain dataclasses that the renderers turn into text, JSON and HTML."""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date

from ._logs import Malformed


def _share(part: int, whole: int) -> float | None:
    return part / whole if whole else None


@dataclass(frozen=True)
class Design:
    """What one experiment should look like: its arms, their expected shares, its date window."""

    layer: str
    experiment: str
    arms: tuple[str, ...]
    shares: tuple[float, ...]
    unit_type: str | None = None
    start: date | None = None
    end: date | None = None


@dataclass
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


@dataclass
class SegmentResult:
    by: dict[str, str]
    units: int
    arm_units: list[int]
    chi2: float
    p_value: float
    p_adjusted: float = 1.0
    srm: bool = False
    explained: float = 0.0  # share of the overall chi-square that goes away without this segment
    p_without: float = 1.0  # overall test with this segment left out
    replay_checked: int = 0
    replay_mismatched: int = 0

    @property
    def label(self) -> str:
        return ", ".join(f"{k}={v}" for k, v in self.by.items())

    replay_mismatch_share = property(lambda self: _share(self.replay_mismatched, self.replay_checked))


@dataclass
class DayResult:
    day: date
    arm_units: list[int]  # units first exposed that day
    p_value: float  # that day's new units alone
    cumulative_p: float  # every unit up to and including that day
    sequential_p: float = 1.0  # anytime-valid: safe to read every day


@dataclass
class Localisation:
    """The intersection of the segments that carry the mismatch, tested alone and without it."""

    by: dict[str, str]
    units: int
    arm_units: list[int]
    p_value: float
    p_rest: float
    srm_rest: bool
    first_srm_day: date | None

    @property
    def label(self) -> str:
        return ", ".join(f"{k}={v}" for k, v in self.by.items())


@dataclass
class Cause:
    """A diagnosed reason for a mismatch (or a data problem worth a look), in words and as a tag."""

    kind: str  # dropped_exposures | duplicate_logging | units_in_two_arms | arm_mismatch | outside_window | forced_units
    message: str
    segment: dict[str, str] | None = None


@dataclass
class ExperimentResult:
    layer: str
    experiment: str
    units: int
    arms: list[ArmResult]
    chi2: float
    df: int
    p_value: float
    srm: bool
    records: int
    duplicate_records: int
    multi_arm_units: int
    multi_arm_examples: list[dict]
    forced_units: int
    outside_window_records: int
    days: list[DayResult] = field(default_factory=list)
    first_srm_day: date | None = None
    sequential_p_value: float = 1.0
    first_sequential_srm_day: date | None = None
    segments: list[SegmentResult] = field(default_factory=list)
    without_worst: SegmentResult | None = None
    localisation: Localisation | None = None
    records_p_value: float = 1.0
    replay_checked: int = 0
    replay_mismatched: int = 0
    replay_examples: list[dict] = field(default_factory=list)
    causes: list[Cause] = field(default_factory=list)

    replay_mismatch_share = property(lambda self: _share(self.replay_mismatched, self.replay_checked))


@dataclass
class UnknownRecords:
    """Records naming an experiment or an arm that the design does not have."""

    experiment: str
    arm: str | None
    layer: str | None
    records: int
    reason: str  # unknown_experiment | unknown_arm


@dataclass
class AuditResult:
    threshold: float
    files: list[str]
    records: int
    results: list[ExperimentResult]
    malformed: Malformed
    unknown: list[UnknownRecords] = field(default_factory=list)
    segment_terms: list[tuple[str, ...]] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)

    @property
    def any_srm(self) -> bool:
        return any(r.srm for r in self.results)
