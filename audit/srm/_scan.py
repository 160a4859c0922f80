"""The DuckDB side of reading: one connection with the `exposure_rows` view over log files or an in-memory table.

`LogScan` opens the sources (files found by `_files`, or a pandas
DataFrame, a pyarrow Table or a DuckDB relation), surveys each text log
first (`_files.survey_file`: unreadable files are skipped, lines no reader
should meet are blanked in a clean copy and counted here), asks `_sql` for
the normalised SELECT of each, and runs queries with progress. `notes`
says how files were read where the reading had to guess or skip.
"""

from __future__ import annotations

import csv
import re
import tempfile
import threading
from concurrent.futures import ThreadPoolExecutor
from pathlib import Path
from typing import Any, Callable, Mapping, Sequence

import duckdb

from bucketing import RECORD_FIELDS

from .._errors import LogError, MissingFieldError
from . import _sql
from ._files import MAX_LINE_BYTES, BadLine, LogFile, clean_copy, survey_file
from ._sql import FieldNames, Select

CSV_DELIMITERS = (",", ";", "\t", "|")
EPOCH_UNITS = ("seconds", "milliseconds", "microseconds", "nanoseconds")  # index = _ts_epoch in `exposure_rows`
READER_COLUMNS = frozenset({"filename", "file_row_number"})  # added by DuckDB's readers, not by the logs
TABLE_VIEW = "input_records"
SURVEY_THREADS = 4

Progress = Callable[[str, float], None]


class LogScan:
    """An open DuckDB connection with the `exposure_rows` view over the given logs."""

    def __init__(self, files: Sequence[LogFile], names: FieldNames, *, table: Any = None,
                 progress: Progress | None = None, max_line_bytes: int = MAX_LINE_BYTES) -> None:
        if not files and table is None:
            raise LogError("no log files given")
        self.names = names
        self.progress = progress
        self.max_line_bytes = max_line_bytes
        self.notes: list[str] = []
        self.present: set[str] = set()  # fields of the record that some source has
        self.times_as_text = False  # True when some source's ts is text or a number, so epoch times may occur
        self.rejects: list[str] = []  # DuckDB reject tables of the CSV and JSON Lines readers
        self.unreadable: list[tuple[str, str]] = []  # (file, why) of the files skipped because they cannot be read
        self.bad_lines: list[tuple[str, BadLine]] = []  # (file, line) of the lines no reader was given
        self.originals: dict[str, str] = {}  # path of a clean copy -> the log it was made from
        self._scratch: tempfile.TemporaryDirectory[str] | None = None
        self._header_lines: dict[str, str] = {}  # CSV path -> its first line
        self.delimiters: dict[str, str] = {}  # CSV log -> the delimiter its header line shows
        self._columns_seen: dict[str, None] = {}  # every column of the CSV and Parquet files and tables, in order
        self._jsonl_paths: list[str] = []
        self.files = self._readable(files) if files else []
        if table is None and not self.files:
            self.close()
            if self.bad_lines:
                file, bad = self.bad_lines[0]
                raise LogError(f"{file}:{bad.line}: no usable exposure record ({len(self.bad_lines)} malformed; "
                               f"first: {bad.detail})")
            if self.unreadable:
                raise LogError("no log file could be read: " + "; ".join(f"{path}: {why}" for path, why in self.unreadable))
            raise LogError(f"no exposure records: every log file is empty ({', '.join(f.path for f in files[:3])}"
                           f"{', …' if len(files) > 3 else ''})")
        self.con = duckdb.connect()
        self.con.execute("SET TimeZone = 'UTC'")
        self.con.execute("SET enable_progress_bar = true")  # progress is tracked for query_progress() ...
        self.con.execute("SET enable_progress_bar_print = false")  # ... but never printed on stdout
        self.con.execute("SET preserve_insertion_order = false")  # every query that needs an order says so
        self.con.execute(_sql.NORMALISE)
        self.sources = [self.original(f.path) for f in self.files]
        selects = [self._table_select(table)] if table is not None else self._file_selects()
        self._check_mapping()
        self.times_as_text = any(s.times_as_text for s in selects)
        self.con.execute("CREATE TEMP VIEW exposure_rows AS " + "\nUNION ALL BY NAME\n".join(s.sql for s in selects))

    def original(self, path: str) -> str:
        """The log's own path for a path read (a clean copy stands for the log it was made from)."""
        return self.originals.get(path, path)

    def _readable(self, files: Sequence[LogFile]) -> list[LogFile]:
        """The files to give the readers: text logs surveyed first (in parallel: gzip and reads release the GIL).

        A file that cannot be read is skipped with a note; an empty one too;
        one with lines no reader should meet is replaced by a clean copy.
        """
        with ThreadPoolExecutor(max_workers=min(SURVEY_THREADS, len(files))) as pool:
            surveys = list(pool.map(lambda f: None if f.format == "parquet" else survey_file(f, self.max_line_bytes),
                                    files))
        kept = []
        for log, survey in zip(files, surveys):
            if survey is None:
                if Path(log.path).stat().st_size == 0:
                    self.notes.append(f"{log.path}: empty; skipped")
                else:
                    kept.append(log)
                continue
            if survey.unreadable:
                self.unreadable.append((log.path, survey.unreadable))
                self.notes.append(f"{log.path}: cannot be read ({survey.unreadable}); skipped, the other files are audited")
                continue
            self.bad_lines += [(log.path, bad) for bad in survey.bad_lines]
            if not survey.records:
                if not survey.bad_lines:
                    self.notes.append(f"{log.path}: {'a header and no records' if survey.header else 'empty'}; skipped")
                continue
            read = log
            if survey.bad_lines:
                read = clean_copy(log, [b.line for b in survey.bad_lines],
                                  Path(self._scratch_dir()) / f"{len(self.originals)}.{log.format}")
                self.originals[read.path] = log.path
            if survey.header is not None:
                self._header_lines[read.path] = survey.header
            kept.append(read)
        return kept

    def _scratch_dir(self) -> str:
        if self._scratch is None:
            self._scratch = tempfile.TemporaryDirectory(prefix="sortition-logs-")
        return self._scratch.name

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
                selects.append(_sql.jsonl_select(paths, self.names, "rejects_jsonl", self.originals,
                                                 self.max_line_bytes, absent))
            elif fmt == "parquet":
                source = _sql.parquet_source(paths)
                where = paths[0] if len(paths) == 1 else f"{len(paths)} Parquet files"
                present = self._describe(source, where)
                self._check_columns(present, paths[0] if len(paths) == 1 else f"{paths[0]} (and others)")
                selects.append(_sql.parquet_select(source, present, self.names))
            else:
                for index, log in enumerate(group):
                    delimiter, head = self._csv_layout(log)
                    self._check_columns({c: "VARCHAR" for c in head}, self.original(log.path))
                    self.rejects.append(f"rejects_csv_{index}")
                    selects.append(_sql.csv_select(log.path, delimiter, head, self.names, f"rejects_csv_{index}",
                                                   self.original(log.path), self.max_line_bytes))
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
        keys = {key for (key,) in self.fetch(_sql.jsonl_keys(paths, sample_lines, self.max_line_bytes))}
        return {name for name in self.names.defaults if self.names.columns[name] not in keys}

    def log_columns(self, sample_lines: int = 10_000) -> list[str]:
        """Every column of the logs: CSV and Parquet files and tables say theirs in the header; JSON Lines files
        are sampled (the keys of their first `sample_lines` records)."""
        found = dict(self._columns_seen)
        if self._jsonl_paths:
            keys = self.fetch(_sql.jsonl_keys(self._jsonl_paths, sample_lines, self.max_line_bytes))
            found.update(dict.fromkeys(sorted(key for (key,) in keys)))
        return [name for name in found if name not in READER_COLUMNS]

    def other_columns(self) -> list[str]:
        """Columns of the logs that are not fields of the exposure record, nor mapped: the candidate segments."""
        taken = set(self.names.columns.values()) | set(self.names.mapped.values()) | set(RECORD_FIELDS)
        return [name for name in self.log_columns() if name not in taken]

    def _check_mapping(self) -> None:
        """A mapping to a column the logs do not have is an error that lists the columns they have."""
        if not self.names.mapped:
            return
        columns = self.log_columns()
        for name, column in self.names.mapped.items():
            if column not in columns:
                raise LogError(f"{name}={column}: the logs have no column {column!r} "
                               f"(columns: {', '.join(columns) or 'none'})")

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
        where = self.original(log.path)
        default = "\t" if log.format == "tsv" else ","
        candidates = [default] + [d for d in CSV_DELIMITERS if d != default]
        split = {d: [name.strip() for name in next(csv.reader([line], delimiter=d), [])] for d in candidates}
        required = [self.names.columns[n] for n in _sql.REQUIRED_FIELDS]
        delimiter = next((d for d in candidates if all(r in split[d] for r in required)),
                         max(candidates, key=lambda d: len(split[d])))
        names = [name or f"column_{i + 1}" for i, name in enumerate(split[delimiter])]
        repeated = next((n for n in names if names.count(n) > 1), None)
        if repeated is not None:
            raise LogError(f"{where}:1: column {repeated!r} appears twice in the header")
        if delimiter != default:
            self.notes.append(f"{where}: fields separated by {'tab' if delimiter == chr(9) else repr(delimiter)}")
        self.delimiters[where] = delimiter
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

    def rejected(self) -> list[tuple[str, str, int, str, str]]:
        """(kind, file, line, detail, text) of each line a reader rejected, and of each line no reader was given."""
        rows = [(kind, self.original(file), line, detail, text)
                for rejects in self.rejects for kind, file, line, detail, text in self.fetch(_sql.rejected_rows(rejects))]
        return rows + [(bad.kind, file, bad.line, bad.detail, bad.text) for file, bad in self.bad_lines]

    def close(self) -> None:
        if hasattr(self, "con"):
            self.con.close()
        if self._scratch is not None:
            self._scratch.cleanup()
            self._scratch = None


def _read_error(exc: duckdb.Error) -> str:
    """One line for an error DuckDB raised while scanning, naming the file when DuckDB does."""
    file = re.search(r"^\s*file = (.+)$", str(exc), re.MULTILINE)
    if file and "state machine" in str(exc):
        return (f"{file.group(1).strip()}: cannot be read as CSV: its rows do not split consistently "
                f"(line ends that mix CRLF and LF, or a quote left open)")
    return f"cannot read the logs: {_first_line(exc)}"


def _first_line(exc: BaseException) -> str:
    return str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
