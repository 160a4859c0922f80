"""Why a unit gets what it gets: the step of the assignment order that decided, per layer, as data.

`explain_unit` walks the contract's order (forced, holdout, layer bucket,
experiment status, dates, eligibility, arm) over the same compiled `Plan`
that `Assigner.assign` reads, and stops at the step that decides. Each step
is a small frozen dataclass whose `reason` is a stable code; `to_dict`
gives the JSON shape of `sortition assign --explain --format json`.
"""

from __future__ import annotations

from bisect import bisect_right
from collections import Counter
from dataclasses import dataclass, field, fields
from datetime import date
from typing import Any, ClassVar, Mapping

import mmh3

from ._exposure import json_safe
from ._hashing import BUCKETS, unit_key
from ._plan import EPOCH_ORDINAL, ExperimentPlan, LayerPlan, Plan


def _bucket(prefix: str, unit: str) -> int:
    return mmh3.hash(prefix + unit, 0, False) % BUCKETS


def _shown(value: Any) -> str:
    """Text for a terminal: printable text as it is, anything else (control characters included) as its repr."""
    return value if isinstance(value, str) and value.isprintable() and value else repr(value)


def _plain(value: Any) -> Any:
    if isinstance(value, date):
        return value.isoformat()
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return json_safe(value)[0]


@dataclass(frozen=True)
class Step:
    """The step that decided what a layer gives a unit. `bucket` is the unit's layer bucket."""

    reason: ClassVar[str] = ""
    layer: str
    unit_type: str
    unit: str
    bucket: int

    @property
    def experiment_and_arm(self) -> tuple[str | None, str | None]:
        """What the layer gives the unit: (experiment, arm), or (None, None) for the default experience."""
        return None, None

    @property
    def forced(self) -> bool:
        return False

    def describe(self) -> str:
        """One line for people: what decided, with its numbers."""
        raise NotImplementedError

    def to_dict(self) -> dict[str, Any]:
        return {"reason": self.reason, **{f.name: _plain(getattr(self, f.name)) for f in fields(self)}}


@dataclass(frozen=True)
class Forced(Step):
    """A running experiment's `overrides` (or a test pin) names the unit: it gets that arm whatever else holds."""

    reason: ClassVar[str] = "forced"
    experiment: str
    arm: str

    @property
    def experiment_and_arm(self) -> tuple[str | None, str | None]:
        return self.experiment, self.arm

    @property
    def forced(self) -> bool:
        return True

    def describe(self) -> str:
        return f"forced: {self.experiment} / {self.arm} (overrides name this unit)"


@dataclass(frozen=True)
class HeldOut(Step):
    """The unit's holdout bucket is below the holdout's cut (percent x 100): no layer assigns it."""

    reason: ClassVar[str] = "held_out"
    holdout_bucket: int
    cut: int

    def describe(self) -> str:
        return f"held out: holdout bucket {self.holdout_bucket} < cut {self.cut}"


@dataclass(frozen=True)
class NoExperiment(Step):
    """No experiment of the layer has a bucket range containing the unit's layer bucket."""

    reason: ClassVar[str] = "no_experiment"

    def describe(self) -> str:
        return "no experiment: this bucket is in no experiment's ranges"


@dataclass(frozen=True)
class NotRunning(Step):
    """The experiment owning the bucket has a status other than `running`."""

    reason: ClassVar[str] = "not_running"
    experiment: str
    status: str

    def describe(self) -> str:
        return f"not running: {self.experiment} owns this bucket but is {self.status}"


@dataclass(frozen=True)
class BeforeStart(Step):
    """The day of the assignment is before the experiment's `start`."""

    reason: ClassVar[str] = "before_start"
    experiment: str
    start: date
    day: date

    def describe(self) -> str:
        return f"before start: {self.experiment} starts {self.start} (day {self.day})"


@dataclass(frozen=True)
class AfterEnd(Step):
    """The day of the assignment is after the experiment's `end`."""

    reason: ClassVar[str] = "after_end"
    experiment: str
    end: date
    day: date

    def describe(self) -> str:
        return f"after end: {self.experiment} ended {self.end} (day {self.day})"


@dataclass(frozen=True)
class NotEligible(Step):
    """An `eligible` rule does not hold: the attribute, its value (None when missing) and the rule as written."""

    reason: ClassVar[str] = "not_eligible"
    experiment: str
    attribute: str
    value: Any
    rule: Any

    def describe(self) -> str:
        rule = "in [" + ", ".join(_shown(v) for v in self.rule) + "]" if isinstance(self.rule, list) else self.rule
        value = "missing" if self.value is None else _shown(self.value)
        return f"not eligible for {self.experiment}: {_shown(self.attribute)} is {value}, rule {rule}"


@dataclass(frozen=True)
class Assigned(Step):
    """The experiment applies; the unit's arm bucket falls in this arm's range."""

    reason: ClassVar[str] = "assigned"
    experiment: str
    arm_bucket: int
    arm: str

    @property
    def experiment_and_arm(self) -> tuple[str | None, str | None]:
        return self.experiment, self.arm

    def describe(self) -> str:
        return f"assigned: {self.experiment} / {self.arm} (arm bucket {self.arm_bucket})"


REASONS = tuple(cls.reason for cls in (Forced, HeldOut, NoExperiment, NotRunning, BeforeStart, AfterEnd,
                                       NotEligible, Assigned))


@dataclass(frozen=True)
class HoldoutCheck:
    """A unit type's holdout: the unit's holdout bucket, the cut, and whether the unit is held out."""

    unit_type: str
    bucket: int
    cut: int
    held_out: bool


@dataclass(frozen=True)
class Explanation:
    """What decided each layer for some units on `day`, under the config `config_version`.

    `unknown_unit_types` are given unit types that no layer or holdout uses;
    `invalid_units` are unit types whose id is neither text nor an integer
    (both give the default experience, as in `assign`). `problem` says what
    else went wrong, e.g. attributes that are not a mapping.
    """

    units: Mapping[str, str]
    day: date
    config_version: str
    layers: Mapping[str, Step]
    holdouts: Mapping[str, HoldoutCheck] = field(default_factory=dict)
    unknown_unit_types: tuple[str, ...] = ()
    invalid_units: tuple[str, ...] = ()
    problem: str | None = None

    def to_text(self) -> str:
        """The explanation for people, one line per layer."""
        units = ", ".join(f"{_shown(uid)} ({_shown(t)})" for t, uid in self.units.items()) or "no unit"
        lines = [f"{units}  config {self.config_version}  day {self.day}"]
        for t, h in self.holdouts.items():
            verdict = "held out" if h.held_out else "not held out"
            lines.append(f"  holdout of {t}: bucket {h.bucket}, cut {h.cut}: {verdict}")
        width = max((len(name) for name in self.layers), default=0)
        for name, step in self.layers.items():
            lines.append(f"  {name:<{width}}  bucket {step.bucket:>4}  {step.describe()}")
        for t in self.unknown_unit_types:
            lines.append(f"  unit type {_shown(t)}: no layer or holdout uses it; default experience")
        for t in self.invalid_units:
            lines.append(f"  unit type {_shown(t)}: the id is neither text nor an integer; default experience")
        if self.problem:
            lines.append(f"  note: {self.problem}")
        return "\n".join(lines)

    def to_dict(self) -> dict[str, Any]:
        return {
            "units": dict(self.units),
            "day": self.day.isoformat(),
            "config_version": self.config_version,
            "holdouts": {t: {"bucket": h.bucket, "cut": h.cut, "held_out": h.held_out} for t, h in self.holdouts.items()},
            "layers": {name: step.to_dict() for name, step in self.layers.items()},
            "unknown_unit_types": list(self.unknown_unit_types),
            "invalid_units": list(self.invalid_units),
            "problem": self.problem,
        }


def unexplained(plan: Plan, day: date, problem: str) -> Explanation:
    return Explanation(units={}, day=day, config_version=plan.version, layers={}, problem=problem)


def explain_unit(plan: Plan, units: Mapping[str, Any], attrs: Any, day: date) -> Explanation:
    """The explanation of `assign(units, attrs, day=day)` under `plan`."""
    problem = None
    given: dict[str, Any] = {}
    if isinstance(attrs, Mapping):
        given = dict(attrs)
    elif attrs is not None:
        problem = f"attributes are not a mapping ({type(attrs).__name__}); the unit is assigned as if it had none"
    ids: dict[str, str] = {}
    layers: dict[str, Step] = {}
    holdouts: dict[str, HoldoutCheck] = {}
    unknown: list[str] = []
    invalid: list[str] = []
    for unit_type, raw in units.items():
        try:
            uid = unit_key(raw)
        except (TypeError, ValueError):
            invalid.append(unit_type)
            continue
        ids[unit_type] = uid
        if unit_type not in plan.hot:
            unknown.append(unit_type)
            continue
        holdout = None
        if unit_type in plan.holdouts:
            prefix, cut = plan.holdouts[unit_type]
            bucket = _bucket(prefix, uid)
            holdout = holdouts[unit_type] = HoldoutCheck(unit_type, bucket, cut, bucket < cut)
        for layer in plan.layers_by_type.get(unit_type, ()):
            layers[layer.name] = _decide(layer, unit_type, uid, holdout, given, day)
    return Explanation(ids, day, plan.version, layers, holdouts, tuple(unknown), tuple(invalid), problem)


def _decide(layer: LayerPlan, unit_type: str, uid: str, holdout: HoldoutCheck | None,
            attrs: dict[str, Any], day: date) -> Step:
    where = (layer.name, unit_type, uid, _bucket(layer.prefix, uid))
    forced = layer.forced.get(uid)
    if forced is not None:
        pinned, index = forced
        return Forced(*where, pinned.name, pinned.arms[index])
    if holdout is not None and holdout.held_out:
        return HeldOut(*where, holdout.bucket, holdout.cut)
    exp: ExperimentPlan | None = layer.table[where[3]]
    if exp is None:
        return NoExperiment(*where)
    if not exp.running:
        return NotRunning(*where, exp.name, exp.source.status)
    today = day.toordinal() - EPOCH_ORDINAL
    if exp.first_day is not None and today < exp.first_day:
        return BeforeStart(*where, exp.name, exp.source.start, day)
    if exp.last_day is not None and today > exp.last_day:
        return AfterEnd(*where, exp.name, exp.source.end, day)
    for condition in exp.conditions:
        if not condition.holds(attrs, Counter()):
            return NotEligible(*where, exp.name, condition.attr, attrs.get(condition.attr),
                               exp.source.eligible[condition.attr])
    arm_bucket = _bucket(exp.prefix, uid)
    return Assigned(*where, exp.name, arm_bucket, exp.arms[bisect_right(exp.thresholds, arm_bucket)])
