"""A config compiled for the hot path: lookup tables built once, when it loads.

Each layer gets a 10,000-entry table from bucket to experiment, each
experiment its arm thresholds and compiled eligibility, each unit type its
holdout threshold. Assigning then costs a few hashes and list lookups.
"""

from __future__ import annotations

import operator
from collections import Counter
from datetime import date
from time import time
from typing import Any, Callable

from ._hashing import BUCKETS
from ._loader import Config
from ._model import CONDITION_PATTERN, experiment_salt, parse_version

EPOCH_ORDINAL = date(1970, 1, 1).toordinal()

_COMPARISONS: dict[str, Callable[[Any, Any], bool]] = {
    ">=": operator.ge, ">": operator.gt, "<=": operator.le, "<": operator.lt, "==": operator.eq, "!=": operator.ne,
}


def attribute_text(value: Any) -> str:
    """How an attribute or an eligibility value is compared: booleans as true/false, numbers in decimal."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def version_key(text: str) -> tuple[int, ...] | None:
    """A dotted version for comparison, trailing zeros dropped so that 7.2 == 7.2.0."""
    parsed = parse_version(text)
    if parsed is None:
        return None
    parts = list(parsed)
    while len(parts) > 1 and parts[-1] == 0:
        parts.pop()
    return tuple(parts)


class Condition:
    """One compiled `eligible` entry."""

    __slots__ = ("attr", "values", "compare", "version")

    def __init__(self, attr: str, spec: Any) -> None:
        self.attr = attr
        self.values: frozenset[str] | None = None
        self.compare: Callable[[Any, Any], bool] = operator.eq
        self.version: tuple[int, ...] | None = None
        if isinstance(spec, list):
            self.values = frozenset(attribute_text(v) for v in spec)
        else:
            match = CONDITION_PATTERN.match(spec)
            assert match is not None, "validated by _rules.condition-syntax"
            self.compare = _COMPARISONS[match.group(1)]
            self.version = version_key(match.group(2))

    def holds(self, attrs: dict[str, Any], errors: Counter) -> bool:
        value = attrs.get(self.attr)
        if value is None:
            return False
        if self.values is not None:
            return attribute_text(value) in self.values
        if isinstance(value, bool) or not isinstance(value, (str, int, float)):
            errors["attribute_type"] += 1
            return False
        version = version_key(attribute_text(value))
        if version is None:
            errors["attribute_version"] += 1
            return False
        return self.compare(version, self.version)


class ExperimentPlan:
    __slots__ = ("source", "name", "layer", "prefix", "thresholds", "arms", "arm_params", "running",
                 "first_day", "last_day", "conditions", "gated")

    def __init__(self, layer_name: str, layer, exp) -> None:
        self.source = exp  # the experiment as configured: status, dates and rules as written, for explanations
        self.name = exp.name
        self.layer = layer_name
        self.prefix = experiment_salt(layer, exp) + ":"
        edges, total = [], 0
        for arm in exp.arms:
            total += arm.width
            edges.append(total)
        self.thresholds = tuple(edges)
        self.arms = tuple(arm.name for arm in exp.arms)
        self.arm_params = tuple(dict(arm.params) for arm in exp.arms)
        self.running = exp.status == "running"
        self.first_day = exp.start.toordinal() - EPOCH_ORDINAL if exp.start else None
        self.last_day = exp.end.toordinal() - EPOCH_ORDINAL if exp.end else None
        self.conditions = tuple(Condition(attr, spec) for attr, spec in exp.eligible.items())
        self.gated = self.first_day is not None or self.last_day is not None or bool(self.conditions)

    def admits(self, attrs: dict[str, Any], today: int | None, errors: Counter) -> bool:
        """Whether the date window (today: days since 1970-01-01 UTC) and eligibility let the unit in."""
        if self.first_day is not None or self.last_day is not None:
            if today is None:
                today = int(time() // 86400)
            if (self.first_day is not None and today < self.first_day) or \
                    (self.last_day is not None and today > self.last_day):
                return False
        for condition in self.conditions:
            if not condition.holds(attrs, errors):
                return False
        return True


class LayerPlan:
    __slots__ = ("name", "unit_type", "prefix", "table", "live", "forced")

    def __init__(self, layer, pins: dict[str, tuple[str, str]]) -> None:
        self.name = layer.name
        self.unit_type = layer.unit
        self.prefix = layer.effective_salt + ":"
        table: list[ExperimentPlan | None] = [None] * BUCKETS
        self.forced: dict[str, tuple[ExperimentPlan, int]] = {}
        for exp in layer.experiments:
            plan = ExperimentPlan(layer.name, layer, exp)
            for low, high in exp.ranges:
                table[low:high + 1] = [plan] * (high - low + 1)
            if plan.running:
                for unit, arm in exp.overrides.items():
                    self.forced.setdefault(unit, (plan, plan.arms.index(arm)))
            for unit, (experiment, arm) in pins.items():
                if experiment == exp.name:
                    self.forced[unit] = (plan, plan.arms.index(arm))
        self.table = table
        self.live = [plan if plan is not None and plan.running else None for plan in table]


class Plan:
    """Everything `Assigner.assign` reads, immutable once built."""

    __slots__ = ("config", "version", "pins", "layers", "layers_by_type", "hot", "holdouts", "param_owner",
                 "targeted_attributes")

    def __init__(self, config: Config, pins: dict[str, dict[str, tuple[str, str]]] | None = None) -> None:
        """`pins`: layer -> unit -> (experiment, arm), forced whatever the status (bucketing.testing)."""
        self.config = config
        self.version = config.version
        self.pins = pins or {}
        self.layers = tuple(LayerPlan(layer, self.pins.get(layer.name, {})) for layer in config.layers)
        by_type: dict[str, list[LayerPlan]] = {}
        for layer in self.layers:
            by_type.setdefault(layer.unit_type, []).append(layer)
        self.layers_by_type = {t: tuple(ls) for t, ls in by_type.items()}
        self.holdouts = {h.unit: (h.salt + ":", h.width) for h in config.holdouts}
        # What `assign` reads per unit type, as plain tuples: (holdout salt prefix or None,
        # holdout threshold, ((layer name, salt prefix, bucket -> running experiment, forced units), ...)).
        # A unit type with a holdout and no layer is here too: its units can be held out.
        self.hot = {
            t: (*self.holdouts.get(t, (None, 0)),
                tuple((lp.name, lp.prefix, lp.live, lp.forced) for lp in self.layers_by_type.get(t, ())))
            for t in [*by_type, *(t for t in self.holdouts if t not in by_type)]
        }
        self.param_owner = {
            name: layer.name
            for layer in config.layers
            for exp in layer.experiments
            for arm in exp.arms
            for name in arm.params
        }
        # The attributes exposure records carry by default: those some experiment targets on.
        self.targeted_attributes = frozenset(
            attr for layer in config.layers for exp in layer.experiments for attr in exp.eligible)
