"""The assigner: units in, experiments and arms out, in the contract's order.

`Assigner.assign` reads one immutable `Plan` reference per call, so a reload
(which swaps that reference) never gives a result that mixes two configs.
It never raises because of a unit's data: a unit it cannot place gets the
default experience and a counter in `Assigner.errors` goes up.
"""

from __future__ import annotations

import threading
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


class LayerAssignment(NamedTuple):
    """What one layer gives a unit. `experiment` and `arm` are None for the default experience."""

    unit_type: str
    unit: str
    experiment: str | None
    arm: str | None
    bucket: int | None
    forced: bool


class Assignment:
    """A unit's experiments and arms in every layer of its unit types, and the merged parameters.

    Reading a parameter with `param` records an exposure for the layer that
    owns it (once per Assignment); `expose` records one explicitly.
    """

    __slots__ = ("units", "attrs", "held_out", "layers", "params", "config", "_exposer", "_exposed")

    def __init__(self, units, attrs, held_out, layers, params, config, exposer) -> None:
        self.units: dict[str, str] = units
        self.attrs: dict[str, Any] = attrs
        self.held_out: frozenset[str] = held_out
        self.layers: dict[str, LayerAssignment] = layers
        self.params: dict[str, Any] = params
        self.config: str = config
        self._exposer: _Exposer | None = exposer
        self._exposed: set[str] | None = None

    @property
    def holdout(self) -> bool:
        """True when the unit is in the long-term holdout of any of its unit types."""
        return bool(self.held_out)

    def param(self, name: str, default: Any = None) -> Any:
        """The parameter's value for this unit, or `default`; records the exposure of its layer."""
        if name not in self.params:
            return default
        if self._exposer is not None:
            layer = self._exposer.plan_owner(name)
            if layer is not None:
                self.expose(layer)
        return self.params[name]

    def expose(self, layer: str | None = None) -> None:
        """Record an exposure for `layer`, or for every layer that gave the unit an experiment."""
        if self._exposer is None:
            return
        names = [layer] if layer is not None else list(self.layers)
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
        got = self.layers.get(layer)
        return got.arm if got is not None else None

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

    def plan_owner(self, name: str) -> str | None:
        return self.assigner._plan.param_owner.get(name)

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
        for key, value in assignment.attrs.items():
            if key not in RECORD_FIELDS:
                record[key] = value
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
            return self._assign(plan, units, attrs, None if day is None else day.toordinal() - EPOCH_ORDINAL)
        except Exception:
            self.errors["unit"] += 1
            return Assignment({}, {}, frozenset(), {}, {}, plan.version, None)

    def assign_many(self, unit_type: str, ids: Iterable[str | int],
                    attrs: Iterable[Mapping[str, Any] | None] | None = None, *,
                    day: date | None = None) -> Iterator[Assignment]:
        """Assign many units of one type under one config version (offline backfills).

        Gives exactly what `assign` gives one by one; the plan and the day are
        read once for the whole batch, and no exposures are recorded.
        """
        plan = self._plan
        today = (day.toordinal() - EPOCH_ORDINAL) if day is not None else int(time() // 86400)
        attr_iter = iter(attrs) if attrs is not None else None
        for unit in ids:
            unit_attrs = next(attr_iter) if attr_iter is not None else None
            try:
                yield self._assign(plan, {unit_type: unit}, unit_attrs, today, expose=False)
            except Exception:
                self.errors["unit"] += 1
                yield Assignment({}, {}, frozenset(), {}, {}, plan.version, None)

    def _assign(self, plan: Plan, units: Mapping[str, str | int], attrs: Mapping[str, Any] | None,
                today: int | None, expose: bool = True) -> Assignment:
        attrs = dict(attrs) if attrs else {}
        ids: dict[str, str] = {}
        layers: dict[str, LayerAssignment] = {}
        params: dict[str, Any] = {}
        held: list[str] = []
        errors = self.errors
        for unit_type, raw in units.items():
            try:
                uid = unit_key(raw)
            except TypeError:
                errors["unit_id"] += 1
                continue
            ids[unit_type] = uid
            type_layers = plan.layers_by_type.get(unit_type)
            if not type_layers:
                continue
            holdout = plan.holdouts.get(unit_type)
            out = holdout is not None and _hash(holdout[0] + uid, 0, False) % BUCKETS < holdout[1]
            if out:
                held.append(unit_type)
            for layer in type_layers:
                bucket = _hash(layer.prefix + uid, 0, False) % BUCKETS
                forced = layer.forced.get(uid) if layer.forced else None
                if forced is not None:
                    exp, index = forced
                    layers[layer.name] = LayerAssignment(unit_type, uid, exp.name, exp.arms[index], bucket, True)
                    params.update(exp.arm_params[index])
                    continue
                exp = None if out else layer.table[bucket]
                if exp is not None and exp.running:
                    if exp.windowed:
                        if today is None:
                            today = int(time() // 86400)
                        if (exp.first_day is not None and today < exp.first_day) or \
                                (exp.last_day is not None and today > exp.last_day):
                            exp = None
                    if exp is not None and exp.conditions:
                        for condition in exp.conditions:
                            if not condition.holds(attrs, errors):
                                exp = None
                                break
                    if exp is not None:
                        arm_bucket = _hash(exp.prefix + uid, 0, False) % BUCKETS
                        index = 0
                        for edge in exp.thresholds:
                            if arm_bucket < edge:
                                break
                            index += 1
                        layers[layer.name] = LayerAssignment(unit_type, uid, exp.name, exp.arms[index], bucket, False)
                        params.update(exp.arm_params[index])
                        continue
                layers[layer.name] = LayerAssignment(unit_type, uid, None, None, bucket, False)
        return Assignment(ids, attrs, frozenset(held), layers, params, plan.version,
                          self._exposer if expose else None)
