"""The assignment order of the contract, rule by rule, on invented configs."""

from datetime import date
from pathlib import Path

import pytest

from bucketing import Assigner, MemorySink, bucket_of, load_config
from bucketing.testing import assigner_from_yaml

TWO_TYPES = """\
format: 1
holdout:
  - {unit: learner, salt: h-salt, percent: 50}
layers:
  - name: flow
    unit: learner
    experiments:
      - name: alpha
        status: running
        buckets: ["0-9999"]
        start: 2026-11-03
        end: 2026-11-30
        eligible: {country: [NL, BE], app_version: ">=7.2"}
        overrides: {qa-1: big}
        arms:
          - {name: control, weight: 50, params: {size: 1}}
          - {name: big, weight: 50, params: {size: 2}}
  - name: push
    unit: device
    experiments:
      - name: nudge
        status: running
        buckets: ["0-9999"]
        arms:
          - {name: control, weight: 100, params: {hour: 18}}
"""
IN_WINDOW = date(2026, 11, 10)
OK = {"country": "NL", "app_version": "7.4"}


def find_unit(predicate, prefix="u"):
    return next(f"{prefix}-{i}" for i in range(100_000) if predicate(f"{prefix}-{i}"))


def test_forced_wins_over_holdout_eligibility_and_dates():
    held = find_unit(lambda u: bucket_of("h-salt", u) < 5000, prefix="qa")
    assigner = assigner_from_yaml(TWO_TYPES.replace("overrides: {qa-1: big}", f"overrides: {{qa-1: big, {held}: big}}"))
    for unit in ("qa-1", held):
        for attrs, day in [({}, date(2025, 1, 1)), ({"country": "US"}, IN_WINDOW)]:
            got = assigner.assign({"learner": unit}, attrs, day=day)
            assert got.layers["flow"].experiment == "alpha"
            assert got.layers["flow"].arm == "big" and got.layers["flow"].forced
    assert assigner.assign({"learner": held}).holdout, "the held-out QA unit is forced all the same"


def test_held_out_units_get_no_experiment_in_any_layer_of_that_type():
    assigner = assigner_from_yaml(TWO_TYPES)
    held = find_unit(lambda u: bucket_of("h-salt", u) < 5000)
    got = assigner.assign({"learner": held, "device": "d-1"}, OK, day=IN_WINDOW)
    assert got.holdout and got.held_out == {"learner"}
    assert got.layers["flow"].experiment is None
    assert got.layers["flow"].bucket == bucket_of("flow", held)
    assert got.layers["push"].experiment == "nudge", "the device holdout is separate (there is none)"


def test_eligibility_and_window_decide_without_falling_through():
    assigner = assigner_from_yaml(TWO_TYPES)
    unit = find_unit(lambda u: bucket_of("h-salt", u) >= 5000)
    assert assigner.assign({"learner": unit}, OK, day=IN_WINDOW).layers["flow"].experiment == "alpha"
    for attrs, day in [
        ({"country": "US", "app_version": "7.4"}, IN_WINDOW),
        ({"country": "NL", "app_version": "7.1.9"}, IN_WINDOW),
        ({"country": "NL"}, IN_WINDOW),
        (OK, date(2026, 11, 2)),
        (OK, date(2026, 12, 1)),
    ]:
        got = assigner.assign({"learner": unit}, attrs, day=day)
        assert got.layers["flow"].experiment is None, (attrs, day)
    assert assigner.assign({"learner": unit}, OK, day=date(2026, 11, 30)).layers["flow"].experiment == "alpha"
    assert assigner.assign({"learner": unit}, OK, day=date(2026, 11, 3)).layers["flow"].experiment == "alpha"


@pytest.mark.parametrize("version, admitted", [
    ("7.2", True), ("7.2.0", True), ("7.10", True), ("v8", True), ("7.1.99", False), ("7", False),
    ("seven", False), ("", False),
])
def test_version_comparison_is_numeric_per_dotted_part(version, admitted):
    # Numeric comparison of dotted versions, 7.10 > 7.2: common practice, no source.
    assigner = assigner_from_yaml(TWO_TYPES)
    unit = find_unit(lambda u: bucket_of("h-salt", u) >= 5000)
    got = assigner.assign({"learner": unit}, {"country": "BE", "app_version": version}, day=IN_WINDOW)
    assert (got.layers["flow"].experiment == "alpha") is admitted


def test_paused_candidate_gives_default_experience(small_yaml):
    assigner = assigner_from_yaml(small_yaml)
    unit = find_unit(lambda u: bucket_of("flow", u) >= 5000 and bucket_of("small-holdout", u) >= 1000)
    got = assigner.assign({"learner": unit})
    assert got.layers["flow"].experiment is None and got.params == {}
    assert got.param("size", 7) == 7


def test_arm_follows_declared_order_and_weights(small_yaml):
    assigner = assigner_from_yaml(small_yaml)
    for i in range(300):
        unit = f"w-{i}"
        got = assigner.assign({"learner": unit})
        if got.layers["flow"].experiment != "alpha":
            continue
        expected = "control" if bucket_of("flow.alpha", unit) < 5000 else "big"
        assert got.layers["flow"].arm == expected
        assert got.param("size") == (1 if expected == "control" else 2)


def test_units_of_types_not_given_are_not_assigned():
    assigner = assigner_from_yaml(TWO_TYPES)
    got = assigner.assign({"device": "d-9"})
    assert set(got.layers) == {"push"} and got.param("size") is None


def test_integer_ids_hash_as_decimal_strings():
    assigner = assigner_from_yaml(TWO_TYPES)
    assert assigner.assign({"device": 12345}).layers["push"].bucket == bucket_of("push", "12345")


@pytest.mark.parametrize("units, attrs, counter", [
    ({"learner": None}, OK, "unit_id"),
    ({"learner": 1.5}, OK, "unit_id"),
    ({"learner": "\ud800"}, OK, "unit_id"),  # a lone surrogate: must not reach the hash function
    ({"learner": "ok"}, {"country": "NL", "app_version": object()}, "attribute_type"),
    ({"learner": "ok"}, {"country": "NL", "app_version": "seven"}, "attribute_version"),
    ("not-a-mapping", None, "unit"),
])
def test_odd_unit_data_never_raises_and_is_counted(units, attrs, counter):
    assigner = assigner_from_yaml(TWO_TYPES.replace("percent: 50", "percent: 0.01"))
    got = assigner.assign(units, attrs, day=IN_WINDOW)
    assert got.param("size", "default") == "default"
    assert assigner.errors == {counter: 1}


def test_unhashable_or_missing_attributes_just_make_the_unit_ineligible():
    assigner = assigner_from_yaml(TWO_TYPES.replace("percent: 50", "percent: 0.01"))
    for attrs in ({"country": ["NL"], "app_version": "7.4"}, {"country": None}, {}):
        assert assigner.assign({"learner": "ok"}, attrs, day=IN_WINDOW).layers["flow"].experiment is None
    assert sum(assigner.errors.values()) == 0


def test_batch_gives_what_one_by_one_gives(example_dir):
    assigner = Assigner(example_dir)
    ids = [f"b-{i}" for i in range(2000)] + ["qa-learner-1", 77]
    attrs = [{"country": ["NL", "DE", "US"][i % 3], "app_version": "7.3"} for i in range(len(ids))]
    day = date(2026, 11, 20)
    batch = list(assigner.assign_many("learner", ids, attrs, day=day))
    single = [assigner.assign({"learner": u}, a, day=day) for u, a in zip(ids, attrs)]
    assert [b.to_dict() for b in batch] == [s.to_dict() for s in single]


def test_param_records_one_exposure_per_layer_in_the_contract_format(example_dir):
    sink = MemorySink()
    assigner = Assigner(example_dir, sink=sink)
    got = assigner.assign({"learner": "qa-learner-1"}, {"country": "NL", "platform": "ios"})
    assert got.param("lesson_minutes") == 6
    assert got.param("lesson_minutes") == 6
    assert got.param("audio_engine") == "v2"
    assert got.param("nope", 3) == 3
    assert [r["layer"] for r in sink.records] == ["lesson-flow", "audio-engine"]
    record = sink.records[0]
    assert {k: record[k] for k in ("unit", "unit_type", "layer", "experiment", "arm", "config", "forced")} == {
        "unit": "qa-learner-1", "unit_type": "learner", "layer": "lesson-flow",
        "experiment": "shorter-lessons", "arm": "short", "config": assigner.version, "forced": True}
    assert record["country"] == "NL" and record["ts"].endswith("Z") and "T" in record["ts"]


def test_default_experience_records_no_exposure(small_yaml):
    sink = MemorySink()
    assigner = assigner_from_yaml(small_yaml, sink=sink)
    unit = find_unit(lambda u: bucket_of("flow", u) >= 5000)
    assigner.assign({"learner": unit}).expose()
    assert sink.records == []


def test_text_of_the_example_in_the_module_docstring_runs(example_dir):
    assigner = Assigner(example_dir)
    got = assigner.assign({"learner": "L-1042"}, {"country": "NL", "app_version": "7.4.0"})
    assert got.param("lesson_minutes", 10) in (6, 10)
    assert repr(got).startswith("Assignment(")


def test_loading_by_path_string(example_dir):
    assert Assigner(str(example_dir)).version == load_config(Path(example_dir)).version
