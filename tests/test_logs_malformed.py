"""Malformed records: each kind is counted and located, and never costs a good record."""

import json

import duckdb
import pytest

from audit import audit_logs
from tests.invented_logs import counts_of, invented_records, python_counts, write_csv

GOOD = {"ts": "2026-11-04T09:00:00.000Z", "unit": "U-1", "unit_type": "learner", "layer": "layer-a",
        "experiment": "exp-a", "arm": "left", "config": "0123456789ab", "forced": False}

BROKEN_LINES = {
    "unparseable": "### log rotated at midnight ###",
    "missing_field": json.dumps({k: v for k, v in GOOD.items() if k != "arm"}),
    "wrong_type": json.dumps(dict(GOOD, forced="maybe")),
}
BROKEN_TS = json.dumps(dict(GOOD, ts="yesterday"))  # epoch numbers are read: a word is not a time
NULL_UNIT = json.dumps(dict(GOOD, unit=None))


def audit(paths, **options):
    return audit_logs([str(p) for p in paths], expect={"left": 50, "right": 50}, replay_units=0, **options)


@pytest.mark.parametrize("kind", sorted(BROKEN_LINES))
def test_each_kind_is_counted_with_its_line(tmp_path, kind):
    path = tmp_path / "log.jsonl"
    path.write_text(json.dumps(GOOD) + "\n\n" + BROKEN_LINES[kind] + "\n" + json.dumps(dict(GOOD, unit="U-2")) + "\n")
    result = audit([path])
    assert result.malformed.counts == {kind: 1}
    example, = result.malformed.examples
    assert (example.file, example.line) == (str(path), 3)  # the blank line 2 still counts as a line
    assert result.results[0].units == 2


def test_truncated_last_line_is_its_own_kind(tmp_path):
    path = tmp_path / "log.jsonl"
    path.write_text(json.dumps(GOOD) + "\n" + json.dumps(GOOD)[:40])
    result = audit([path])
    assert result.malformed.counts == {"truncated": 1}
    assert result.malformed.examples[0].line == 2


def test_wrong_types_name_the_field(tmp_path):
    path = tmp_path / "log.jsonl"
    path.write_text("\n".join([BROKEN_TS, NULL_UNIT, json.dumps(dict(GOOD, unit=[1]))]) + "\n" + json.dumps(GOOD) + "\n")
    result = audit([path])
    assert result.malformed.counts == {"wrong_type": 2, "missing_field": 1}
    details = {e.line: e.detail for e in result.malformed.examples}
    assert "'ts'" in details[1] and "'unit' is missing" in details[2] and "'unit'" in details[3]


def test_a_log_mixing_every_kind_counts_all_good_records(tmp_path):
    records = invented_records(seed=21)
    lines = [json.dumps(r) for r in records]
    broken = list(BROKEN_LINES.values()) + [BROKEN_TS, NULL_UNIT]
    for i, text in enumerate(broken):
        lines.insert(7 + 31 * i, text)
    path = tmp_path / "mixed.jsonl"
    path.write_text("\n".join(lines) + "\n" + lines[-1][:25])
    result = audit([path])
    assert result.malformed.total == len(broken) + 1
    assert set(result.malformed.counts) == {"unparseable", "truncated", "missing_field", "wrong_type"}
    counts = counts_of(result)
    expected = {k: v for k, v in python_counts(records).items() if k[0] == "exp-a"}
    assert counts == expected


def test_csv_rows_with_missing_or_extra_columns(tmp_path):
    records = invented_records(seed=22)
    path = write_csv(tmp_path / "log.csv", records)
    text = path.read_text().splitlines()
    text.insert(5, "U-9,too,few")
    text.append(text[-1] + ",an,extra,column,or,two,three,four,five,six")
    text.append("2026-11-04T09:00:00.000Z,U-1,learner")
    path.write_text("\n".join(text))
    result = audit([path])
    assert result.malformed.counts == {"truncated": 2, "unparseable": 1}
    assert {e.line for e in result.malformed.examples} == {6, len(text) - 1, len(text)}
    expected = {k: v for k, v in python_counts(records).items() if k[0] == "exp-a"}
    assert counts_of(result) == expected


def test_csv_values_of_the_wrong_type(tmp_path):
    records = invented_records(seed=23)
    path = write_csv(tmp_path / "log.csv", records)
    text = path.read_text().splitlines()
    text.insert(3, "yesterday,U-9,learner,layer-a,exp-a,left,0123456789ab,false,AA")
    text.insert(4, "2026-11-04T09:00:00.000Z,U-9,learner,layer-a,exp-a,left,0123456789ab,perhaps,AA")
    path.write_text("\n".join(text) + "\n")
    result = audit([path])
    assert result.malformed.counts == {"wrong_type": 2}
    assert any("'forced'" in e.detail for e in result.malformed.examples)


def test_parquet_nulls_are_missing_fields(tmp_path):
    path = tmp_path / "log.parquet"
    duckdb.sql(f"""COPY (SELECT * FROM (VALUES
        (TIMESTAMP '2026-11-04 09:00:00', 'U-1', 'layer-a', 'exp-a', 'left'),
        (TIMESTAMP '2026-11-04 09:00:00', NULL, 'layer-a', 'exp-a', 'left'),
        (TIMESTAMP '2026-11-04 09:00:00', 'U-2', 'layer-a', 'exp-a', 'right')) t(ts, unit, layer, experiment, arm))
        TO '{path}' (FORMAT parquet)""")
    result = audit([path])
    assert result.malformed.counts == {"missing_field": 1}
    assert result.malformed.examples[0].line == 2
    assert result.results[0].units == 2
