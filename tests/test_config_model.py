"""The config model: staged rollouts and approvals as data, arm and holdout widths, near-miss names.

All configs are invented (the shared small config of conftest.py).
"""

from __future__ import annotations

import pytest

from audit import AuditError, layout_of
from bucketing import ConfigError, config_schema, did_you_mean, load_config, parse_config
from bucketing.testing import assigner_from_yaml, pinned

from .conftest import SMALL

ROLLOUT = SMALL.replace("        overrides: {qa-1: big}\n", "        overrides: {qa-1: big}\n        rollout: big\n"
                        "        reassign_ok: \"ramp 10 -> 25 %\"\n", 1)


def test_an_experiment_carries_its_rollout_arm_and_its_approval():
    alpha = load_config("r.yaml", text=ROLLOUT).layers[0].experiments[0]
    assert (alpha.rollout, alpha.reassign_ok) == ("big", "ramp 10 -> 25 %")
    assert load_config("r.yaml", text=SMALL).layers[0].experiments[0].rollout is None


def test_a_rollout_of_an_arm_that_does_not_exist_is_a_located_error():
    with pytest.raises(ConfigError) as caught:
        load_config("r.yaml", text=ROLLOUT.replace("rollout: big", "rollout: bigg"))
    (problem,) = caught.value.problems
    assert (problem.rule, problem.loc, problem.line) == ("rollout-unknown-arm", ("layers", 0, "experiments", 0, "rollout"), 17)
    assert "did you mean 'big'?" in problem.message


def test_a_rollout_must_be_a_name():
    with pytest.raises(ConfigError) as caught:
        load_config("r.yaml", text=ROLLOUT.replace("rollout: big", "rollout: [big]"))
    assert caught.value.problems[0].loc == ("layers", 0, "experiments", 0, "rollout")


def test_the_schema_describes_rollout_and_reassign_ok():
    experiment = config_schema()["$defs"]["Experiment"]["properties"]
    assert experiment["rollout"]["anyOf"][0]["type"] == "string" and "rollout" in experiment["rollout"]["description"]
    assert "reassign_ok" in experiment and experiment["reassign_ok"]["description"]


def test_arm_and_holdout_widths_are_in_buckets():
    config = load_config("r.yaml", text=SMALL.replace("weight: 50, params: {size: 1}", "weight: 33.33, params: {size: 1}")
                         .replace("weight: 50, params: {size: 2}", "weight: 66.67, params: {size: 2}"))
    assert [arm.width for arm in config.layers[0].experiments[0].arms] == [3333, 6667]
    assert config.holdouts[0].width == 1000  # percent 10


def test_an_override_naming_a_misspelt_arm_suggests_the_arm():
    _, problems = parse_config("r.yaml", text=SMALL.replace("{qa-1: big}", "{qa-1: bgi}"))
    (problem,) = problems
    assert problem.rule == "override-unknown-arm" and "did you mean 'big'?" in problem.message


def test_a_misspelt_layer_is_suggested_by_layout_and_pinned():
    config = load_config("r.yaml", text=SMALL)
    with pytest.raises(AuditError, match="did you mean 'flow'"):
        layout_of(config, layer="flwo")
    assigner = assigner_from_yaml(SMALL)
    with pytest.raises(KeyError, match="did you mean 'flow'"):
        with pinned(assigner, {"learner": "L-1"}, layer="folw", experiment="alpha", arm="big"):
            pass


@pytest.mark.parametrize("word, choices, want", [
    ("eligble", ["eligible", "overrides"], " (did you mean 'eligible'?)"),
    ("runing", ["draft", "running", "paused", "done"], " (did you mean 'running'?)"),
    ("zzz", ["draft", "running"], ""),
    ("x", [], ""),
])
def test_did_you_mean(word, choices, want):
    assert did_you_mean(word, choices) == want
