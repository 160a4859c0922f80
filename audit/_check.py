"""`sortition check`: the SDK's own findings on a config, plus rules only a linter needs.

The SDK (`bucketing.parse_config`) already reports every error that makes it
refuse a config; this module adds warnings about configs the SDK accepts but
that are probably wrong, then applies the turned-off rules (per run) and the
waivers (per experiment, in the YAML). Errors of the SDK cannot be turned off:
the SDK would refuse the config whatever the linter says.

Everything here is data in, findings out; rendering lives in `render_text`
and `render_json`, SARIF in `_sarif`.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from datetime import date
from pathlib import Path
from typing import Iterable, Iterator

from bucketing import BUCKETS, RULES as SDK_RULES, Config, Problem, parse_config

LINT_RULES = {
    "arm-zero-weight": "an arm has weight 0, so it never gets a unit",
    "arm-param-missing": "an arm does not set a parameter that other arms of its experiment set",
    "arm-underpowered": "an arm is expected to get fewer units a week than the minimum asked for",
    "eligible-empty": "an eligibility list is empty, so no unit can ever take part",
    "holdout-unused": "a holdout is for a unit type that no layer assigns",
    "layer-empty": "a layer has no experiments",
    "override-inactive": "overrides of an experiment that is not running force nothing",
    "window-ended": "a running experiment's end date is past",
    "window-not-started": "a running experiment's start date is still to come",
    "waiver-unknown-rule": "a waiver names a rule id that does not exist",
    "waiver-not-allowed": "a waiver names an error of the SDK, which refuses the config whatever the waiver says",
    "waiver-unused": "a waiver turns off a rule that finds nothing in its experiment",
}
ALL_RULES = {**SDK_RULES, **LINT_RULES}
UNREADABLE_RULES = frozenset({"file-unreadable", "yaml-syntax", "yaml-limits"})
LIVE_STATUSES = ("draft", "running")
DEFAULT_MIN_ARM_UNITS = 1000


@dataclass(frozen=True)
class CheckOptions:
    today: date
    weekly_units: dict[str, int] = field(default_factory=dict)
    min_arm_units: int = DEFAULT_MIN_ARM_UNITS
    ignore: frozenset[str] = frozenset()


@dataclass(frozen=True)
class Waived:
    finding: Problem
    reason: str


@dataclass(frozen=True)
class CheckResult:
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
        return any(f.rule in UNREADABLE_RULES for f in self.findings)

    def exit_code(self, warnings_fail: bool = False) -> int:
        """2 when input is unreadable, 1 when an error (or, if asked, a warning) is found, else 0."""
        if self.unreadable:
            return 2
        if self.errors or (warnings_fail and self.warnings):
            return 1
        return 0


def ignorable(rule: str) -> str | None:
    """Why a rule cannot be turned off for a run, or None when it can."""
    if rule in SDK_RULES:
        return f"rule {rule!r} is an error of the SDK, which refuses such a config; it cannot be turned off"
    if rule not in LINT_RULES:
        return f"unknown rule {rule!r}; `sortition check --rules` lists them"
    return None


def check(sources: Iterable[str | Path], options: CheckOptions, *, text: str | None = None) -> CheckResult:
    """Read one config (files and directories merged) and return its findings, waivers applied."""
    sources = list(sources)
    config, problems = parse_config(sources, text=text)
    if config is None:
        files = tuple(sorted({p.file for p in problems}))
        return CheckResult(tuple(_ordered(p for p in problems if p.rule not in options.ignore)), (), files)
    problems = problems + lint(config, options)
    findings, waived = _apply_waivers(config, problems)
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
            found += _window(config, at, exp, options.today)
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


def _arms(config: Config, at: tuple, exp) -> Iterator[Problem]:
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


def _window(config: Config, at: tuple, exp, today: date) -> Iterator[Problem]:
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


def experiment_buckets(exp) -> int:
    """How many layer buckets an experiment holds (reversed or out-of-range ranges count nothing)."""
    total = 0
    for low, high in exp.ranges:
        if low <= high:
            total += max(0, min(high, BUCKETS - 1) - low + 1)
    return total


def _underpowered(config: Config, at: tuple, exp, weekly: int, unit_type: str,
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


def _experiment_anchors(config: Config) -> list[tuple[str, tuple, tuple, object]]:
    """(file, location in that file, merged path, experiment) of every experiment, to match findings to waivers."""
    anchors = []
    for li, layer in enumerate(config.layers):
        for ei, exp in enumerate(layer.experiments):
            at = ("layers", li, "experiments", ei)
            document, local = config.origin(at)
            anchors.append((document.file, local, at, exp))
    return anchors


def _inside(finding: Problem, file: str, prefix: tuple) -> bool:
    return finding.file == file and finding.loc[:len(prefix)] == prefix


def _apply_waivers(config: Config, problems: list[Problem]) -> tuple[list[Problem], list[Waived]]:
    remaining = list(problems)
    waived: list[Waived] = []
    notes: list[Problem] = []
    for file, prefix, at, exp in _experiment_anchors(config):
        for wi, waiver in enumerate(exp.waivers):
            where = at + ("waivers", wi, "rule")
            if waiver.rule in SDK_RULES:
                notes.append(config.problem("waiver-not-allowed", where,
                    f"rule {waiver.rule!r} is an error of the SDK: services refuse to load a config that breaks "
                    "it, whatever the waiver says; fix the config and remove this waiver", "warning"))
                continue
            if waiver.rule not in LINT_RULES:
                notes.append(config.problem("waiver-unknown-rule", where,
                    f"no rule is called {waiver.rule!r}; `sortition check --rules` lists them", "warning"))
                continue
            hits = [p for p in remaining if p.rule == waiver.rule and _inside(p, file, prefix)]
            if not hits:
                notes.append(config.problem("waiver-unused", where,
                    f"rule {waiver.rule!r} finds nothing in {exp.name!r}; remove the waiver", "warning"))
            for hit in hits:
                remaining.remove(hit)
                waived.append(Waived(hit, waiver.reason))
    return remaining + notes, waived


def _ordered(findings: Iterable[Problem]) -> list[Problem]:
    return sorted(findings, key=lambda f: (f.file, f.line, f.column, f.rule, f.message))


def finding_dict(finding: Problem) -> dict:
    return {"rule": finding.rule, "severity": finding.severity, "file": finding.file, "line": finding.line,
            "column": finding.column, "path": finding.path, "message": finding.message}


def render_json(result: CheckResult) -> str:
    return json.dumps({
        "findings": [finding_dict(f) for f in result.findings],
        "waived": [{**finding_dict(w.finding), "reason": w.reason} for w in result.waived],
        "summary": {"errors": result.errors, "warnings": result.warnings, "waived": len(result.waived),
                    "files": len(result.files)},
    }, indent=2, ensure_ascii=False)


def finding_line(finding: Problem) -> str:
    field_path = f" ({finding.path})" if finding.path else ""
    return f"{finding.file}:{finding.line}:{finding.column}: {finding.severity} {finding.rule}{field_path}: {finding.message}"


def render_text(result: CheckResult) -> str:
    lines = [finding_line(f) for f in result.findings]
    summary = f"{result.errors} error(s), {result.warnings} warning(s) in {len(result.files)} file(s)"
    if result.waived:
        summary += f"; {len(result.waived)} waived"
    lines.append(summary)
    return "\n".join(lines)


def render_rules() -> str:
    width = max(len(rule) for rule in ALL_RULES)
    lines = [f"{'rule':<{width}}  {'can be off':<10}  meaning"]
    for rule, meaning in ALL_RULES.items():
        lines.append(f"{rule:<{width}}  {'no' if rule in SDK_RULES else 'yes':<10}  {meaning}")
    return "\n".join(lines)
