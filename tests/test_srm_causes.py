"""Causes named by the audit on logs written through the SDK with one planted fault each (invented data)."""

import json
import random
from datetime import date

import pytest

from audit import audit_logs
from audit.render import as_json
from bucketing import Assigner, MemorySink, load_config
from tests.conftest import EXAMPLE


@pytest.fixture(scope="module")
def sdk_records():
    sink = MemorySink()
    assigner = Assigner(EXAMPLE, sink=sink)
    rng = random.Random(3)
    for i in range(30_000):
        attrs = {"country": rng.choice(["NL", "DE", "BR", "US"]), "platform": rng.choice(["ios", "android", "web"]),
                 "app_version": rng.choice(["7.2.0", "7.3.0", "7.4.0"])}
        assigner.assign({"learner": f"c-{i}"}, attrs, day=date(2026, 11, 20)).param("lesson_minutes")
    return sink.records


def audit(records, tmp_path):
    path = tmp_path / "log.jsonl"
    path.write_text("".join(json.dumps(r) + "\n" for r in records))
    report = audit_logs([str(path)], config=load_config(EXAMPLE), segments=["country", "platform", "app_version"],
                        replay_units=0)
    return next(r for r in report.results if r.experiment == "shorter-lessons")


def test_a_stale_arm_in_one_segment_is_named_as_the_cause_not_as_lost_exposures(sdk_records, tmp_path):
    rng = random.Random(8)
    faulty = []
    for record in sdk_records:
        record = dict(record)
        if record["experiment"] == "shorter-lessons" and record["platform"] == "web" and rng.random() < 0.5:
            record["arm"] = "control"  # a cache on the web client serves a stale arm
        faulty.append(record)
    result = audit(faulty, tmp_path)
    assert result.srm
    kinds = [c.kind for c in result.causes]
    assert kinds[0] == "arm_mismatch" and result.causes[0].segment == {"platform": "web"}
    assert "dropped_exposures" not in kinds


def test_dropped_exposures_in_one_segment_are_named_with_the_segment(sdk_records, tmp_path):
    kept = [r for r in sdk_records
            if not (r["experiment"] == "shorter-lessons" and r["arm"] == "short"
                    and r["country"] == "DE" and r["platform"] == "android")]
    result = audit(kept, tmp_path)
    assert result.srm
    dropped = [c for c in result.causes if c.kind == "dropped_exposures"]
    assert dropped and dropped[0].segment.get("country") == "DE" and dropped[0].segment.get("platform") == "android"
    assert result.replay_mismatch_share == 0


def test_clean_sdk_logs_name_no_cause(sdk_records, tmp_path):
    result = audit(sdk_records, tmp_path)
    assert not result.srm and result.causes == ()


def test_the_same_logs_give_the_same_report_on_every_run(sdk_records, tmp_path):
    # Replay samples and counts must not depend on DuckDB's thread scheduling.

    path = tmp_path / "log.jsonl"
    path.write_text("".join(json.dumps(r) + "\n" for r in sdk_records) + "not json\n{\"unit\": 1}\n")
    runs = {as_json(audit_logs([str(path)], config=load_config(EXAMPLE), segments=["country", "platform"],
                                   replay_units=700)) for _ in range(3)}
    assert len(runs) == 1
    assert json.loads(runs.pop())["results"][0]["replay_checked"] == 700


@pytest.mark.parametrize("suffix", [".jsonl", ".csv", ".parquet"])
def test_by_auto_tests_every_attribute_column_and_leaves_out_crowded_ones(sdk_records, tmp_path, suffix):
    import duckdb

    records = [dict(r, session=f"s-{i}") for i, r in enumerate(sdk_records)]  # one value per record
    source = tmp_path / "log.jsonl"
    source.write_text("".join(json.dumps(r) + "\n" for r in records))
    path = source
    if suffix != ".jsonl":
        path = tmp_path / f"log{suffix}"
        options = "(FORMAT parquet)" if suffix == ".parquet" else "(HEADER, DELIMITER ',')"
        duckdb.connect().execute(f"COPY (SELECT * FROM read_json('{source}')) TO '{path}' {options}")
    report = audit_logs([str(path)], config=load_config(EXAMPLE), auto_segments=True, replay_units=0)
    assert sorted(report.segment_terms) == [("app_version",), ("country",), ("platform",)]
    assert any("'session'" in note for note in report.notes)
    lesson = next(r for r in report.results if r.experiment == "shorter-lessons")
    # Plain-Python count of the units per country: the segments cover them all.
    countries = {}
    for r in sdk_records:
        if r["experiment"] == "shorter-lessons" and not r["forced"]:
            countries.setdefault(r["country"], set()).add(r["unit"])
    by_country = {s.by["country"]: s.units for s in lesson.segments if list(s.by) == ["country"]}
    assert by_country == {c: len(units) for c, units in countries.items()}
