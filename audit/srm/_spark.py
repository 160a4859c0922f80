"""The Spark counting engine: `_engine.CountingEngine` on Apache Spark, for logs that live in a data lake.

    audit_logs("s3a://lake/exposures/2026-11-*/", config="configs/", engine="spark")
    audit_logs(spark.table("lake.exposures").where("day >= '2026-11-03'"), config=..., engine="spark")

The records are read and normalised in the cluster exactly as the DuckDB
engine reads them (`_sql` says how; this module says it again with the
DataFrame API), reduced to one row per unit and logged arm (`unit_arms`),
then to one row per unit and experiment (`unit_rows`); both stay in the
cluster, cached. Only small tables come back to the driver: counts per arm,
day and segment, the census, a few examples, and the replay sample, whose
arms the SDK recomputes in the executors (bucketing.batch, a pandas UDF).

The session: the active one if there is one, else `SPARK_REMOTE` (Spark
Connect) when set, else the one spark-submit configured, else local mode on
every core; `conf` adds settings (`--spark-conf key=value`). Times are read
in UTC, as the contract says.
"""

from __future__ import annotations

import gzip
import json
import os
import sys
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable, Iterator, Mapping, Sequence

from bucketing import RECORD_FIELDS, Config
from bucketing.batch import assign_frame, layer_column

from .._errors import LogError, MissingFieldError
from ._designs import Design
from ._engine import (
    CONFIG_VERSION, FIRST_DAY, NO_VALUE, ArmCounts, CensusRow, Progress, ReplayUnit, Segment, UnitSummary, Window,
)
from ._files import LogFile, format_of, resolve_files
from ._malformed import PROBLEM_KINDS, _with_lines
from ._results import Malformed, MalformedExample
from ._scan import CSV_DELIMITERS, EPOCH_UNITS
from ._sql import (
    EXAMPLES_PER_KIND, FLAG_EXPECTED, REQUIRED_FIELDS, TEXT_FIELDS, TIME_EXPECTED, FieldNames,
)

VERSION_COLUMNS = ["config", "unit_type"]
JSON_SAMPLE_LINES = 10_000  # JSON Lines have no header: their columns are the keys of the first records
CUBE_MAX_ROWS = 200_000  # above this many (experiment, arm, day, attributes) combinations, one Spark job per question


@dataclass(frozen=True)
class SparkTable:
    """A table of the Spark catalog (`--table db.name`), with optional filters (SQL, e.g. on its partitions)."""

    name: str
    filters: tuple[str, ...] = ()


def spark_session(conf: Mapping[str, str] | None = None) -> Any:
    """The active session, else one for `SPARK_REMOTE`, else a local one; `conf` is applied to either."""
    from pyspark.sql import SparkSession

    active = SparkSession.getActiveSession()
    if active is not None:
        for key, value in (conf or {}).items():
            active.conf.set(key, value)  # a setting fixed at start-up cannot change: Spark says so
        return active
    builder = SparkSession.builder.appName("sortition-srm")
    if os.environ.get("SPARK_REMOTE"):
        builder = builder.remote(os.environ["SPARK_REMOTE"])
    elif not os.environ.get("PYSPARK_GATEWAY_PORT"):  # set by spark-submit, whose --master then holds
        os.environ.setdefault("PYSPARK_PYTHON", sys.executable)  # local workers import this interpreter's sortition
        builder = builder.master("local[*]").config("spark.ui.showConsoleProgress", "false")
    for key, value in (conf or {}).items():
        builder = builder.config(key, value)
    return builder.getOrCreate()


class SparkEngine:
    name = "spark"

    def __init__(self, conf: Mapping[str, str] | None = None, session: Any = None) -> None:
        self.conf = dict(conf or {})
        self.session = session

    def read(self, source: Sequence[str] | Any, columns: Mapping[str, str] | None, attributes: Sequence[str], *,
             keep_versions: bool, log_format: str | None = None, progress: Progress | None = None,
             defaults: Mapping[str, str] | None = None) -> SparkUnitTables:
        spark = self.session or spark_session(self.conf)
        spark.conf.set("spark.sql.session.timeZone", "UTC")
        names = FieldNames.of(columns, attributes, defaults)
        reader = _Reader(spark, names)
        if type(source).__module__.startswith("pyspark."):
            rows = reader.frame(source, f"<spark.{type(source).__name__}>")
        elif isinstance(source, SparkTable):
            table = spark.table(source.name)
            for condition in source.filters:
                table = table.where(condition)
            rows = reader.frame(table, source.name)
        else:
            rows = reader.files([str(s) for s in source], log_format)
        return SparkUnitTables(spark, reader, rows, names, keep_versions)


# -- reading: the normalised columns of `_sql`, as Spark expressions ------------------------------------


def _functions() -> Any:
    from pyspark.sql import functions as F

    return F


def _window() -> Any:
    from pyspark.sql import Window

    return Window


def _is_uri(path: str) -> bool:
    return "://" in path and not path.startswith("file://")


class _Reader:
    """Turns sources into one DataFrame of normalised records (`_sql`'s `exposure_rows`)."""

    def __init__(self, spark: Any, names: FieldNames) -> None:
        self.spark = spark
        self.names = names
        self.notes: list[str] = []
        self.sources: list[str] = []
        self.present: set[str] = set()
        self.columns_seen: dict[str, None] = {}
        self.times_as_text = False
        self.local_files: dict[str, LogFile] = {}
        self.delimiters: dict[str, str] = {}
        self.jsonl: list[str] = []
        self.persisted: list[Any] = []  # frames kept in the cluster until the audit closes

    # sources

    def frame(self, frame: Any, label: str) -> Any:
        self.sources = [label]
        present = dict(frame.dtypes)
        self._check_columns(present, label)
        F = _functions()
        return self._typed(frame, present, F.lit(label), F.lit(None).cast("bigint"))

    def files(self, sources: list[str], log_format: str | None) -> Any:
        local = [s for s in sources if not _is_uri(s)]
        files = resolve_files(local, log_format) if local else []
        for uri in (s for s in sources if _is_uri(s)):
            detected = format_of(uri) or ((log_format, uri.lower().endswith(".gz")) if log_format else None)
            if detected is None:
                raise LogError(f"{uri}: unknown log format; name it .jsonl, .csv, .tsv or .parquet "
                               f"(optionally .gz), or give the format")
            files.append(LogFile(uri, *detected))
        if not files:
            raise LogError("no log files given")
        kept = [f for f in files if self._has_records(f)]
        if not kept:
            raise LogError(f"no exposure records: every log file is empty ({', '.join(f.path for f in files[:3])}"
                           f"{', …' if len(files) > 3 else ''})")
        self.sources = [f.path for f in kept]
        self.local_files = {f.path: f for f in kept if not _is_uri(f.path)}
        frames = []
        by_format: dict[str, list[LogFile]] = {}
        for f in kept:
            by_format.setdefault(f.format, []).append(f)
        for fmt, group in by_format.items():
            paths = [f.path for f in group]
            if fmt == "jsonl":
                frames.append(self._jsonl(paths))
            elif fmt == "parquet":
                frames.append(self._parquet(paths))
            else:
                frames += [self._csv(log) for log in group]
        rows = frames[0]
        for more in frames[1:]:
            rows = rows.unionByName(more)
        return rows

    def _spark_path(self, path: str) -> str:
        return path if _is_uri(path) else str(Path(path).resolve())

    def _given_name(self, column: Any) -> Any:
        """Spark's file URI turned back into the path as given, so that both engines name files alike."""
        F = _functions()
        mapping = []
        for given in self.sources:
            spark_path = self._spark_path(given)
            for form in {spark_path, "file:" + spark_path, "file://" + spark_path}:
                mapping += [F.lit(form), F.lit(given)]
        return F.coalesce(F.element_at(F.create_map(*mapping), column), column)

    def _has_records(self, log: LogFile) -> bool:
        if _is_uri(log.path):
            return True
        path = Path(log.path)
        if log.format == "parquet":
            empty = path.stat().st_size == 0
        else:
            opener: Callable[..., Any] = gzip.open if log.compressed else open
            try:
                with opener(log.path, "rt", encoding="utf-8-sig", newline="") as stream:
                    header = stream.readline() if log.format in ("csv", "tsv") else ""
                    empty = not any(line.strip() for line in stream) if header.strip() or log.format == "jsonl" else True
            except (OSError, UnicodeDecodeError, EOFError) as exc:
                raise LogError(f"{log.path}: cannot read ({exc})") from None
            if log.format in ("csv", "tsv") and empty:
                self.notes.append(f"{log.path}: {'a header and no records' if header.strip() else 'empty'}; skipped")
                return False
        if empty:
            self.notes.append(f"{log.path}: empty; skipped")
        return not empty

    def _check_columns(self, present: Mapping[str, str], where: str) -> None:
        columns = self.names.columns
        for name in REQUIRED_FIELDS:
            if columns[name] not in present and name not in self.names.defaults:
                raise MissingFieldError(f"{where}: no column {columns[name]!r} for field {name!r} "
                                        f"(columns: {', '.join(present)})", name, columns[name])
        self.present.update(n for n in RECORD_FIELDS if columns[n] in present)
        self.columns_seen.update(dict.fromkeys(present))

    def _parquet(self, paths: list[str]) -> Any:
        F = _functions()
        frame = self.spark.read.option("mergeSchema", "true").parquet(*[self._spark_path(p) for p in paths])
        present = dict(frame.dtypes)
        self._check_columns(present, paths[0] if len(paths) == 1 else f"{paths[0]} (and others)")
        frame = frame.select("*", F.col("_metadata.file_path").alias("_file_uri"),
                             F.col("_metadata.row_index").alias("_row_index"))
        return self._typed(frame, present, self._given_name(F.col("_file_uri")), F.col("_row_index") + 1)

    def _csv(self, log: LogFile) -> Any:
        F = _functions()
        delimiter, head = self._csv_layout(log)
        self._check_columns({c: "string" for c in head}, log.path)
        from pyspark.sql import types as T

        schema = T.StructType([T.StructField(name, T.StringType()) for name in head])
        frame = (self.spark.read.schema(schema).option("header", "true").option("sep", delimiter)
                 .option("quote", '"').option("escape", '"').option("multiLine", "true")
                 .option("mode", "PERMISSIVE").csv(self._spark_path(log.path)))
        text = F.substring(F.concat_ws(delimiter, *[F.coalesce(F.col(f"`{c}`"), F.lit("")) for c in head]), 1, 300)
        return self._typed(frame, {c: "string" for c in head}, F.lit(log.path), F.lit(None).cast("bigint"), text)

    def _csv_layout(self, log: LogFile) -> tuple[str, list[str]]:
        import csv

        if _is_uri(log.path):
            line = self.spark.read.text(log.path).limit(1).collect()[0][0]
        else:
            opener: Callable[..., Any] = gzip.open if log.compressed else open
            with opener(log.path, "rt", encoding="utf-8-sig", newline="") as stream:
                line = stream.readline()
        default = "\t" if log.format == "tsv" else ","
        candidates = [default] + [d for d in CSV_DELIMITERS if d != default]
        split = {d: [name.strip() for name in next(csv.reader([line], delimiter=d), [])] for d in candidates}
        required = [self.names.columns[n] for n in REQUIRED_FIELDS]
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

    def _jsonl(self, paths: list[str]) -> Any:
        """JSON Lines: each line parsed by Python's json in the executors, keeping each value's JSON type."""
        from pyspark.sql import types as T

        F = _functions()
        self.present.update(RECORD_FIELDS)
        self.jsonl += paths
        fields = [self.names.columns[n] for n in RECORD_FIELDS] + list(self.names.attributes)
        lines = (self.spark.read.text([self._spark_path(p) for p in paths])
                 .select(F.col("value").alias("line"), F.col("_metadata.file_path").alias("_file_uri"))
                 .where(F.trim("line") != ""))
        out = [T.StructField("line", T.StringType()), T.StructField("_file_uri", T.StringType()),
               T.StructField("_object", T.BooleanType())]
        out += [T.StructField(f"_v{i}", T.StringType()) for i in range(len(fields))]
        out += [T.StructField(f"_t{i}", T.StringType()) for i in range(len(fields))]
        # kept in the cluster: the census and the malformed examples read it again, and parsing is the slow part
        parsed = lines.mapInPandas(_json_values(fields), T.StructType(out)).persist()
        self.persisted.append(parsed)
        keys = list(RECORD_FIELDS) + ["a:" + a for a in self.names.attributes]
        values = {k: F.col(f"_v{i}") for i, k in enumerate(keys)}
        types = {k: F.col(f"_t{i}") for i, k in enumerate(keys)}
        values["unit"] = F.when(types["unit"] == "VARCHAR", values["unit"]).otherwise(_integer_text(values["unit"]))
        if self.names.defaults:  # a field no sampled record has takes its default
            keys_seen = {row[0] for row in lines.limit(JSON_SAMPLE_LINES)
                         .select(F.explode(F.json_object_keys("line"))).distinct().collect()}
            values.update({n: F.lit(v) for n, v in self.names.defaults.items() if self.names.columns[n] not in keys_seen})
        kinds = {"unit": F.when(types["unit"].isNotNull() & (types["unit"] != "NULL") & values["unit"].isNull(),
                                F.concat(F.lit("expected a string or an integer, found "), F.lower(types["unit"])))}
        kinds.update({n: F.when(~types[n].isin("VARCHAR", "NULL", "BIGINT", "UBIGINT"),
                                F.concat(F.lit("expected a string, found "), F.lower(types[n]))) for n in TEXT_FIELDS})
        cut_short = F.ltrim("line").startswith("{") & ~F.rtrim("line").endswith("}")
        broken = (F.when(~F.col("_object"), F.when(cut_short, "truncated").otherwise("unparseable")),
                  F.when(cut_short, "record cut short").otherwise("not a JSON object"))
        return self._normalised(parsed, values, kinds, native=(), broken=broken, file=self._given_name(F.col("_file_uri")),
                                line=F.lit(None).cast("bigint"), text=F.substring("line", 1, 300))

    def _typed(self, frame: Any, present: Mapping[str, str], file: Any, line: Any, text: Any = None) -> Any:
        """`_sql.typed_select` again: text values from typed columns, native timestamps and booleans kept."""
        F = _functions()
        values: dict[str, Any] = {}
        kinds: dict[str, Any] = {}
        native = []
        for name in RECORD_FIELDS:
            column = self.names.columns[name]
            kind = present.get(column)
            col = F.col(f"`{column}`")
            if kind is None:
                values[name] = F.lit(self.names.defaults.get(name)).cast("string")
            elif name == "ts" and kind.startswith("timestamp"):
                values[name] = col.cast("timestamp")
                native.append(name)
            elif name == "forced" and kind == "boolean":
                values[name] = col
                native.append(name)
            elif kind == "string":
                values[name] = col
            elif name == "unit" and kind in ("double", "float"):
                values[name] = _integer_text(col.cast("string"))
                kinds[name] = F.when(col.isNotNull() & values[name].isNull(),
                                     F.concat(F.lit("expected a string or an integer, found "), col.cast("string")))
            else:
                values[name] = col.cast("string")
        for attr in self.names.attributes:
            values["a:" + attr] = F.col(f"`{attr}`").cast("string") if attr in present else F.lit(None).cast("string")
        return self._normalised(frame, values, kinds, native, None, file, line,
                                text if text is not None else F.lit(None).cast("string"))

    def _normalised(self, frame: Any, values: dict[str, Any], kinds: dict[str, Any], native: Sequence[str],
                    broken: tuple[Any, Any] | None, file: Any, line: Any, text: Any) -> Any:
        F = _functions()
        if "ts" in native:
            ts, epoch = values["ts"], F.lit(None).cast("int")
        else:
            self.times_as_text = True
            ts, epoch = _time_of(values["ts"]), _time_epoch_unit(values["ts"])
            kinds["ts"] = F.when(ts.isNull(), F.concat(F.lit(TIME_EXPECTED), values["ts"]))
        if "forced" in native:
            forced = F.coalesce(values["forced"], F.lit(False))
        else:
            forced = _flag_of(values["forced"])
            kinds["forced"] = F.when(forced.isNull(), F.concat(F.lit(FLAG_EXPECTED), values["forced"]))
        problems = [broken] if broken else []
        problems += [(F.when(kinds[n].isNotNull(), F.lit("wrong_type")),
                      F.concat(F.lit(f"field {self.names.columns[n]!r}: "), kinds[n]))
                     for n in RECORD_FIELDS if n in kinds]
        problems += [(F.when(values[n].isNull(), F.lit("missing_field")), F.lit(f"field {self.names.columns[n]!r} is missing"))
                     for n in REQUIRED_FIELDS]
        problem = F.coalesce(*[kind for kind, _ in problems])
        detail = F.lit(None).cast("string")
        for kind, message in reversed(problems):
            detail = F.when(kind.isNotNull(), message).otherwise(detail)
        select = [problem.alias("_problem"), detail.alias("_detail"), values["unit"].alias("unit")]
        select += [values[n].alias(n) for n in TEXT_FIELDS]
        select += [F.coalesce(forced, F.lit(False)).alias("forced"), ts.alias("ts"), epoch.alias("_ts_epoch")]
        select += [values["a:" + a].alias(f"a_{i}") for i, a in enumerate(self.names.attributes)]
        select += [file.alias("_file"), line.alias("_line"), F.when(problem.isNotNull(), text).alias("_text")]
        return frame.select(*select)


def _json_values(fields: list[str]) -> Callable[[Iterator[Any]], Iterator[Any]]:
    """A pandas UDF body: each JSON line's fields as text and their JSON types, named as DuckDB names them."""

    def type_name(value: Any) -> str:
        if value is None:
            return "NULL"
        if isinstance(value, bool):
            return "BOOLEAN"
        if isinstance(value, int):
            return "BIGINT" if -2**63 <= value < 2**63 else "UBIGINT" if 0 <= value < 2**64 else "DOUBLE"
        if isinstance(value, float):
            return "DOUBLE"
        if isinstance(value, str):
            return "VARCHAR"
        return "OBJECT" if isinstance(value, dict) else "ARRAY"

    def text(value: Any) -> str | None:
        if value is None or isinstance(value, str):
            return value
        if isinstance(value, bool):
            return "true" if value else "false"
        if isinstance(value, (int, float)):
            return repr(value)
        return json.dumps(value, separators=(",", ":"), ensure_ascii=False)

    def parse(batches: Iterator[Any]) -> Iterator[Any]:
        import pandas as pd

        for batch in batches:
            objects: list[bool] = []
            values: list[list[str | None]] = [[] for _ in fields]
            types: list[list[str | None]] = [[] for _ in fields]
            for line in batch["line"]:
                try:
                    record = json.loads(line)
                except ValueError:
                    record = None
                is_object = isinstance(record, dict)
                objects.append(is_object)
                for i, name in enumerate(fields):
                    if is_object and name in record:
                        values[i].append(text(record[name]))
                        types[i].append(type_name(record[name]))
                    else:
                        values[i].append(None)
                        types[i].append(None)
            out = pd.DataFrame({"line": batch["line"], "_file_uri": batch["_file_uri"], "_object": objects})
            for i in range(len(fields)):
                out[f"_v{i}"] = values[i]
                out[f"_t{i}"] = types[i]
            yield out

    return parse


def _integer_text(t: Any) -> Any:
    F = _functions()
    number = t.try_cast("double")
    return (F.when(t.rlike(r"^-?[0-9]+$"), t)
            .when((number == F.floor(number)) & (F.abs(number) < 9007199254740992), number.cast("bigint").cast("string")))


def _iso_time(t: Any) -> Any:
    F = _functions()
    return F.when(F.ascii(t).between(48, 57), t.try_cast("timestamp"))


def _epoch_number(t: Any) -> Any:
    F = _functions()
    return F.when(t.rlike(r"^[0-9]+([.][0-9]+)?$"), t.cast("double"))


def _epoch_unit(n: Any) -> Any:
    F = _functions()
    return F.when(n < 1e11, 0).when(n < 1e14, 1).when(n < 1e17, 2).when(n < 1e20, 3)


def _time_of(t: Any) -> Any:
    F = _functions()
    n = _epoch_number(F.trim(t))
    micros = (F.when(_epoch_unit(n) == 0, n * 1e6).when(_epoch_unit(n) == 1, n * 1e3)
              .when(_epoch_unit(n) == 2, n).when(_epoch_unit(n) == 3, n * 1e-3))
    return F.when(t.contains("-"), F.coalesce(_iso_time(t), _iso_time(F.upper(F.trim(t))))) \
        .otherwise(F.timestamp_micros(micros.cast("bigint")))


def _time_epoch_unit(t: Any) -> Any:
    F = _functions()
    return F.when(~t.contains("-"), _epoch_unit(_epoch_number(F.trim(t))))


def _flag_of(t: Any) -> Any:
    F = _functions()
    return F.coalesce(t.try_cast("boolean"),
                      F.when(t.isNull() | (F.trim(t) == ""), F.lit(False)).otherwise(F.trim(t).try_cast("boolean")))


# -- the unit tables ----------------------------------------------------------------------------------


def _match(design: Design, layer_logged: bool) -> Any:
    F = _functions()
    match = F.col("experiment") == design.experiment
    if layer_logged:
        match = match & (F.col("layer").isNull() | (F.col("layer") == design.layer))
    return match


class SparkUnitTables:
    """The unit tables of one audit, cached in the Spark session; only small tables are collected."""

    def __init__(self, spark: Any, reader: _Reader, rows: Any, names: FieldNames, keep_versions: bool) -> None:
        self.spark = spark
        self.reader = reader
        self.rows = rows
        self.names = names
        self.sources = reader.sources
        self.notes = reader.notes
        self.unreadable: list[tuple[str, str]] = []  # this reader stops on a file it cannot read
        self.attributes = names.attributes
        self.layer_logged = "layer" in reader.present
        self.kept = (VERSION_COLUMNS if keep_versions else []) + [names.attribute_column(a) for a in self.attributes]
        self.cached: list[Any] = reader.persisted
        self.arms: list[int] = []

    def _collect(self, frame: Any) -> list[Any]:
        """Every row that reaches the driver passes here: small tables only."""
        return frame.collect()

    def _cache(self, frame: Any) -> Any:
        self.cached.append(frame.persist())
        return frame

    def other_columns(self) -> list[str]:
        F = _functions()
        found = dict(self.reader.columns_seen)
        if self.reader.jsonl:
            lines = self.spark.read.text([self.reader._spark_path(p) for p in self.reader.jsonl]).limit(JSON_SAMPLE_LINES)
            keys = lines.select(F.explode(F.json_object_keys("value")).alias("key")).distinct()
            found.update(dict.fromkeys(sorted(row[0] for row in self._collect(keys))))
        taken = set(self.names.columns.values()) | set(RECORD_FIELDS)
        return [name for name in found if name not in taken]

    def census(self, designs: Sequence[Design], window: Window = (None, None)) -> list[CensusRow]:
        F = _functions()
        since, until = window
        inside = F.lit(True)
        if since is not None:
            inside = inside & (F.to_date("ts") >= F.lit(since))
        if until is not None:
            inside = inside & (F.to_date("ts") <= F.lit(until))
        outside = F.lit(False)
        if any(d.start or d.end for d in designs):
            case = None
            for d in designs:
                window = F.lit(False)
                if d.start:
                    window = window | (F.to_date("ts") < F.lit(d.start))
                if d.end:
                    window = window | (F.to_date("ts") > F.lit(d.end))
                case = F.when(_match(d, self.layer_logged), window) if case is None \
                    else case.when(_match(d, self.layer_logged), window)
            outside = F.coalesce(case, F.lit(False))
        kept = F.array(*[F.col(c) for c in self.kept]) if self.kept else F.lit(None).cast("array<string>")
        usable = F.col("_problem").isNull() & ~F.col("outside")
        records = (self.rows.where(F.col("_problem").isNotNull() | inside)
                   .select("_problem", "layer", "experiment", "arm", outside.alias("outside"), "unit", "ts", "forced",
                           "_ts_epoch", "config", kept.alias("kept"))
                   .withColumn("unit", F.when(usable, F.col("unit"))))
        epoch = F.bool_or(F.col("_ts_epoch").isNotNull()) if self.reader.times_as_text else F.lit(False)
        # the config versions a unit's records in one arm name (kept with the versions, for `moved` units)
        versions = (F.array_distinct(F.collect_list(F.when(F.col("unit").isNotNull(), F.col("config"))))
                    if "config" in self.kept else F.lit(None).cast("array<string>"))
        self.unit_arms = self._cache(
            records.groupBy("_problem", "layer", "experiment", "arm", "outside", "unit").agg(
                F.count(F.lit(1)).alias("records"), F.min("ts").alias("first_ts"),
                F.min_by("kept", "ts").alias("first_kept"), F.bool_or("forced").alias("forced"),
                F.count_distinct("ts").alias("times"), epoch.alias("epoch_times"), versions.alias("versions"))
            .withColumn("repeats", F.when(F.col("unit").isNotNull(), F.col("records") - F.col("times"))))
        census = self.unit_arms.groupBy("_problem", "layer", "experiment", "arm", "outside").agg(
            F.sum("records"), F.sum("repeats"), F.bool_or("epoch_times"))
        return [CensusRow(*row) for row in self._collect(census)]

    def epoch_notes(self) -> list[str]:
        F = _functions()
        grouped = (self.rows.where(F.col("_problem").isNull() & F.col("_ts_epoch").isNotNull())
                   .groupBy("_file", "_ts_epoch").agg(F.count(F.lit(1)), F.min("ts"), F.max("ts"))
                   .orderBy("_file", "_ts_epoch"))
        return [f"{file}: ts read as epoch {EPOCH_UNITS[unit]} in {count:,} records "
                f"({low:%Y-%m-%d %H:%M:%S} to {high:%Y-%m-%d %H:%M:%S} UTC)"
                for file, unit, count, low, high in self._collect(grouped)]

    def malformed(self, counts_by_kind: Mapping[str, int]) -> Malformed:
        F = _functions()
        counts = {k: v for k, v in counts_by_kind.items() if v}
        examples = []
        if counts:
            order = _window().partitionBy("_problem").orderBy("_file", "_line")
            first = (self.rows.where(F.col("_problem").isNotNull()).withColumn("n", F.row_number().over(order))
                     .where(F.col("n") <= EXAMPLES_PER_KIND).select("_problem", "_file", "_line", "_detail", "_text", "n"))
            examples = [MalformedExample(kind, file, line, detail or kind.replace("_", " "), text)
                        for kind, file, line, detail, text, _ in sorted(self._collect(first), key=lambda r: (r[0], r[5]))]
        located = _with_lines(examples, self.reader.local_files, self.reader.delimiters)
        located.sort(key=lambda ex: (PROBLEM_KINDS.index(ex.kind), ex.file, ex.line or 0))
        return Malformed(counts, tuple(located))

    def place_units(self, designs: Sequence[Design]) -> None:
        F = _functions()
        self.designs = list(designs)
        self.arms = [len(d.arms) for d in designs]
        exp = arm = None
        for i, d in enumerate(designs):
            match = _match(d, self.layer_logged)
            arm_of = None
            for j, name in enumerate(d.arms):
                arm_of = F.when(F.col("arm") == name, j) if arm_of is None else arm_of.when(F.col("arm") == name, j)
            exp = F.when(match, i) if exp is None else exp.when(match, i)
            arm = F.when(match, arm_of) if arm is None else arm.when(match, arm_of)
        none = F.lit(None).cast("int")
        units = (self.unit_arms.where(F.col("unit").isNotNull())
                 .select((exp if exp is not None else none).alias("exp"), (arm if arm is not None else none).alias("arm"),
                         "unit", "first_ts", "first_kept", "forced", "records", "versions")
                 .where(F.col("arm").isNotNull())
                 .groupBy("exp", "unit").agg(
                     F.min("first_ts").alias("first_ts"), F.min_by("arm", "first_ts").alias("arm"),
                     F.min_by("first_kept", "first_ts").alias("first_kept"), F.min("arm").alias("arm_low"),
                     F.max("arm").alias("arm_high"), F.bool_or("forced").alias("forced"),
                     F.sum("records").alias("records"),
                     # as `_sql.unit_rows`: the arm changed only where the config version did (no version in two arms)
                     F.coalesce(F.bool_and(F.coalesce(F.size("versions"), F.lit(0)) > 0)
                                & (F.sum(F.size("versions"))
                                   == F.size(F.array_distinct(F.flatten(F.collect_list("versions"))))),
                                F.lit(False)).alias("by_version")))
        kept = [F.col("first_kept")[i].alias(c) for i, c in enumerate(self.kept)]
        changed = F.col("arm_low") != F.col("arm_high")
        self.unit_rows = self._cache(units.select(
            "exp", "unit", "first_ts", "arm", "arm_low", "arm_high", "forced", "records",
            (changed & ~F.col("by_version")).alias("multi"), (changed & F.col("by_version")).alias("moved"), *kept))
        self.cube = self._counts_cube()
        self.replayed: dict[int, list[tuple[ReplayUnit, str | None]]] | None = None

    def _counts_cube(self) -> list[tuple] | None:
        """Tested units per experiment, arm, day, config version and attribute values, when that table is small.

        The audit asks many small questions (per arm, per day, per segment,
        with or without a segment); one Spark job answers them all when the
        combinations are few, instead of one job per question. None when it is not small.
        """
        F = _functions()
        attributes = [self.names.attribute_column(a) for a in self.attributes]
        version = F.col("config") if "config" in self.kept else F.lit(None).cast("string")
        tested = self.unit_rows.where(~F.col("multi") & ~F.col("forced"))
        cube = tested.groupBy("exp", "arm", F.to_date("first_ts").alias("day"), version.alias("version"),
                              *attributes).count()
        rows = self._collect(cube.limit(CUBE_MAX_ROWS + 1))
        return None if len(rows) > CUBE_MAX_ROWS else [tuple(row) for row in rows]

    def _cube_rows(self, experiment: int, within: Segment | None, without: Segment | None) -> Iterator[tuple]:
        """(arm, day, version, attribute values with NO_VALUE for nulls, units) of an experiment's cube rows."""
        assert self.cube is not None
        position = {name: i for i, name in enumerate(self.attributes)}
        for exp, arm, day, version, *rest in self.cube:
            if exp != experiment:
                continue
            values = tuple(NO_VALUE if v is None else v for v in rest[:-1])
            if within and any(values[position[k]] != v for k, v in within.items()):
                continue
            if without and all(values[position[k]] == v for k, v in without.items()):
                continue
            yield arm, day, version, values, rest[-1]

    def _segment(self, segment: Segment) -> Any:
        F = _functions()
        where = F.lit(True)
        for name, value in segment.items():
            where = where & (F.coalesce(F.col(self.names.attribute_column(name)), F.lit(NO_VALUE)) == value)
        return where

    def _tested(self, experiment: int, within: Segment | None = None, without: Segment | None = None) -> Any:
        F = _functions()
        where = (F.col("exp") == int(experiment)) & ~F.col("multi") & ~F.col("forced")
        if within:
            where = where & self._segment(within)
        if without:
            where = where & ~self._segment(without)
        return self.unit_rows.where(where)

    def unit_summary(self, experiment: int, examples: int) -> UnitSummary:
        F = _functions()
        if not hasattr(self, "summaries"):
            by_exp = self._collect(self.unit_rows.groupBy("exp").agg(
                F.count_if("multi"), F.count_if(F.col("forced") & ~F.col("multi")), F.count_if("moved")))
            first = (self.unit_rows.where("multi")
                     .withColumn("n", F.row_number().over(_window().partitionBy("exp").orderBy("unit")))
                     .where(F.col("n") <= int(examples)).select("exp", "unit", "arm_low", "arm_high", "n"))
            listed: dict[int, list[tuple[str, int, int]]] = {}
            for exp, unit, low, high, _ in sorted(self._collect(first), key=lambda r: (r[0], r[4])):
                listed.setdefault(exp, []).append((unit, low, high))
            self.summaries = {exp: UnitSummary(multi, forced, listed.get(exp, []), moved)
                              for exp, multi, forced, moved in by_exp}
        return self.summaries.get(experiment, UnitSummary(0, 0, []))

    def grouped_units(self, experiment: int, keys: Sequence[str], within: Segment | None = None,
                      without: Segment | None = None) -> dict[tuple, ArmCounts]:
        F = _functions()
        grouped: dict[tuple, ArmCounts] = {}
        if self.cube is not None:
            position = {name: i for i, name in enumerate(self.attributes)}
            for arm, day, version, values, units in self._cube_rows(experiment, within, without):
                key = tuple(day if k == FIRST_DAY else version if k == CONFIG_VERSION else values[position[k]]
                            for k in keys)
                grouped.setdefault(key, [0] * self.arms[experiment])[arm] += units
            return grouped
        columns = [(F.to_date("first_ts") if k == FIRST_DAY else
                    (F.col("config") if "config" in self.kept else F.lit(None).cast("string"))
                    if k == CONFIG_VERSION else
                    F.coalesce(F.col(self.names.attribute_column(k)), F.lit(NO_VALUE))).alias(f"k{i}")
                   for i, k in enumerate(keys)]
        for row in self._collect(self._tested(experiment, within, without).groupBy(*columns, "arm").count()):
            grouped.setdefault(tuple(row[:len(keys)]), [0] * self.arms[experiment])[row[len(keys)]] += row[-1]
        return grouped

    def records_per_unit(self, experiment: int) -> dict[int, ArmCounts]:
        histogram: dict[int, ArmCounts] = {}
        for records, arm, units in self._collect(self._tested(experiment).groupBy("records", "arm").count()):
            histogram.setdefault(records, [0] * self.arms[experiment])[arm] = units
        return histogram

    def replay_arms(self, experiment: int, limit: int, design: Design, configs: Mapping[str, Config],
                    fallback: Config) -> list[tuple[ReplayUnit, str | None]]:
        """The replay sample with each unit's arm recomputed by the SDK in the executors (bucketing.batch).

        The first call replays the samples of every experiment in one job (the
        designs, configs and limit are the same for every call of an audit).
        """
        if self.replayed is None:
            self.replayed = self._replay_all(limit, configs, fallback)
        return self.replayed.get(experiment, [])

    def _replay_all(self, limit: int, configs: Mapping[str, Config],
                    fallback: Config) -> dict[int, list[tuple[ReplayUnit, str | None]]]:
        F = _functions()
        attributes = list(self.attributes)
        columns = [F.col(self.names.attribute_column(a)).alias(a) for a in attributes]
        order = _window().partitionBy("exp").orderBy(F.md5("unit"), "unit")
        sample = (self.unit_rows.where(~F.col("multi") & ~F.col("forced"))
                  .select("exp", "unit", "arm", F.to_date("first_ts").alias("day"), "config", "unit_type", *columns)
                  .withColumn("_n", F.row_number().over(order)))
        if limit:
            sample = sample.where(F.col("_n") <= int(limit))
        version = F.when(F.col("config").isin(list(configs)), F.col("config")).otherwise(F.lit(fallback.version))
        sample = sample.withColumn("_version", version)
        base = ["exp", "unit", "arm", "day", "config", "unit_type", *attributes, "_n"]
        parts = []
        for name, config in configs.items():
            for unit_type in sorted({d.unit_type or "unit" for d in self.designs}):
                layers = {layer.name for layer in config.layers if layer.unit == unit_type}
                mine = [(i, d) for i, d in enumerate(self.designs) if (d.unit_type or "unit") == unit_type
                        and d.layer in layers]
                if not mine:
                    continue
                rows = sample.where((F.col("_version") == name) & F.col("exp").isin([i for i, _ in mine]))
                assigned = assign_frame(rows, config, unit_type=unit_type, day_column="day", attributes=attributes)
                computed = F.lit(None).cast("string")
                for i, d in reversed(mine):
                    experiment = F.col(f"`{layer_column(d.layer, 'experiment')}`")
                    arm = F.when(experiment == d.experiment, F.col(f"`{layer_column(d.layer, 'arm')}`"))
                    computed = F.when(F.col("exp") == i, arm).otherwise(computed)
                parts.append(assigned.select(*base, computed.alias("_computed")))
        replayed: dict[int, list[tuple[ReplayUnit, str | None]]] = {}
        if not parts:
            return replayed
        union = parts[0]
        for more in parts[1:]:
            union = union.unionByName(more)
        width = len(attributes)
        for r in sorted(self._collect(union), key=lambda r: (r[0], r[-2])):
            replayed.setdefault(r[0], []).append((ReplayUnit(r[1], r[2], r[3], r[4], r[5], tuple(r[6:6 + width])), r[-1]))
        return replayed

    def close(self) -> None:
        for frame in self.cached:
            frame.unpersist()
        self.cached.clear()
