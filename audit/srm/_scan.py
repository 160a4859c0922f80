"""The DuckDB side of reading: one connection with the `exposure_rows` view over log files or an in-memory table.

`LogScan` opens the sources (files found by `_files`, or a pandas
DataFrame, a pyarrow Table or a DuckDB relation), asks `_sql` for the
normalised SELECT of each, and runs queries with progress. `notes` says
how files were read where the reading had to guess or skip.
"""

from __future__ import annotations

import csv
import gzip
import re
import threading
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

import duckdb

from bucketing import RECORD_FIELDS

from .._errors import LogError, MissingFieldError
from . import _sql
from ._files import LogFile
from ._sql import FieldNames, Select

CSV_DELIMITERS = (",", ";", "\t", "|")
EPOCH_UNITS = ("seconds", "milliseconds", "microseconds", "nanoseconds")  # index = _ts_epoch in `exposure_rows`
READER_COLUMNS = frozenset({"filename", "file_row_number"})  # added by DuckDB's readers, not by the logs
TABLE_VIEW = "input_records"

Progress = Callable[[str, float], None]


class LogScan:
    """An open DuckDB connection with the `exposure_rows` view over the given logs."""

    def __init__(self, files: Sequence[LogFile], names: FieldNames, *, table: Any = None,
                 progress: Progress | None = None) -> None:
        if not files and table is None:
            raise LogError("no log files given")
        self.names = names
        self.progress = progress
        self.notes: list[str] = []
        self.present: set[str] = set()  # fields of the record that some source has
        self.times_as_text = False  # True when some source's ts is text or a number, so epoch times may occur
        self.rejects: list[str] = []  # DuckDB reject tables of the CSV and JSON Lines readers
        self._header_lines: dict[str, str] = {}  # CSV path -> its first line
        self.delimiters: dict[str, str] = {}  # CSV path -> the delimiter its header line shows
        self._columns_seen: dict[str, None] = {}  # every column of the CSV and Parquet files and tables, in order
        self._jsonl_paths: list[str] = []
        self.files = [f for f in files if self._has_records(f)]
        if table is None and not self.files:
            raise LogError(f"no exposure records: every log file is empty ({', '.join(f.path for f in files[:3])}"
                           f"{', …' if len(files) > 3 else ''})")
        self.con = duckdb.connect()
        self.con.execute("SET TimeZone = 'UTC'")
        self.con.execute("SET enable_progress_bar = true")  # progress is tracked for query_progress() ...
        self.con.execute("SET enable_progress_bar_print = false")  # ... but never printed on stdout
        self.con.execute("SET preserve_insertion_order = false")  # every query that needs an order says so
        self.con.execute(_sql.NORMALISE)
        self.sources = [f.path for f in self.files]
        selects = [self._table_select(table)] if table is not None else self._file_selects()
        self.times_as_text = any(s.times_as_text for s in selects)
        self.con.execute("CREATE TEMP VIEW exposure_rows AS " + "\nUNION ALL BY NAME\n".join(s.sql for s in selects))

    def _file_selects(self) -> list[Select]:
        selects = []
        by_format: dict[str, list[LogFile]] = {}
        for f in self.files:
            by_format.setdefault(f.format, []).append(f)
        for fmt, group in by_format.items():
            paths = [f.path for f in group]
            if fmt == "jsonl":
                self.present.update(RECORD_FIELDS)  # JSON Lines have no header: any field may be there
                self._jsonl_paths += paths
                self.rejects.append("rejects_jsonl")
                absent = self._absent_from_jsonl(paths) if self.names.defaults else set()
                selects.append(_sql.jsonl_select(paths, self.names, "rejects_jsonl", absent))
            elif fmt == "parquet":
                source = _sql.parquet_source(paths)
                where = paths[0] if len(paths) == 1 else f"{len(paths)} Parquet files"
                present = self._describe(source, where)
                self._check_columns(present, paths[0] if len(paths) == 1 else f"{paths[0]} (and others)")
                selects.append(_sql.parquet_select(source, present, self.names))
            else:
                for index, log in enumerate(group):
                    delimiter, head = self._csv_layout(log)
                    self._check_columns({c: "VARCHAR" for c in head}, log.path)
                    self.rejects.append(f"rejects_csv_{index}")
                    selects.append(_sql.csv_select(log.path, delimiter, head, self.names, f"rejects_csv_{index}"))
        return selects

    def _table_select(self, table: Any) -> Select:
        """An in-memory table: a pandas DataFrame, a pyarrow Table, or a DuckDB relation (read through Arrow)."""
        if isinstance(table, duckdb.DuckDBPyRelation):
            table = table.to_arrow_table() if hasattr(table, "to_arrow_table") else table.arrow()
        label = f"<{type(table).__module__.split('.')[0]}.{type(table).__name__}>"
        try:
            self.con.register(TABLE_VIEW, table)
        except (duckdb.Error, TypeError, ValueError) as exc:
            raise LogError(f"{label}: cannot be read as a table of exposure records ({_first_line(exc)})") from None
        present = self._describe(TABLE_VIEW, label)
        self._check_columns(present, label)
        self.sources = [label]
        return _sql.table_select(TABLE_VIEW, present, self.names, label)

    def _absent_from_jsonl(self, paths: list[str], sample_lines: int = 10_000) -> set[str]:
        """Record fields with a default that none of the first `sample_lines` JSON records has."""
        keys = {key for (key,) in self.fetch(_sql.jsonl_keys(paths, sample_lines))}
        return {name for name in self.names.defaults if self.names.columns[name] not in keys}

    def other_columns(self, sample_lines: int = 10_000) -> list[str]:
        """Columns of the logs that are not fields of the exposure record: the candidate segments.

        CSV and Parquet files and tables say theirs in the header; JSON Lines
        files are sampled (the keys of their first `sample_lines` records).
        """
        found = dict(self._columns_seen)
        if self._jsonl_paths:
            keys = self.fetch(_sql.jsonl_keys(self._jsonl_paths, sample_lines))
            found.update(dict.fromkeys(sorted(key for (key,) in keys)))
        taken = set(self.names.columns.values()) | set(RECORD_FIELDS) | READER_COLUMNS
        return [name for name in found if name not in taken]

    # -- files without records ---------------------------------------------------------------------

    def _has_records(self, log: LogFile) -> bool:
        """False, with a note, for an empty file or a CSV with only a header; keeps CSV header lines for later."""
        if log.format == "parquet":
            empty = Path(log.path).stat().st_size == 0
        else:
            opener: Callable[..., Any] = gzip.open if log.compressed else open
            try:
                with opener(log.path, "rt", encoding="utf-8-sig", newline="") as stream:
                    if log.format in ("csv", "tsv"):
                        header = stream.readline()
                        if header.strip():
                            self._header_lines[log.path] = header
                        elif any(line.strip() for line in stream):
                            raise LogError(f"{log.path}:1: empty header line; a CSV log starts with the column names")
                    empty = not any(line.strip() for line in stream)
            except (OSError, UnicodeDecodeError, EOFError) as exc:
                raise LogError(f"{log.path}: cannot read ({exc})") from None
        if empty:
            what = "a header and no records" if log.path in self._header_lines else "empty"
            self.notes.append(f"{log.path}: {what}; skipped")
        return not empty

    # -- columns -----------------------------------------------------------------------------------

    def _describe(self, source: str, where: str) -> dict[str, str]:
        try:
            return {row[0]: row[1] for row in self.con.execute(f"DESCRIBE SELECT * FROM {source}").fetchall()}
        except duckdb.Error as exc:
            raise LogError(f"{where}: cannot read ({_first_line(exc)})") from None

    def _check_columns(self, present: Mapping[str, str], where: str) -> None:
        columns = self.names.columns
        for name in _sql.REQUIRED_FIELDS:
            if columns[name] not in present and name not in self.names.defaults:
                raise MissingFieldError(f"{where}: no column {columns[name]!r} for field {name!r} "
                                        f"(columns: {', '.join(present)})", name, columns[name])
        self.present.update(n for n in RECORD_FIELDS if columns[n] in present)
        self._columns_seen.update(dict.fromkeys(present))

    def _csv_layout(self, log: LogFile) -> tuple[str, list[str]]:
        """The delimiter and the column names, from the header line: the delimiter that yields the required columns.

        The file's suffix gives the first guess (tab for .tsv, comma otherwise);
        another delimiter is used, with a note, only when the header needs it.
        """
        line = self._header_lines[log.path]
        default = "\t" if log.format == "tsv" else ","
        candidates = [default] + [d for d in CSV_DELIMITERS if d != default]
        split = {d: [name.strip() for name in next(csv.reader([line], delimiter=d), [])] for d in candidates}
        required = [self.names.columns[n] for n in _sql.REQUIRED_FIELDS]
        delimiter = next((d for d in candidates if all(r in split[d] for r in required)),
                         max(candidates, key=lambda d: len(split[d])))
        names = [name or f"column_{i + 1}" for i, name in enumerate(split[delimiter])]
        repeated = next((n for n in names if names.count(n) > 1), None)
        if repeated is not None:
            raise LogError(f"{log.path}:1: column {repeated!r} appears twice in the header")
        if delimiter != default:
            self.notes.append(f"{log.path}: fields separated by {'tab' if delimiter == chr(9) else repr(delimiter)}")
        self.delimiters[log.path] = delimiter
        return delimiter, names

    # -- how times were read -----------------------------------------------------------------------

    def epoch_notes(self) -> list[str]:
        """Which sources had epoch numbers as `ts`, read in which unit (a second scan: call it only when some were)."""
        return [f"{file}: ts read as epoch {EPOCH_UNITS[unit]} in {count:,} records "
                f"({low:%Y-%m-%d %H:%M:%S} to {high:%Y-%m-%d %H:%M:%S} UTC)"
                for file, unit, count, low, high in self.fetch(_sql.EPOCH_NOTES)]

    # -- running queries ---------------------------------------------------------------------------

    def query(self, sql: str, label: str = "scanning") -> list[tuple]:
        """Run SQL and fetch all rows; reports DuckDB's progress while it runs, when asked to."""
        if self.progress is None:
            return self.fetch(sql)
        progress = self.progress
        done = threading.Event()

        def poll() -> None:
            while not done.wait(0.5):
                try:
                    fraction = self.con.query_progress()
                except duckdb.Error:
                    continue
                if fraction is not None and fraction >= 0:
                    progress(label, min(fraction / 100, 1.0))

        poller = threading.Thread(target=poll, daemon=True)
        poller.start()
        try:
            return self.fetch(sql)
        finally:
            done.set()
            poller.join()
            progress(label, 1.0)

    def fetch(self, sql: str) -> list[tuple]:
        try:
            return self.con.execute(sql).fetchall()
        except duckdb.Error as exc:
            raise LogError(_read_error(exc)) from None

    def close(self) -> None:
        self.con.close()


def _read_error(exc: duckdb.Error) -> str:
    """One line for an error DuckDB raised while scanning, naming the file when DuckDB does."""
    file = re.search(r"^\s*file = (.+)$", str(exc), re.MULTILINE)
    if file and "state machine" in str(exc):
        return (f"{file.group(1).strip()}: cannot be read as CSV: its rows do not split consistently "
                f"(line ends that mix CRLF and LF, or a quote left open)")
    return f"cannot read the logs: {_first_line(exc)}"


def _first_line(exc: BaseException) -> str:
    return str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
