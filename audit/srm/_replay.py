"""The arm replay: each sampled unit's arm recomputed with the SDK, under the config version its record names."""

from __future__ import annotations

from collections import defaultdict
from datetime import date
from typing import Mapping, Sequence

from bucketing import Assigner, Config

from ._designs import Design
from ._engine import NO_VALUE, ReplayUnit
from ._results import ReplaySummary, SegmentResult

EXAMPLES = 5


def sdk_arms(units: Sequence[ReplayUnit], design: Design, attributes: Sequence[str], configs: Mapping[str, Config],
             fallback: Config) -> list[str | None]:
    """Each unit's arm as the SDK gives it, under the config version its record names (`fallback` when unknown)."""
    groups: dict[tuple[str, date], list[int]] = defaultdict(list)
    for position, unit in enumerate(units):
        version = unit.config if unit.config in configs and unit.config else fallback.version
        groups[(version, unit.day)].append(position)
    computed: list[str | None] = [None] * len(units)
    for (version, day), positions in groups.items():
        assigner = Assigner(configs.get(version, fallback))
        unit_type = design.unit_type or units[positions[0]].unit_type or "unit"
        ids = [units[p].unit for p in positions]
        unit_attrs = [{a: v for a, v in zip(attributes, units[p].attributes) if v is not None} for p in positions]
        for position, got in zip(positions, assigner.assign_many(unit_type, ids, unit_attrs, day=day)):
            placed = got.layers.get(design.layer)
            computed[position] = placed.arm if placed is not None and placed.experiment == design.experiment else None
    return computed


def replay(replayed: Sequence[tuple[ReplayUnit, str | None]], design: Design, configs: Mapping[str, Config],
           fallback: Config) -> tuple[ReplaySummary, list[ReplayUnit], list[str]]:
    """The replay's summary, the units logged in another arm than the SDK gives (`replayed`: unit, SDK's arm), notes."""
    unmatched = sum(1 for unit, _ in replayed if unit.config not in configs)
    notes = []
    if unmatched and len(configs) > 1:
        notes.append(f"{design.experiment}: {unmatched} replayed units carry a config version not among the "
                     f"versions given; replayed against {fallback.version}")
    mismatched = [(unit, computed) for unit, computed in replayed if computed != design.arms[unit.arm]]
    examples = tuple({"unit": m.unit, "logged": design.arms[m.arm], "computed": computed, "config": m.config}
                     for m, computed in mismatched[:EXAMPLES])
    return ReplaySummary(len(replayed), len(mismatched), examples), [m for m, _ in mismatched], notes


def segment_replay(segment: SegmentResult, units: Sequence[ReplayUnit], mismatched: Sequence[ReplayUnit],
                   attributes: Sequence[str]) -> tuple[int, int]:
    """(checked, mismatched) replayed units inside a segment."""
    positions = [attributes.index(n) for n in segment.by]
    wanted = list(segment.by.values())

    def inside(unit: ReplayUnit) -> bool:
        return [unit.attributes[p] if unit.attributes[p] is not None else NO_VALUE for p in positions] == wanted

    return sum(1 for u in units if inside(u)), sum(1 for u in mismatched if inside(u))
