"""Reading exposure logs into DuckDB: files, formats, column names, malformed records.

`open_logs` resolves files, globs and directories (JSON Lines, CSV, TSV,
Parquet; gzip by suffix), and defines one DuckDB view, `exposure_rows`,
with the contract's field names, typed, one row per record, whatever the
source format. A record that cannot be used keeps its row, with `_problem`
set to its kind (`unparseable`, `truncated`, `missing_field`, `wrong_type`)
and `_detail` saying what is wrong, so nothing is dropped silently.

JSON Lines are read as raw lines and parsed in SQL, one pass: that keeps
every line, good or bad, and blank lines keep the line count right.
"""

from __future__ import annotations

import csv
import glob
import gzip
import io
import threading
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable, Iterable, Mapping

import duckdb

from bucketing import RECORD_FIELDS

REQUIRED_FIELDS = ("unit", "experiment", "arm", "ts")
OPTIONAL_FIELDS = tuple(f for f in RECORD_FIELDS if f not in REQUIRED_FIELDS)
TEXT_FIELDS = ("unit_type", "layer", "experiment", "arm", "config")
PROBLEM_KINDS = ("unparseable", "truncated", "missing_field", "wrong_type")
EXAMPLES_PER_KIND = 5
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


def _sql_text(value: str) -> str:
    return "'" + value.replace("'", "''") + "'"


def _ident(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _file_list(files: list[LogFile]) -> str:
    return "[" + ", ".join(_sql_text(f.path) for f in files) + "]"


class LogScan:
    """An open DuckDB connection with the `exposure_rows` view over the given logs.

    `attributes` are the unit attributes kept (as text) for segments and
    replay; the view names them `a_<index>` in the order given, see `attribute_column`.
    """

    def __init__(self, files: list[LogFile], columns: Mapping[str, str] | None = None,
                 attributes: Iterable[str] = (), *, progress: Progress | None = None,
                 threads: int | None = None, memory_limit: str | None = None) -> None:
        if not files:
            raise LogError("no log files given")
        self.files = files
        self.columns = {name: (columns or {}).get(name, name) for name in RECORD_FIELDS}
        self.attributes = list(dict.fromkeys(attributes))
        self.progress = progress
        self.con = duckdb.connect()
        self.con.execute("SET TimeZone = 'UTC'")
        self.con.execute("SET enable_progress_bar = true")  # progress is tracked for query_progress() ...
        self.con.execute("SET enable_progress_bar_print = false")  # ... but never printed on stdout
        self.con.execute("SET preserve_insertion_order = false")  # every query that needs an order says so
        if threads:
            self.con.execute(f"SET threads = {int(threads)}")
        if memory_limit:
            self.con.execute(f"SET memory_limit = {_sql_text(memory_limit)}")
        self.present: set[str] = set()
        self._csv_rejects: list[str] = []
        parts = []
        by_format: dict[str, list[LogFile]] = {}
        for f in files:
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

    # -- per-format SELECTs, each giving the same normalised columns ------------------------------

    def _normalised(self, values: Mapping[str, str], kinds: Mapping[str, str], ts: str,
                    broken: tuple[str, str] | None = None) -> str:
        """SELECT list from per-field text expressions and per-field type checks.

        `values[f]` is the field's value as text (NULL when absent), except
        that `ts` and `forced` may keep a native TIMESTAMP or BOOLEAN type; `kinds[f]`
        is NULL when the field's type is acceptable, else what was found; `ts`
        is the time parsed as a UTC TIMESTAMP.
        `broken` is (kind, detail) for records that could not be parsed at all.
        """
        problems = [broken] if broken else []
        problems += [(f"CASE WHEN {values[n]} IS NULL THEN 'missing_field' END",
                      f"'field ' || {_sql_text(repr(self.columns[n]))} || ' is missing'") for n in REQUIRED_FIELDS]
        problems += [(f"CASE WHEN {kinds[n]} IS NOT NULL THEN 'wrong_type' END",
                      f"'field ' || {_sql_text(repr(self.columns[n]))} || ': ' || {kinds[n]}")
                     for n in RECORD_FIELDS if n in kinds]
        problem = "coalesce(" + ", ".join(kind for kind, _ in problems) + ")"
        detail = "CASE " + " ".join(f"WHEN {kind} IS NOT NULL THEN {text}" for kind, text in problems) + " END"
        select = [f"{problem} AS _problem", f"{detail} AS _detail", f"CAST({values['unit']} AS VARCHAR) AS unit"]
        select += [f"{values[n]} AS {n}" for n in TEXT_FIELDS]
        select.append(f"coalesce(TRY_CAST({values['forced']} AS BOOLEAN), false) AS forced")
        select.append(f"{ts} AS ts")
        select += [f"{values['a:' + a]} AS a_{i}" for i, a in enumerate(self.attributes)]
        return ", ".join(select)

    def _jsonl_select(self, group: list[LogFile]) -> str:
        self.present.update(RECORD_FIELDS)  # JSON Lines have no header: any field may be there
        names = [self.columns[n] for n in RECORD_FIELDS] + self.attributes
        paths = "[" + ", ".join(_sql_text('$."' + n.replace('"', '\\"') + '"') for n in names) + "]"
        index = {n: i + 1 for i, n in enumerate(list(RECORD_FIELDS) + ["a:" + a for a in self.attributes])}
        values = {k: f"v[{i}]" for k, i in index.items()}
        types = {k: f"t[{i}]" for k, i in index.items()}
        kinds = {
            "unit": f"CASE WHEN {types['unit']} NOT IN ('VARCHAR', 'BIGINT', 'UBIGINT') "
                    f"THEN 'expected a string or an integer, found ' || lower({types['unit']}) END",
            "forced": f"CASE WHEN {types['forced']} NOT IN ('BOOLEAN', 'NULL') "
                      f"THEN 'expected true or false, found ' || lower({types['forced']}) END",
            "ts": f"CASE WHEN {types['ts']} <> 'VARCHAR' THEN 'expected an ISO-8601 time, found ' || lower({types['ts']}) "
                  f"WHEN ts_value IS NULL THEN 'expected an ISO-8601 time, found ' || {values['ts']} END",
        }
        kinds.update({n: f"CASE WHEN {types[n]} NOT IN ('VARCHAR', 'NULL') "
                         f"THEN 'expected a string, found ' || lower({types[n]}) END" for n in TEXT_FIELDS})
        cut_short = "starts_with(ltrim(line), '{') AND NOT ends_with(rtrim(line), '}')"
        broken = (f"CASE WHEN NOT is_object THEN CASE WHEN {cut_short} THEN 'truncated' ELSE 'unparseable' END END",
                  f"CASE WHEN {cut_short} THEN 'record cut short' ELSE 'not a JSON object' END")
        select = self._normalised(values, kinds, "ts_value", broken)
        source = (f"read_csv({_file_list(group)}, columns={{'line': 'VARCHAR'}}, delim=chr(1), quote='', escape='', "
                  f"header=false, auto_detect=false, filename=true, store_rejects=true, "
                  f"rejects_table='rejects_jsonl_errors', rejects_scan='rejects_jsonl_scans')")
        self._csv_rejects.append("rejects_jsonl")
        return f"""
            SELECT filename AS _file, NULL::BIGINT AS _line, {select},
                   CASE WHEN _problem IS NOT NULL THEN left(line, 300) END AS _text
            FROM (
                SELECT *, TRY_CAST(TRY_CAST(v[{index['ts']}] AS TIMESTAMPTZ) AT TIME ZONE 'UTC' AS TIMESTAMP) AS ts_value
                FROM (
                    SELECT filename, line, is_object,
                           CASE WHEN is_object THEN json_extract_string(line, {paths}) END AS v,
                           CASE WHEN is_object THEN json_type(line, {paths}) END AS t
                    FROM (
                        SELECT filename, line, CASE WHEN json_valid(line) THEN json_type(line) = 'OBJECT' ELSE false END AS is_object
                        FROM {source}
                        WHERE line IS NOT NULL AND trim(line) <> ''
                    )
                )
            )"""

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

    def _typed_select(self, present: Mapping[str, str]) -> str:
        """Normalised columns from a typed source (CSV read as text, or Parquet)."""
        values, kinds = {}, {}
        native = {"ts": "TIMESTAMP", "forced": "BOOLEAN"}  # kept as they are: formatting them as text costs a lot
        for name in RECORD_FIELDS:
            column = self.columns[name]
            if column not in present:
                values[name] = "NULL::VARCHAR"
            elif present[column].startswith(("VARCHAR", native.get(name, "VARCHAR"))):
                values[name] = _ident(column)
            else:
                values[name] = f"CAST({_ident(column)} AS VARCHAR)"
        for attr in self.attributes:
            values["a:" + attr] = f"CAST({_ident(attr)} AS VARCHAR)" if attr in present else "NULL::VARCHAR"
        ts_type = present.get(self.columns["ts"], "")
        if ts_type.startswith("TIMESTAMP"):
            ts = f"CAST({_ident(self.columns['ts'])} AS TIMESTAMP)"
        else:
            text = values["ts"]
            ts = f"TRY_CAST(TRY_CAST({text} AS TIMESTAMPTZ) AT TIME ZONE 'UTC' AS TIMESTAMP)"
            kinds["ts"] = (f"CASE WHEN {text} IS NOT NULL AND {ts} IS NULL "
                           f"THEN 'expected an ISO-8601 time, found ' || {text} END")
        forced_type = present.get(self.columns["forced"], "")
        if forced_type and forced_type != "BOOLEAN":
            text = values["forced"]
            kinds["forced"] = (f"CASE WHEN {text} IS NOT NULL AND TRY_CAST({text} AS BOOLEAN) IS NULL "
                               f"THEN 'expected true or false, found ' || {text} END")
        return self._normalised(values, kinds, ts)

    def _csv_select(self, log: LogFile, index: int) -> str:
        delim = "\\t" if log.format == "tsv" else ","
        options = f"delim=E'{delim}', quote='\"', escape='\"', header=true, auto_detect=false"
        head = self._csv_header(log, delim)
        columns = "{" + ", ".join(f"{_sql_text(c)}: 'VARCHAR'" for c in head) + "}"
        present = {c: "VARCHAR" for c in head}
        self._check_columns(present, log.path)
        name = f"rejects_csv_{index}"
        self._csv_rejects.append(name)
        source = (f"read_csv({_sql_text(log.path)}, {options}, columns={columns}, filename=true, "
                  f"store_rejects=true, rejects_table='{name}_errors', rejects_scan='{name}_scans')")
        return f"SELECT filename AS _file, NULL::BIGINT AS _line, NULL AS _text, {self._typed_select(present)} FROM {source}"

    def _csv_header(self, log: LogFile, delim: str) -> list[str]:
        opener = gzip.open if log.compressed else open
        try:
            with opener(log.path, "rt", encoding="utf-8", newline="") as stream:
                first = stream.readline()
        except (OSError, UnicodeDecodeError, EOFError) as exc:
            raise LogError(f"{log.path}: cannot read ({exc})") from None
        header = next(csv.reader([first], delimiter="\t" if delim == "\\t" else ","), [])
        if not header or not any(header):
            raise LogError(f"{log.path}:1: empty header line; a CSV log starts with the column names")
        return header

    def _parquet_select(self, group: list[LogFile]) -> str:
        source = f"read_parquet({_file_list(group)}, filename=true, file_row_number=true, union_by_name=true)"
        present = self._describe(source, group[0].path if len(group) == 1 else f"{len(group)} Parquet files")
        self._check_columns(present, group[0].path if len(group) == 1 else f"{group[0].path} (and others)")
        return f"SELECT filename AS _file, file_row_number + 1 AS _line, NULL AS _text, {self._typed_select(present)} FROM {source}"

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
            raise LogError(f"cannot read the logs: {_first_line(exc)}") from None

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
        _locate_lines(result.examples, {f.path: f for f in self.files})
        result.examples.sort(key=lambda ex: (PROBLEM_KINDS.index(ex.kind), ex.file, ex.line or 0))
        return result

    def close(self) -> None:
        self.con.close()


def _locate_lines(examples: list[MalformedExample], files: Mapping[str, LogFile]) -> None:
    """Line numbers of JSON Lines examples, found by reading only as far as the last one."""
    wanted: dict[str, dict[str, list[MalformedExample]]] = {}
    for ex in examples:
        if ex.line is None and ex.text is not None and ex.file in files and files[ex.file].format == "jsonl":
            wanted.setdefault(ex.file, {}).setdefault(ex.text, []).append(ex)
    for path, by_text in wanted.items():
        opener = gzip.open if files[path].compressed else open
        remaining = sum(len(v) for v in by_text.values())
        with opener(path, "rb") as raw:
            stream = io.TextIOWrapper(raw, encoding="utf-8", errors="replace", newline="\n")
            for number, line in enumerate(stream, start=1):
                pending = by_text.get(line.rstrip("\r\n")[:300])
                if pending:
                    unplaced = next((ex for ex in pending if ex.line is None), None)
                    if unplaced is not None:
                        unplaced.line = number
                        remaining -= 1
                        if remaining == 0:
                            break


def _first_line(exc: BaseException) -> str:
    return str(exc).strip().splitlines()[0] if str(exc).strip() else type(exc).__name__
