"""`check_config`: the SDK's own findings on a config, plus rules only a linter needs.

The SDK (`bucketing.parse_config`) already reports every error that makes it
refuse a config; this module adds warnings about configs the SDK accepts but
that are probably wrong, then applies the turned-off rules (per run) and the
waivers (per experiment, in the YAML, see `_waivers`). Errors of the SDK
cannot be turned off: the SDK would refuse the config whatever the linter says.

Data in, findings out: rendering lives in `audit.render`, exit codes in `audit.cli`.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import IO, Any, Iterable, Iterator, Mapping, Union

from bucketing import BUCKETS, Config, Experiment, Problem, parse_config

from .._errors import AuditError
from ._rules import UNREADABLE_RULES, why_not_ignorable
from ._waivers import Waived, apply_waivers

LIVE_STATUSES = ("draft", "running")
DEFAULT_MIN_ARM_UNITS = 1000

Sources = Union[str, Path, Iterable[Union[str, Path]]]


@dataclass(frozen=True)
class CheckOptions:
    day: date
    weekly_units: Mapping[str, int] = field(default_factory=dict)
    min_arm_units: int = DEFAULT_MIN_ARM_UNITS
    ignore: frozenset[str] = frozenset()


def finding_dict(finding: Problem) -> dict[str, Any]:
    """A finding as the JSON and SARIF outputs name its fields."""
    return {"rule": finding.rule, "severity": finding.severity, "file": finding.file, "line": finding.line,
            "column": finding.column, "path": finding.path, "message": finding.message}


@dataclass(frozen=True)
class CheckResult:
    """The findings on one config (waived ones apart), and the files read."""

    findings: tuple[Problem, ...]
    waived: tuple[Waived, ...]
    files: tuple[str, ...]

    @property
    def errors(self) -> int:
        return sum(1 for f in self.findings if f.severity == "error")

    @property
    def warnings(self) -> int:
        return sum(1 for f in self.findings if f.severity == "warning")

    @property
    def unreadable(self) -> bool:
        """Some input could not be read at all (a file, its YAML)."""
        return any(f.rule in UNREADABLE_RULES for f in self.findings)

    def __add__(self, other: CheckResult) -> CheckResult:
        """Two results as one (configs checked separately, reported together)."""
        return CheckResult(self.findings + other.findings, self.waived + other.waived, self.files + other.files)

    def to_dict(self) -> dict[str, Any]:
        """The JSON output of `sortition check --format json`, as Python values."""
        return {
            "findings": [finding_dict(f) for f in self.findings],
            "waived": [{**finding_dict(w.finding), "reason": w.reason} for w in self.waived],
            "summary": {"errors": self.errors, "warnings": self.warnings, "waived": len(self.waived),
                        "files": len(self.files)},
        }


def check_config(sources: Sources, *, day: date | None = None, weekly_units: Mapping[str, int] | None = None,
                 min_arm_units: int = DEFAULT_MIN_ARM_UNITS, ignore: Iterable[str] = (),
                 text: str | IO[bytes] | None = None) -> CheckResult:
    """Lint one config (files and directories merged): its findings, waivers applied.

    `day` judges dates (default: today); `weekly_units` (unit type -> units a
    week) adds to the config's own, for the power warning; `ignore` turns
    warning rules off; `text` is the YAML itself, `sources` then naming it.
    """
    for rule in ignore:
        reason = why_not_ignorable(rule)
        if reason:
            raise AuditError(f"cannot turn off {rule!r}: {reason}")
    options = CheckOptions(day or date.today(), dict(weekly_units or {}), min_arm_units, frozenset(ignore))
    paths = [sources] if isinstance(sources, (str, Path)) else list(sources)
    config, problems = parse_config(paths, text=text)
    if config is None:
        files = tuple(sorted({p.file for p in problems}))
        return CheckResult(tuple(_ordered(p for p in problems if p.rule not in options.ignore)), (), files)
    findings, waived = apply_waivers(config, problems + lint(config, options))
    kept = [f for f in findings if f.rule not in options.ignore]
    return CheckResult(tuple(_ordered(kept)), tuple(waived), config.files)


def lint(config: Config, options: CheckOptions) -> list[Problem]:
    """The warnings of this linter (the SDK's own findings come from `parse_config`)."""
    weekly = {**config.weekly_units, **options.weekly_units}
    held_out = {h.unit: h.percent for h in config.holdouts}
    found: list[Problem] = []
    layer_units = {layer.unit for layer in config.layers}
    for hi, holdout in enumerate(config.holdouts):
        if holdout.unit not in layer_units:
            found.append(config.problem("holdout-unused", ("holdout", hi, "unit"),
                f"holdout for unit type {holdout.unit!r}, but no layer assigns that unit type "
                f"(layers use {sorted(layer_units)}); fix the unit type or remove the holdout", "warning"))
    for li, layer in enumerate(config.layers):
        if not layer.experiments:
            found.append(config.problem("layer-empty", ("layers", li, "name"),
                f"layer {layer.name!r} has no experiments; add one or remove the layer", "warning"))
        for ei, exp in enumerate(layer.experiments):
            at = ("layers", li, "experiments", ei)
            found += _arms(config, at, exp)
            found += _window(config, at, exp, options.day)
            for attr, condition in exp.eligible.items():
                if condition == []:
                    found.append(config.problem("eligible-empty", at + ("eligible", attr),
                        f"no value of {attr!r} is eligible, so {exp.name!r} gets no units; "
                        "list the values that may take part, or remove the condition", "warning"))
            if exp.overrides and exp.status != "running":
                found.append(config.problem("override-inactive", at + ("overrides",),
                    f"{exp.name!r} is {exp.status}, and overrides force units only while an experiment "
                    "is running; the units named here get their usual assignment", "warning"))
            if exp.status in LIVE_STATUSES and layer.unit in weekly:
                found += _underpowered(config, at, exp, weekly[layer.unit], layer.unit,
                                       held_out.get(layer.unit, 0), options.min_arm_units)
    return found


def _arms(config: Config, at: tuple, exp: Experiment) -> Iterator[Problem]:
    names = [arm.name for arm in exp.arms]
    if exp.rollout in names[1:]:
        yield config.problem("rollout-not-first", at + ("rollout",),
            f"{exp.name!r} releases arm {exp.rollout!r}, which is not its first arm: raising its weight moves "
            f"units between the arms before it ({', '.join(names[:names.index(exp.rollout)])}) too, so each ramp "
            "needs an approval; put it first", "warning")
    everywhere = {name for arm in exp.arms for name in arm.params}
    for ai, arm in enumerate(exp.arms):
        if arm.weight == 0:
            yield config.problem("arm-zero-weight", at + ("arms", ai, "weight"),
                f"arm {arm.name!r} of {exp.name!r} has weight 0 and never gets a unit; "
                "give it a weight or remove it", "warning")
        missing = sorted(everywhere - set(arm.params))
        if missing:
            setters = sorted({other.name for other in exp.arms if set(missing) & set(other.params)})
            yield config.problem("arm-param-missing", at + ("arms", ai, "params" if arm.params else "name"),
                f"arm {arm.name!r} does not set {', '.join(missing)}, which arm(s) {', '.join(setters)} set; "
                "set it in every arm so this arm does not fall back on the code's default", "warning")


def _window(config: Config, at: tuple, exp: Experiment, today: date) -> Iterator[Problem]:
    if exp.status != "running":
        return
    if exp.end is not None and exp.end < today:
        yield config.problem("window-ended", at + ("end",),
            f"{exp.name!r} is running but ended on {exp.end.isoformat()}; its units get the default "
            "experience: set status to done, or move the end date", "warning")
    if exp.start is not None and exp.start > today:
        yield config.problem("window-not-started", at + ("start",),
            f"{exp.name!r} is running but starts on {exp.start.isoformat()}; until then its buckets give "
            "the default experience: keep it as draft until then, or waive this rule if the launch is scheduled",
            "warning")


def experiment_buckets(exp: Experiment) -> int:
    """How many layer buckets an experiment holds (reversed or out-of-range ranges count nothing)."""
    total = 0
    for low, high in exp.ranges:
        if low <= high:
            total += max(0, min(high, BUCKETS - 1) - low + 1)
    return total


def _underpowered(config: Config, at: tuple, exp: Experiment, weekly: int, unit_type: str,
                  holdout_percent: float, minimum: int) -> Iterator[Problem]:
    traffic = experiment_buckets(exp) / BUCKETS * (1 - holdout_percent / 100)
    for ai, arm in enumerate(exp.arms):
        if arm.weight <= 0:
            continue
        expected = weekly * traffic * arm.weight / 100
        if expected < minimum:
            yield config.problem("arm-underpowered", at + ("arms", ai, "weight"),
                f"arm {arm.name!r} of {exp.name!r} expects about {expected:,.0f} {unit_type} units a week "
                f"({traffic * arm.weight:.2f} % of {weekly:,}, before eligibility), fewer than the "
                f"minimum of {minimum:,}: widen the experiment's buckets or this arm's weight", "warning")


def _ordered(findings: Iterable[Problem]) -> list[Problem]:
    return sorted(findings, key=lambda f: (f.file, f.line, f.column, f.rule, f.message))


