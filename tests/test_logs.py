"""Reading logs: every format gives the counts a plain-Python count gives; malformed records are kept apart."""

import csv
import gzip
import json
import random
from collections import defaultdict
from pathlib import Path

import duckdb
import pytest

from audit._logs import LogError, LogScan, parse_column_map, resolve_files
from audit._srm import audit_logs, parse_terms

FIELDS = ["ts", "unit", "unit_type", "layer", "experiment", "arm", "config", "forced", "country"]


def invented_records(seed: int = 3, units: int = 400) -> list[dict]:
    """Invented exposure records: two experiments, repeats, a few units in two arms, a forced unit."""
    rng = random.Random(seed)
    records = []
    for n in range(units):
        unit = f"U-{n:04d}"
        country = rng.choice(["AA", "BB", "CC"])
        for experiment, arms in (("exp-a", ["left", "right"]), ("exp-b", ["one", "two", "three"])):
            if rng.random() < 0.3:
                continue
            arm = rng.choice(arms)
            for _ in range(rng.randint(1, 3)):
                day = rng.randint(1, 9)
                logged = rng.choice(arms) if rng.random() < 0.03 else arm
                records.append({"ts": f"2026-11-0{day}T{rng.randint(10, 23)}:00:00.000Z", "unit": unit,
                                "unit_type": "learner", "layer": f"layer-{experiment[-1]}", "experiment": experiment,
                                "arm": logged, "config": "0123456789ab", "forced": n == 7, "country": country})
    return records


def python_counts(records: list[dict]) -> dict[tuple[str, str], int]:
    """Distinct units per experiment and arm at first exposure, units in two arms and forced units left out."""
    by_unit = defaultdict(list)
    for r in records:
        by_unit[(r["experiment"], r["unit"])].append(r)
    counts: dict[tuple[str, str], int] = defaultdict(int)
    for (experiment, _), rows in by_unit.items():
        if len({r["arm"] for r in rows}) > 1 or any(r["forced"] for r in rows):
            continue
        first = min(rows, key=lambda r: r["ts"])
        counts[(experiment, first["arm"])] += 1
    return dict(counts)


def write_jsonl(path: Path, records: list[dict], gz: bool = False) -> Path:
    text = "".join(json.dumps(r) + "\n" for r in records)
    if gz:
        with gzip.open(path, "wt", encoding="utf-8") as out:
            out.write(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def write_csv(path: Path, records: list[dict], gz: bool = False, names: dict | None = None) -> Path:
    names = names or {}
    opener = gzip.open if gz else open
    with opener(path, "wt", encoding="utf-8", newline="") as out:
        writer = csv.writer(out)
        writer.writerow([names.get(f, f) for f in FIELDS])
        for r in records:
            writer.writerow([str(r[f]).lower() if f == "forced" else r[f] for f in FIELDS])
    return path


def write_parquet(path: Path, records: list[dict]) -> Path:
    source = write_jsonl(path.with_suffix(".tmp.jsonl"), records)
    duckdb.sql(f"COPY (SELECT * FROM read_json('{source}')) TO '{path}' (FORMAT parquet)")
    source.unlink()
    return path


def counts_of(result) -> dict[tuple[str, str], int]:
    return {(r.experiment, a.arm): a.units for r in result.results for a in r.arms if a.units}


def audit_two_experiments(paths, **options):
    """exp-a is 50/50 and exp-b is thirds; --expect by arm name covers both through a config-free audit."""
    results = {}
    for experiment, expectation in (("exp-a", {"left": 50, "right": 50}), ("exp-b", {"one": 1, "two": 1, "three": 1})):
        result = audit_logs([str(p) for p in paths], expectation=expectation, replay_units=0, **options)
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
    result = audit_logs([str(path)], expectation={"left": 50, "right": 50}, replay_units=0)
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
    mapping = parse_column_map([f"{ours}={theirs}" for ours, theirs in names.items()])
    assert audit_two_experiments([path], columns=mapping) == python_counts(records)


def test_missing_column_names_the_field_and_the_mapping(tmp_path):
    path = write_csv(tmp_path / "theirs.csv", invented_records(), names={"unit": "user_id"})
    with pytest.raises(LogError, match=r"theirs.csv: no column 'unit'.*--column unit=NAME"):
        LogScan(resolve_files([str(path)]))


def test_unknown_suffix_and_missing_path_are_errors(tmp_path):
    (tmp_path / "log.txt").write_text("{}\n")
    with pytest.raises(LogError, match="unknown log format"):
        resolve_files([str(tmp_path / "log.txt")])
    with pytest.raises(LogError, match="no such file"):
        resolve_files([str(tmp_path / "nothing.jsonl")])
    with pytest.raises(LogError, match="takes FIELD=LOG_COLUMN"):
        parse_column_map(["unit"])


def test_segments_count_units_by_their_attribute_at_first_exposure(tmp_path):
    records = invented_records(seed=12)
    path = write_parquet(tmp_path / "log.parquet", records)
    result = audit_logs([str(path)], expectation={"left": 50, "right": 50}, terms=parse_terms("country"),
                        replay_units=0)
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


def python_units(records: list[dict]) -> dict[str, str]:
    """Unit -> arm for the units a test counts (one arm only, not forced)."""
    arms, forced = defaultdict(set), set()
    for r in records:
        arms[r["unit"]].add(r["arm"])
        if r["forced"]:
            forced.add(r["unit"])
    return {u: next(iter(a)) for u, a in arms.items() if len(a) == 1 and u not in forced}
