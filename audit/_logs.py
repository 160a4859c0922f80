"""Reading exposure logs into DuckDB: files, formats, column names, malformed records.

`open_logs` resolves files, globs and directories (JSON Lines, CSV, TSV,
Parquet; gzip by suffix), and defines one DuckDB view, `exposure_rows`,
with the contract's field names, typed, one row per record, whatever the
source format. A record that cannot be used keeps its row, with `_problem`
set to its kind (`unparseable`, `truncated`, `missing_field`, `wrong_type`)
and `_detail` saying what is wrong, so nothing is dropped silently.

JSON Lines are read as raw lines and parsed in SQL, one pass: that keeps
every line, good or bad, and blank lines keep the line count right.

Logs written by other systems bend the contract in ordinary ways; the
reading step normalises them, in SQL (the macros of `_NORMALISE`), the
same way for every format:

- `ts`: ISO-8601 / RFC 3339 with `T` or a space, `Z`, an offset (converted
  to UTC) or no zone (taken as UTC, as the contract's times are UTC), any
  fraction of a second, lower-case `t`/`z`, or a plain date (midnight UTC);
  or a number of seconds, milliseconds, microseconds or nanoseconds since
  1970, told apart by magnitude (below 10^11 seconds, below 10^14
  milliseconds, below 10^17 microseconds, below 10^20 nanoseconds); which
  unit was read in which file is said by `LogScan.epoch_notes`.
- `forced`: true/false, t/f, yes/no, y/n, 1/0 (any case; a JSON boolean or
  number, or text); empty or absent is false.
- `unit` and the other names: a JSON or Parquet integer is read in
  decimal (so `12345` hashes as "12345", as the hashing rule says); an
  integral JSON float such as `12345.0` too.
- Names are compared exactly: no case folding, no trimming. An arm logged
  as "Control" or "control " is an unknown arm, reported as such.
- CSV: the delimiter (`,` `;` tab `|`) is taken from the header line, a
  UTF-8 byte order mark is skipped, CRLF and quoted fields are read;
  column names are trimmed. A CSV whose lines end in both CRLF and LF
  stops the run with an error naming the file: DuckDB's lenient CSV mode
  would read it, but would also drop extra columns without a word. JSON Lines: a byte order mark, CRLF, mixed
  line ends and blank lines are fine.
- An empty file, or a CSV with a header and no rows, is skipped with a note.

Values that still cannot be read (a `ts` of "yesterday", a `forced` of
"maybe") are `wrong_type` records, counted and located by file and line.
"""

from __future__ import annotations

import csv
import glob
import gzip
import io
import re
import threading
from contextlib import closing
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Iterator, Mapping

import duckdb

from bucketing import RECORD_FIELDS

REQUIRED_FIELDS = ("unit", "experiment", "arm", "ts")
OPTIONAL_FIELDS = tuple(f for f in RECORD_FIELDS if f not in REQUIRED_FIELDS)
TEXT_FIELDS = ("unit_type", "layer", "experiment", "arm", "config")
PROBLEM_KINDS = ("unparseable", "truncated", "missing_field", "wrong_type")
EXAMPLES_PER_KIND = 5
CSV_DELIMITERS = (",", ";", "\t", "|")
EPOCH_UNITS = ("seconds", "milliseconds", "microseconds", "nanoseconds")  # index = _ts_epoch in `exposure_rows`

_NORMALISE = """
    CREATE TEMP MACRO iso_time(t) AS CASE WHEN ascii(t) BETWEEN 48 AND 57
        THEN TRY_CAST(TRY_CAST(t AS TIMESTAMPTZ) AT TIME ZONE 'UTC' AS TIMESTAMP) END;
    CREATE TEMP MACRO epoch_number(t) AS CASE WHEN regexp_full_match(t, '[0-9]+([.][0-9]+)?') THEN CAST(t AS DOUBLE) END;
    CREATE TEMP MACRO epoch_unit(n) AS CASE WHEN n < 1e11 THEN 0 WHEN n < 1e14 THEN 1 WHEN n < 1e17 THEN 2
        WHEN n < 1e20 THEN 3 END;
    CREATE TEMP MACRO epoch_time(n) AS make_timestamp(CAST(n * [1e6, 1e3, 1, 1e-3][epoch_unit(n) + 1] AS BIGINT));
    CREATE TEMP MACRO time_of(t) AS CASE WHEN contains(t, '-')
        THEN coalesce(iso_time(t), iso_time(upper(trim(t)))) ELSE epoch_time(epoch_number(trim(t))) END;
    CREATE TEMP MACRO time_epoch_unit(t) AS CASE WHEN NOT contains(t, '-') THEN epoch_unit(epoch_number(trim(t))) END;
    CREATE TEMP MACRO flag_of(t) AS coalesce(TRY_CAST(t AS BOOLEAN),
        CASE WHEN t IS NULL OR trim(t) = '' THEN false ELSE TRY_CAST(trim(t) AS BOOLEAN) END);
    CREATE TEMP MACRO integer_text(t) AS CASE
        WHEN regexp_full_match(t, '-?[0-9]+') THEN t
        WHEN TRY_CAST(t AS DOUBLE) = trunc(TRY_CAST(t AS DOUBLE)) AND abs(TRY_CAST(t AS DOUBLE)) < 9007199254740992
            THEN CAST(CAST(t AS DOUBLE) AS BIGINT)::VARCHAR END;
"""
TIME_EXPECTED = "expected an ISO-8601 time or an epoch number, found "
FLAG_EXPECTED = "expected true or false (or yes/no, 1/0), found "
FORMATS = {".jsonl": "jsonl", ".ndjson": "jsonl", ".json": "jsonl", ".csv": "csv", ".tsv": "tsv", ".parquet": "parquet"}

Progress = Callable[[str, float], None]


class LogError(ValueError):
    """Input that cannot be read at all: no files, an unknown format, a field absent from every record."""


@dataclass(frozen=True)
class LogFile:
    path: str
    format: str  # jsonl | csv | tsv | parquet
    compressed: bool


@dataclass
class MalformedExample:
    kind: str
    file: str
    line: int | None
    detail: str
    text: str | None = None


@dataclass
class Malformed:
    """Records that could not be used, counted by kind, with a few located examples."""

    counts: dict[str, int] = field(default_factory=dict)
    examples: list[MalformedExample] = field(default_factory=list)

    @property
    def total(self) -> int:
        return sum(self.counts.values())


def parse_column_map(pairs: Iterable[str]) -> dict[str, str]:
    """['unit=user_id', 'arm=variant'] -> {'unit': 'user_id', 'arm': 'variant'}."""
    mapping = {}
    for pair in pairs:
        ours, sep, theirs = pair.partition("=")
        ours, theirs = ours.strip(), theirs.strip()
        if not sep or not ours or not theirs:
            raise LogError(f"--column takes FIELD=LOG_COLUMN (e.g. unit=user_id), found {pair!r}")
        mapping[ours] = theirs
    return mapping


def _format_of(path: str) -> tuple[str, bool] | None:
    name = path.lower()
    compressed = name.endswith(".gz")
    if compressed:
        name = name[:-3]
    suffix = name[name.rfind("."):] if "." in name else ""
    kind = FORMATS.get(suffix)
    return (kind, compressed) if kind else None


def resolve_files(sources: Iterable[str], default_format: str | None = None) -> list[LogFile]:
    """Files named by paths, globs and directories (searched recursively), in name order."""
    found: list[LogFile] = []
    for source in sources:
        if any(ch in source for ch in "*?["):
            paths = sorted(glob.glob(source, recursive=True))
            if not paths:
                raise LogError(f"{source}: no files match this pattern")
        elif Path(source).is_dir():
            paths = sorted(str(p) for p in Path(source).rglob("*") if p.is_file() and _format_of(str(p)))
            if not paths:
                raise LogError(f"{source}: no .jsonl, .csv, .tsv or .parquet files (plain or .gz) in this directory")
        elif Path(source).is_file():
            paths = [source]
        else:
            raise LogError(f"{source}: no such file or directory")
        for path in paths:
            detected = _format_of(path)
            if detected is None and default_format:
                detected = (default_format, path.lower().endswith(".gz"))
            if detected is None:
                raise LogError(f"{path}: unknown log format; name it .jsonl, .csv, .tsv or .parquet "
                               f"(optionally .gz), or pass --log-format")
            if detected[0] == "parquet" and detected[1]:
                raise LogError(f"{path}: Parquet compresses inside the file; gzip around it is not supported")
            found.append(LogFile(path, *detected))
    return found


_READER_COLUMNS = frozenset({"filename", "file_row_number"})  # added by DuckDB's readers, not by the logs


def _sql_text(value: str) -> str:
    return "'" + value.replace("'", "''") + "'"


def _ident(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _file_list(files: list[LogFile]) -> str:
    return "[" + ", ".join(_sql_text(f.path) for f in files) + "]"


def _raw_lines(group: list[LogFile], options: str = "") -> str:
    """JSON Lines files as one text column `line`, however their lines end."""
    # strict_mode off: one column only, and it lets lines end in CRLF and LF within one file
    return (f"read_csv({_file_list(group)}, columns={{'line': 'VARCHAR'}}, delim=chr(1), quote='', escape='', "
            f"header=false, auto_detect=false, strict_mode=false{', ' + options if options else ''})")


class LogScan:
    """An open DuckDB connection with the `exposure_rows` view over the given logs.

    `attributes` are the unit attributes kept (as text) for segments and
    replay; the view names them `a_<index>` in the order given, see `attribute_column`.
    `notes` says how files were read where the reading had to guess or skip.
    """

    def __init__(self, files: list[LogFile], columns: Mapping[str, str] | None = None,
                 attributes: Iterable[str] = (), *, progress: Progress | None = None,
                 threads: int | None = None, memory_limit: str | None = None) -> None:
        if not files:
            raise LogError("no log files given")
        self.columns = {name: (columns or {}).get(name, name) for name in RECORD_FIELDS}
        self.attributes = list(dict.fromkeys(attributes))
        self.progress = progress
        self.notes: list[str] = []
        self._header_lines: dict[str, str] = {}  # CSV path -> its first line
        self._delimiters: dict[str, str] = {}  # CSV path -> the delimiter its header line shows
        self.files = [f for f in files if self._has_records(f)]
        if not self.files:
            raise LogError(f"no exposure records: every log file is empty ({', '.join(f.path for f in files[:3])}"
                           f"{', …' if len(files) > 3 else ''})")
        self.con = duckdb.connect()
        self.con.execute("SET TimeZone = 'UTC'")
        self.con.execute("SET enable_progress_bar = true")  # progress is tracked for query_progress() ...
        self.con.execute("SET enable_progress_bar_print = false")  # ... but never printed on stdout
        self.con.execute("SET preserve_insertion_order = false")  # every query that needs an order says so
        if threads:
            self.con.execute(f"SET threads = {int(threads)}")
        if memory_limit:
            self.con.execute(f"SET memory_limit = {_sql_text(memory_limit)}")
        self.con.execute(_NORMALISE)
        self.present: set[str] = set()
        self._columns_seen: dict[str, None] = {}  # every column of the CSV and Parquet files, in order
        self._jsonl_groups: list[list[LogFile]] = []
        self.times_as_text = False  # True when some file's ts is text or a number, so epoch times may occur
        self._csv_rejects: list[str] = []
        parts = []
        by_format: dict[str, list[LogFile]] = {}
        for f in self.files:
            by_format.setdefault(f.format, []).append(f)
        for fmt, group in by_format.items():
            if fmt == "jsonl":
                parts.append(self._jsonl_select(group))
            elif fmt == "parquet":
                parts.append(self._parquet_select(group))
            else:
                parts.extend(self._csv_select(f, index) for index, f in enumerate(group))
        self.con.execute("CREATE TEMP VIEW exposure_rows AS " + "\nUNION ALL BY NAME\n".join(parts))

    def attribute_column(self, name: str) -> str:
        return f"a_{self.attributes.index(name)}"

    def other_columns(self, sample_lines: int = 10_000) -> list[str]:
        """Columns of the logs that are not fields of the exposure record: the candidate segments.

        CSV and Parquet files say theirs in the header; JSON Lines files are
        sampled (the keys of their first `sample_lines` records).
        """
        names = dict(self._columns_seen)
        for group in self._jsonl_groups:
            keys = self._fetch(f"""
                SELECT DISTINCT unnest(json_keys(line)) FROM (
                    SELECT line FROM {_raw_lines(group)}
                    WHERE json_valid(line) AND json_type(line) = 'OBJECT' LIMIT {int(sample_lines)})""")
            names.update(dict.fromkeys(sorted(key for (key,) in keys)))
        taken = set(self.columns.values()) | set(RECORD_FIELDS) | _READER_COLUMNS
        return [name for name in names if name not in taken]

    # -- files without records ---------------------------------------------------------------------

    def _has_records(self, log: LogFile) -> bool:
        """False, with a note, for an empty file or a CSV with only a header; keeps CSV header lines for later."""
        if log.format == "parquet":
            empty = Path(log.path).stat().st_size == 0
        else:
            opener = gzip.open if log.compressed else open
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

    # -- per-format SELECTs, each giving the same normalised columns ------------------------------

    def _normalised(self, source: str, values: Mapping[str, str], kinds: Mapping[str, str],
                    native: Iterable[str] = (), broken: tuple[str, str] | None = None, extra: str = "") -> str:
        """A SELECT of the normalised columns over `source`, from per-field text expressions and type checks.

        `values[f]` is the field's value as text (NULL when absent), except
        for the fields in `native`: a `ts` of a TIMESTAMP type or a `forced`
        of BOOLEAN type, kept as they are. `kinds[f]` is NULL when the field's
        value is acceptable, else what was found. Text times and flags are
        read once, by the `_NORMALISE` macros in an inner SELECT, and checked here.
        `broken` is (kind, detail) for records that could not be parsed at all;
        `extra` adds columns to the outer SELECT (it may use `_problem`).
        """
        kinds = dict(kinds)
        inner = []
        if "ts" in native:
            ts, epoch = f"CAST({values['ts']} AS TIMESTAMP)", "NULL::UTINYINT"
        else:
            self.times_as_text = True
            inner += [f"time_of({values['ts']}) AS _ts_value", f"time_epoch_unit({values['ts']}) AS _ts_epoch"]
            ts, epoch = "_ts_value", "_ts_epoch"
            kinds["ts"] = f"CASE WHEN {ts} IS NULL THEN {_sql_text(TIME_EXPECTED)} || {values['ts']} END"
        if "forced" in native:
            forced = f"coalesce({values['forced']}, false)"
        else:
            inner.append(f"flag_of({values['forced']}) AS _forced_value")
            forced = "_forced_value"
            kinds["forced"] = f"CASE WHEN {forced} IS NULL THEN {_sql_text(FLAG_EXPECTED)} || {values['forced']} END"
        problems = [broken] if broken else []
        problems += [(f"CASE WHEN {kinds[n]} IS NOT NULL THEN 'wrong_type' END",
                      f"'field ' || {_sql_text(repr(self.columns[n]))} || ': ' || {kinds[n]}")
                     for n in RECORD_FIELDS if n in kinds]
        problems += [(f"CASE WHEN {values[n]} IS NULL THEN 'missing_field' END",
                      f"'field ' || {_sql_text(repr(self.columns[n]))} || ' is missing'") for n in REQUIRED_FIELDS]
        problem = "coalesce(" + ", ".join(kind for kind, _ in problems) + ")"
        detail = "CASE " + " ".join(f"WHEN {kind} IS NOT NULL THEN {text}" for kind, text in problems) + " END"
        select = [f"{problem} AS _problem", f"{detail} AS _detail", f"{values['unit']} AS unit"]
        select += [f"{values[n]} AS {n}" for n in TEXT_FIELDS]
        select += [f"coalesce({forced}, false) AS forced", f"{ts} AS ts", f"{epoch} AS _ts_epoch"]
        select += [f"{values['a:' + a]} AS a_{i}" for i, a in enumerate(self.attributes)]
        if extra:
            select.append(extra)
        source = f"(SELECT *, {', '.join(inner)} FROM {source})" if inner else source
        return f"SELECT {', '.join(select)} FROM {source}"

    def _jsonl_select(self, group: list[LogFile]) -> str:
        self.present.update(RECORD_FIELDS)  # JSON Lines have no header: any field may be there
        names = [self.columns[n] for n in RECORD_FIELDS] + self.attributes
        paths = "[" + ", ".join(_sql_text('$."' + n.replace('"', '\\"') + '"') for n in names) + "]"
        index = {n: i + 1 for i, n in enumerate(list(RECORD_FIELDS) + ["a:" + a for a in self.attributes])}
        values = {k: f"v[{i}]" for k, i in index.items()}
        types = {k: f"t[{i}]" for k, i in index.items()}
        values["unit"] = f"CASE WHEN {types['unit']} = 'VARCHAR' THEN {values['unit']} ELSE integer_text({values['unit']}) END"
        kinds = {"unit": f"CASE WHEN {types['unit']} <> 'NULL' AND {values['unit']} IS NULL "
                         f"THEN 'expected a string or an integer, found ' || lower({types['unit']}) END"}
        kinds.update({n: f"CASE WHEN {types[n]} NOT IN ('VARCHAR', 'NULL', 'BIGINT', 'UBIGINT') "
                         f"THEN 'expected a string, found ' || lower({types[n]}) END" for n in TEXT_FIELDS})
        cut_short = "starts_with(ltrim(line), '{') AND NOT ends_with(rtrim(line), '}')"
        broken = (f"CASE WHEN NOT is_object THEN CASE WHEN {cut_short} THEN 'truncated' ELSE 'unparseable' END END",
                  f"CASE WHEN {cut_short} THEN 'record cut short' ELSE 'not a JSON object' END")
        self._jsonl_groups.append(group)
        source = _raw_lines(group, "filename=true, store_rejects=true, rejects_table='rejects_jsonl_errors', "
                                   "rejects_scan='rejects_jsonl_scans'")
        self._csv_rejects.append("rejects_jsonl")
        parsed = f"""(
            SELECT filename, line, is_object,
                   CASE WHEN is_object THEN json_extract_string(line, {paths}) END AS v,
                   CASE WHEN is_object THEN json_type(line, {paths}) END AS t
            FROM (
                SELECT filename, line, CASE WHEN json_valid(line) THEN json_type(line) = 'OBJECT' ELSE false END AS is_object
                FROM {source}
                WHERE line IS NOT NULL AND trim(line) <> ''
            )
        )"""
        extra = "filename AS _file, NULL::BIGINT AS _line, CASE WHEN _problem IS NOT NULL THEN left(line, 300) END AS _text"
        return self._normalised(parsed, values, kinds, broken=broken, extra=extra)

    def _describe(self, source: str, where: str) -> dict[str, str]:
        try:
            return {row[0]: row[1] for row in self.con.execute(f"DESCRIBE SELECT * FROM {source}").fetchall()}
        except duckdb.Error as exc:
            raise LogError(f"{where}: cannot read ({_first_line(exc)})") from None

    def _check_columns(self, present: Mapping[str, str], where: str) -> None:
        for name in REQUIRED_FIELDS:
            if self.columns[name] not in present:
                hint = f"; map it with --column {name}=NAME" if self.columns[name] == name else ""
                raise LogError(f"{where}: no column {self.columns[name]!r} for field {name!r} "
                               f"(columns: {', '.join(present)}){hint}")
        self.present.update(n for n in RECORD_FIELDS if self.columns[n] in present)
        self._columns_seen.update(dict.fromkeys(present))

    def _typed_select(self, source: str, present: Mapping[str, str], extra: str) -> str:
        """The normalised SELECT over a typed source (CSV read as text, or Parquet)."""
        values, kinds, native = {}, {}, []
        native_types = {"ts": "TIMESTAMP", "forced": "BOOLEAN"}  # kept as they are: formatting them as text costs a lot
        for name in RECORD_FIELDS:
            column = self.columns[name]
            kind = present.get(column)
            if kind is None:
                values[name] = "NULL::VARCHAR"
            elif name in native_types and kind.startswith(native_types[name]):
                values[name] = _ident(column)
                native.append(name)
            elif kind == "VARCHAR":
                values[name] = _ident(column)
            elif name == "unit" and kind in ("DOUBLE", "FLOAT"):
                values[name] = f"integer_text(CAST({_ident(column)} AS VARCHAR))"
                kinds[name] = (f"CASE WHEN {_ident(column)} IS NOT NULL AND {values[name]} IS NULL "
                               f"THEN 'expected a string or an integer, found ' || {_ident(column)} END")
            else:
                values[name] = f"CAST({_ident(column)} AS VARCHAR)"
        for attr in self.attributes:
            values["a:" + attr] = f"CAST({_ident(attr)} AS VARCHAR)" if attr in present else "NULL::VARCHAR"
        return self._normalised(source, values, kinds, native, extra=extra)

    def _csv_select(self, log: LogFile, index: int) -> str:
        delimiter, head = self._csv_layout(log)
        options = f"delim={_sql_text(delimiter)}, quote='\"', escape='\"', header=true, auto_detect=false"
        columns = "{" + ", ".join(f"{_sql_text(c)}: 'VARCHAR'" for c in head) + "}"
        present = {c: "VARCHAR" for c in head}
        self._check_columns(present, log.path)
        name = f"rejects_csv_{index}"
        self._csv_rejects.append(name)
        source = (f"read_csv({_sql_text(log.path)}, {options}, columns={columns}, filename=true, "
                  f"store_rejects=true, rejects_table='{name}_errors', rejects_scan='{name}_scans')")
        fields = ", ".join(f"coalesce({_ident(c)}, '')" for c in head)
        extra = (f"filename AS _file, NULL::BIGINT AS _line, "
                 f"CASE WHEN _problem IS NOT NULL THEN left(concat_ws({_sql_text(delimiter)}, {fields}), 300) END AS _text")
        return self._typed_select(source, present, extra)

    def _csv_layout(self, log: LogFile) -> tuple[str, list[str]]:
        """The delimiter and the column names, from the header line: the delimiter that yields the required columns.

        The file's suffix gives the first guess (tab for .tsv, comma otherwise);
        another delimiter is used, with a note, only when the header needs it.
        """
        line = self._header_lines[log.path]
        default = "\t" if log.format == "tsv" else ","
        candidates = [default] + [d for d in CSV_DELIMITERS if d != default]
        split = {d: [name.strip() for name in next(csv.reader([line], delimiter=d), [])] for d in candidates}
        required = [self.columns[n] for n in REQUIRED_FIELDS]
        delimiter = next((d for d in candidates if all(r in split[d] for r in required)),
                         max(candidates, key=lambda d: len(split[d])))
        names = [name or f"column_{i + 1}" for i, name in enumerate(split[delimiter])]
        repeated = next((n for n in names if names.count(n) > 1), None)
        if repeated is not None:
            raise LogError(f"{log.path}:1: column {repeated!r} appears twice in the header")
        if delimiter != default:
            self.notes.append(f"{log.path}: fields separated by {'tab' if delimiter == chr(9) else repr(delimiter)}")
        self._delimiters[log.path] = delimiter
        return delimiter, names

    def _parquet_select(self, group: list[LogFile]) -> str:
        source = f"read_parquet({_file_list(group)}, filename=true, file_row_number=true, union_by_name=true)"
        present = self._describe(source, group[0].path if len(group) == 1 else f"{len(group)} Parquet files")
        self._check_columns(present, group[0].path if len(group) == 1 else f"{group[0].path} (and others)")
        return self._typed_select(source, present, "filename AS _file, file_row_number + 1 AS _line, NULL AS _text")

    # -- how times were read -----------------------------------------------------------------------

    def epoch_notes(self) -> list[str]:
        """Which files had epoch numbers as `ts`, read in which unit (a second scan: call it only when some were)."""
        rows = self._fetch("""
            SELECT _file, _ts_epoch, count(*), min(ts), max(ts) FROM exposure_rows
            WHERE _problem IS NULL AND _ts_epoch IS NOT NULL GROUP BY ALL ORDER BY 1, 2""")
        return [f"{file}: ts read as epoch {EPOCH_UNITS[unit]} in {count:,} records "
                f"({low:%Y-%m-%d %H:%M:%S} to {high:%Y-%m-%d %H:%M:%S} UTC)" for file, unit, count, low, high in rows]

    # -- running queries ---------------------------------------------------------------------------

    def query(self, sql: str, label: str = "scanning") -> list[tuple]:
        """Run SQL and fetch all rows; reports DuckDB's progress while it runs, when asked to."""
        if self.progress is None:
            return self._fetch(sql)
        done = threading.Event()

        def poll() -> None:
            while not done.wait(0.5):
                try:
                    fraction = self.con.query_progress()
                except duckdb.Error:
                    continue
                if fraction is not None and fraction >= 0:
                    self.progress(label, min(fraction / 100, 1.0))

        poller = threading.Thread(target=poll, daemon=True)
        poller.start()
        try:
            return self._fetch(sql)
        finally:
            done.set()
            poller.join()
            self.progress(label, 1.0)

    def _fetch(self, sql: str) -> list[tuple]:
        try:
            return self.con.execute(sql).fetchall()
        except duckdb.Error as exc:
            raise LogError(_read_error(exc)) from None

    def execute(self, sql: str, label: str = "scanning") -> None:
        self.query(sql, label)

    # -- malformed records -------------------------------------------------------------------------

    def malformed(self, counts_by_kind: Mapping[str, int]) -> Malformed:
        """Malformed records: kinds counted in `exposure_rows` plus rows the CSV reader rejected.

        Each scan of the view logs its rejected rows again, and a row may have
        several errors: one per file line is kept.
        """
        result = Malformed(counts={k: v for k, v in counts_by_kind.items() if v})
        examples = self._fetch(f"""
            SELECT _problem, _file, _line, _detail, _text FROM (
                SELECT *, row_number() OVER (PARTITION BY _problem ORDER BY _file, _line) AS n
                FROM exposure_rows WHERE _problem IS NOT NULL)
            WHERE n <= {EXAMPLES_PER_KIND} ORDER BY _problem, n""") if result.total else []
        for kind, file, line, detail, text in examples:
            result.examples.append(MalformedExample(kind, file, line, detail or kind.replace("_", " "), text))
        for name in self._csv_rejects:
            for kind, file, line, detail, text in self._fetch(f"""
                    SELECT CASE WHEN e.error_type = 'MISSING COLUMNS' THEN 'truncated' ELSE 'unparseable' END,
                           s.file_path, e.line, e.error_message, left(e.csv_line, 300)
                    FROM {name}_errors e JOIN {name}_scans s USING (scan_id, file_id)
                    QUALIFY row_number() OVER (PARTITION BY s.file_path, e.line ORDER BY e.scan_id, e.column_idx) = 1
                    ORDER BY 2, 3"""):
                result.counts[kind] = result.counts.get(kind, 0) + 1
                if sum(1 for ex in result.examples if ex.kind == kind) < EXAMPLES_PER_KIND:
                    result.examples.append(MalformedExample(kind, file, line, detail, text))
        _locate_lines(result.examples, {f.path: f for f in self.files}, self._delimiters)
        result.examples.sort(key=lambda ex: (PROBLEM_KINDS.index(ex.kind), ex.file, ex.line or 0))
        return result

    def close(self) -> None:
        self.con.close()


def _locate_lines(examples: list[MalformedExample], files: Mapping[str, LogFile],
                  delimiters: Mapping[str, str]) -> None:
    """Line numbers of JSON Lines and CSV examples, found by reading each file only as far as its last example."""
    wanted: dict[str, dict[str, list[MalformedExample]]] = {}
    for ex in examples:
        if ex.line is None and ex.text is not None and ex.file in files and files[ex.file].format != "parquet":
            wanted.setdefault(ex.file, {}).setdefault(ex.text, []).append(ex)
    for path, by_text in wanted.items():
        remaining = sum(len(v) for v in by_text.values())
        with closing(_numbered_records(files[path], delimiters.get(path))) as records:
            for number, text in records:
                unplaced = next((ex for ex in by_text.get(text[:300], ()) if ex.line is None), None)
                if unplaced is not None:
                    unplaced.line = number
                    remaining -= 1
                    if remaining == 0:
                        break


def _numbered_records(log: LogFile, delimiter: str | None) -> Iterator[tuple[int, str]]:
    """(first line number, text) of each record: a JSON line, or a CSV row's fields joined by `delimiter`."""
    opener = gzip.open if log.compressed else open
    with opener(log.path, "rb") as raw:
        stream = io.TextIOWrapper(raw, encoding="utf-8-sig", errors="replace", newline="" if delimiter else "\n")
        if delimiter is None:
            for number, line in enumerate(stream, start=1):
                yield number, line.rstrip("\r\n")
            return
        rows = csv.reader(stream, delimiter=delimiter)
        next(rows, None)
        start = rows.line_num + 1
        for row in rows:
            yield start, delimiter.join(row)
            start = rows.line_num + 1


def _read_error(exc: duckdb.Error) -> str:
    """One line for an error DuckDB raised while scanning, naming the file when DuckDB does."""
    file = re.search(r"^\s*file = (.+)$", str(exc), re.MULTILINE)
    if file and "state machine" in str(exc):
        return (f"{file.group(1).strip()}: cannot be read as CSV: its rows do not split consistently "
                f"(line ends that mix CRLF and LF, or a quote left open)")
    return f"cannot read the logs: {_first_line(exc)}"


def _first_line(exc: BaseException) -> str:
    return str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
