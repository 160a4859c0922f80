"""Batch assignment: every unit of a pandas or Spark DataFrame, placed exactly as `Assigner.assign` places it.

    from bucketing.batch import assign_frame

    assigned = assign_frame(units, "configs/", unit_type="learner", unit_column="learner_id")
    assigned.groupBy("lesson-flow__experiment", "lesson-flow__arm").count()   # a Spark DataFrame in, one out

For backfills and offline analyses. The result keeps every input column and
adds, for each layer of the unit type (config order), four columns named
`<layer>__experiment`, `<layer>__arm`, `<layer>__bucket` and `<layer>__forced`,
and one column `holdout`: the fields of `Assignment.to_dict()`, row by row.
Every other input column is a unit attribute (or name them with `attributes`);
a null attribute is a missing one.

On Spark the SDK runs inside the executors through a pandas UDF
(`mapInPandas`, Arrow batches): the config is broadcast once, and each Python
worker builds its `Assigner` once and keeps it for every batch it is given.
pandas and pyspark are imported only when called, so the plain SDK install
(mmh3, pydantic, pyyaml) does not need them: `pip install 'sortition[spark]'`.

No exposure is recorded: a backfill is not an exposure. A pandas caller who
wants records passes a `sink`, as to `Assigner`.
"""

from __future__ import annotations

import pickle
from dataclasses import dataclass
from datetime import date, datetime
from pathlib import Path
from time import time
from typing import TYPE_CHECKING, Any, Iterable, Iterator, Sequence

from ._assigner import Assigner
from ._config import Config
from ._exposure import ExposureSink
from ._loader import load_config
from ._plan import EPOCH_ORDINAL

if TYPE_CHECKING:
    import pandas

__all__ = ["assign_frame", "layer_column", "LAYER_FIELDS", "HOLDOUT_COLUMN"]

LAYER_FIELDS = ("experiment", "arm", "bucket", "forced")
HOLDOUT_COLUMN = "holdout"


def layer_column(layer: str, field: str) -> str:
    """Name of the column holding `field` (one of LAYER_FIELDS) of `layer`: '<layer>__<field>'."""
    return f"{layer}__{field}"


@dataclass(frozen=True)
class _Request:
    """What every batch needs to know besides the config: small, pickled into each task."""

    unit_type: str
    unit_column: str
    attributes: tuple[str, ...]
    layers: tuple[str, ...]
    day: date
    day_column: str | None


def assign_frame(frame: Any, config: Config | str | Path, *, unit_type: str, unit_column: str = "unit",
                 attributes: Sequence[str] | None = None, day: date | None = None,
                 day_column: str | None = None, sink: ExposureSink | None = None) -> Any:
    """Assign every row of a pandas or Spark DataFrame; returns the same kind of frame with the assignment columns.

    `unit_column` holds the unit ids (strings, or integers hashed in decimal).
    `attributes` names the attribute columns (default: every column but the
    unit and day columns). The day the start/end dates are checked against is
    `day` for every row, or each row's own `day_column` (a date, a timestamp
    or an ISO date string), or else today (UTC, read once for the whole
    frame). A row whose unit id is missing or unusable gets nulls, as a
    service gets the default experience. `sink` (pandas only) receives the
    exposure records of every layer that gives a unit an experiment.
    """
    loaded = config if isinstance(config, Config) else load_config(config)
    columns = list(frame.columns)
    request = _plan_request(loaded, columns, unit_type, unit_column, attributes, day, day_column)
    if type(frame).__module__.startswith("pyspark."):
        if sink is not None:
            raise ValueError("a Spark job records no exposures: write the assignment columns where you need them")
        return _assign_spark(frame, loaded, request)
    import pandas as pd

    if not isinstance(frame, pd.DataFrame):
        raise TypeError(f"assign_frame takes a pandas or Spark DataFrame, not {type(frame).__name__}")
    return _assign_batch(Assigner(loaded, sink=sink), frame, request, expose=sink is not None)


def _plan_request(config: Config, columns: list[str], unit_type: str, unit_column: str,
                  attributes: Sequence[str] | None, day: date | None, day_column: str | None) -> _Request:
    layers = tuple(layer.name for layer in config.layers if layer.unit == unit_type)
    if not layers:
        types = sorted({layer.unit for layer in config.layers})
        raise ValueError(f"the config has no layer for unit type {unit_type!r}; its unit types: {', '.join(types)}")
    if day is not None and day_column is not None:
        raise ValueError("give either day (one day for every row) or day_column (each row's day), not both")
    for name, what in [(unit_column, "unit_column"), (day_column, "day_column"), *((a, "attributes") for a in attributes or ())]:
        if name is not None and name not in columns:
            raise ValueError(f"{what}: the frame has no column {name!r}; its columns: {', '.join(map(str, columns))}")
    added = [HOLDOUT_COLUMN, *(layer_column(layer, field) for layer in layers for field in LAYER_FIELDS)]
    clash = [name for name in added if name in columns]
    if clash:
        raise ValueError(f"the frame already has column {clash[0]!r}, which the assignment adds; rename it first")
    if attributes is None:
        attributes = [c for c in columns if c not in (unit_column, day_column)]
    today = day if day is not None else date.fromordinal(int(time() // 86400) + EPOCH_ORDINAL)
    return _Request(unit_type, unit_column, tuple(attributes), layers, today, day_column)


def _python_values(column: "pandas.Series") -> list[Any]:
    """A column as Python values, nulls (None, NaN, NaT, NA) as None."""
    return column.astype(object).where(column.notna(), None).tolist()


def _unit_ids(column: "pandas.Series") -> list[Any]:
    """Unit ids as the SDK takes them. pandas stores an integer column with nulls as floats: whole ones are integers again."""
    values = _python_values(column)
    if column.dtype.kind == "f":
        return [int(v) if v is not None and v.is_integer() else v for v in values]
    return values


def _days(column: "pandas.Series", default: date) -> list[date]:
    """Each row's day from a column of dates, timestamps or ISO date strings; a null is `default`."""
    known: dict[Any, date] = {}
    out = []
    for value in _python_values(column):
        got = known.get(value)
        if got is None:
            if value is None:
                got = default
            elif isinstance(value, datetime):
                got = value.date()
            elif isinstance(value, date):
                got = value
            else:
                got = date.fromisoformat(str(value))
            known[value] = got
        out.append(got)
    return out


def _assign_batch(assigner: Assigner, batch: "pandas.DataFrame", request: _Request, expose: bool = False) -> "pandas.DataFrame":
    """One batch of rows: its own columns, then `holdout`, then each layer's four columns."""
    import pandas as pd

    size = len(batch)
    units = _unit_ids(batch[request.unit_column])
    attribute_values = [(name, _python_values(batch[name])) for name in request.attributes]
    days = _days(batch[request.day_column], request.day) if request.day_column else None
    held = [False] * size
    fields = {layer: ([None] * size, [None] * size, [None] * size, [None] * size) for layer in request.layers}
    unit_type = request.unit_type
    for row, unit in enumerate(units):
        attrs = {name: values[row] for name, values in attribute_values if values[row] is not None}
        got = assigner.assign({unit_type: unit}, attrs, day=days[row] if days is not None else request.day)
        held[row] = got.holdout
        # The slots behind `Assignment.layers`, read without building its per-layer tuples (a third of the time).
        for layer, (_, _, experiment, arm, bucket, forced_here) in got._slots.items():
            experiments, arms, buckets, forced = fields[layer]
            buckets[row], forced[row] = bucket, forced_here
            if experiment is not None:
                experiments[row], arms[row] = experiment.name, experiment.arms[arm]
        if expose:
            got.expose()
    out = batch.copy()
    out[HOLDOUT_COLUMN] = pd.array(held, dtype="boolean")
    for layer, (experiments, arms, buckets, forced) in fields.items():
        out[layer_column(layer, "experiment")] = pd.array(experiments, dtype=object)
        out[layer_column(layer, "arm")] = pd.array(arms, dtype=object)
        out[layer_column(layer, "bucket")] = pd.array(buckets, dtype="Int32")
        out[layer_column(layer, "forced")] = pd.array(forced, dtype="boolean")
    return out


# Python workers are reused across tasks (Spark's default): each keeps the
# Assigner of every config version it has been sent, built on first use.
_EXECUTOR_ASSIGNERS: dict[str, Assigner] = {}


def _executor_assigner(version: str, pickled_config: bytes) -> Assigner:
    assigner = _EXECUTOR_ASSIGNERS.get(version)
    if assigner is None:
        assigner = _EXECUTOR_ASSIGNERS[version] = Assigner(pickle.loads(pickled_config))
    return assigner


def _assign_spark(frame: Any, config: Config, request: _Request) -> Any:
    from pyspark.sql import types as T

    shipped = (config.version, pickle.dumps(config))
    if type(frame).__module__.startswith("pyspark.sql.connect"):
        # Spark Connect has no broadcast variables: the config travels inside the function, once per plan.
        def config_on_executor() -> tuple[str, bytes]:
            return shipped
    else:
        broadcast = frame.sparkSession.sparkContext.broadcast(shipped)

        def config_on_executor() -> tuple[str, bytes]:
            return broadcast.value

    def assign_batches(batches: Iterable["pandas.DataFrame"]) -> Iterator["pandas.DataFrame"]:
        assigner = _executor_assigner(*config_on_executor())
        for batch in batches:
            yield _assign_batch(assigner, batch, request)

    added = [T.StructField(HOLDOUT_COLUMN, T.BooleanType())]
    types = {"experiment": T.StringType(), "arm": T.StringType(), "bucket": T.IntegerType(), "forced": T.BooleanType()}
    added += [T.StructField(layer_column(layer, field), types[field]) for layer in request.layers for field in LAYER_FIELDS]
    return frame.mapInPandas(assign_batches, T.StructType([*frame.schema.fields, *added]))
