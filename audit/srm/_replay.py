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


def replay(units: Sequence[ReplayUnit], design: Design, attributes: Sequence[str], configs: Mapping[str, Config],
           fallback: Config) -> tuple[ReplaySummary, list[ReplayUnit], list[str]]:
    """The replay's summary, the units logged in another arm than the config gives, and notes.

    A unit whose record names no version among `configs` is replayed against `fallback`.
    """
    groups: dict[tuple[str, date], list[ReplayUnit]] = defaultdict(list)
    unmatched = 0
    for unit in units:
        known = unit.config in configs
        unmatched += not known
        groups[(unit.config if known and unit.config else fallback.version, unit.day)].append(unit)
    notes = []
    if unmatched and len(configs) > 1:
        notes.append(f"{design.experiment}: {unmatched} replayed units carry a config version not among the "
                     f"versions given; replayed against {fallback.version}")
    mismatched: list[tuple[ReplayUnit, str | None]] = []
    for (version, day), members in groups.items():
        assigner = Assigner(configs.get(version, fallback))
        unit_type = design.unit_type or members[0].unit_type or "unit"
        ids = [m.unit for m in members]
        unit_attrs = [{a: v for a, v in zip(attributes, m.attributes) if v is not None} for m in members]
        for member, got in zip(members, assigner.assign_many(unit_type, ids, unit_attrs, day=day)):
            placed = got.layers.get(design.layer)
            computed = placed.arm if placed is not None and placed.experiment == design.experiment else None
            if computed != design.arms[member.arm]:
                mismatched.append((member, computed))
    examples = tuple({"unit": m.unit, "logged": design.arms[m.arm], "computed": computed, "config": m.config}
                     for m, computed in mismatched[:EXAMPLES])
    return ReplaySummary(len(units), len(mismatched), examples), [m for m, _ in mismatched], notes


def segment_replay(segment: SegmentResult, units: Sequence[ReplayUnit], mismatched: Sequence[ReplayUnit],
                   attributes: Sequence[str]) -> tuple[int, int]:
    """(checked, mismatched) replayed units inside a segment."""
    positions = [attributes.index(n) for n in segment.by]
    wanted = list(segment.by.values())

    def inside(unit: ReplayUnit) -> bool:
        return [unit.attributes[p] if unit.attributes[p] is not None else NO_VALUE for p in positions] == wanted

    return sum(1 for u in units if inside(u)), sum(1 for u in mismatched if inside(u))
