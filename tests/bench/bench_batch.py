"""Benchmark of batch assignment (bucketing.batch): units per second on pandas and on Spark local[2], against `assign_many`.

1,000,000 invented learners (tests/batch_expectations.py) under the example
config, one day for all. The baseline is `Assigner.assign_many` in this
process; the pandas path assigns one DataFrame; the Spark path reads the
units from Parquet, assigns them in the executors and writes Parquet, timed
without the session's start (reported apart). The Spark result is then read
back and compared, row for row, with what `Assigner.assign` gives: the figures
count only if it is identical.
"""

from __future__ import annotations

import os
import sys
import tempfile
import time
from datetime import date
from pathlib import Path

import pandas as pd

from bucketing import Assigner, load_config
from bucketing.batch import assign_frame
from tests.batch_expectations import ATTRIBUTES, assignment_columns, expected_row, generated_units

UNITS = 1_000_000
DAY = date(2026, 11, 20)
EXAMPLE = Path(__file__).resolve().parents[2] / "configs_example"


def _spark_session():
    from pyspark.sql import SparkSession

    os.environ["PYSPARK_PYTHON"] = sys.executable
    session = (SparkSession.builder.master("local[2]").appName("sortition-bench")
               .config("spark.ui.enabled", "false").config("spark.sql.shuffle.partitions", "2")
               .config("spark.driver.memory", "2g").getOrCreate())
    session.sparkContext.setLogLevel("ERROR")
    return session


def run() -> str:
    config = load_config(EXAMPLE)
    layers = [layer.name for layer in config.layers if layer.unit == "learner"]
    units = generated_units(UNITS)
    del units["day"]
    attrs = [{k: v for k, v in zip(ATTRIBUTES, values) if v is not None} for values in zip(*(units[a] for a in ATTRIBUTES))]
    frame = pd.DataFrame(units)

    assigner = Assigner(config)
    started = time.perf_counter()
    for _ in assigner.assign_many("learner", units["unit"], attrs, day=DAY):
        pass
    many_s = time.perf_counter() - started

    started = time.perf_counter()
    assign_frame(frame, config, unit_type="learner", day=DAY)
    pandas_s = time.perf_counter() - started

    with tempfile.TemporaryDirectory() as tmp:
        frame.assign(position=range(UNITS)).to_parquet(f"{tmp}/units.parquet", row_group_size=100_000)
        started = time.perf_counter()
        spark = _spark_session()
        spark.range(1).count()
        session_s = time.perf_counter() - started
        started = time.perf_counter()
        source = spark.read.parquet(f"{tmp}/units.parquet")
        assign_frame(source, config, unit_type="learner", day=DAY, attributes=list(ATTRIBUTES)) \
            .write.parquet(f"{tmp}/assigned")
        spark_s = time.perf_counter() - started
        got = pd.read_parquet(f"{tmp}/assigned").sort_values("position")
    columns = [got[name].astype(object).where(got[name].notna(), None).tolist() for name in assignment_columns(layers)]
    fresh = Assigner(config)
    assert list(zip(*columns)) == [expected_row(fresh, "learner", unit, unit_attrs, DAY, layers)
                                     for unit, unit_attrs in zip(units["unit"], attrs)], \
        "Spark's batch assignment differs from Assigner.assign"

    def rate(seconds: float) -> str:
        return f"{UNITS / seconds:,.0f} units/s"

    return "\n".join([
        "## batch assignment (example config, 1,000,000 learners with attributes)",
        "",
        "| path | throughput | vs `assign_many` |",
        "|---|---|---|",
        f"| `Assigner.assign_many` (one process) | {rate(many_s)} | 1.00 |",
        f"| `assign_frame`, pandas DataFrame | {rate(pandas_s)} | {many_s / pandas_s:.2f} |",
        f"| `assign_frame`, Spark local[2], Parquet in and out | {rate(spark_s)} | {many_s / spark_s:.2f} |",
        "",
        f"Spark session start (not counted above): {session_s:.1f} s. Spark's 1,000,000 rows were checked "
        "identical to `Assigner.assign`'s.",
        "",
    ])
