"""The one registry of rule ids: the SDK's errors, the linter's warnings and the diff's verdicts.

Every finding of `sortition check` and `sortition diff` names a rule from
here; `--rules`, waivers, `--ignore` and SARIF's rule list all read it.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Mapping

from bucketing import RULES as SDK_RULES


@dataclass(frozen=True)
class Rule:
    id: str
    meaning: str
    origin: str  # "sdk": the SDK refuses such a config; "lint": a warning of `check`; "diff": a verdict of `diff`

    @property
    def can_be_off(self) -> bool:
        """Whether a run may turn it off or an experiment may waive it (an SDK error refuses the config anyway)."""
        return self.origin == "lint"


_LINT = {
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
    "rollout-not-first": "a staged rollout's released arm is not first, so raising its weight moves units between "
                         "the other arms",
}
_DIFF = {
    "reassign-running": "a running experiment would move units to another arm or drop them, and this change does "
                        "not approve it (a rollout's units moving into its released arm need no approval)",
    "reassign-accepted": "a running experiment moves units, and an approval (`reassign_ok`) that this change adds "
                         "or changes says why",
    "reassign-stale": "an approval (`reassign_ok`) is carried over unchanged from the old version, so it approves "
                      "nothing",
    "share-unknown": "a running experiment's eligibility or dates change; how many units move cannot be counted",
    "running-removed": "a running experiment is removed from the config",
}

RULES: Mapping[str, Rule] = {
    **{rule: Rule(rule, meaning, "sdk") for rule, meaning in SDK_RULES.items()},
    **{rule: Rule(rule, meaning, "lint") for rule, meaning in _LINT.items()},
    **{rule: Rule(rule, meaning, "diff") for rule, meaning in _DIFF.items()},
}
UNREADABLE_RULES = frozenset({"file-unreadable", "yaml-syntax", "yaml-limits"})  # the input could not be read


def meanings(*origins: str) -> dict[str, str]:
    """Rule id -> meaning, of the given origins (all when none is given), in registry order."""
    return {r.id: r.meaning for r in RULES.values() if not origins or r.origin in origins}


def why_not_ignorable(rule: str) -> str | None:
    """Why a rule cannot be turned off for a run, or None when it can."""
    known = RULES.get(rule)
    if known is None or known.origin == "diff":
        return f"unknown rule {rule!r}"
    if not known.can_be_off:
        return f"rule {rule!r} is an error of the SDK, which refuses such a config; it cannot be turned off"
    return None
