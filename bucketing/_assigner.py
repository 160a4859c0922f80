"""The assigner: units in, experiments and arms out, in the contract's order.

`Assigner.assign` reads one immutable `Plan` reference per call, so a reload
(which swaps that reference) never gives a result that mixes two configs.
It never raises because of a unit's data: a unit it cannot place gets the
default experience and a counter in `Assigner.errors` goes up.
"""

from __future__ import annotations

import threading
from bisect import bisect_right
from collections import Counter, OrderedDict
from datetime import date
from pathlib import Path
from time import time
from typing import Any, Iterable, Iterator, Mapping, NamedTuple

import mmh3

from ._exposure import RECORD_FIELDS, ExposureSink, utc_timestamp
from ._hashing import BUCKETS, unit_key
from ._loader import Config, load_config
from ._plan import EPOCH_ORDINAL, Plan

_hash = mmh3.hash
_NO_ATTRS: Mapping[str, Any] = {}
_NOBODY: frozenset[str] = frozenset()


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
        self._exposer: _Exposer | None = exposer
        self._exposed: set[str] | None = None

    @property
    def config(self) -> str | None:
        """Version id of the config that made this assignment."""
        return self._plan.version if self._plan is not None else None

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
        layer = self._plan.param_owner.get(name) if self._plan is not None else None
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
        if self._exposer is None:
            return
        names = [layer] if layer is not None else list(self._slots)
        for name in names:
            got = self.layers.get(name)
            if got is None or got.experiment is None:
                continue
            if self._exposed is None:
                self._exposed = set()
            if name in self._exposed:
                continue
            self._exposed.add(name)
            self._exposer.emit(self, name, got)

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


class _Exposer:
    """Turns exposures into records for the sink; optional de-duplication per process."""

    def __init__(self, assigner: "Assigner", sink: ExposureSink, dedupe: bool, dedupe_limit: int) -> None:
        self.assigner = assigner
        self.sink = sink
        self.dedupe = dedupe
        self.dedupe_limit = dedupe_limit
        self._seen: OrderedDict[tuple, None] = OrderedDict()
        self._lock = threading.Lock()

    def emit(self, assignment: Assignment, layer: str, got: LayerAssignment) -> None:
        if self.dedupe:
            key = (got.unit_type, got.unit, layer, got.experiment, got.arm)
            with self._lock:
                if key in self._seen:
                    return
                self._seen[key] = None
                if len(self._seen) > self.dedupe_limit:
                    self._seen.popitem(last=False)
        record = {
            "ts": utc_timestamp(),
            "unit": got.unit,
            "unit_type": got.unit_type,
            "layer": layer,
            "experiment": got.experiment,
            "arm": got.arm,
            "config": assignment.config,
            "forced": got.forced,
        }
        for attr, value in assignment.attrs.items():
            if attr not in RECORD_FIELDS:
                record[attr] = value
        try:
            self.sink.write(record)
        except Exception:
            self.assigner.errors["sink"] += 1


class Assigner:
    """Assigns units to experiments and arms under one config, swappable at run time.

        assigner = Assigner("configs/", sink=JsonLinesSink("exposures.jsonl"))
        got = assigner.assign({"learner": "L-1042"}, {"country": "NL", "app_version": "7.4"})
        minutes = got.param("lesson_minutes", 10)   # records the exposure
    """

    def __init__(self, config: Config | str | Path, *, sink: ExposureSink | None = None,
                 dedupe: bool = False, dedupe_limit: int = 1_000_000) -> None:
        self._plan = Plan(config if isinstance(config, Config) else load_config(config))
        self._reload_lock = threading.Lock()
        self.errors: Counter[str] = Counter()
        self._exposer = _Exposer(self, sink, dedupe, dedupe_limit) if sink is not None else None

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

    def assign(self, units: Mapping[str, str | int], attrs: Mapping[str, Any] | None = None, *,
               day: date | None = None) -> Assignment:
        """Assign a unit: `units` maps unit type to id, e.g. {"learner": "L-1", "device": "D-9"}."""
        plan = self._plan
        try:
            today = None if day is None else day.toordinal() - EPOCH_ORDINAL
            attrs = attrs if attrs is not None else _NO_ATTRS
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

    def assign_many(self, unit_type: str, ids: Iterable[str | int],
                    attrs: Iterable[Mapping[str, Any] | None] | None = None, *,
                    day: date | None = None) -> Iterator[Assignment]:
        """Assign many units of one type (offline backfills): exactly what `assign` gives one by one.

        The day is read once for the whole batch (today, UTC, unless given);
        each unit gets the config serving when it is assigned, as with
        `assign`; reading a parameter of these results records no exposure.
        """
        when = day if day is not None else date.fromordinal(int(time() // 86400) + EPOCH_ORDINAL)
        attr_iter = iter(attrs) if attrs is not None else None
        for unit in ids:
            got = self.assign({unit_type: unit}, next(attr_iter) if attr_iter is not None else None, day=when)
            got._exposer = None
            yield got
