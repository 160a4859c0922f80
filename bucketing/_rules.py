"""Rules across fields that decide whether a config can assign units at all.

The SDK refuses a config with any error found here; `sortition check`
reports the same findings (plus its own warnings), so each rule exists once.
Each finding has a stable rule id, a merged path and a message that says
what to do.
"""

from __future__ import annotations

from collections import defaultdict
from typing import Iterator

from ._errors import Problem, did_you_mean, shown
from ._hashing import BUCKETS
from ._config import Config
from ._model import CONDITION_PATTERN, experiment_salt, hundredths, parse_version

# Rule ids. Shared with `sortition check`, which documents each one.
RULES = {
    "file-unreadable": "a config file cannot be read",
    "yaml-syntax": "a config file is not valid YAML",
    "yaml-limits": "a config file is too large or expands too many aliases",
    "yaml-duplicate-key": "a key appears twice in one mapping",
    "yaml-ambiguous": "a plain value that YAML 1.1 reads differently from YAML 1.2 (yes, 062, 1_000, 12:30): quote or respell it",
    "schema": "a field has the wrong type, an unknown key, or a required key is missing",
    "name-duplicate": "two layers, experiments of a layer, or arms of an experiment share a name",
    "range-bounds": "a bucket range is reversed or outside 0-9999",
    "range-self-overlap": "two ranges of one experiment overlap",
    "traffic-overlap": "two experiments of one layer claim the same buckets",
    "weights-total": "arm weights do not add up to 100",
    "weight-precision": "a weight or percent has more than two decimals",
    "salt-reused": "a salt (defaults included) is used twice in the config",
    "param-two-layers": "one parameter is set by experiments of two layers",
    "unit-mismatch": "an experiment's unit type differs from its layer's",
    "holdout-duplicate": "two holdouts for one unit type",
    "override-unknown-arm": "an override names an arm the experiment does not have",
    "rollout-unknown-arm": "`rollout` names an arm the experiment does not have",
    "override-conflict": "a unit is forced into two running experiments of one layer",
    "condition-syntax": "an eligibility condition is neither a list of values nor a version comparison",
    "window-reversed": "an experiment ends before it starts",
}


def structural_problems(config: Config) -> list[Problem]:
    return [config.problem(rule, path, message) for rule, path, message in _findings(config)]


def _findings(config: Config) -> Iterator[tuple[str, tuple, str]]:
    yield from _duplicate_names(config)
    yield from _salts(config)
    yield from _holdouts(config)
    param_layers: dict[str, list[tuple[str, tuple]]] = defaultdict(list)
    for li, layer in enumerate(config.layers):
        owners: list[tuple[int, int, int]] = []  # (low, high, experiment index)
        forced_in: dict[str, str] = {}
        for ei, exp in enumerate(layer.experiments):
            at = ("layers", li, "experiments", ei)
            yield from _ranges(exp, at, owners, ei)
            yield from _weights(exp, at)
            yield from _conditions(exp, at)
            if exp.unit is not None and exp.unit != layer.unit:
                yield ("unit-mismatch", at + ("unit",),
                       f"experiment unit {exp.unit!r} differs from layer {layer.name!r} unit {layer.unit!r}; "
                       "move the experiment to a layer of that unit type")
            arm_names = [arm.name for arm in exp.arms]
            for unit, forced_arm in exp.overrides.items():
                if forced_arm not in arm_names:
                    yield ("override-unknown-arm", at + ("overrides", unit),
                           f"override for {shown(unit)} names arm {shown(forced_arm)}"
                           f"{did_you_mean(forced_arm, arm_names)}; the arms are {arm_names}")
                elif exp.status == "running":
                    other = forced_in.setdefault(unit, exp.name)
                    if other != exp.name:
                        yield ("override-conflict", at + ("overrides", unit),
                               f"unit {unit!r} is also forced into {other!r} of this layer; keep one override")
            if exp.rollout is not None and exp.rollout not in arm_names:
                yield ("rollout-unknown-arm", at + ("rollout",),
                       f"rollout names arm {shown(exp.rollout)}{did_you_mean(exp.rollout, arm_names)}; "
                       f"the arms are {arm_names}")
            if exp.start and exp.end and exp.end < exp.start:
                yield ("window-reversed", at + ("end",),
                       f"end {exp.end.isoformat()} is before start {exp.start.isoformat()}")
            for ai, arm in enumerate(exp.arms):
                for name in arm.params:
                    param_layers[name].append((layer.name, at + ("arms", ai, "params", name)))
        yield from _overlaps(layer, li, owners)
    for name, places in param_layers.items():
        setters = sorted({owner for owner, _ in places})
        if len(setters) > 1:
            first = places[0][0]
            for setter, path in places:
                if setter != first:
                    yield ("param-two-layers", path,
                           f"parameter {name!r} is set in layers {setters}; a parameter belongs to one layer, "
                           "or the experiments of those layers interact")
                    break


def _duplicate_names(config: Config) -> Iterator[tuple[str, tuple, str]]:
    seen: dict[str, int] = {}
    for li, layer in enumerate(config.layers):
        if layer.name in seen:
            file, line, _ = config.locate(("layers", seen[layer.name]))
            yield ("name-duplicate", ("layers", li, "name"),
                   f"layer {layer.name!r} is already defined at {file}:{line}; a layer lives in one file")
        seen.setdefault(layer.name, li)
        experiments: set[str] = set()
        for ei, exp in enumerate(layer.experiments):
            if exp.name in experiments:
                yield ("name-duplicate", ("layers", li, "experiments", ei, "name"),
                       f"experiment {exp.name!r} appears twice in layer {layer.name!r}")
            experiments.add(exp.name)
            arms: set[str] = set()
            for ai, arm in enumerate(exp.arms):
                if arm.name in arms:
                    yield ("name-duplicate", ("layers", li, "experiments", ei, "arms", ai, "name"),
                           f"arm {arm.name!r} appears twice in experiment {exp.name!r}")
                arms.add(arm.name)


def salt_uses(config: Config) -> Iterator[tuple[str, tuple, str]]:
    """Every salt in the config, defaults included: (salt, path, what uses it)."""
    for hi, holdout in enumerate(config.holdouts):
        yield holdout.salt, ("holdout", hi, "salt"), f"holdout for {holdout.unit!r}"
    for li, layer in enumerate(config.layers):
        path = ("layers", li, "salt") if layer.salt is not None else ("layers", li, "name")
        yield layer.effective_salt, path, f"layer {layer.name!r}"
        for ei, exp in enumerate(layer.experiments):
            at = ("layers", li, "experiments", ei)
            yield experiment_salt(layer, exp), at + ("salt" if exp.salt is not None else "name",), \
                f"experiment {layer.name}/{exp.name}"


def _salts(config: Config) -> Iterator[tuple[str, tuple, str]]:
    first: dict[str, tuple[tuple, str]] = {}
    for salt, path, user in salt_uses(config):
        if salt in first:
            earlier = first[salt][0]
            if path[-1] == earlier[-1] == "name" and len(path) == len(earlier):
                continue  # two default salts of the same kind collide only through a duplicate name, reported already
            file, line, _ = config.locate(earlier)
            yield ("salt-reused", path,
                   f"salt {salt!r} of {user} is already used by {first[salt][1]} ({file}:{line}); "
                   "shared salts correlate assignments: give each a salt of its own")
        else:
            first[salt] = (path, user)


def _holdouts(config: Config) -> Iterator[tuple[str, tuple, str]]:
    seen: set[str] = set()
    for hi, holdout in enumerate(config.holdouts):
        if holdout.unit in seen:
            yield ("holdout-duplicate", ("holdout", hi, "unit"),
                   f"a holdout for unit type {holdout.unit!r} is already defined; keep one")
        seen.add(holdout.unit)
        if hundredths(holdout.percent) is None:
            yield ("weight-precision", ("holdout", hi, "percent"),
                   f"percent {holdout.percent} has more than two decimals (buckets are 0.01 % wide)")


def _ranges(exp, at: tuple, owners: list, ei: int) -> Iterator[tuple[str, tuple, str]]:
    mine: list[tuple[int, int, int]] = []
    for ri, (text, (low, high)) in enumerate(zip(exp.buckets, exp.ranges)):
        path = at + ("buckets", ri)
        if low > high:
            yield ("range-bounds", path, f"range {text!r} is reversed; write {high}-{low}")
            continue
        if high >= BUCKETS:
            yield ("range-bounds", path, f"range {text!r} goes past bucket {BUCKETS - 1}")
            continue
        for olow, ohigh, ori in mine:
            if low <= ohigh and olow <= high:
                yield ("range-self-overlap", path,
                       f"range {text!r} overlaps {exp.buckets[ori]!r} of the same experiment "
                       f"(buckets {max(low, olow)}-{min(high, ohigh)}); merge them")
        mine.append((low, high, ri))
        owners.append((low, high, ei))


def _overlaps(layer, li: int, owners: list[tuple[int, int, int]]) -> Iterator[tuple[str, tuple, str]]:
    owners = sorted(owners)
    reported: set[tuple[int, int]] = set()
    for i, (low, high, ei) in enumerate(owners):
        for olow, ohigh, oei in owners[i + 1:]:
            if olow > high:
                break
            pair = (min(ei, oei), max(ei, oei))
            if ei == oei or pair in reported:
                continue
            reported.add(pair)
            later = max(ei, oei)
            earlier = min(ei, oei)
            yield ("traffic-overlap", ("layers", li, "experiments", later, "buckets"),
                   f"experiments {layer.experiments[earlier].name!r} and {layer.experiments[later].name!r} "
                   f"of layer {layer.name!r} both claim buckets {max(low, olow)}-{min(high, ohigh)}; "
                   "experiments of a layer must not share traffic")


def _weights(exp, at: tuple) -> Iterator[tuple[str, tuple, str]]:
    total = 0
    for ai, arm in enumerate(exp.arms):
        h = hundredths(arm.weight)
        if h is None:
            yield ("weight-precision", at + ("arms", ai, "weight"),
                   f"weight {arm.weight} of arm {arm.name!r} has more than two decimals (buckets are 0.01 % wide)")
            return
        total += h
    if total != 10_000:
        yield ("weights-total", at + ("arms",),
               f"arm weights of {exp.name!r} add up to {total / 100:g}, not 100")


def _conditions(exp, at: tuple) -> Iterator[tuple[str, tuple, str]]:
    for attr, condition in exp.eligible.items():
        if isinstance(condition, list):
            continue
        match = CONDITION_PATTERN.match(condition)
        if match is None or parse_version(match.group(2)) is None:
            yield ("condition-syntax", at + ("eligible", attr),
                   f"condition {shown(condition)} on {shown(attr)} is not a version comparison such as '>=7.2'; "
                   "to match values, write a list such as [ios, android]")
