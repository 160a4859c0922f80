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
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from pathlib import Path
from typing import Any

import numpy as np

from bucketing import BUCKETS, Config, Experiment, Layer, Problem, experiment_salt, load_config

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
    verdict: str = "ok"  # "blocked", "accepted", "warn" or "ok"
    reason: str | None = None
    finding: Problem | None = None

    @property
    def changed(self) -> bool:
        return self.presence != "both" or bool(self.causes or self.unknown)

    def to_dict(self) -> dict[str, Any]:
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
        }


@dataclass(frozen=True)
class ConfigDiff:
    """Every experiment of either version of a config, and what the change does to it."""

    changes: tuple[ExperimentChange, ...]

    @property
    def findings(self) -> list[Problem]:
        return [c.finding for c in self.changes if c.finding is not None]

    @property
    def blocked(self) -> int:
        """Running experiments whose units would move without an approval."""
        return sum(1 for c in self.changes if c.verdict == "blocked")

    def to_dict(self) -> dict[str, Any]:
        """The JSON output of `sortition diff --format json`, as Python values."""
        return {"experiments": [c.to_dict() for c in self.changes], "blocked": self.blocked}


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
                            presence="added", new_traffic=share, causes=("added",))


def _removed(old: Config, li: int, ei: int, new: Config) -> ExperimentChange:
    layer = old.layers[li]
    exp = layer.experiments[ei]
    share = traffic(placement(old, layer, exp))
    finding = None
    verdict = "ok"
    if exp.status == "running":
        verdict = "warn"
        new_layer = next((i for i, other in enumerate(new.layers) if other.name == layer.name), None)
        message = (f"running experiment {layer.name}/{exp.name} is removed: its units return to the default "
                   "experience with no record of when it stopped; set status: done first and remove it later")
        finding = (new.problem("running-removed", ("layers", new_layer, "experiments"), message, "warning")
                   if new_layer is not None else old.problem("running-removed", ("layers", li, "name"), message, "warning"))
    return ExperimentChange(layer=layer.name, experiment=exp.name, status=exp.status, old_status=exp.status,
                            presence="removed", kept=ZERO, switched=ZERO, left=Fraction(1), entered=ZERO,
                            old_traffic=share, causes=("removed",), verdict=verdict, finding=finding)


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
    at = ("layers", new_at[0], "experiments", new_at[1])
    verdict, finding = _verdict(new, at, old_exp, new_exp, switched, left, found, unknown)
    return ExperimentChange(layer=new_layer.name, experiment=new_exp.name, status=new_exp.status,
                            old_status=old_exp.status, presence="both", kept=kept, switched=switched, left=left,
                            entered=entered, old_traffic=old_traffic, new_traffic=new_traffic, exact=exact,
                            causes=tuple(found), unknown=tuple(unknown), moves=moves, verdict=verdict,
                            reason=new_exp.reassign_ok, finding=finding)


def _verdict(new: Config, at: tuple, old_exp: Experiment, new_exp: Experiment, switched: Fraction, left: Fraction,
             found: list[str], unknown: list[str]) -> tuple[str, Problem | None]:
    if new_exp.status != "running" or old_exp.status not in CONTINUING:
        return "ok", None
    what = ", ".join(found + unknown) or "no named cause"
    if switched > 0 or left > 0:
        parts = [f"{percent_text(share)} of its units would {verb}"
                 for share, verb in ((switched, "switch arm"), (left, "leave")) if share > 0]
        moved = f"{' and '.join(parts)} ({what})"
        if new_exp.reassign_ok:
            return "accepted", new.problem("reassign-accepted", at + ("reassign_ok",),
                f"{new_exp.name!r}: {moved}; accepted: {new_exp.reassign_ok}", "note")
        return "blocked", new.problem("reassign-running", at,
            f"running experiment {new_exp.name!r}: {moved}; its results would mix two designs. Undo the change, "
            "or set reassign_ok: \"<why>\" on the experiment if this is intended", "error")
    if unknown and not new_exp.reassign_ok:
        return "warn", new.problem("share-unknown", at + ("eligible" if "eligibility change" in unknown else "start",),
            f"running experiment {new_exp.name!r}: {', '.join(unknown)} may add or drop units, how many depends on "
            "unit attributes and days, not buckets; set reassign_ok: \"<why>\" once you have checked", "warning")
    return "ok", None


