"""Batch assignment of a Spark DataFrame: inside the executors, through a pandas UDF, the same answers as `Assigner.assign`."""

from __future__ import annotations

from datetime import date

import pandas as pd
import pytest
from pyspark.sql import functions as F
from pyspark.sql import types as T

from bucketing import Assigner, MemorySink, load_config
from bucketing.batch import assign_frame

from ..batch_expectations import ATTRIBUTES, assignment_columns, expected_row, generated_units, golden_units

LEARNER_LAYERS = ["audio-engine", "lesson-flow", "paywall"]


@pytest.fixture(scope="module")
def example():
    return load_config("configs_example")


def _rows_by_position(frame, layers) -> list[tuple]:
    """The assignment columns of a Spark frame that has a `position` column, in position order."""
    rows = frame.select("position", *(F.col(f"`{c}`") for c in assignment_columns(layers))).collect()
    return [tuple(row)[1:] for row in sorted(rows, key=lambda row: row[0])]


@pytest.mark.parametrize("unit_type", ["learner", "device"])
def test_golden_vectors_come_out_of_spark_unchanged(spark, example, unit_type):
    rows = golden_units(unit_type)
    frame = spark.createDataFrame(pd.DataFrame(rows).assign(position=range(len(rows))))
    frame = frame.withColumn("day", F.to_date("day"))
    out = assign_frame(frame, example, unit_type=unit_type, day_column="day", attributes=[a for a in ATTRIBUTES if a in rows[0]])
    layers = [layer.name for layer in example.layers if layer.unit == unit_type]
    assigner = Assigner(example)
    expected = [expected_row(assigner, unit_type, r["unit"], {k: v for k, v in r.items() if k not in ("unit", "day")},
                             date.fromisoformat(r["day"]), layers) for r in rows]
    assert _rows_by_position(out, layers) == expected


def test_generated_units_in_many_small_batches_match_assign(spark, example):
    units = generated_units(30_000, seed=5)
    frame = spark.createDataFrame(pd.DataFrame(units).assign(position=range(30_000))).repartition(5)
    spark.conf.set("spark.sql.execution.arrow.maxRecordsPerBatch", "1000")  # several batches per task
    try:
        got = _rows_by_position(assign_frame(frame, example, unit_type="learner", day_column="day",
                                             attributes=list(ATTRIBUTES)), LEARNER_LAYERS)
    finally:
        spark.conf.unset("spark.sql.execution.arrow.maxRecordsPerBatch")
    assigner = Assigner(example)
    for row, (unit, day, *values) in enumerate(zip(units["unit"], units["day"], *(units[a] for a in ATTRIBUTES))):
        attrs = {name: value for name, value in zip(ATTRIBUTES, values) if value is not None}
        assert got[row] == expected_row(assigner, "learner", unit, attrs, day, LEARNER_LAYERS), unit


def test_integer_ids_with_nulls_and_typed_columns(spark, example):
    schema = T.StructType([T.StructField("position", T.IntegerType()), T.StructField("unit", T.LongType()),
                           T.StructField("country", T.StringType()), T.StructField("app_version", T.StringType()),
                           T.StructField("visits", T.IntegerType()), T.StructField("seen", T.TimestampType())])
    rows = [(0, 7, "NL", "7.4.0", 3, None), (1, None, "NL", "7.4.0", None, None), (2, 12345678901, None, None, None, None)]
    out = assign_frame(spark.createDataFrame(rows, schema), example, unit_type="learner", day=date(2026, 11, 20))
    assigner = Assigner(example)
    day = date(2026, 11, 20)
    assert _rows_by_position(out, LEARNER_LAYERS) == [
        expected_row(assigner, "learner", "7", {"country": "NL", "app_version": "7.4.0", "visits": 3}, day, LEARNER_LAYERS),
        (False,) + (None,) * 12,
        expected_row(assigner, "learner", 12345678901, {}, day, LEARNER_LAYERS),
    ]
    assert out.schema["unit"].dataType == T.LongType(), "input columns keep their types"
    assert out.schema["seen"].dataType == T.TimestampType()
    assert [f.dataType for f in out.schema.fields[-4:]] == [T.StringType(), T.StringType(), T.IntegerType(), T.BooleanType()]


def test_a_spark_frame_records_no_exposures(spark, example):
    frame = spark.createDataFrame([("L-1",)], ["unit"])
    with pytest.raises(ValueError, match="a Spark job records no exposures"):
        assign_frame(frame, example, unit_type="learner", sink=MemorySink())
