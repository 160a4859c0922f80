"""The DuckDB counting engine: the default implementation of `_engine.CountingEngine`.

One pass over the records reduces them to one row per unit and logged arm
(`unit_arms`: records, exact repeats, first exposure and the attributes
then); a second, small aggregate gives one row per unit and experiment
(`unit_rows`). Every small table the audit asks for is a GROUP BY on that
much smaller table.
"""

from __future__ import annotations

from typing import Any, Mapping, Sequence

from bucketing import Config

from . import _sql
from ._designs import Design
from ._engine import (
    CONFIG_VERSION, FIRST_DAY, NO_VALUE, ArmCounts, CensusRow, Progress, ReplayUnit, Segment, UnitSummary, Window,
)
from ._files import resolve_files
from ._malformed import malformed_records
from ._replay import sdk_arms
from ._results import Malformed
from ._scan import LogScan
from ._sql import FieldNames

VERSION_COLUMNS = ["config", "unit_type"]


class DuckDBEngine:
    name = "duckdb"

    def read(self, source: Sequence[str] | Any, columns: Mapping[str, str] | None, attributes: Sequence[str], *,
             keep_versions: bool, log_format: str | None = None, progress: Progress | None = None,
             defaults: Mapping[str, str] | None = None) -> DuckDBUnitTables:
        names = FieldNames.of(columns, attributes, defaults)
        if _is_paths(source):
            scan = LogScan(resolve_files(source, log_format), names, progress=progress)
        else:
            scan = LogScan([], names, table=source, progress=progress)
        return DuckDBUnitTables(scan, keep_versions)


def _is_paths(source: Any) -> bool:
    return isinstance(source, (list, tuple)) and all(isinstance(s, str) or hasattr(s, "__fspath__") for s in source)


class DuckDBUnitTables:
    """The unit tables of one audit, in one DuckDB connection."""

    def __init__(self, scan: LogScan, keep_versions: bool) -> None:
        self.scan = scan
        self.names = scan.names
        self.sources = scan.sources
        self.notes = scan.notes
        self.attributes = scan.names.attributes
        self.layer_logged = "layer" in scan.present
        self.kept = (VERSION_COLUMNS if keep_versions else []) + [self.names.attribute_column(a)
                                                                  for a in self.attributes]

    def other_columns(self) -> list[str]:
        return self.scan.other_columns()

    def census(self, designs: Sequence[Design], window: Window = (None, None)) -> list[CensusRow]:
        outside = _sql.outside_case(designs, self.layer_logged)
        self.scan.query(_sql.unit_arms(outside, self.kept, self.scan.times_as_text, window), "reading records")
        return [CensusRow(*row) for row in self.scan.query(_sql.CENSUS, "counting records")]

    def epoch_notes(self) -> list[str]:
        return self.scan.epoch_notes()

    def malformed(self, counts_by_kind: Mapping[str, int]) -> Malformed:
        return malformed_records(self.scan, counts_by_kind)

    def place_units(self, designs: Sequence[Design]) -> None:
        self.scan.query(_sql.unit_rows(designs, self.layer_logged, self.kept), "counting units")
        self.arms = [len(d.arms) for d in designs]

    def _where(self, within: Segment | None, without: Segment | None) -> str:
        where = _sql.segment_where(within or {}, self.names)
        return f"{where} AND NOT ({_sql.segment_where(without, self.names)})" if without else where

    def unit_summary(self, experiment: int, examples: int) -> UnitSummary:
        (multi, forced), = self.scan.query(f"""
            SELECT count(*) FILTER (WHERE multi), count(*) FILTER (WHERE forced AND NOT multi)
            FROM unit_rows WHERE exp = {int(experiment)}""")
        rows = self.scan.query(f"""
            SELECT unit, arm_low, arm_high FROM unit_rows WHERE exp = {int(experiment)} AND multi
            ORDER BY unit LIMIT {int(examples)}""")
        return UnitSummary(multi, forced, [tuple(row) for row in rows])

    def grouped_units(self, experiment: int, keys: Sequence[str], within: Segment | None = None,
                      without: Segment | None = None) -> dict[tuple, ArmCounts]:
        columns = [self._key(key) for key in keys]
        grouped: dict[tuple, ArmCounts] = {}
        for row in self.scan.query(f"""
                SELECT {", ".join([*columns, "arm", "count(*)"])} FROM unit_rows
                WHERE {_sql.tested_units(experiment, self._where(within, without))} GROUP BY ALL""", "counting units"):
            grouped.setdefault(tuple(row[:len(keys)]), [0] * self.arms[experiment])[row[len(keys)]] = row[-1]
        return grouped

    def _key(self, key: str) -> str:
        if key == FIRST_DAY:
            return "CAST(first_ts AS DATE)"
        if key == CONFIG_VERSION:
            return "config" if "config" in self.kept else "NULL::VARCHAR"
        return f"coalesce({self.names.attribute_column(key)}, {_sql.text(NO_VALUE)})"

    def records_per_unit(self, experiment: int) -> dict[int, ArmCounts]:
        histogram: dict[int, ArmCounts] = {}
        for records, arm, units in self.scan.query(f"""
                SELECT records, arm, count(*) FROM unit_rows WHERE {_sql.tested_units(experiment)} GROUP BY ALL""",
                "counting records per unit"):
            histogram.setdefault(records, [0] * self.arms[experiment])[arm] = units
        return histogram

    def replay_arms(self, experiment: int, limit: int, design: Design, configs: Mapping[str, Config],
                    fallback: Config) -> list[tuple[ReplayUnit, str | None]]:
        columns = "".join(f", {self.names.attribute_column(a)}" for a in self.attributes)
        # The sample is the units with the smallest MD5 of their id: the same on every run and on every engine.
        rows = self.scan.query(f"""
            SELECT unit, arm, CAST(first_ts AS DATE), config, unit_type{columns}
            FROM unit_rows WHERE {_sql.tested_units(experiment)} ORDER BY md5(unit), unit
            {f"LIMIT {int(limit)}" if limit else ""}""", "replaying")
        units = [ReplayUnit(row[0], row[1], row[2], row[3], row[4], tuple(row[5:])) for row in rows]
        return list(zip(units, sdk_arms(units, design, self.attributes, configs, fallback)))

    def close(self) -> None:
        self.scan.close()
