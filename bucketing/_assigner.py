"""The assigner: units in, experiments and arms out, in the contract's order.

`Assigner.assign` reads one immutable `Plan` reference per call, so a reload
(which swaps that reference) never gives a result that mixes two configs.
It never raises because of a unit's data: a unit it cannot place gets the
default experience and a counter in `Assigner.errors` goes up. A unit type
that no layer or holdout uses is counted too, and logged once per name.
`Assigner.explain` says, layer by layer, which step decided.
"""

from __future__ import annotations

import logging
import threading
from bisect import bisect_right
from collections import Counter
from datetime import date
from pathlib import Path
from time import time
from typing import Any, Iterable, Iterator, Mapping, NamedTuple

import mmh3

from ._explain import Explanation, explain_unit, unexplained
from ._exposure import ExposureSink, Exposer, pseudonym_key
from ._hashing import BUCKETS, unit_key
from ._loader import Config, load_config
from ._plan import EPOCH_ORDINAL, Plan

_hash = mmh3.hash
_NO_ATTRS: Mapping[str, Any] = {}
_NOBODY: frozenset[str] = frozenset()
_RAN_OUT: Any = object()
# Unknown unit types are logged once each, up to this many names (a caller passing
# arbitrary keys must not grow memory or flood the log); all of them are counted.
UNKNOWN_UNIT_TYPES_LOGGED = 100

logger = logging.getLogger("bucketing.assigner")


class LayerAssignment(NamedTuple):
    """What one layer gives a unit. `experiment` and `arm` are None for the default experience."""

    unit_type: str
    unit: str
    experiment: str | None
    arm: str | None
    bucket: int | None
    forced: bool


class Assignment:
    """A unit's experiments and arms in every layer of its unit types, and its parameters.

    Reading a parameter with `param` records an exposure for the layer that
    owns it (once per Assignment); `expose` records one explicitly. The
    per-layer view (`layers`) and the merged `params` are built on first use,
    which keeps `assign` itself cheap.
    """

    __slots__ = ("units", "attrs", "held_out", "_plan", "_slots", "_layers", "_params", "_exposer", "_exposed")

    def __init__(self, units, attrs, held_out, plan, slots, exposer) -> None:
        self.units: dict[str, str] = units
        self.attrs: Mapping[str, Any] = attrs
        self.held_out: frozenset[str] = held_out
        self._plan: Plan | None = plan
        self._slots: dict[str, tuple] = slots  # layer -> (unit_type, unit, experiment plan, arm index, bucket, forced)
        self._layers: dict[str, LayerAssignment] | None = None
        self._params: dict[str, Any] | None = None
        self._exposer: Exposer | None = exposer
        self._exposed: set[str] | None = None

    @property
    def config_version(self) -> str | None:
        """Version id of the config that made this assignment (the `config` field of its exposure records)."""
        return self._plan.version if self._plan is not None else None

    @property
    def config(self) -> str | None:
        """Deprecated name of `config_version`, kept for callers written before it."""
        return self.config_version

    @property
    def layers(self) -> dict[str, LayerAssignment]:
        """Layer name -> what that layer gives the unit, for every layer of the unit's types."""
        if self._layers is None:
            self._layers = {
                layer: LayerAssignment(unit_type, unit, exp.name if exp else None,
                                       exp.arms[index] if exp else None, bucket, forced)
                for layer, (unit_type, unit, exp, index, bucket, forced) in self._slots.items()
            }
        return self._layers

    @property
    def params(self) -> dict[str, Any]:
        """Every parameter the unit's arms set, merged across layers (a parameter belongs to one layer)."""
        if self._params is None:
            merged: dict[str, Any] = {}
            for _, _, exp, index, _, _ in self._slots.values():
                if exp is not None:
                    merged.update(exp.arm_params[index])
            self._params = merged
        return self._params

    @property
    def holdout(self) -> bool:
        """True when the unit is in the long-term holdout of any of its unit types."""
        return bool(self.held_out)

    def param(self, name: str, default: Any = None) -> Any:
        """The parameter's value for this unit, or `default`; records the exposure of its layer."""
        if self._plan is None or not isinstance(name, str):
            return default
        layer = self._plan.param_owner.get(name)
        slot = self._slots.get(layer) if layer is not None else None
        if slot is None or slot[2] is None:
            return default
        values = slot[2].arm_params[slot[3]]
        if name not in values:
            return default
        if self._exposer is not None:
            self.expose(layer)
        return values[name]

    def expose(self, layer: str | None = None) -> None:
        """Record an exposure for `layer`, or for every layer that gave the unit an experiment."""
        if self._exposer is None or self._plan is None:
            return
        names = [layer] if layer is not None else list(self._slots)
        for name in names:
            got = self.layers.get(name) if isinstance(name, str) else None
            if got is None or got.experiment is None or got.arm is None:
                continue
            if self._exposed is None:
                self._exposed = set()
            if name in self._exposed:
                continue
            self._exposed.add(name)
            self._exposer.emit(got.unit_type, got.unit, name, got.experiment, got.arm, self._plan.version,
                               got.forced, self.attrs, self._plan.targeted_attributes)

    def arm(self, layer: str) -> str | None:
        """The unit's arm in `layer`, or None."""
        slot = self._slots.get(layer)
        return slot[2].arms[slot[3]] if slot is not None and slot[2] is not None else None

    def to_dict(self) -> dict[str, Any]:
        """The JSON shape of `sortition assign`."""
        unit = next(iter(self.units.values())) if len(self.units) == 1 else dict(self.units)
        return {
            "unit": unit,
            "holdout": self.holdout,
            "layers": {
                name: {"experiment": la.experiment, "arm": la.arm, "bucket": la.bucket, "forced": la.forced}
                for name, la in self.layers.items()
            },
            "params": dict(self.params),
        }

    def __repr__(self) -> str:
        arms = ", ".join(f"{n}={la.experiment}/{la.arm}" for n, la in self.layers.items() if la.experiment)
        return f"Assignment({self.units}, holdout={self.holdout}, {arms or 'default'})"


class Assigner:
    """Assigns units to experiments and arms under one config, swappable at run time.

        assigner = Assigner("configs/", sink=JsonLinesSink("exposures.jsonl"))
        got = assigner.assign({"learner": "L-1042"}, {"country": "NL", "app_version": "7.4"})
        minutes = got.param("lesson_minutes", 10)   # records the exposure

    Exposure records carry the attributes the config targets on (its
    `eligible` keys) and those named in `record_attributes`, no others. With
    `pseudonym_key_env`, the name of an environment variable holding a
    secret key, records carry HMAC-SHA256 pseudonyms instead of unit ids.
    `dedupe=True` records each unit's arm once per process, remembering the
    `dedupe_limit` most recently seen (unit, layer, arm) keys.
    """

    def __init__(self, config: Config | str | Path, *, sink: ExposureSink | None = None,
                 record_attributes: Iterable[str] = (), pseudonym_key_env: str | None = None,
                 dedupe: bool = False, dedupe_limit: int = 100_000) -> None:
        self._plan = Plan(config if isinstance(config, Config) else load_config(config))
        self._reload_lock = threading.Lock()
        self.errors: Counter[str] = Counter()
        self._unknown_unit_types: set[Any] = set()
        self._unknown_lock = threading.Lock()
        key = pseudonym_key(pseudonym_key_env) if pseudonym_key_env is not None else None
        named = frozenset([record_attributes] if isinstance(record_attributes, str) else record_attributes)
        self._exposer = Exposer(sink, self.errors, record_attributes=named,
                                pseudonym_key=key, dedupe=dedupe, dedupe_limit=dedupe_limit) if sink is not None else None

    @property
    def config(self) -> Config:
        return self._plan.config

    @property
    def version(self) -> str:
        return self._plan.version

    def reload(self, config: Config | str | Path) -> str:
        """Swap to a new config atomically; returns its version id.

        If the new config fails to load or validate, ConfigError is raised
        and the old config keeps serving.
        """
        new = Plan(config if isinstance(config, Config) else load_config(config))
        with self._reload_lock:
            self._plan = new
        return new.version

    def _attributes(self, attrs: Any) -> Mapping[str, Any]:
        """`attrs` when it is a mapping; otherwise no attributes, counted under "attributes"."""
        if attrs is None:
            return _NO_ATTRS
        if isinstance(attrs, Mapping):
            return attrs
        self.errors["attributes"] += 1
        return _NO_ATTRS

    def _unknown_unit_type(self, unit_type: Any, plan: Plan) -> None:
        self.errors["unknown_unit_type"] += 1
        with self._unknown_lock:
            if unit_type in self._unknown_unit_types or len(self._unknown_unit_types) >= UNKNOWN_UNIT_TYPES_LOGGED:
                return
            self._unknown_unit_types.add(unit_type)
        logger.warning("unit type %r is used by no layer or holdout of config %s (its unit types: %s); such units "
                       "get the default experience, counted in errors['unknown_unit_type']",
                       unit_type, plan.version, ", ".join(sorted(plan.hot)) or "none")

    def assign(self, units: Mapping[str, str | int], attrs: Mapping[str, Any] | None = None, *,
               day: date | None = None) -> Assignment:
        """Assign a unit: `units` maps unit type to id, e.g. {"learner": "L-1", "device": "D-9"}."""
        plan = self._plan
        try:
            today = None if day is None else day.toordinal() - EPOCH_ORDINAL
            if attrs is None:
                attrs = _NO_ATTRS
            elif type(attrs) is not dict:
                attrs = self._attributes(attrs)
            ids: dict[str, str] = {}
            slots: dict[str, tuple] = {}
            held = _NOBODY
            for unit_type, uid in units.items():
                if type(uid) is not str or not uid.isascii():
                    try:
                        uid = unit_key(uid)
                    except (TypeError, ValueError):
                        self.errors["unit_id"] += 1
                        continue
                ids[unit_type] = uid
                hot = plan.hot.get(unit_type)
                if hot is None:
                    self._unknown_unit_type(unit_type, plan)
                    continue
                holdout_prefix, holdout_below, type_layers = hot
                out = holdout_prefix is not None and _hash(holdout_prefix + uid, 0, False) % BUCKETS < holdout_below
                if out:
                    held = held | {unit_type}
                for name, prefix, live, forced_units in type_layers:
                    bucket = _hash(prefix + uid, 0, False) % BUCKETS
                    if forced_units:
                        forced = forced_units.get(uid)
                        if forced is not None:
                            exp, index = forced
                            slots[name] = (unit_type, uid, exp, index, bucket, True)
                            continue
                    exp = None if out else live[bucket]
                    if exp is not None and (not exp.gated or exp.admits(attrs, today, self.errors)):
                        index = bisect_right(exp.thresholds, _hash(exp.prefix + uid, 0, False) % BUCKETS)
                        slots[name] = (unit_type, uid, exp, index, bucket, False)
                    else:
                        slots[name] = (unit_type, uid, None, 0, bucket, False)
            return Assignment(ids, attrs, held, plan, slots, self._exposer)
        except Exception:
            self.errors["unit"] += 1
            return Assignment({}, _NO_ATTRS, _NOBODY, plan, {}, None)

    def explain(self, units: Mapping[str, str | int], attrs: Mapping[str, Any] | None = None, *,
                day: date | None = None) -> Explanation:
        """Why `assign` gives these units what it gives: per layer, the step that decided, as data.

        Never raises and counts nothing in `errors`: what `assign` would count
        (an unknown unit type, an unreadable id, attributes that are not a
        mapping) is said in the explanation instead.
        """
        plan = self._plan
        when = day if day is not None else date.fromordinal(int(time() // 86400) + EPOCH_ORDINAL)
        try:
            return explain_unit(plan, units, attrs, when)
        except Exception as exc:
            return unexplained(plan, when, f"could not explain: {type(exc).__name__}: {exc}")

    def assign_many(self, unit_type: str, ids: Iterable[str | int],
                    attrs: Iterable[Mapping[str, Any] | None] | None = None, *,
                    day: date | None = None) -> Iterator[Assignment]:
        """Assign many units of one type (offline backfills): exactly what `assign` gives one by one.

        The day is read once for the whole batch (today, UTC, unless given);
        each unit gets the config serving when it is assigned, as with
        `assign`; reading a parameter of these results records no exposure.
        When `attrs` runs out before `ids`, the remaining units get no
        attributes and each counts under "attributes_ran_out".
        """
        when = day if day is not None else date.fromordinal(int(time() // 86400) + EPOCH_ORDINAL)
        try:
            attr_iter = iter(attrs) if attrs is not None else None
        except TypeError:
            self.errors["attributes"] += 1
            attr_iter = None
        for unit in ids:
            unit_attrs = None
            if attr_iter is not None:
                unit_attrs = next(attr_iter, _RAN_OUT)
                if unit_attrs is _RAN_OUT:
                    self.errors["attributes_ran_out"] += 1
                    unit_attrs = None
            got = self.assign({unit_type: unit}, unit_attrs, day=when)
            got._exposer = None
            yield got
