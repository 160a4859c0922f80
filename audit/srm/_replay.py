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
           fallback: Config) -> tuple[ReplaySummary, list[ReplayUnit], list[ReplayUnit], list[str]]:
    """The replay's summary, the units replayed, those logged in another arm than the config gives, and notes.

    A unit whose record names no version among `configs` is replayed against `fallback`. A unit whose record
    lacks an attribute the experiment targets on is not replayed (a note says how many).
    """
    targeted = {version: _targeted(config, design) for version, config in [*configs.items(), (None, fallback)]}
    groups: dict[tuple[str, date], list[ReplayUnit]] = defaultdict(list)
    unmatched = 0
    unknowable: dict[str, int] = defaultdict(int)  # a targeted attribute the logs lack -> units not replayed for it
    for unit in units:
        known = unit.config in configs
        unmatched += not known
        version = unit.config if known and unit.config else fallback.version
        # A unit logged in an arm passed the targeting then; without the attribute in the logs, its arm cannot be
        # recomputed, and counting it as a mismatch would blame the config version for what the logs left out.
        lacking = [a for a in targeted[version if version in configs else None]
                   if a not in attributes or unit.attributes[attributes.index(a)] is None]
        if lacking:
            unknowable[lacking[0]] += 1
            continue
        groups[(version, unit.day)].append(unit)
    notes = []
    if unmatched and len(configs) > 1:
        notes.append(f"{design.experiment}: {unmatched} replayed units carry a config version not among the "
                     f"versions given; replayed against {fallback.version}")
    notes += [f"{design.experiment}: {count:,} units were not replayed: the config targets attribute {name!r}, "
              f"which their records do not carry (add it to the logged attributes, or map its column)"
              for name, count in unknowable.items()]
    units = [u for members in groups.values() for u in members]
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
    return ReplaySummary(len(units), len(mismatched), examples), units, [m for m, _ in mismatched], notes


def _targeted(config: Config, design: Design) -> list[str]:
    """The attributes the experiment's eligibility rules read in this config version."""
    return [key for layer in config.layers if layer.name == design.layer
            for exp in layer.experiments if exp.name == design.experiment for key in exp.eligible]


def segment_replay(segment: SegmentResult, units: Sequence[ReplayUnit], mismatched: Sequence[ReplayUnit],
                   attributes: Sequence[str]) -> tuple[int, int]:
    """(checked, mismatched) replayed units inside a segment."""
    positions = [attributes.index(n) for n in segment.by]
    wanted = list(segment.by.values())

    def inside(unit: ReplayUnit) -> bool:
        return [unit.attributes[p] if unit.attributes[p] is not None else NO_VALUE for p in positions] == wanted

    return sum(1 for u in units if inside(u)), sum(1 for u in mismatched if inside(u))
