"""The DuckDB counting engine: the default implementation of `_engine.CountingEngine`.

One pass over the records reduces them to one row per unit and logged arm
(`unit_arms`: records, exact repeats, first exposure and the attributes
then); a second, small aggregate gives one row per unit and experiment
(`unit_rows`). Every small table the audit asks for is a GROUP BY on that
much smaller table.

What any engine must do the same way (the Spark engine mirrors it):

- Files: each regular file once, however it is reached (links, loops, named
  twice); anything else (a device, a FIFO) is an error naming it. A file
  that cannot be read at all (a gzip stream cut short, a CSV header that is
  not UTF-8) is skipped and listed in `unreadable` with a note, and the
  others are audited; when no file can be read, the read fails.
- Lines: a line longer than `max_line_bytes` (1 MiB by default) is one
  malformed record of kind `too_long`, located by file and line, and is
  never held in memory whole; the files are read in blocks of bounded size.
  A CSV line that leaves a quote open is one `unparseable` record: a record
  is one line, so it never swallows the lines after it. A line that is not
  UTF-8 is one `unparseable` record. Every malformed record counts in
  `records` and in the census under its kind.
- Dates: a record dated before 2000-01-01 or more than 366 days after the
  day of the audit (`_sql.plausible_days`) is outside its experiment's
  dates, whatever they are, and a note says how many and their range.
  Per-day tables hold only days with units.
- Columns: `FieldNames.mapped` maps record fields and attributes to log
  columns; a mapped column the logs lack is an error listing theirs.
"""

from __future__ import annotations

from datetime import datetime, timezone
from typing import Any, Mapping, Sequence

from bucketing import Config

from . import _sql
from ._designs import Design
from ._engine import (
    CONFIG_VERSION, FIRST_DAY, NO_VALUE, ArmCounts, CensusRow, Progress, ReplayUnit, Segment, UnitSummary, Window,
)
from ._files import MAX_LINE_BYTES, resolve_files
from ._malformed import malformed_records
from ._replay import sdk_arms
from ._results import Malformed
from ._scan import LogScan
from ._sql import FieldNames

VERSION_COLUMNS = ["config", "unit_type"]


class DuckDBEngine:
    name = "duckdb"

    def __init__(self, max_line_bytes: int = MAX_LINE_BYTES) -> None:
        self.max_line_bytes = max_line_bytes

    def read(self, source: Sequence[str] | Any, columns: Mapping[str, str] | None, attributes: Sequence[str], *,
             keep_versions: bool, log_format: str | None = None, progress: Progress | None = None,
             defaults: Mapping[str, str] | None = None) -> DuckDBUnitTables:
        names = FieldNames.of(columns, attributes, defaults)
        if _is_paths(source):
            scan = LogScan(resolve_files(source, log_format), names, progress=progress,
                           max_line_bytes=self.max_line_bytes)
        else:
            scan = LogScan([], names, table=source, progress=progress, max_line_bytes=self.max_line_bytes)
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
        self.unreadable = scan.unreadable
        self.attributes = scan.names.attributes
        self.layer_logged = "layer" in scan.present
        self.rejected: list[tuple[str, str, int, str, str]] = []
        self.kept = (VERSION_COLUMNS if keep_versions else []) + [self.names.attribute_column(a)
                                                                  for a in self.attributes]

    def other_columns(self) -> list[str]:
        return self.scan.other_columns()

    def _load_designs(self, designs: Sequence[Design]) -> None:
        for statement, parameters in _sql.design_tables(designs):
            self.scan.con.execute(statement, parameters)

    def census(self, designs: Sequence[Design], window: Window = (None, None)) -> list[CensusRow]:
        self._load_designs(designs)
        plausible = _sql.plausible_days(datetime.now(timezone.utc).date())
        windows = any(d.start or d.end for d in designs)
        self.scan.query(_sql.unit_arms(self.kept, self.scan.times_as_text, windows, plausible, window),
                        "reading records")
        (implausible, earliest, latest), = self.scan.fetch(_sql.IMPLAUSIBLE)
        if implausible:
            self.notes.append(f"{implausible:,} records dated outside {plausible[0]} to {plausible[1]} "
                              f"(from {earliest:%Y-%m-%d} to {latest:%Y-%m-%d}) are implausible: counted as outside "
                              f"their experiment's dates")
        self.rejected = self.scan.rejected()
        rows = [CensusRow(*row) for row in self.scan.query(_sql.CENSUS, "counting records")]
        for kind in dict.fromkeys(kind for kind, *_ in self.rejected):
            rows.append(CensusRow(kind, None, None, None, False, sum(1 for r in self.rejected if r[0] == kind), 0, False))
        return rows

    def epoch_notes(self) -> list[str]:
        return self.scan.epoch_notes()

    def malformed(self, counts_by_kind: Mapping[str, int]) -> Malformed:
        return malformed_records(self.scan, counts_by_kind, self.rejected)

    def place_units(self, designs: Sequence[Design]) -> None:
        self._load_designs(designs)
        self.scan.query(_sql.unit_rows(self.kept), "counting units")
        self.arms = [len(d.arms) for d in designs]
        self._summaries: dict[int, UnitSummary] | None = None
        self._whole: dict[tuple[str, ...], dict[int, dict[tuple, ArmCounts]]] = {}
        self._records: dict[int, dict[int, ArmCounts]] | None = None

    def _where(self, within: Segment | None, without: Segment | None) -> str:
        where = _sql.segment_where(within or {}, self.names)
        return f"{where} AND NOT ({_sql.segment_where(without, self.names)})" if without else where

    # Whole-audit questions (no segment) are answered for every experiment in one query, the first time one is
    # asked: with 100,000 experiments, one query per experiment would cost more than the records.

    def unit_summary(self, experiment: int, examples: int) -> UnitSummary:
        if self._summaries is None:
            self._summaries = {exp: UnitSummary(multi, forced, [], moved)
                               for exp, multi, forced, moved in self.scan.query(_sql.LEFT_OUT_UNITS)}
            for exp, unit, low, high in self.scan.query(_sql.multi_arm_examples(examples)):
                self._summaries[exp].multi_arm_examples.append((unit, low, high))
        return self._summaries.get(experiment, UnitSummary(0, 0, []))

    def grouped_units(self, experiment: int, keys: Sequence[str], within: Segment | None = None,
                      without: Segment | None = None) -> dict[tuple, ArmCounts]:
        if within or without:
            return self._grouped(keys, _sql.tested_units(experiment, self._where(within, without))).get(experiment, {})
        if tuple(keys) not in self._whole:
            self._whole[tuple(keys)] = self._grouped(keys, _sql.tested_units(None))
        return {key: list(counts) for key, counts in self._whole[tuple(keys)].get(experiment, {}).items()}

    def _grouped(self, keys: Sequence[str], where: str) -> dict[int, dict[tuple, ArmCounts]]:
        columns = [self._key(key) for key in keys]
        grouped: dict[int, dict[tuple, ArmCounts]] = {}
        for exp, *row in self.scan.query(f"""
                SELECT {", ".join(["exp", *columns, "arm", "count(*)"])} FROM unit_rows
                WHERE {where} GROUP BY ALL""", "counting units"):
            by_key = grouped.setdefault(exp, {})
            by_key.setdefault(tuple(row[:len(keys)]), [0] * self.arms[exp])[row[len(keys)]] = row[-1]
        return grouped

    def _key(self, key: str) -> str:
        if key == FIRST_DAY:
            return "CAST(first_ts AS DATE)"
        if key == CONFIG_VERSION:
            return "config" if "config" in self.kept else "NULL::VARCHAR"
        return f"coalesce({self.names.attribute_column(key)}, {_sql.text(NO_VALUE)})"

    def records_per_unit(self, experiment: int) -> dict[int, ArmCounts]:
        if self._records is None:
            self._records = {}
            for exp, records, arm, units in self.scan.query(f"""
                    SELECT exp, records, arm, count(*) FROM unit_rows WHERE {_sql.tested_units(None)} GROUP BY ALL""",
                    "counting records per unit"):
                self._records.setdefault(exp, {}).setdefault(records, [0] * self.arms[exp])[arm] = units
        return {records: list(counts) for records, counts in self._records.get(experiment, {}).items()}

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
