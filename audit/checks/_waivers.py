"""Waivers: an experiment's own `waivers` turning a warning rule off, with the reason written beside it.

A waiver applies to findings inside its experiment only; a waiver that
names an SDK error, an unknown rule, or finds nothing is itself reported.
"""

from __future__ import annotations

from dataclasses import dataclass

from bucketing import Config, Experiment, Problem

from ._rules import RULES


@dataclass(frozen=True)
class Waived:
    finding: Problem
    reason: str


def _experiment_anchors(config: Config) -> list[tuple[str, tuple, tuple, Experiment]]:
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


def apply_waivers(config: Config, problems: list[Problem]) -> tuple[list[Problem], list[Waived]]:
    remaining = list(problems)
    waived: list[Waived] = []
    notes: list[Problem] = []
    for file, prefix, at, exp in _experiment_anchors(config):
        for wi, waiver in enumerate(exp.waivers):
            where = at + ("waivers", wi, "rule")
            rule = RULES.get(waiver.rule)
            if rule is not None and rule.origin == "sdk":
                notes.append(config.problem("waiver-not-allowed", where,
                    f"rule {waiver.rule!r} is an error of the SDK: services refuse to load a config that breaks "
                    "it, whatever the waiver says; fix the config and remove this waiver", "warning"))
                continue
            if rule is None or not rule.can_be_off:
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
