"""Reading logs: every format gives the counts a plain-Python count gives; malformed records are kept apart."""

from collections import defaultdict

import pytest

from audit import LogError, MissingFieldError, audit_logs
from audit.srm import resolve_files
from tests.invented_logs import (
    counts_of, invented_records, python_counts, python_units, write_csv, write_jsonl, write_parquet,
)

def audit_two_experiments(paths, **options):
    """exp-a is 50/50 and exp-b is thirds; --expect by arm name covers both through a config-free audit."""
    results = {}
    for experiment, expectation in (("exp-a", {"left": 50, "right": 50}), ("exp-b", {"one": 1, "two": 1, "three": 1})):
        result = audit_logs([str(p) for p in paths], expect=expectation, replay_units=0, **options)
        results.update({k: v for k, v in counts_of(result).items() if k[0] == experiment})
    return results


@pytest.mark.parametrize("writer, name", [
    (lambda p, r: write_jsonl(p, r), "log.jsonl"),
    (lambda p, r: write_jsonl(p, r, gz=True), "log.jsonl.gz"),
    (lambda p, r: write_csv(p, r), "log.csv"),
    (lambda p, r: write_csv(p, r, gz=True), "log.csv.gz"),
    (lambda p, r: write_parquet(p, r), "log.parquet"),
])
def test_counts_match_a_plain_python_count(tmp_path, writer, name):
    records = invented_records()
    path = writer(tmp_path / name, records)
    assert audit_two_experiments([path]) == python_counts(records)


def test_directory_and_glob_read_every_file(tmp_path):
    records = invented_records(seed=5)
    half = len(records) // 2
    write_jsonl(tmp_path / "a.jsonl", records[:half])
    write_csv(tmp_path / "b.csv", records[half:])
    expected = python_counts(records)
    assert audit_two_experiments([tmp_path]) == expected
    assert audit_two_experiments([str(tmp_path / "*.*")]) == expected


def test_raw_records_units_in_two_arms_and_forced_units_are_reported(tmp_path):
    records = invented_records(seed=8)
    path = write_jsonl(tmp_path / "log.jsonl", records)
    result = audit_logs([str(path)], expect={"left": 50, "right": 50}, replay_units=0)
    exp_a = next(r for r in result.results if r.experiment == "exp-a")
    rows = [r for r in records if r["experiment"] == "exp-a"]
    arms_by_unit = defaultdict(set)
    for r in rows:
        arms_by_unit[r["unit"]].add(r["arm"])
    multi = {u for u, arms in arms_by_unit.items() if len(arms) > 1}
    assert exp_a.multi_arm_units == len(multi) > 0
    assert {e["unit"] for e in exp_a.multi_arm_examples} <= multi
    assert exp_a.forced_units == (1 if "U-0007" in arms_by_unit and "U-0007" not in multi else 0)
    assert exp_a.records == len(rows)
    duplicates = len(rows) - len({(r["unit"], r["arm"], r["ts"]) for r in rows})
    assert exp_a.duplicate_records == duplicates


def test_column_mapping_reads_other_names(tmp_path):
    records = invented_records(seed=9)
    names = {"unit": "user_id", "arm": "variant", "ts": "seen_at", "experiment": "test_name"}
    path = write_csv(tmp_path / "theirs.csv", records, names=names)
    assert audit_two_experiments([path], columns=names) == python_counts(records)


def test_missing_column_names_the_field_and_the_mapping(tmp_path):
    path = write_csv(tmp_path / "theirs.csv", invented_records(), names={"unit": "user_id"})
    with pytest.raises(MissingFieldError, match=r"theirs.csv: no column 'unit' for field 'unit'") as raised:
        audit_logs(path, expect=[50, 50])
    assert (raised.value.field, raised.value.column) == ("unit", "unit")


def test_unknown_suffix_and_missing_path_are_errors(tmp_path):
    (tmp_path / "log.txt").write_text("{}\n")
    with pytest.raises(LogError, match="unknown log format"):
        resolve_files([str(tmp_path / "log.txt")])
    with pytest.raises(LogError, match="no such file"):
        resolve_files([str(tmp_path / "nothing.jsonl")])


def test_segments_count_units_by_their_attribute_at_first_exposure(tmp_path):
    records = invented_records(seed=12)
    path = write_parquet(tmp_path / "log.parquet", records)
    result = audit_logs([str(path)], expect={"left": 50, "right": 50}, segments=["country"], replay_units=0)
    exp_a = next(r for r in result.results if r.experiment == "exp-a")
    audited = {s.by["country"]: s.units for s in exp_a.segments}
    rows = [r for r in records if r["experiment"] == "exp-a"]
    kept = {u for u, n in python_units(rows).items()}
    first_country = {}
    for r in sorted(rows, key=lambda r: r["ts"]):
        first_country.setdefault(r["unit"], r["country"])
    expected = defaultdict(int)
    for unit in kept:
        expected[first_country[unit]] += 1
    assert audited == dict(expected)
