"""Batch assignment of a pandas DataFrame (bucketing.batch): the same answers as `Assigner.assign`, row by row."""

from __future__ import annotations

from datetime import date, datetime, timezone

import pandas as pd
import pytest

from bucketing import Assigner, MemorySink, load_config
from bucketing.batch import _executor_assigner, assign_frame, layer_column

from .batch_expectations import ATTRIBUTES, assignment_columns, expected_row, generated_units, golden_units

LEARNER_LAYERS = ["audio-engine", "lesson-flow", "paywall"]


def _assignment_rows(frame: pd.DataFrame, layers) -> list[tuple]:
    columns = [frame[name].astype(object).where(frame[name].notna(), None).tolist() for name in assignment_columns(layers)]
    return list(zip(*columns))


@pytest.fixture(scope="module")
def example():
    return load_config("configs_example")


@pytest.mark.parametrize("unit_type", ["learner", "device"])
def test_golden_vectors_come_out_of_a_frame_unchanged(example, unit_type):
    rows = golden_units(unit_type)
    out = assign_frame(pd.DataFrame(rows), example, unit_type=unit_type, day_column="day")
    layers = [layer.name for layer in example.layers if layer.unit == unit_type]
    assigner = Assigner(example)
    expected = [expected_row(assigner, unit_type, r["unit"], {k: v for k, v in r.items() if k not in ("unit", "day")},
                                 date.fromisoformat(r["day"]), layers) for r in rows]
    assert len(rows) > 100
    assert _assignment_rows(out, layers) == expected
    assert list(out.columns[:len(rows[0])]) == list(rows[0]), "the input columns stay, in their order"


def test_a_million_generated_units_match_assign(example):
    units = generated_units(1_000_000)
    out = assign_frame(pd.DataFrame(units), example, unit_type="learner", day_column="day")
    assigner = Assigner(example)
    got = _assignment_rows(out, LEARNER_LAYERS)
    attribute_columns = [units[name] for name in ATTRIBUTES]
    mismatches = 0
    for row, (unit, day, *values) in enumerate(zip(units["unit"], units["day"], *attribute_columns)):
        attrs = {name: value for name, value in zip(ATTRIBUTES, values) if value is not None}
        mismatches += got[row] != expected_row(assigner, "learner", unit, attrs, day, LEARNER_LAYERS)
    assert mismatches == 0
    assert out["holdout"].sum() > 10_000, "about 2 % are held out"
    assert out[layer_column("lesson-flow", "forced")].sum() > 500, "the forced QA learners are in"


def test_one_day_for_all_rows_or_today(example):
    units = pd.DataFrame({"unit": ["L-1", "L-2", "L-3"]})
    before = assign_frame(units, example, unit_type="learner", day=date(2026, 11, 1))
    after = assign_frame(units, example, unit_type="learner", day=date(2026, 11, 20))
    assert before[layer_column("lesson-flow", "experiment")].isna().all(), "lesson-flow's experiments start on 11-03"
    assigner = Assigner(example)
    today = assign_frame(units, example, unit_type="learner")
    assert _assignment_rows(today, LEARNER_LAYERS) == [
        expected_row(assigner, "learner", u, {}, datetime.now(timezone.utc).date(), LEARNER_LAYERS) for u in units["unit"]]
    assert _assignment_rows(after, LEARNER_LAYERS) != _assignment_rows(before, LEARNER_LAYERS)


def test_integer_ids_nulls_and_odd_values_behave_as_in_a_service(example):
    units = pd.DataFrame({
        "unit": pd.array([7, None, 12345678901], dtype="Int64"),
        "country": ["NL", None, float("nan")],
        "day": [pd.Timestamp("2026-11-20 23:59"), None, "2026-11-20"],
    })
    out = assign_frame(units, example, unit_type="learner", day_column="day")
    assigner = Assigner(example)
    rows = _assignment_rows(out, LEARNER_LAYERS)
    assert rows[0] == expected_row(assigner, "learner", 7, {"country": "NL"}, date(2026, 11, 20), LEARNER_LAYERS)
    assert rows[0] == expected_row(assigner, "learner", "7", {"country": "NL"}, date(2026, 11, 20), LEARNER_LAYERS)
    assert rows[1] == (False,) + (None,) * 4 * len(LEARNER_LAYERS), "no id: the default experience, no bucket"
    assert rows[2] == expected_row(assigner, "learner", "12345678901", {}, date(2026, 11, 20), LEARNER_LAYERS)
    float_ids = pd.DataFrame({"unit": [7.0, None], "country": ["NL", "NL"]})  # pandas' integers-with-nulls
    assert assign_frame(float_ids, example, unit_type="learner", day=date(2026, 11, 20))["unit"].dtype.kind == "f"
    assert _assignment_rows(assign_frame(float_ids, example, unit_type="learner", day=date(2026, 11, 20)),
                            LEARNER_LAYERS)[0] == rows[0]


def test_named_attributes_only_are_read(example):
    units = pd.DataFrame({"unit": ["L-00000"] * 2, "country": ["US", "NL"], "note": ["x", "y"]})
    only_note = assign_frame(units, example, unit_type="learner", attributes=["note"], day=date(2026, 11, 20))
    assigner = Assigner(example)
    assert _assignment_rows(only_note, LEARNER_LAYERS) == [
        expected_row(assigner, "learner", "L-00000", {"note": n}, date(2026, 11, 20), LEARNER_LAYERS) for n in "xy"]


def test_no_exposures_unless_a_sink_is_given(example):
    units = pd.DataFrame({"unit": ["L-00000", "L-00001"], "country": ["NL", "US"], "app_version": ["7.4.0"] * 2})
    sink = MemorySink()
    out = assign_frame(units, example, unit_type="learner", day=date(2026, 11, 20), sink=sink)
    placed = sum(out[layer_column(layer, "experiment")].notna().sum() for layer in LEARNER_LAYERS)
    assert len(sink.records) == placed > 0
    assert {r["unit"] for r in sink.records} == {"L-00000", "L-00001"}
    assert all(r["config"] == example.version and r["country"] in ("NL", "US") for r in sink.records)


@pytest.mark.parametrize("kwargs, message", [
    ({"unit_type": "account"}, "no layer for unit type 'account'; its unit types: device, learner"),
    ({"unit_type": "learner", "unit_column": "id"}, "unit_column: the frame has no column 'id'"),
    ({"unit_type": "learner", "attributes": ["age"]}, "attributes: the frame has no column 'age'"),
    ({"unit_type": "learner", "day": date(2026, 11, 1), "day_column": "unit"}, "either day"),
])
def test_bad_requests_fail_with_one_line(example, kwargs, message):
    with pytest.raises(ValueError, match=message):
        assign_frame(pd.DataFrame({"unit": ["L-1"]}), example, **kwargs)


def test_a_column_the_assignment_would_add_is_not_overwritten(example):
    with pytest.raises(ValueError, match="already has column 'paywall__arm'"):
        assign_frame(pd.DataFrame({"unit": ["L-1"], "paywall__arm": ["mine"]}), example, unit_type="learner")


def test_a_config_path_works_like_a_loaded_config(example):
    units = pd.DataFrame({"unit": ["L-1", "L-2"]})
    by_path = assign_frame(units, "configs_example", unit_type="learner", day=date(2026, 11, 20))
    loaded = assign_frame(units, example, unit_type="learner", day=date(2026, 11, 20))
    pd.testing.assert_frame_equal(by_path, loaded)


def test_each_worker_builds_the_assigner_of_a_version_once(example):
    import pickle

    first = _executor_assigner("test-version-a", pickle.dumps(example))
    again = _executor_assigner("test-version-a", b"not unpickled again")
    assert again is first and first.version == example.version
