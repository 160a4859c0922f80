"""`diff_configs`: what a config change does to the units of each experiment.

A unit's place in an experiment is decided by three buckets, each a hash
under its own salt: the holdout bucket, the layer bucket and the arm bucket.
For one experiment, the old and the new config each put conditions on those
buckets (not held out, inside the ranges, arm thresholds). Where both
versions use the same salt, the conditions meet on the same bucket and the
shares are counts of buckets, exact. Where a salt changes, the old and new
buckets of a unit are independent hashes, so the shares are products of
bucket counts: exact in expectation, not unit by unit. Eligibility and dates
cannot be counted from buckets; a change there is named with an unknown share.

Two things let a running experiment's units move. An approval
(`reassign_ok`) covers only the change that adds it or changes it: one
carried over unchanged from the old version approves nothing and is
reported as stale. A staged rollout (`rollout: <arm>`) may move units into
its released arm without approval; a unit moving anywhere else needs one.
Each finding points at the lines that changed, the first as its place and
all of them as related places.
"""

from __future__ import annotations

import dataclasses
from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path
from typing import Any

import numpy as np

from bucketing import (BUCKETS, Approval, Config, Experiment, Layer, Problem, experiment_salt, format_path,
                       load_config)

CONTINUING = ("running", "paused")
ZERO = Fraction(0)


@dataclass(frozen=True)
class Placement:
    """The bucket conditions one config version puts on a unit of one experiment."""

    unit_type: str
    holdout_salt: str | None
    holdout_cut: int  # units whose holdout bucket is below this are held out
    layer_salt: str
    ranges: tuple[tuple[int, int], ...]
    salt: str
    arms: tuple[tuple[str, int], ...]  # (arm name, width in buckets), in declared order

    def range_mask(self) -> np.ndarray:
        mask = np.zeros(BUCKETS, dtype=bool)
        for low, high in self.ranges:
            if low <= high:
                mask[low:min(high, BUCKETS - 1) + 1] = True
        return mask

    def arm_labels(self) -> np.ndarray:
        """Arm index of each arm bucket; -1 where the weights leave buckets without an arm."""
        labels = np.full(BUCKETS, -1, dtype=np.int64)
        edge = 0
        for index, (_, width) in enumerate(self.arms):
            labels[edge:min(edge + max(width, 0), BUCKETS)] = index
            edge += max(width, 0)
        return labels


def placement(config: Config, layer: Layer, exp: Experiment) -> Placement:
    holdout = next((h for h in config.holdouts if h.unit == layer.unit), None)
    return Placement(
        unit_type=layer.unit,
        holdout_salt=holdout.salt if holdout else None,
        holdout_cut=holdout.width if holdout else 0,
        layer_salt=layer.effective_salt,
        ranges=exp.ranges,
        salt=experiment_salt(layer, exp),
        arms=tuple((arm.name, arm.width) for arm in exp.arms),
    )


@dataclass(frozen=True)
class Shares:
    """Shares of all units of the unit type; `moves[(old arm, new arm)]` for units in both versions."""

    old: Fraction
    new: Fraction
    moves: dict[tuple[str, str], Fraction]
    exact: bool

    @property
    def both(self) -> Fraction:
        return sum(self.moves.values(), ZERO)

    @property
    def kept(self) -> Fraction:
        return sum((share for (a, b), share in self.moves.items() if a == b), ZERO)


def _conditions(p: Placement, masks: dict[str, np.ndarray]) -> None:
    """AND into `masks` (salt -> allowed buckets) what a unit needs to be in `p`'s population."""
    if p.holdout_salt is not None and p.holdout_cut > 0:
        masks.setdefault(p.holdout_salt, np.ones(BUCKETS, dtype=bool))[:p.holdout_cut] = False
    layer = masks.setdefault(p.layer_salt, np.ones(BUCKETS, dtype=bool))
    layer &= p.range_mask()
    masks.setdefault(p.salt, np.ones(BUCKETS, dtype=bool))


def _share(masks: dict[str, np.ndarray], skip: tuple[str, ...] = ()) -> Fraction:
    """Probability that every salt's bucket is allowed, salts being independent hashes."""
    share = Fraction(1)
    for salt, mask in masks.items():
        if salt not in skip:
            share *= Fraction(int(mask.sum()), BUCKETS)
    return share


def traffic(p: Placement) -> Fraction:
    """Share of all units of the unit type that the placement puts in the experiment."""
    masks: dict[str, np.ndarray] = {}
    _conditions(p, masks)
    return _share(masks)


def population_shares(old: Placement, new: Placement) -> Shares:
    """Exact shares (of all units of the type) in the old, the new, and both, by arm pair."""
    masks: dict[str, np.ndarray] = {}
    _conditions(old, masks)
    _conditions(new, masks)
    old_labels, new_labels = old.arm_labels(), new.arm_labels()
    rest = _share(masks, skip=(old.salt, new.salt))
    k_old, k_new = len(old.arms), len(new.arms)
    if old.salt == new.salt:
        allowed = masks[old.salt] & (old_labels >= 0) & (new_labels >= 0)
        pairs = np.bincount(old_labels[allowed] * k_new + new_labels[allowed], minlength=k_old * k_new)
        counts = pairs.reshape(k_old, k_new)
        scale = Fraction(1, BUCKETS)
    else:
        per_old = np.bincount(old_labels[masks[old.salt] & (old_labels >= 0)], minlength=k_old)
        per_new = np.bincount(new_labels[masks[new.salt] & (new_labels >= 0)], minlength=k_new)
        counts = np.outer(per_old, per_new)
        scale = Fraction(1, BUCKETS * BUCKETS)
    moves: dict[tuple[str, str], Fraction] = {}
    for i, (old_arm, _) in enumerate(old.arms):
        for j, (new_arm, _) in enumerate(new.arms):
            if counts[i, j]:
                key = (old_arm, new_arm)
                moves[key] = moves.get(key, ZERO) + rest * scale * int(counts[i, j])
    return Shares(traffic(old), traffic(new), moves, _exact(old, new))


def _exact(old: Placement, new: Placement) -> bool:
    """True when no share rests on two independent hashes of the same unit (a salt that changed)."""
    holdout_same = old.holdout_salt == new.holdout_salt or not old.holdout_cut or not new.holdout_cut
    full = ((0, BUCKETS - 1),)
    layer_same = old.layer_salt == new.layer_salt or old.ranges == full or new.ranges == full
    arms_same = old.salt == new.salt or len(old.arms) == 1 or len(new.arms) == 1
    return holdout_same and layer_same and arms_same


def _number(share: Fraction | None) -> float | None:
    return None if share is None else float(share)


def percent_text(share: Fraction | None) -> str:
    """A share as the messages and reports print it: '12.50 %', or '-' when unknown."""
    return "-" if share is None else f"{float(share) * 100:.2f} %"


@dataclass(frozen=True)
class RolloutShare:
    """How far a staged rollout has gone: its released arm's share of the experiment, and of all units of the type.

    `of_units` counts held-out units and units outside the experiment's ranges
    in the whole, never in the arm; eligibility is not counted (it depends on
    attributes, not buckets).
    """

    arm: str
    of_experiment: Fraction
    of_units: Fraction
    unit: str  # the unit type

    def to_dict(self) -> dict[str, Any]:
        return {"arm": self.arm, "experiment_share": float(self.of_experiment), "layer_share": float(self.of_units)}


def rollout_share(config: Config, layer: Layer, exp: Experiment) -> RolloutShare | None:
    """The released arm's current share, or None when the experiment is no rollout (or names no arm of its own)."""
    arm = next((arm for arm in exp.arms if arm.name == exp.rollout), None)
    if arm is None:
        return None
    of_experiment = Fraction(arm.width, BUCKETS)
    return RolloutShare(arm.name, of_experiment, traffic(placement(config, layer, exp)) * of_experiment, layer.unit)


@dataclass(frozen=True)
class ChangedLine:
    """A line of the new config that differs from the old version, and what changed there."""

    file: str
    line: int
    column: int
    path: str
    what: str
    counted: bool  # a change whose effect bucket arithmetic counts (not eligibility, dates, notes)
    loc: tuple = ()  # the place in its file as keys and indexes, as `Problem.loc`

    def to_dict(self) -> dict[str, Any]:
        return {"file": self.file, "line": self.line, "column": self.column, "path": self.path, "what": self.what}


@dataclass(frozen=True)
class DiffFinding(Problem):
    """A finding of `diff`: placed on the first line that changed, with every changed line as a related place."""

    related: tuple[ChangedLine, ...] = ()

    def to_dict(self) -> dict[str, Any]:
        return {"rule": self.rule, "severity": self.severity, "file": self.file, "line": self.line,
                "column": self.column, "path": self.path, "message": self.message,
                "related": [place.to_dict() for place in self.related]}


APPROVAL_STATES = ("new", "changed", "stale")


@dataclass(frozen=True)
class ApprovalState:
    """An experiment's `reassign_ok` in the new version, and whether this change added it, changed it, or kept it."""

    why: str
    moves_up_to: Fraction | None  # share of the experiment's units the approval lets move; None: no limit given
    state: str  # one of APPROVAL_STATES

    @property
    def fresh(self) -> bool:
        """Whether it approves this change: only an approval this change adds or changes does."""
        return self.state != "stale"

    def to_dict(self) -> dict[str, Any]:
        limit = None if self.moves_up_to is None else float(self.moves_up_to * 100)
        return {"why": self.why, "moves_up_to": limit, "state": self.state}


def approval_state(old_exp: Experiment | None, new_exp: Experiment) -> ApprovalState | None:
    approval = new_exp.reassign_ok
    if approval is None:
        return None
    if old_exp is None or old_exp.reassign_ok is None:
        state = "new"
    else:
        state = "stale" if old_exp.reassign_ok == approval else "changed"
    if isinstance(approval, Approval):
        return ApprovalState(approval.why, Fraction(round(approval.moves_up_to * 100), BUCKETS), state)
    return ApprovalState(approval, None, state)


@dataclass(frozen=True, kw_only=True)
class ExperimentChange:
    """What a change does to one experiment: shares of its units kept, switched, left and entered, and why."""

    layer: str
    experiment: str
    status: str
    old_status: str | None
    presence: str  # "both", "added" or "removed"
    kept: Fraction | None = None  # shares of the units the experiment held before
    switched: Fraction | None = None
    left: Fraction | None = None
    entered: Fraction | None = None
    old_traffic: Fraction | None = None  # shares of all units of the unit type
    new_traffic: Fraction | None = None
    exact: bool = True
    causes: tuple[str, ...] = ()
    unknown: tuple[str, ...] = ()  # causes whose share cannot be counted from buckets
    moves: tuple[tuple[str, str, Fraction], ...] = ()  # (old arm, new arm, share of old units) for switches
    verdict: str = "ok"  # "blocked", "accepted", "ramp", "warn" or "ok"
    approval: ApprovalState | None = None
    rollout_before: RolloutShare | None = None
    rollout_after: RolloutShare | None = None
    changed_lines: tuple[ChangedLine, ...] = ()
    findings: tuple[Problem, ...] = ()

    @property
    def changed(self) -> bool:
        return self.presence != "both" or bool(self.causes or self.unknown)

    @property
    def reason(self) -> str | None:
        """The approval's reason, as the new version writes it."""
        return self.approval.why if self.approval else None

    def to_dict(self) -> dict[str, Any]:
        shown = self.rollout_after or self.rollout_before
        rollout = None if shown is None else {
            "arm": shown.arm,
            "old": self.rollout_before.to_dict() if self.rollout_before else None,
            "new": self.rollout_after.to_dict() if self.rollout_after else None,
        }
        return {
            "layer": self.layer,
            "experiment": self.experiment,
            "status": self.status,
            "old_status": self.old_status,
            "presence": self.presence,
            "kept_share": _number(self.kept),
            "switched_share": _number(self.switched),
            "left_share": _number(self.left),
            "entered_share": _number(self.entered),
            "old_traffic": _number(self.old_traffic),
            "new_traffic": _number(self.new_traffic),
            "exact": self.exact,
            "cause": "; ".join(self.causes + tuple(f"{c} (share unknown)" for c in self.unknown)),
            "causes": list(self.causes),
            "unknown_share_causes": list(self.unknown),
            "moves": [{"from": a, "to": b, "share": float(s)} for a, b, s in self.moves],
            "verdict": self.verdict,
            "reassign_ok": self.reason,
            "approval": self.approval.to_dict() if self.approval else None,
            "rollout": rollout,
            "changed_lines": [place.to_dict() for place in self.changed_lines],
        }


def finding_record(finding: Problem) -> dict[str, Any]:
    """A finding of `diff` as its JSON output writes it (with related places when it has them)."""
    if isinstance(finding, DiffFinding):
        return finding.to_dict()
    return {"rule": finding.rule, "severity": finding.severity, "file": finding.file, "line": finding.line,
            "column": finding.column, "path": finding.path, "message": finding.message, "related": []}


@dataclass(frozen=True)
class ConfigDiff:
    """Every experiment of either version of a config, and what the change does to it."""

    changes: tuple[ExperimentChange, ...]

    @property
    def findings(self) -> list[Problem]:
        return [finding for change in self.changes for finding in change.findings]

    @property
    def blocked(self) -> int:
        """Running experiments whose units would move without an approval."""
        return sum(1 for c in self.changes if c.verdict == "blocked")

    def to_dict(self) -> dict[str, Any]:
        """The JSON output of `sortition diff --format json`, as Python values."""
        return {"experiments": [c.to_dict() for c in self.changes], "blocked": self.blocked,
                "findings": [finding_record(f) for f in self.findings]}


def _range_cause(old: Placement, new: Placement) -> str | None:
    before, after = old.range_mask(), new.range_mask()
    if np.array_equal(before, after):
        return None
    if not (before & ~after).any():
        return "range grow"
    if not (after & ~before).any():
        return "range shrink"
    return "range move"


def _arm_cause(old: Placement, new: Placement) -> str | None:
    if old.arms == new.arms:
        return None
    if sorted(name for name, _ in old.arms) != sorted(name for name, _ in new.arms):
        return "arm set change"
    if dict(old.arms) != dict(new.arms):
        ramp = _ramp_arm(old, new)
        return f"weight change (units only move into {ramp!r})" if ramp else "weight change"
    return "arm reorder"


def _ramp_arm(old: Placement, new: Placement) -> str | None:
    """The arm every switching unit moves into, when there is one: a monotone ramp of a rollout."""
    if old.salt != new.salt:
        return None
    before, after = old.arm_labels(), new.arm_labels()
    names_before = np.array([name for name, _ in old.arms] + [""])[before]
    names_after = np.array([name for name, _ in new.arms] + [""])[after]
    targets = set(names_after[names_before != names_after].tolist())
    return targets.pop() if len(targets) == 1 and "" not in targets else None


def causes(old_layer: Layer, old_exp: Experiment, old: Placement,
           new_layer: Layer, new_exp: Experiment, new: Placement) -> tuple[list[str], list[str]]:
    """Named causes of a change, and those whose share cannot be counted from buckets."""
    counted = [
        (old_layer.name != new_layer.name, f"layer move ({old_layer.name} → {new_layer.name})"),
        (old.layer_salt != new.layer_salt, "layer salt change"),
        (old.salt != new.salt, "salt change"),
        (True, _arm_cause(old, new)),
        (True, _range_cause(old, new)),
        ((old.holdout_salt, old.holdout_cut) != (new.holdout_salt, new.holdout_cut), "holdout change"),
        (old_exp.status != new_exp.status, f"status change ({old_exp.status} → {new_exp.status})"),
        (old_exp.overrides != new_exp.overrides, "override change (named units only)"),
    ]
    uncounted = [
        (old_exp.eligible != new_exp.eligible, "eligibility change"),
        ((old_exp.start, old_exp.end) != (new_exp.start, new_exp.end), "date change"),
    ]
    return ([cause for changed, cause in counted if changed and cause],
            [cause for changed, cause in uncounted if changed])


def _arm_lines(old_exp: Experiment, new_exp: Experiment) -> list[tuple[tuple, str]]:
    """(path inside the experiment, what changed) for each arm added, re-weighted, moved in order or removed."""
    old_arms = {arm.name: (index, arm) for index, arm in enumerate(old_exp.arms)}
    kept_order = [arm.name for arm in old_exp.arms if arm.name in {a.name for a in new_exp.arms}]
    new_order = [arm.name for arm in new_exp.arms if arm.name in old_arms]
    lines: list[tuple[tuple, str]] = []
    for ai, arm in enumerate(new_exp.arms):
        if arm.name not in old_arms:
            lines.append((("arms", ai, "name"), f"arm {arm.name!r} added"))
            continue
        before = old_arms[arm.name][1]
        if before.weight != arm.weight:
            lines.append((("arms", ai, "weight"), f"weight of {arm.name!r}: {before.weight:g} → {arm.weight:g}"))
        if kept_order.index(arm.name) != new_order.index(arm.name):
            lines.append((("arms", ai, "name"), f"arm {arm.name!r} moved from place {kept_order.index(arm.name) + 1} "
                                                 f"to {new_order.index(arm.name) + 1}"))
    gone = [name for name in old_arms if name not in {a.name for a in new_exp.arms}]
    if gone:
        lines.append((("arms",), f"arm(s) {', '.join(map(repr, gone))} removed"))
    return lines


def _range_lines(old_exp: Experiment, new_exp: Experiment) -> list[tuple[tuple, str]]:
    before = set(old_exp.ranges)
    lines: list[tuple[tuple, str]] = [(("buckets", i), f"range {text.strip()} added")
                                      for i, (text, r) in enumerate(zip(new_exp.buckets, new_exp.ranges))
                                      if r not in before]
    gone = [text.strip() for text, r in zip(old_exp.buckets, old_exp.ranges) if r not in set(new_exp.ranges)]
    if gone:
        lines.append((("buckets",), f"range(s) {', '.join(gone)} removed"))
    return lines


def changed_lines(old: Config, old_at: tuple[int, int], new: Config, new_at: tuple[int, int]) -> tuple[ChangedLine, ...]:
    """The lines of the new version where this experiment's change was written, in the order of the file."""
    old_layer, new_layer = old.layers[old_at[0]], new.layers[new_at[0]]
    old_exp, new_exp = old_layer.experiments[old_at[1]], new_layer.experiments[new_at[1]]
    li = new_at[0]
    at = ("layers", li, "experiments", new_at[1])
    counted: list[tuple[tuple, str]] = []
    if old_layer.name != new_layer.name:
        counted.append((at + ("name",), f"moved from layer {old_layer.name!r}"))
    if old_layer.unit != new_layer.unit:
        counted.append((("layers", li, "unit"), f"unit type {old_layer.unit!r} → {new_layer.unit!r}"))
    if old_layer.effective_salt != new_layer.effective_salt:
        counted.append((("layers", li, "salt" if new_layer.salt is not None else "name"),
                        f"layer salt {old_layer.effective_salt!r} → {new_layer.effective_salt!r}"))
    if old_exp.salt != new_exp.salt:  # a default salt that follows the layer's is placed on the layer's line
        counted.append((at + ("salt" if new_exp.salt is not None else "name",),
                        f"salt {experiment_salt(old_layer, old_exp)!r} → {experiment_salt(new_layer, new_exp)!r}"))
    counted += [(at + path, what) for path, what in _arm_lines(old_exp, new_exp) + _range_lines(old_exp, new_exp)]
    counted += _holdout_lines(old, new, old_layer.unit, new_layer.unit, at)
    if old_exp.status != new_exp.status:
        counted.append((at + ("status",), f"status {old_exp.status} → {new_exp.status}"))
    other: list[tuple[tuple, str]] = []
    if old_exp.overrides != new_exp.overrides:
        other.append((at + ("overrides",), "overrides changed"))
    for key in sorted(set(old_exp.eligible) | set(new_exp.eligible)):
        if old_exp.eligible.get(key) != new_exp.eligible.get(key):
            other.append((at + (("eligible", key) if key in new_exp.eligible else ("eligible",)),
                          f"eligibility on {key!r} changed"))
    for key in ("start", "end"):
        if getattr(old_exp, key) != getattr(new_exp, key):
            other.append((at + (key,), f"{key} date changed"))
    if old_exp.rollout != new_exp.rollout:
        other.append((at + ("rollout" if new_exp.rollout else "name",), f"rollout {old_exp.rollout} → {new_exp.rollout}"))
    if new_exp.reassign_ok is not None and old_exp.reassign_ok != new_exp.reassign_ok:
        other.append((at + ("reassign_ok",), "approval added or changed"))
    places = [_place(new, path, what, True) for path, what in counted]
    places += [_place(new, path, what, False) for path, what in other]
    by_line: dict[tuple[str, int], ChangedLine] = {}
    for place in places:  # two changes on one line (a flow list of ranges) are one place
        same = by_line.get((place.file, place.line))
        by_line[(place.file, place.line)] = place if same is None else dataclasses.replace(
            same, what=f"{same.what}; {place.what}", counted=same.counted or place.counted)
    return tuple(sorted(by_line.values(), key=lambda p: (p.file, p.line, p.column)))


def _holdout_lines(old: Config, new: Config, old_unit: str, new_unit: str, at: tuple) -> list[tuple[tuple, str]]:
    before = next((h for h in old.holdouts if h.unit == old_unit), None)
    index, after = next(((i, h) for i, h in enumerate(new.holdouts) if h.unit == new_unit), (None, None))
    if before == after:
        return []
    if index is None or after is None:
        return [(at + ("name",), "holdout removed")]
    lines = []
    if before is None or before.salt != after.salt:
        lines.append((("holdout", index, "salt"), f"holdout salt → {after.salt!r}"))
    if before is None or before.percent != after.percent:
        lines.append((("holdout", index, "percent"), f"holdout percent → {after.percent:g}"))
    return lines


def _place(config: Config, path: tuple, what: str, counted: bool) -> ChangedLine:
    document, local = config.origin(path)
    line, column = document.locate(local)
    return ChangedLine(document.file, line, column, format_path(local), what, counted, tuple(local))


def _finding(config: Config, rule: str, places: tuple[ChangedLine, ...], fallback: tuple, message: str,
             severity: str) -> DiffFinding:
    """A finding on the first of `places` (or on `fallback` when there is none), all of them related."""
    first = places[0] if places else _place(config, fallback, "", False)
    return DiffFinding(rule, severity, first.file, first.line, first.column, first.path, message, first.loc, places)


def _index(config: Config | None) -> dict[tuple[str, str], tuple[int, int]]:
    if config is None:
        return {}
    return {(layer.name, exp.name): (li, ei)
            for li, layer in enumerate(config.layers) for ei, exp in enumerate(layer.experiments)}


def _moved_layers(old_index: dict, new_index: dict) -> dict[tuple[str, str], tuple[str, str]]:
    """New key -> old key for experiments that left one layer for another under the same, unique name."""
    gone = {key for key in old_index if key not in new_index}
    came = {key for key in new_index if key not in old_index}
    old_by_name: dict[str, list] = {}
    for key in gone:
        old_by_name.setdefault(key[1], []).append(key)
    new_by_name: dict[str, list] = {}
    for key in came:
        new_by_name.setdefault(key[1], []).append(key)
    return {new_keys[0]: old_by_name[name][0] for name, new_keys in new_by_name.items()
            if len(new_keys) == 1 and len(old_by_name.get(name, [])) == 1}


def diff_configs(old: Config | str | Path | None, new: Config | str | Path) -> ConfigDiff:
    """What changing config `old` (None: no config yet) into `new` does to every experiment of either.

    Each may be a loaded `Config` or the path of a config file or directory.
    The result lists every experiment of either version, with its shares,
    causes and verdict, in the new config's order.
    """
    if old is not None and not isinstance(old, Config):
        old = load_config(old)
    if not isinstance(new, Config):
        new = load_config(new)
    old_index, new_index = _index(old), _index(new)
    moved = _moved_layers(old_index, new_index)
    changes = []
    for key, (li, ei) in new_index.items():
        old_key = key if key in old_index else moved.get(key)
        if old_key is None:
            changes.append(_added(new, li, ei))
        else:
            assert old is not None  # an experiment with an old key exists in the old config
            changes.append(_compared(old, old_index[old_key], new, (li, ei)))
    matched_old = set(moved.values())
    for key, (li, ei) in old_index.items():
        if old is not None and key not in new_index and key not in matched_old:
            changes.append(_removed(old, li, ei, new))
    return ConfigDiff(tuple(changes))


def _added(new: Config, li: int, ei: int) -> ExperimentChange:
    layer = new.layers[li]
    exp = layer.experiments[ei]
    share = traffic(placement(new, layer, exp))
    return ExperimentChange(layer=layer.name, experiment=exp.name, status=exp.status, old_status=None,
                            presence="added", new_traffic=share, causes=("added",),
                            approval=approval_state(None, exp), rollout_after=rollout_share(new, layer, exp))


def _removed(old: Config, li: int, ei: int, new: Config) -> ExperimentChange:
    layer = old.layers[li]
    exp = layer.experiments[ei]
    share = traffic(placement(old, layer, exp))
    findings: tuple[Problem, ...] = ()
    verdict = "ok"
    if exp.status == "running":
        verdict = "warn"
        new_layer = next((i for i, other in enumerate(new.layers) if other.name == layer.name), None)
        message = (f"running experiment {layer.name}/{exp.name} is removed: its units return to the default "
                   "experience with no record of when it stopped; set status: done first and remove it later")
        findings = (new.problem("running-removed", ("layers", new_layer, "experiments"), message, "warning")
                    if new_layer is not None else old.problem("running-removed", ("layers", li, "name"), message, "warning"),)
    return ExperimentChange(layer=layer.name, experiment=exp.name, status=exp.status, old_status=exp.status,
                            presence="removed", kept=ZERO, switched=ZERO, left=Fraction(1), entered=ZERO,
                            old_traffic=share, causes=("removed",), verdict=verdict, findings=findings,
                            rollout_before=rollout_share(old, layer, exp))


def _compared(old: Config, old_at: tuple[int, int], new: Config, new_at: tuple[int, int]) -> ExperimentChange:
    old_layer = old.layers[old_at[0]]
    old_exp = old_layer.experiments[old_at[1]]
    new_layer = new.layers[new_at[0]]
    new_exp = new_layer.experiments[new_at[1]]
    before, after = placement(old, old_layer, old_exp), placement(new, new_layer, new_exp)
    found, unknown = causes(old_layer, old_exp, before, new_layer, new_exp, after)
    moves: tuple[tuple[str, str, Fraction], ...]
    if before.unit_type != after.unit_type:
        found.insert(0, f"unit type change ({before.unit_type} → {after.unit_type})")
        old_traffic, new_traffic = traffic(before), traffic(after)
        kept, switched, left, entered, exact, moves = ZERO, ZERO, Fraction(1), None, True, ()
    else:
        shares = population_shares(before, after)
        old_traffic, new_traffic, exact = shares.old, shares.new, shares.exact
        kept = shares.kept / shares.old
        switched = (shares.both - shares.kept) / shares.old
        left = (shares.old - shares.both) / shares.old
        entered = (shares.new - shares.both) / shares.old
        moves = tuple((a, b, share / shares.old) for (a, b), share in sorted(shares.moves.items()) if a != b)
    places = changed_lines(old, old_at, new, new_at)
    approval = approval_state(old_exp, new_exp)
    at = ("layers", new_at[0], "experiments", new_at[1])
    motion = Motion(switched, left, moves, found, unknown)
    verdict, finding = _verdict(new, at, new_exp, old_exp.status in CONTINUING, motion, approval, places)
    findings = tuple(f for f in (finding, _stale(new, at, new_exp, approval)) if f is not None)
    return ExperimentChange(layer=new_layer.name, experiment=new_exp.name, status=new_exp.status,
                            old_status=old_exp.status, presence="both", kept=kept, switched=switched, left=left,
                            entered=entered, old_traffic=old_traffic, new_traffic=new_traffic, exact=exact,
                            causes=tuple(found), unknown=tuple(unknown), moves=moves, verdict=verdict,
                            approval=approval, rollout_before=rollout_share(old, old_layer, old_exp),
                            rollout_after=rollout_share(new, new_layer, new_exp), changed_lines=places,
                            findings=findings)


@dataclass(frozen=True)
class Motion:
    """How a change moves one experiment's old units: shares that switch arm or leave, by arm pair, and why."""

    switched: Fraction
    left: Fraction
    moves: tuple[tuple[str, str, Fraction], ...]
    causes: list[str]
    unknown: list[str]

    @property
    def moved(self) -> Fraction:
        return self.switched + self.left

    def outside(self, arm: str | None) -> Fraction:
        """The share that moves anywhere but into `arm` (all of it when no arm is given)."""
        into = sum((share for _, to, share in self.moves if arm is not None and to == arm), ZERO)
        return self.moved - into

    def text(self) -> str:
        parts = [f"{percent_text(share)} of its units would {verb}"
                 for share, verb in ((self.switched, "switch arm"), (self.left, "leave")) if share > 0]
        return f"{' and '.join(parts)} ({', '.join(self.causes + self.unknown) or 'no named cause'})"


def _verdict(new: Config, at: tuple, exp: Experiment, was_live: bool, motion: Motion,
             approval: ApprovalState | None, places: tuple[ChangedLine, ...]) -> tuple[str, Problem | None]:
    """The verdict on a running experiment whose units may move, and the finding that says so."""
    if exp.status != "running" or not was_live:
        return "ok", None
    fresh = approval is not None and approval.fresh
    released = exp.rollout if any(arm.name == exp.rollout for arm in exp.arms) else None
    outside = motion.outside(released)
    if outside > 0:
        counted_first = tuple(p for p in places if p.counted) + tuple(p for p in places if not p.counted)
        if approval is not None and fresh and (approval.moves_up_to is None or motion.moved <= approval.moves_up_to):
            return "accepted", _finding(new, "reassign-accepted", counted_first, at + ("reassign_ok",),
                f"{exp.name!r}: {motion.text()}; accepted: {approval.why}", "note")
        out_of_arm = (f", {percent_text(outside)} of them not into the released arm {released!r}"
                      if released is not None else "")
        return "blocked", _finding(new, "reassign-running", counted_first, at,
            f"running experiment {exp.name!r}: {motion.text()}{out_of_arm}; its results would mix two designs. "
            f"{_unblock(approval, motion)}", "error")
    if motion.unknown and not fresh:
        return "warn", _finding(new, "share-unknown", tuple(p for p in places if not p.counted),
            at + ("eligible" if "eligibility change" in motion.unknown else "start",),
            f"running experiment {exp.name!r}: {', '.join(motion.unknown)} may add or drop units, how many "
            "depends on unit attributes and days, not buckets; add or change reassign_ok: \"<why>\" in this change "
            "once you have checked", "warning")
    return ("ramp" if motion.moved > 0 else "ok"), None


def _unblock(approval: ApprovalState | None, motion: Motion) -> str:
    """What lets such a change through, given the approval the experiment already carries."""
    if approval is not None and approval.state == "stale":
        return ("Its reassign_ok is carried over unchanged from the old version and approves nothing now: undo the "
                "change, or write a new reassign_ok that says why this change may move units")
    if approval is not None and approval.moves_up_to is not None:
        return (f"Its reassign_ok lets at most {percent_text(approval.moves_up_to)} move, and this change moves "
                f"{percent_text(motion.moved)}: undo the change, or raise moves_up_to if this is intended")
    return "Undo the change, or set reassign_ok: \"<why>\" on the experiment in this change if it is intended"


def _stale(new: Config, at: tuple, exp: Experiment, approval: ApprovalState | None) -> Problem | None:
    if approval is None or approval.fresh:
        return None
    return _finding(new, "reassign-stale", (), at + ("reassign_ok",),
        f"{exp.name!r}: reassign_ok ({approval.why!r}) is carried over unchanged from the old version, so it approves "
        "nothing in this change (an approval covers only the change that adds or changes it); remove it", "warning")
