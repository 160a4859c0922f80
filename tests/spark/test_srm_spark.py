"""The SRM audit on the Spark engine gives the JSON the DuckDB engine gives, for the same records.

Equal counts, equal names and texts, and numbers (p-values, statistics)
equal to 1e-9 relative. Every log is invented: the records of
tests/invented_logs.py in each format, logs that bend the record, and the
demo's logs with their planted fault. One local Spark session serves every
test (tests/spark/conftest.py); the logs are small, so the Spark part of the
suite stays within its budget.
"""

from __future__ import annotations

import json
import math
from datetime import timedelta

import pandas as pd
import pytest

from audit import audit_logs
from audit.demo import write_demo_logs
from audit.srm import SparkEngine, SparkTable, spark_session
from tests.conftest import DEMO_SEGMENTS, EXAMPLE
from tests.invented_logs import invented_records, write_csv, write_jsonl, write_parquet
from tests.test_srm_ramps_window import returning_ramp
from tests.test_srm_verdict import START, country_drop, daily_log

SPLIT = {"left": 50, "right": 50}


def assert_same(duck, spark, path="result"):
    """Equal JSON, numbers to 1e-9 relative."""
    if isinstance(duck, dict):
        assert isinstance(spark, dict) and list(duck) == list(spark), f"{path}: keys {list(duck)} vs {list(spark)}"
        for key in duck:
            assert_same(duck[key], spark[key], f"{path}.{key}")
    elif isinstance(duck, list):
        assert isinstance(spark, list) and len(duck) == len(spark), f"{path}: {len(duck)} vs {len(spark)} items"
        for i, (a, b) in enumerate(zip(duck, spark)):
            assert_same(a, b, f"{path}[{i}]")
    elif isinstance(duck, float) and not isinstance(spark, bool):
        assert isinstance(spark, (int, float)) and math.isclose(duck, spark, rel_tol=1e-9, abs_tol=1e-300), \
            f"{path}: {duck!r} vs {spark!r}"
    else:
        assert duck == spark, f"{path}: {duck!r} vs {spark!r}"


def both(source, **options):
    """The JSON of the same audit on both engines."""
    duck = json.loads(json.dumps(audit_logs(source, engine="duckdb", **options).to_dict(), default=str))
    spark = json.loads(json.dumps(audit_logs(source, engine="spark", **options).to_dict(), default=str))
    return duck, spark


@pytest.fixture(scope="module")
def records():
    return invented_records(seed=9, units=300)


@pytest.mark.parametrize("kind", ["jsonl", "jsonl.gz", "csv", "csv.gz", "parquet"])
def test_every_format_gives_the_same_json(spark, tmp_path, records, kind):
    path = tmp_path / f"exposures.{kind}"
    if kind.startswith("jsonl"):
        write_jsonl(path, records, gz=kind.endswith(".gz"))
    elif kind.startswith("csv"):
        write_csv(path, records, gz=kind.endswith(".gz"))
    else:
        write_parquet(path, records)
    duck, spark_json = both([str(path)], expect=SPLIT, segments=["country"], replay_units=0)
    assert duck["records"] == len(records) and any(r["units"] for r in duck["results"])
    assert_same(duck, spark_json)


BENT = [  # invented records that bend the contract in the ways both engines must read alike
    {"ts": "2026-11-03T10:00:00Z", "unit": 101, "experiment": "exp-a", "arm": "left", "forced": "yes"},
    {"ts": "2026-11-03 11:00:00+02:00", "unit": "u-2", "experiment": "exp-a", "arm": "right", "forced": "0"},
    {"ts": "1762164000", "unit": "u-3", "experiment": "exp-a", "arm": "left", "forced": "false"},
    {"ts": "1762164000123", "unit": "u-4", "experiment": "exp-a", "arm": "right", "forced": ""},
    {"ts": "2026-11-04t09:30:00.5z", "unit": "u-5", "experiment": "exp-a", "arm": "left", "forced": "N"},
    {"ts": "2026-11-05", "unit": "u-6", "experiment": "exp-a", "arm": "right", "forced": "f"},
    {"ts": "last tuesday", "unit": "u-7", "experiment": "exp-a", "arm": "left", "forced": "false"},
    {"ts": "2026-11-05T08:00:00Z", "unit": "u-8", "experiment": "exp-a", "arm": "left", "forced": "maybe"},
    {"ts": "2026-11-05T08:00:00Z", "unit": "", "experiment": "exp-a", "arm": "Left", "forced": "false"},
    {"ts": "2026-11-05T08:00:00Z", "unit": "u-9", "experiment": "exp-z", "arm": "left", "forced": "false"},
    {"ts": "2026-11-05T08:00:00Z", "unit": "u-2", "experiment": "exp-a", "arm": "left", "forced": "false"},
    {"ts": "2026-11-03 11:00:00+02:00", "unit": "u-2", "experiment": "exp-a", "arm": "right", "forced": "0"},
]


@pytest.mark.parametrize("kind", ["jsonl", "csv"])
def test_bent_and_malformed_records_mean_the_same(spark, tmp_path, records, kind):
    path = tmp_path / f"bent.{kind}"
    if kind == "jsonl":
        lines = [json.dumps(r) for r in BENT] + ["--- log rotated ---", '{"ts": "2026-11-05T08:00:00Z", "unit": "u-1',
                                                   json.dumps({"ts": "2026-11-05T08:00:00Z", "unit": True,
                                                               "experiment": "exp-a", "arm": 1})]
        path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    else:
        pd.DataFrame(BENT).to_csv(path, index=False)
    duck, spark_json = both([str(path)], expect=SPLIT, replay_units=0)
    assert duck["malformed"]["total"] >= 2, "the bad times and flags are malformed records on both"
    assert_same(duck, spark_json)


def test_the_demo_logs_give_the_same_json(spark, tmp_path):
    logs = write_demo_logs(EXAMPLE, tmp_path / "demo", learners=2_000, devices=500)
    duck, spark_json = both(str(logs.directory), config=EXAMPLE, segments=DEMO_SEGMENTS, replay_units=300)
    assert_same(duck, spark_json)
    assert spark_json["malformed"]["total"] > 0 and any(r["replay_checked"] for r in spark_json["results"])


def test_a_planted_fault_is_found_alike(spark, tmp_path):
    """Country AA loses three in four units of arm 'right' of exp-a (an invented fault)."""
    records = [r for r in invented_records(seed=12, units=1_500)
               if not (r["country"] == "AA" and r["experiment"] == "exp-a" and r["arm"] == "right"
                       and int(r["unit"][2:]) % 4 != 0)]
    path = write_parquet(tmp_path / "fault.parquet", records)
    duck, spark_json = both([str(path)], expect=SPLIT, segments=["country"], replay_units=0)
    assert_same(duck, spark_json)
    exp_a = next(r for r in spark_json["results"] if r["experiment"] == "exp-a")
    assert exp_a["srm"] and exp_a["localised"] is not None


def test_a_spark_dataframe_and_a_catalog_table_with_a_partition_filter(spark, records):
    frame = pd.DataFrame(records)
    frame["day"] = frame["ts"].str[:10]
    duck = audit_logs(frame[frame["day"] >= "2026-11-04"].drop(columns="day"), expect=SPLIT, replay_units=0)
    spark.createDataFrame(frame).write.partitionBy("day").mode("overwrite").saveAsTable("invented_exposures")
    from_frame = audit_logs(spark.table("invented_exposures").where("day >= '2026-11-04'").drop("day"),
                            expect=SPLIT, replay_units=0, engine="spark")
    from_table = audit_logs(SparkTable("invented_exposures", ("day >= '2026-11-04'",)),
                            expect=SPLIT, replay_units=0, engine=SparkEngine())
    assert duck.records < len(records)
    for result in (from_frame, from_table):
        assert [(r.experiment, [a.units for a in r.arms], r.p_value) for r in result.results] == \
            [(r.experiment, [a.units for a in r.arms], r.p_value) for r in duck.results]


def test_raw_records_never_come_back_to_the_driver(spark, tmp_path, monkeypatch):
    many = invented_records(seed=4, units=2_000)
    path = write_parquet(tmp_path / "many.parquet", many)
    collected: list[list] = []
    frame_class = type(spark.range(1))
    original = frame_class.collect

    def counting_collect(self):
        rows = original(self)
        collected.append(rows)
        return rows

    monkeypatch.setattr(frame_class, "collect", counting_collect)
    monkeypatch.setattr(frame_class, "toPandas", lambda self: pytest.fail("toPandas on the driver"))
    monkeypatch.setattr(frame_class, "toLocalIterator", lambda self, *a: pytest.fail("iterating on the driver"))
    result = audit_logs([str(path)], expect=SPLIT, segments=["country"], replay_units=0, engine="spark")
    assert result.records == len(many) > 5_000
    assert collected, "the engine collects its small tables"
    assert max(len(rows) for rows in collected) < 300
    assert sum(len(rows) for rows in collected) < len(many) / 10
    assert not any({"ts", "unit"} <= set(row.asDict()) for rows in collected for row in rows)


def test_the_command_line_runs_on_spark(spark, sortition, tmp_path, records):
    path = write_jsonl(tmp_path / "exposures.jsonl", records)
    duck = sortition("srm", path, "--expect", "left=50,right=50", "--format", "json", "--quiet")
    on_spark = sortition("srm", path, "--expect", "left=50,right=50", "--format", "json", "--quiet", "--engine", "spark")
    assert on_spark.exit_code == duck.exit_code
    assert_same(json.loads(duck.stdout), json.loads(on_spark.stdout))
    refused = sortition("srm", "--table", "db.exposures", "--expect", "50,50")
    assert refused.exit_code == 2 and "need --engine spark" in refused.stderr


def test_spark_conf_reaches_the_session(spark):
    before = spark.conf.get("spark.sql.shuffle.partitions")
    try:
        assert spark_session({"spark.sql.shuffle.partitions": "3"}) is spark
        assert spark.conf.get("spark.sql.shuffle.partitions") == "3"
    finally:
        spark.conf.set("spark.sql.shuffle.partitions", before)



def test_a_ramp_judged_per_version_with_moved_units_and_a_window_alike(spark, tmp_path):
    """Mixture expectations, units the ramp moved, a unit in two arms, and --since/--until: the same JSON."""
    versions, log, moved = returning_ramp(tmp_path)
    duck, spark_json = both([str(log)], config=str(versions / "v2.yaml"), config_versions=str(versions),
                            replay_units=200, since=START + timedelta(2), until=START + timedelta(11))
    assert_same(duck, spark_json)
    result, = spark_json["results"]
    assert 0 < result["moved_with_version_units"] < moved and result["multi_arm_units"] == 0
    assert result["days"][0]["day"] == (START + timedelta(2)).isoformat()
    assert result["days"][-1]["day"] == (START + timedelta(11)).isoformat()


def test_a_fault_in_one_segment_and_an_unnamed_experiment_alike(spark, tmp_path):
    """A segment-only fault (scope, onset, localisation) on a log with no experiment column."""
    path = daily_log(tmp_path, broken=country_drop)
    plain = write_parquet(tmp_path / "plain.parquet",
                          [{k: v for k, v in r.items() if k not in ("experiment", "layer")}
                           for r in map(json.loads, path.read_text().splitlines())])
    duck, spark_json = both([str(plain)], expect=SPLIT, segments=["country"], replay_units=0)
    assert_same(duck, spark_json)
    result, = spark_json["results"]
    assert result["experiment"] == "(unnamed)" and result["srm"] and result["srm_scope"] == "segment"
    assert result["onset_day"] is not None
