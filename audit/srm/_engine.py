"""The counting-engine interface: exposure records in, small tables out.

An engine reads the records (files, or an in-memory table it understands)
and reduces them to one row per unit and experiment; the audit then asks it
for small tables: units per arm and any grouping (day of first exposure,
config version, segment attributes), records per unit, and a sample of
units to replay. Only Python values cross this interface (no
engine types), so statistics, diagnosis and rendering never know which
engine counted. `audit/srm/_duckdb.py` is the default engine.
"""

from __future__ import annotations

import importlib
from datetime import date
from typing import Any, Callable, Mapping, NamedTuple, Optional, Protocol, Sequence

from bucketing import Config

from .._errors import AuditError
from ._designs import Design
from ._results import Malformed

Progress = Callable[[str, float], None]
NO_VALUE = "(none)"  # the segment value of units without the attribute
FIRST_DAY = "(first day)"  # a key of `grouped_units`: the day (a date) of the unit's first exposure
CONFIG_VERSION = "(config)"  # a key of `grouped_units`: the record's `config` at first exposure (None if absent)
Window = tuple[Optional[date], Optional[date]]  # first and last day of records to count, both included; None: open
Segment = Mapping[str, str]  # attribute -> value (NO_VALUE for units without the attribute)
ArmCounts = list[int]  # units per arm, in the design's arm order


class CensusRow(NamedTuple):
    """Records of one (problem, layer, experiment, arm, outside the dates) group, as logged."""

    problem: str | None  # the kind of a malformed record, None for usable ones
    layer: str | None
    experiment: str | None
    arm: str | None
    outside: bool
    records: int
    repeats: int  # records that repeat another one exactly (same unit, arm and time)
    epoch_times: bool  # some `ts` was an epoch number


class UnitSummary(NamedTuple):
    """Units of an experiment left out of its tests."""

    multi_arm: int  # seen in more than one arm
    forced: int  # forced into their arm (and in one arm only)
    multi_arm_examples: list[tuple[str, int, int]]  # (unit, lowest arm index, highest arm index)
    moved: int = 0  # in several arms, each with config versions of its own (counted at first exposure)


class ReplayUnit(NamedTuple):
    """A unit of an experiment as first exposed: what the SDK needs to recompute its arm."""

    unit: str
    arm: int
    day: date
    config: str | None  # the config version the record names
    unit_type: str | None
    attributes: tuple[str | None, ...]  # in the order of `UnitTables.attributes`


class UnitTables(Protocol):
    """What an engine made of the records: asked for small tables, one question at a time."""

    sources: list[str]  # the files read (or a label for an in-memory table)
    notes: list[str]  # how the sources were read, where the reading had to guess or skip
    unreadable: list[tuple[str, str]]  # (file, why) of the files skipped because they cannot be read at all
    attributes: tuple[str, ...]  # the unit attributes kept, as asked
    layer_logged: bool  # whether some source has the `layer` field

    def other_columns(self) -> list[str]:
        """Columns of the sources that are not fields of the exposure record (candidate segments)."""
        ...

    def census(self, designs: Sequence[Design], window: Window = (None, None)) -> list[CensusRow]:
        """The one pass over the records; `designs` give the date windows (records outside are only counted).

        Usable records dated outside `window` are not read at all (as if not in the logs), so each unit
        is taken at its first exposure within the window.
        """
        ...

    def epoch_notes(self) -> list[str]:
        """Which sources had epoch numbers as `ts`, read in which unit."""
        ...

    def malformed(self, counts_by_kind: Mapping[str, int]) -> Malformed:
        """Malformed records, counted by kind (census counts plus what the reader rejected), a few located."""
        ...

    def place_units(self, designs: Sequence[Design]) -> None:
        """Reduce to one row per unit and experiment (index into `designs`): its arm at first exposure."""
        ...

    def unit_summary(self, experiment: int, examples: int) -> UnitSummary:
        ...

    def grouped_units(self, experiment: int, keys: Sequence[str], within: Segment | None = None,
                      without: Segment | None = None) -> dict[tuple, ArmCounts]:
        """Tested units per value of `keys` and arm: attribute names (NO_VALUE where absent), FIRST_DAY or
        CONFIG_VERSION (this one kept only when `read` was asked to keep versions)."""
        ...

    def records_per_unit(self, experiment: int) -> dict[int, ArmCounts]:
        """Tested units per number of records they logged (in the experiment's known arms, inside its dates) and arm."""
        ...

    def replay_arms(self, experiment: int, limit: int, design: Design, configs: Mapping[str, Config],
                    fallback: Config) -> list[tuple[ReplayUnit, str | None]]:
        """Up to `limit` tested units (all when 0), the same ones on every engine and run: smallest MD5 of the id
        first. Each comes with the arm the SDK gives it under the config version its record names (`fallback`
        when that version is not among `configs`), None when the SDK gives it none of the design's arms."""
        ...

    def close(self) -> None:
        ...


class CountingEngine(Protocol):
    """Reads exposure records into `UnitTables`."""

    name: str

    def read(self, source: Sequence[str] | Any, columns: Mapping[str, str] | None, attributes: Sequence[str], *,
             keep_versions: bool, log_format: str | None = None, progress: Progress | None = None,
             defaults: Mapping[str, str] | None = None) -> UnitTables:
        """`source`: paths, globs and directories, or an in-memory table; `columns`: record field -> log column.

        `defaults` gives a value to record fields that no source has (a log of one experiment audited
        against an expected split needs no `experiment`).

        `keep_versions` keeps each unit's `config` and `unit_type` at first exposure, for the replay.
        """
        ...


# name -> "module:class", imported when asked for (pyspark only with the spark extra)
ENGINES = {"duckdb": "audit.srm._duckdb:DuckDBEngine", "spark": "audit.srm._spark:SparkEngine"}


def engine_named(name: str | CountingEngine, **options: Any) -> CountingEngine:
    """The engine of that name, made with `options` (or the engine itself when one is given)."""
    if not isinstance(name, str):
        return name
    if name not in ENGINES:
        raise AuditError(f"unknown counting engine {name!r}; the engines are {', '.join(ENGINES)}")
    module, _, cls = ENGINES[name].partition(":")
    engine: CountingEngine = getattr(importlib.import_module(module), cls)(**options)
    return engine
