"""The SQL of the DuckDB engine, as pure functions: names and designs in, query text out.

Every format is read into the same normalised columns (`exposure_rows`):
the contract's field names, typed, one row per record. A record that cannot
be used keeps its row, with `_problem` set to its kind (`unparseable`,
`truncated`, `missing_field`, `wrong_type`) and `_detail` saying what is
wrong, so nothing is dropped silently. JSON Lines are read as raw lines and
parsed in SQL, one pass: that keeps every line, good or bad, and blank
lines keep the line count right.

Logs written by other systems bend the contract in ordinary ways; the
reading step normalises them, in SQL (the macros of `NORMALISE`), the
same way for every format:

- `ts`: ISO-8601 / RFC 3339 with `T` or a space, `Z`, an offset (converted
  to UTC) or no zone (taken as UTC, as the contract's times are UTC), any
  fraction of a second, lower-case `t`/`z`, or a plain date (midnight UTC);
  or a number of seconds, milliseconds, microseconds or nanoseconds since
  1970, told apart by magnitude (below 10^11 seconds, below 10^14
  milliseconds, below 10^17 microseconds, below 10^20 nanoseconds); which
  unit was read in which file is said by the scan's epoch notes.
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

from dataclasses import dataclass, field
from datetime import date, timedelta
from typing import Iterable, Mapping, Sequence

from bucketing import RECORD_FIELDS

from ._designs import Design
from ._engine import NO_VALUE

REQUIRED_FIELDS = ("unit", "experiment", "arm", "ts")
TEXT_FIELDS = ("unit_type", "layer", "experiment", "arm", "config")
EXAMPLES_PER_KIND = 5

NORMALISE = """
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


@dataclass(frozen=True)
class FieldNames:
    """Which log column holds each field of the record and each unit attribute kept (named `a_<index>`).

    `mapped` is what the caller asked for: record field or attribute -> log
    column; a name it does not map is its own column.
    """

    columns: Mapping[str, str]  # record field -> log column, for every field of the record
    attributes: tuple[str, ...] = ()
    mapped: Mapping[str, str] = field(default_factory=dict)
    defaults: Mapping[str, str] = field(default_factory=dict)  # record field -> value, where no source has it

    @classmethod
    def of(cls, columns: Mapping[str, str] | None, attributes: Iterable[str],
           defaults: Mapping[str, str] | None = None) -> FieldNames:
        mapped = dict(columns or {})
        return cls({name: mapped.get(name, name) for name in RECORD_FIELDS}, tuple(dict.fromkeys(attributes)), mapped,
                   dict(defaults or {}))

    def attribute_column(self, name: str) -> str:
        return f"a_{self.attributes.index(name)}"

    def log_column(self, attribute: str) -> str:
        """The log column that holds a unit attribute."""
        return self.mapped.get(attribute, attribute)


@dataclass(frozen=True)
class Select:
    """A SELECT of the normalised columns, and whether its times are text (so epoch numbers may occur)."""

    sql: str
    times_as_text: bool


def text(value: str) -> str:
    """A SQL string literal."""
    return "'" + value.replace("'", "''") + "'"


def ident(name: str) -> str:
    """A SQL identifier, quoted."""
    return '"' + name.replace('"', '""') + '"'


def file_list(paths: Sequence[str]) -> str:
    return "[" + ", ".join(text(p) for p in paths) + "]"


DUCKDB_MAX_LINE = 2_000_000  # DuckDB's own default limit of a line, in bytes
DUCKDB_BUFFER = 32 * 1024 * 1024  # and of its read buffer


def line_limits(max_line_bytes: int) -> str:
    """Reader options that let every line up to the cap through (longer ones never reach a reader: see `_files`)."""
    if max_line_bytes + 2 <= DUCKDB_MAX_LINE:
        return ""
    return f", max_line_size={max_line_bytes + 2}, buffer_size={max(DUCKDB_BUFFER, 2 * (max_line_bytes + 2))}"


def raw_lines(paths: Sequence[str], options: str = "") -> str:
    """JSON Lines files as one text column `line`, however their lines end."""
    # strict_mode off: one column only, and it lets lines end in CRLF and LF within one file
    return (f"read_csv({file_list(paths)}, columns={{'line': 'VARCHAR'}}, delim=chr(1), quote='', escape='', "
            f"header=false, auto_detect=false, strict_mode=false{', ' + options if options else ''})")


def json_pointer(key: str) -> str:
    """The JSON Pointer (RFC 6901) of a top-level key: no quoting rules but `~` and `/`, whatever else the key holds."""
    return "/" + key.replace("~", "~0").replace("/", "~1")


def file_label(column: str, originals: Mapping[str, str]) -> str:
    """The log's own path for a reader's file name column (clean copies stand for the logs they were made from)."""
    if not originals:
        return column
    return "CASE " + column + " " + " ".join(f"WHEN {text(copy)} THEN {text(log)}" for copy, log in originals.items()) \
        + f" ELSE {column} END"


def normalised_select(source: str, values: Mapping[str, str], kinds: Mapping[str, str], names: FieldNames,
                      native: Iterable[str] = (), broken: tuple[str, str] | None = None, extra: str = "") -> Select:
    """A SELECT of the normalised columns over `source`, from per-field text expressions and type checks.

    `values[f]` is the field's value as text (NULL when absent), except
    for the fields in `native`: a `ts` of a TIMESTAMP type or a `forced`
    of BOOLEAN type, kept as they are. `kinds[f]` is NULL when the field's
    value is acceptable, else what was found. Text times and flags are
    read once, by the `NORMALISE` macros in an inner SELECT, and checked here.
    `broken` is (kind, detail) for records that could not be parsed at all;
    `extra` adds columns to the outer SELECT (it may use `_problem`).
    """
    kinds = dict(kinds)
    native = set(native)
    inner = []
    if "ts" in native:
        ts, epoch = f"CAST({values['ts']} AS TIMESTAMP)", "NULL::UTINYINT"
    else:
        inner += [f"time_of({values['ts']}) AS _ts_value", f"time_epoch_unit({values['ts']}) AS _ts_epoch"]
        ts, epoch = "_ts_value", "_ts_epoch"
        kinds["ts"] = f"CASE WHEN {ts} IS NULL THEN {text(TIME_EXPECTED)} || {values['ts']} END"
    if "forced" in native:
        forced = f"coalesce({values['forced']}, false)"
    else:
        inner.append(f"flag_of({values['forced']}) AS _forced_value")
        forced = "_forced_value"
        kinds["forced"] = f"CASE WHEN {forced} IS NULL THEN {text(FLAG_EXPECTED)} || {values['forced']} END"
    problems = [broken] if broken else []
    problems += [(f"CASE WHEN {kinds[n]} IS NOT NULL THEN 'wrong_type' END",
                  f"'field ' || {text(repr(names.columns[n]))} || ': ' || {kinds[n]}")
                 for n in RECORD_FIELDS if n in kinds]
    problems += [(f"CASE WHEN {values[n]} IS NULL THEN 'missing_field' END",
                  f"'field ' || {text(repr(names.columns[n]))} || ' is missing'") for n in REQUIRED_FIELDS]
    problem = "coalesce(" + ", ".join(kind for kind, _ in problems) + ")"
    detail = "CASE " + " ".join(f"WHEN {kind} IS NOT NULL THEN {message}" for kind, message in problems) + " END"
    select = [f"{problem} AS _problem", f"{detail} AS _detail", f"{values['unit']} AS unit"]
    select += [f"{values[n]} AS {n}" for n in TEXT_FIELDS]
    select += [f"coalesce({forced}, false) AS forced", f"{ts} AS ts", f"{epoch} AS _ts_epoch"]
    select += [f"{values['a:' + a]} AS a_{i}" for i, a in enumerate(names.attributes)]
    if extra:
        select.append(extra)
    source = f"(SELECT *, {', '.join(inner)} FROM {source})" if inner else source
    return Select(f"SELECT {', '.join(select)} FROM {source}", "ts" not in native)


def jsonl_select(paths: Sequence[str], names: FieldNames, rejects: str, originals: Mapping[str, str] = {},
                 max_line_bytes: int = DUCKDB_MAX_LINE, absent: Iterable[str] = ()) -> Select:
    """JSON Lines files: each line parsed in SQL; lines that are not objects are `unparseable` or `truncated`.

    `originals` maps a clean copy among `paths` to the log it stands for. Fields in `absent` (no sampled record
    has them) take their value from `names.defaults`, if any.
    """
    fields = [names.columns[n] for n in RECORD_FIELDS] + [names.log_column(a) for a in names.attributes]
    json_paths = "[" + ", ".join(text(json_pointer(n)) for n in fields) + "]"
    index = {n: i + 1 for i, n in enumerate(list(RECORD_FIELDS) + ["a:" + a for a in names.attributes])}
    values = {k: f"v[{i}]" for k, i in index.items()}
    values.update({n: text(names.defaults[n]) for n in absent if n in names.defaults})
    types = {k: f"t[{i}]" for k, i in index.items()}
    values["unit"] = f"CASE WHEN {types['unit']} = 'VARCHAR' THEN {values['unit']} ELSE integer_text({values['unit']}) END"
    kinds = {"unit": f"CASE WHEN {types['unit']} <> 'NULL' AND {values['unit']} IS NULL "
                     f"THEN 'expected a string or an integer, found ' || lower({types['unit']}) END"}
    kinds.update({n: f"CASE WHEN {types[n]} NOT IN ('VARCHAR', 'NULL', 'BIGINT', 'UBIGINT') "
                     f"THEN 'expected a string, found ' || lower({types[n]}) END" for n in TEXT_FIELDS})
    cut_short = "starts_with(ltrim(line), '{') AND NOT ends_with(rtrim(line), '}')"
    broken = (f"CASE WHEN NOT is_object THEN CASE WHEN {cut_short} THEN 'truncated' ELSE 'unparseable' END END",
              f"CASE WHEN {cut_short} THEN 'record cut short' ELSE 'not a JSON object' END")
    source = raw_lines(paths, f"filename=true, store_rejects=true, rejects_table='{rejects}_errors', "
                              f"rejects_scan='{rejects}_scans'{line_limits(max_line_bytes)}")
    parsed = f"""(
        SELECT filename, line, is_object,
               CASE WHEN is_object THEN json_extract_string(line, {json_paths}) END AS v,
               CASE WHEN is_object THEN json_type(line, {json_paths}) END AS t
        FROM (
            SELECT filename, line, CASE WHEN json_valid(line) THEN json_type(line) = 'OBJECT' ELSE false END AS is_object
            FROM {source}
            WHERE line IS NOT NULL AND trim(line) <> ''
        )
    )"""
    extra = (f"{file_label('filename', originals)} AS _file, NULL::BIGINT AS _line, "
             f"CASE WHEN _problem IS NOT NULL THEN left(line, 300) END AS _text")
    return normalised_select(parsed, values, kinds, names, broken=broken, extra=extra)


def jsonl_keys(paths: Sequence[str], sample_lines: int, max_line_bytes: int = DUCKDB_MAX_LINE) -> str:
    """The keys of the first `sample_lines` JSON objects of the files (lines the reader rejects, such as text that
    is not UTF-8, are passed over: the records' own reading counts them)."""
    return f"""
        SELECT DISTINCT unnest(json_keys(line)) FROM (
            SELECT line FROM {raw_lines(paths, "ignore_errors=true" + line_limits(max_line_bytes))}
            WHERE json_valid(line) AND json_type(line) = 'OBJECT' LIMIT {int(sample_lines)})"""


NATIVE_TYPES = {"ts": "TIMESTAMP", "forced": "BOOLEAN"}  # kept as they are: formatting them as text costs a lot


def typed_select(source: str, present: Mapping[str, str], names: FieldNames, extra: str) -> Select:
    """The normalised SELECT over a typed source (CSV read as text, Parquet, or an in-memory table).

    `present` maps each column of the source to its DuckDB type.
    """
    values: dict[str, str] = {}
    kinds: dict[str, str] = {}
    native = []
    for name in RECORD_FIELDS:
        column = names.columns[name]
        kind = present.get(column)
        if kind is None:
            values[name] = text(names.defaults[name]) if name in names.defaults else "NULL::VARCHAR"
        elif name in NATIVE_TYPES and kind.startswith(NATIVE_TYPES[name]):
            values[name] = ident(column)
            native.append(name)
        elif kind == "VARCHAR":
            values[name] = ident(column)
        elif name == "unit" and kind in ("DOUBLE", "FLOAT"):
            values[name] = f"integer_text(CAST({ident(column)} AS VARCHAR))"
            kinds[name] = (f"CASE WHEN {ident(column)} IS NOT NULL AND {values[name]} IS NULL "
                           f"THEN 'expected a string or an integer, found ' || {ident(column)} END")
        else:
            values[name] = f"CAST({ident(column)} AS VARCHAR)"
    for attr in names.attributes:
        column = names.log_column(attr)
        values["a:" + attr] = f"CAST({ident(column)} AS VARCHAR)" if column in present else "NULL::VARCHAR"
    return normalised_select(source, values, kinds, names, native, extra=extra)


def csv_select(path: str, delimiter: str, head: Sequence[str], names: FieldNames, rejects: str, label: str,
               max_line_bytes: int = DUCKDB_MAX_LINE) -> Select:
    """One CSV file, every column read as text, with the delimiter and column names of its header; `label` names it."""
    options = f"delim={text(delimiter)}, quote='\"', escape='\"', header=true, auto_detect=false"
    columns = "{" + ", ".join(f"{text(c)}: 'VARCHAR'" for c in head) + "}"
    source = (f"read_csv({text(path)}, {options}, columns={columns}, store_rejects=true, "
              f"rejects_table='{rejects}_errors', rejects_scan='{rejects}_scans'{line_limits(max_line_bytes)})")
    fields = ", ".join(f"coalesce({ident(c)}, '')" for c in head)
    extra = (f"{text(label)} AS _file, NULL::BIGINT AS _line, "
             f"CASE WHEN _problem IS NOT NULL THEN left(concat_ws({text(delimiter)}, {fields}), 300) END AS _text")
    return typed_select(source, {c: "VARCHAR" for c in head}, names, extra)


def parquet_source(paths: Sequence[str]) -> str:
    return f"read_parquet({file_list(paths)}, filename=true, file_row_number=true, union_by_name=true)"


def parquet_select(source: str, present: Mapping[str, str], names: FieldNames) -> Select:
    return typed_select(source, present, names, "filename AS _file, file_row_number + 1 AS _line, NULL AS _text")


def table_select(view: str, present: Mapping[str, str], names: FieldNames, label: str) -> Select:
    """An in-memory table registered as `view`; its records are located by `label` only."""
    return typed_select(view, present, names, f"{text(label)} AS _file, NULL::BIGINT AS _line, NULL AS _text")


# -- the unit tables -------------------------------------------------------------------------------


PLAUSIBLE_FROM = date(2000, 1, 1)  # a record dated before this is implausible (a clock at zero, an epoch misread)
PLAUSIBLE_AHEAD = timedelta(days=366)  # ... and so is one dated more than this after the day of the audit


def plausible_days(today: date) -> tuple[date, date]:
    """The first and last day a record may plausibly be dated, on the day of the audit."""
    return PLAUSIBLE_FROM, today + PLAUSIBLE_AHEAD


def design_keys(designs: Sequence[Design]) -> list[tuple[str | None, str, int]]:
    """(layer or None, experiment, index) rows that name each design: a record that logs no layer takes the first
    design of that experiment name, as does a record whose layer is NULL."""
    keys: dict[tuple[str | None, str], int] = {}
    for index, d in enumerate(designs):
        keys.setdefault((d.layer, d.experiment), index)
        keys.setdefault((None, d.experiment), index)
    return [(layer, experiment, index) for (layer, experiment), index in keys.items()]


def design_tables(designs: Sequence[Design]) -> list[tuple[str, list]]:
    """Statements and their parameters that load the designs as tables: `design_keys`, `design_arms`,
    `design_windows` (one row per design with dates). Joins on them cost the same for 1 design or 100,000."""
    keys = design_keys(designs)
    arms = [(index, position, arm) for index, d in enumerate(designs) for position, arm in enumerate(d.arms)]
    windows = [(layer, experiment, designs[index].start, designs[index].end) for layer, experiment, index in keys
               if designs[index].start or designs[index].end]

    def table(name: str, columns: str, rows: list[tuple]) -> tuple[str, list]:
        names = [c.split()[0] for c in columns.split(", ")]
        selects = ", ".join(f"CAST(unnest(${i + 1}) AS {c.split()[1]}) AS {n}"
                            for i, (n, c) in enumerate(zip(names, columns.split(", "))))
        values = [list(column) for column in zip(*rows)] if rows else [[] for _ in names]
        return f"CREATE OR REPLACE TEMP TABLE {name} AS SELECT {selects}", values

    return [table("design_keys", "layer VARCHAR, experiment VARCHAR, exp INTEGER", keys),
            table("design_arms", "exp INTEGER, arm_index INTEGER, arm VARCHAR", arms),
            table("design_windows", "layer VARCHAR, experiment VARCHAR, first_day DATE, last_day DATE", windows)]


def _design_of(rows: str) -> str:
    """`rows` with the index of their design, `exp` (NULL when none): records whose layer is logged match that layer."""
    return (f"{rows} LEFT JOIN design_keys k ON k.experiment = {rows}.experiment "
            f"AND k.layer IS NOT DISTINCT FROM {rows}.layer")


def unit_arms(kept: Sequence[str], epoch_times: bool, windows: bool, plausible: tuple[date, date],
              window: tuple[date | None, date | None] = (None, None)) -> str:
    """The one pass over the records: a row per unit and logged (layer, experiment, arm), `unit_arms`.

    Each row has the unit's records, how many of them repeat another one
    exactly (same unit, arm and time), and its first exposure in that arm:
    the time and the `kept` columns then. Malformed records and records
    outside their experiment's dates are only counted: their rows have no
    unit. A record dated outside the `plausible` days is `implausible`, and
    outside its experiment's dates whatever they are; `windows` says
    whether some design has dates (in `design_windows`). Usable records
    dated outside the audit's `window` (first and last day, both included)
    are not read at all. When the `config` column is kept, each row also
    lists the config versions its records name (`versions`).
    """
    since, until = window
    bounds = ([f"ts >= DATE '{since.isoformat()}'"] if since else []) + \
        ([f"ts < DATE '{until.isoformat()}' + INTERVAL 1 DAY"] if until else [])
    inside = f"WHERE _problem IS NOT NULL OR ({' AND '.join(bounds)})" if bounds else ""
    values = f"list_value({', '.join(kept)})" if kept else "NULL::VARCHAR[]"
    epoch = "bool_or(_ts_epoch IS NOT NULL)" if epoch_times else "false"
    versions = ("list_distinct(list(config) FILTER (WHERE unit IS NOT NULL))" if "config" in kept
                else "NULL::VARCHAR[]")
    first, last = plausible
    implausible = (f"coalesce(ts < TIMESTAMP '{first.isoformat()}' OR "
                   f"ts >= TIMESTAMP '{(last + timedelta(days=1)).isoformat()}', false)")
    source = "exposure_rows"
    dated = "false"
    if windows:
        source = ("exposure_rows LEFT JOIN design_windows w ON w.experiment = exposure_rows.experiment "
                  "AND w.layer IS NOT DISTINCT FROM exposure_rows.layer")
        dated = "coalesce(CAST(ts AS DATE) < w.first_day OR CAST(ts AS DATE) > w.last_day, false)"
    return f"""
        CREATE TEMP TABLE unit_arms AS
        SELECT * EXCLUDE (times), records - list_unique(times) AS repeats
        FROM (
            SELECT _problem, layer, experiment, arm, outside, implausible, unit, count(*) AS records,
                   min(ts) AS first_ts, max(ts) AS last_ts,
                   arg_min(kept, ts) AS first_kept, bool_or(forced) AS forced,
                   list(ts) FILTER (WHERE unit IS NOT NULL) AS times, {epoch} AS epoch_times, {versions} AS versions
            FROM (SELECT * REPLACE (CASE WHEN _problem IS NULL AND NOT outside THEN unit END AS unit)
                  FROM (SELECT _problem, layer, experiment, arm, implausible OR window_outside AS outside, implausible,
                               unit, ts, forced, _ts_epoch, config, {values} AS kept
                        FROM (SELECT exposure_rows.*, {implausible} AS implausible, {dated} AS window_outside
                              FROM {source} {inside})))
            GROUP BY _problem, layer, experiment, arm, outside, implausible, unit)"""


IMPLAUSIBLE = """
    SELECT sum(records), min(first_ts), max(last_ts) FROM unit_arms WHERE implausible AND _problem IS NULL"""


CENSUS = """
    SELECT _problem, layer, experiment, arm, outside, sum(records), sum(repeats), bool_or(epoch_times)
    FROM unit_arms GROUP BY ALL"""


def unit_rows(kept: Sequence[str]) -> str:
    """One row per unit and experiment, `unit_rows`: its arm at first exposure, its records, and whether it saw
    several arms.

    Experiments and arms are those of the design tables (`design_tables`).
    A unit seen in several arms is left out of every count (`multi`), so
    which of them comes first when two exposures share their time does not
    matter, unless its arm changed only where the config version its records
    name changed (`moved`: no version is logged with two of its arms, as
    when a ramp's new weights move it): that unit is counted at its first
    exposure, under the design then in force.
    """
    return f"""
        CREATE TEMP TABLE unit_rows AS
        SELECT * EXCLUDE (first_kept, by_version), arm_low <> arm_high AND NOT by_version AS multi,
               arm_low <> arm_high AND by_version AS moved
               {''.join(f', first_kept[{i + 1}] AS {c}' for i, c in enumerate(kept))}
        FROM (
            SELECT k.exp, unit, min(first_ts) AS first_ts, arg_min(a.arm_index, first_ts) AS arm,
                   arg_min(first_kept, first_ts) AS first_kept, min(a.arm_index) AS arm_low,
                   max(a.arm_index) AS arm_high, bool_or(forced) AS forced, sum(records) AS records,
                   coalesce(bool_and(len(versions) > 0)
                            AND sum(len(versions)) = len(list_distinct(flatten(list(versions)))), false) AS by_version
            FROM {_design_of("unit_arms")}
            JOIN design_arms a ON a.exp = k.exp AND a.arm = unit_arms.arm
            WHERE unit IS NOT NULL
            GROUP BY k.exp, unit)"""


def segment_where(segment: Mapping[str, str], names: FieldNames) -> str:
    """Units of a segment (attribute -> value; `NO_VALUE` for units without the attribute)."""
    if not segment:
        return "true"
    return " AND ".join(f"coalesce({names.attribute_column(k)}, {text(NO_VALUE)}) = {text(v)}"
                        for k, v in segment.items())


def tested_units(experiment: int | None, where: str = "true") -> str:
    """The units an experiment's tests count (of every experiment when None): one arm only, not forced."""
    which = "true" if experiment is None else f"exp = {int(experiment)}"
    return f"{which} AND NOT multi AND NOT forced AND ({where})"


LEFT_OUT_UNITS = """
    SELECT exp, count(*) FILTER (WHERE multi), count(*) FILTER (WHERE forced AND NOT multi), count(*) FILTER (WHERE moved)
    FROM unit_rows GROUP BY exp"""


def multi_arm_examples(per_experiment: int) -> str:
    """The first units (by id) of each experiment seen in several arms."""
    return f"""
        SELECT exp, unit, arm_low, arm_high FROM unit_rows WHERE multi
        QUALIFY row_number() OVER (PARTITION BY exp ORDER BY unit) <= {int(per_experiment)} ORDER BY exp, unit"""


EPOCH_NOTES = """
    SELECT _file, _ts_epoch, count(*), min(ts), max(ts) FROM exposure_rows
    WHERE _problem IS NULL AND _ts_epoch IS NOT NULL GROUP BY ALL ORDER BY 1, 2"""


def malformed_examples(per_kind: int = EXAMPLES_PER_KIND) -> str:
    """The first malformed records of each kind, in file and line order."""
    return f"""
        SELECT _problem, _file, _line, _detail, _text FROM (
            SELECT *, row_number() OVER (PARTITION BY _problem ORDER BY _file, _line) AS n
            FROM exposure_rows WHERE _problem IS NOT NULL)
        WHERE n <= {int(per_kind)} ORDER BY _problem, n"""


def rejected_rows(rejects: str) -> str:
    """Rows a CSV reader rejected, one per file line (a row may have several errors; each scan logs it again)."""
    return f"""
        SELECT CASE e.error_type WHEN 'MISSING COLUMNS' THEN 'truncated' WHEN 'LINE SIZE OVER MAXIMUM' THEN 'too_long'
                    ELSE 'unparseable' END,
               s.file_path, e.line, e.error_message, left(e.csv_line, 300)
        FROM {rejects}_errors e JOIN {rejects}_scans s USING (scan_id, file_id)
        QUALIFY row_number() OVER (PARTITION BY s.file_path, e.line ORDER BY e.scan_id, e.column_idx) = 1
        ORDER BY 2, 3"""
