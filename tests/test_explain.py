"""`Assigner.explain`: every reason, and agreement with `assign` and the golden vectors.

Each step's claims (the buckets, the status, the dates, the failed rule) are
checked against the raw YAML with the plain transcription of the contract in
test_vectors, not against the SDK's own tables. Configs and units are invented.
"""

from datetime import date
from functools import lru_cache

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from bucketing import (AfterEnd, Assigned, Assigner, BeforeStart, Forced, HeldOut, NoExperiment, NotEligible,
                       NotRunning, Step, bucket_of, load_config)
from bucketing._explain import REASONS
from bucketing.testing import assigner_from_yaml, pinned
from tests.conftest import EXAMPLE, SMALL
from tests.test_vectors import _condition_holds, _lines, _raw_example, contract_bucket

# The shared small config (tests/conftest.py: a 10 % holdout, `alpha` forcing qa-1, `beta` paused), narrowed
# so that one layer shows every reason: alpha 0-1999 targeted, beta 2000-3999, gamma 4000-5999 dated, the rest free.
EVERY_REASON = SMALL.replace(
    'buckets: ["0-4999"]', 'buckets: ["0-1999"]\n        eligible: {country: [NL, BE], app_version: ">=7.2"}'
).replace('buckets: ["5000-9999"]', 'buckets: ["2000-3999"]') + """\
      - name: gamma
        status: running
        buckets: ["4000-5999"]
        start: 2026-11-10
        end: 2026-11-20
        arms:
          - {name: control, weight: 100}
"""
DAY = date(2026, 11, 15)
OK = {"country": "NL", "app_version": "7.4"}


def unit_where(predicate) -> str:
    return next(f"w-{i}" for i in range(100_000) if predicate(f"w-{i}"))


def not_held(unit: str) -> bool:
    return bucket_of("small-holdout", unit) >= 1000


@pytest.fixture
def assigner() -> Assigner:
    return assigner_from_yaml(EVERY_REASON)


def explain_flow(assigner: Assigner, unit: str, attrs=OK, day=DAY) -> Step:
    step = assigner.explain({"learner": unit}, attrs, day=day).layers["flow"]
    got = assigner.assign({"learner": unit}, attrs, day=day).layers["flow"]
    assert step.experiment_and_arm == (got.experiment, got.arm) and step.bucket == got.bucket
    assert step.forced == got.forced
    return step


def test_forced_override_names_experiment_and_arm(assigner):
    step = explain_flow(assigner, "qa-1", attrs={})
    assert step == Forced("flow", "learner", "qa-1", bucket_of("flow", "qa-1"), "alpha", "big")
    assert step.to_dict()["reason"] == "forced"


def test_held_out_gives_the_holdout_bucket_and_the_cut(assigner):
    unit = unit_where(lambda u: bucket_of("small-holdout", u) < 1000 and bucket_of("flow", u) < 2000)
    step = explain_flow(assigner, unit)
    assert step == HeldOut("flow", "learner", unit, bucket_of("flow", unit), bucket_of("small-holdout", unit), 1000)
    check = assigner.explain({"learner": unit}, OK, day=DAY).holdouts["learner"]
    assert check.held_out and check.bucket < check.cut == 1000


def test_bucket_in_no_experiments_range(assigner):
    unit = unit_where(lambda u: not_held(u) and bucket_of("flow", u) >= 6000)
    assert explain_flow(assigner, unit) == NoExperiment("flow", "learner", unit, bucket_of("flow", unit))


def test_experiment_not_running_gives_its_status(assigner):
    unit = unit_where(lambda u: not_held(u) and 2000 <= bucket_of("flow", u) < 4000)
    step = explain_flow(assigner, unit)
    assert isinstance(step, NotRunning) and (step.experiment, step.status) == ("beta", "paused")


def test_before_start_and_after_end_give_the_date_and_the_day(assigner):
    unit = unit_where(lambda u: not_held(u) and 4000 <= bucket_of("flow", u) < 6000)
    early = explain_flow(assigner, unit, day=date(2026, 11, 9))
    assert isinstance(early, BeforeStart)
    assert (early.experiment, early.start, early.day) == ("gamma", date(2026, 11, 10), date(2026, 11, 9))
    late = explain_flow(assigner, unit, day=date(2026, 11, 21))
    assert isinstance(late, AfterEnd) and (late.end, late.day) == (date(2026, 11, 20), date(2026, 11, 21))
    assert isinstance(explain_flow(assigner, unit, day=date(2026, 11, 20)), Assigned), "end is inclusive"
    assert late.to_dict()["end"] == "2026-11-20"


@pytest.mark.parametrize("attrs, attribute, value, rule", [
    ({"country": "US", "app_version": "7.4"}, "country", "US", ["NL", "BE"]),
    ({"app_version": "7.4"}, "country", None, ["NL", "BE"]),
    ({"country": "BE", "app_version": "7.1.9"}, "app_version", "7.1.9", ">=7.2"),
    ({"country": "BE", "app_version": "beta"}, "app_version", "beta", ">=7.2"),
])
def test_failed_rule_names_attribute_value_and_rule(assigner, attrs, attribute, value, rule):
    unit = unit_where(lambda u: not_held(u) and bucket_of("flow", u) < 2000)
    step = explain_flow(assigner, unit, attrs=attrs)
    assert isinstance(step, NotEligible)
    assert (step.experiment, step.attribute, step.value, step.rule) == ("alpha", attribute, value, rule)


def test_assigned_gives_the_arm_bucket_and_the_arm(assigner):
    unit = unit_where(lambda u: not_held(u) and bucket_of("flow", u) < 2000)
    step = explain_flow(assigner, unit)
    arm_bucket = bucket_of("flow.alpha", unit)
    assert step == Assigned("flow", "learner", unit, bucket_of("flow", unit), "alpha", arm_bucket,
                            "control" if arm_bucket < 5000 else "big")


def test_every_reason_is_tested_here():
    tested = {Forced, HeldOut, NoExperiment, NotRunning, BeforeStart, AfterEnd, NotEligible, Assigned}
    assert {cls.reason for cls in tested} == set(REASONS) and len(REASONS) == 8


def test_test_pins_explain_as_forced(assigner):
    unit = unit_where(lambda u: not_held(u) and 2000 <= bucket_of("flow", u) < 4000)
    with pinned(assigner, {"learner": unit}, layer="flow", experiment="beta", arm="control"):
        assert explain_flow(assigner, unit) == Forced("flow", "learner", unit, bucket_of("flow", unit), "beta", "control")


def test_odd_input_is_explained_not_raised(assigner):
    got = assigner.explain({"rider": "R-1", "learner": 3.5, "device": "x"}, ["not", "a", "mapping"], day=DAY)
    assert got.layers == {} and set(got.unknown_unit_types) == {"rider", "device"}
    assert got.invalid_units == ("learner",) and "not a mapping" in got.problem
    assert assigner.explain(None).problem.startswith("could not explain")  # type: ignore[arg-type]
    assert sum(assigner.errors.values()) == 0, "explaining counts nothing"


def test_json_shape_is_plain_data(assigner):
    data = assigner.explain({"learner": "qa-1"}, {"country": float("nan")}, day=DAY).to_dict()
    assert data["layers"]["flow"] == {"reason": "forced", "layer": "flow", "unit_type": "learner", "unit": "qa-1",
                                      "bucket": bucket_of("flow", "qa-1"), "experiment": "alpha", "arm": "big"}
    assert data["day"] == "2026-11-15" and data["holdouts"]["learner"]["cut"] == 1000


def holds(rule, value) -> bool:
    """The plain reading of a rule; a value that is no dotted version (a leading 'v' allowed) fails a comparison."""
    if isinstance(value, str) and not isinstance(rule, list):
        value = value.lstrip("vV")
    try:
        return _condition_holds(rule, value)
    except ValueError:
        return False


def check_claims(raw: dict, step: Step, attrs: dict, day: date) -> None:
    """A step's claims hold in the raw YAML under the contract's plain reading."""
    layer = next(layer for layer in raw["layers"] if layer["name"] == step.layer)
    layer_salt = layer.get("salt", layer["name"])
    assert step.bucket == contract_bucket(layer_salt, step.unit)
    owner = next((e for e in layer["experiments"]
                  if any(int(r.split("-")[0]) <= step.bucket <= int(r.split("-")[-1]) for r in e["buckets"])), None)
    if isinstance(step, Forced):
        exp = next(e for e in layer["experiments"] if e["name"] == step.experiment)
        assert exp["status"] == "running" and exp["overrides"][step.unit] == step.arm
        return
    assert not any(e["status"] == "running" and step.unit in e.get("overrides", {}) for e in layer["experiments"])
    holdout = next((h for h in raw["holdout"] if h["unit"] == step.unit_type), None)
    held = holdout is not None and contract_bucket(holdout["salt"], step.unit) < holdout["percent"] * 100
    if isinstance(step, HeldOut):
        assert held and holdout is not None and step.cut == holdout["percent"] * 100
        return
    assert not held
    if isinstance(step, NoExperiment):
        assert owner is None
        return
    assert owner is not None and owner["name"] == step.experiment  # type: ignore[attr-defined]
    if isinstance(step, NotRunning):
        assert owner["status"] == step.status != "running"
    elif isinstance(step, BeforeStart):
        assert day < owner["start"] == step.start
    elif isinstance(step, AfterEnd):
        assert day > owner["end"] == step.end
    elif isinstance(step, NotEligible):
        assert owner["eligible"][step.attribute] == step.rule
        assert not holds(step.rule, attrs.get(step.attribute))
    else:
        assert isinstance(step, Assigned)
        assert step.arm_bucket == contract_bucket(owner.get("salt", f"{layer_salt}.{owner['name']}"), step.unit)
        edge = 0
        for arm in owner["arms"]:
            edge += arm["weight"] * 100
            if step.arm_bucket < edge:
                assert arm["name"] == step.arm
                break


def test_explanations_agree_with_every_golden_vector(example_dir):
    _, lines = _lines()
    assigner = Assigner(load_config(example_dir))
    raw = _raw_example(example_dir)
    reasons = set()
    for v in lines:
        day = date.fromisoformat(v["day"])
        why = assigner.explain({v["unit_type"]: v["unit"]}, v["attrs"], day=day)
        expected = v["assignment"]
        assert set(why.layers) == set(expected["layers"]), v["unit"]
        assert any(h.held_out for h in why.holdouts.values()) == expected["holdout"]
        for name, step in why.layers.items():
            want = expected["layers"][name]
            assert step.experiment_and_arm == (want["experiment"], want["arm"]), (v["unit"], name)
            assert (step.bucket, step.forced) == (want["bucket"], want["forced"])
            check_claims(raw, step, v["attrs"], day)
            reasons.add(step.reason)
    assert reasons >= {"forced", "held_out", "no_experiment", "not_running", "not_eligible", "assigned"}


UNIT_IDS = st.one_of(st.text(max_size=12), st.integers(min_value=0, max_value=10**15),
                     st.sampled_from(["qa-learner-1", "qa-learner-2"]))
ATTRS = st.fixed_dictionaries({}, optional={
    "country": st.sampled_from(["NL", "BE", "DE", "FR", "BR", "US", "", "nl"]),
    "app_version": st.one_of(st.sampled_from(["7.1", "7.2", "7.2.0", "8", "7.10", "v7.4", "beta", ""]),
                             st.integers(0, 9), st.floats(allow_nan=True)),
    "platform": st.sampled_from(["ios", "android", "web"]),
})
DAYS = st.dates(min_value=date(2026, 10, 1), max_value=date(2027, 3, 1))


@settings(max_examples=300, deadline=None)
@given(unit=UNIT_IDS, attrs=ATTRS, day=DAYS, unit_type=st.sampled_from(["learner", "device"]))
def test_explanations_agree_with_assign_on_random_units(unit, attrs, day, unit_type):
    assigner, raw = _example()
    why = assigner.explain({unit_type: unit}, attrs, day=day)
    got = assigner.assign({unit_type: unit}, attrs, day=day)
    if why.invalid_units:
        assert got.layers == {} and assigner.errors["unit_id"] >= 1
        return
    assert set(why.layers) == set(got.layers)
    assert any(h.held_out for h in why.holdouts.values()) == got.holdout
    for name, step in why.layers.items():
        la = got.layers[name]
        assert step.experiment_and_arm == (la.experiment, la.arm)
        assert (step.bucket, step.forced) == (la.bucket, la.forced)
        check_claims(raw, step, attrs, day)


@lru_cache(maxsize=1)
def _example() -> tuple[Assigner, dict]:
    return Assigner(EXAMPLE), _raw_example(EXAMPLE)


def test_text_names_the_deciding_numbers_and_escapes_control_characters(assigner):
    held = unit_where(lambda u: bucket_of("small-holdout", u) < 1000)
    text = assigner.explain({"learner": held}, OK, day=DAY).to_text()
    assert f"holdout bucket {bucket_of('small-holdout', held)} < cut 1000" in text
    assert text.splitlines()[0] == f"{held} (learner)  config {assigner.version}  day 2026-11-15"
    unit = unit_where(lambda u: not_held(u) and bucket_of("flow", u) < 2000)
    text = assigner.explain({"learner": unit}, {"country": "\x1b[2JUS"}, day=DAY).to_text()
    assert "not eligible for alpha: country is '\\x1b[2JUS', rule in [NL, BE]" in text and "\x1b" not in text
    lines = {type(step).__name__: step.describe() for step in [
        explain_flow(assigner, unit_where(lambda u: not_held(u) and 2000 <= bucket_of("flow", u) < 4000)),
        explain_flow(assigner, unit_where(lambda u: not_held(u) and bucket_of("flow", u) >= 6000)),
        explain_flow(assigner, unit_where(lambda u: not_held(u) and 4000 <= bucket_of("flow", u) < 6000),
                     day=date(2026, 11, 9)),
    ]}
    assert lines == {"NotRunning": "not running: beta owns this bucket but is paused",
                     "NoExperiment": "no experiment: this bucket is in no experiment's ranges",
                     "BeforeStart": "before start: gamma starts 2026-11-10 (day 2026-11-09)"}
