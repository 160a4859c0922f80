"""bucketing.testing: a service's tests pin a unit to an arm without editing YAML."""

import pytest

from bucketing import Assigner, MemorySink
from bucketing.testing import assigner_from_yaml, pinned


def test_pin_forces_the_arm_and_is_undone_after_the_block(example_dir):
    assigner = Assigner(example_dir)
    unit = next(f"p-{i}" for i in range(10_000)
                if assigner.assign({"learner": f"p-{i}"}).arm("lesson-flow") not in (None, "short"))
    before = assigner.assign({"learner": unit}).to_dict()
    with pinned(assigner, {"learner": unit}, layer="lesson-flow", experiment="shorter-lessons", arm="short"):
        got = assigner.assign({"learner": unit})
        assert got.arm("lesson-flow") == "short" and got.layers["lesson-flow"].forced
        assert got.param("lesson_minutes") == 6
        assert assigner.assign({"learner": unit + "-other"}).to_dict()["layers"]["lesson-flow"]["forced"] is False
    assert assigner.assign({"learner": unit}).to_dict() == before


def test_pin_reaches_paused_experiments_for_pre_launch_tests(example_dir):
    assigner = Assigner(example_dir)
    with pinned(assigner, {"learner": "dev-1"}, layer="paywall", experiment="price-display", arm="monthly-first"):
        assert assigner.assign({"learner": "dev-1"}).arm("paywall") == "monthly-first"


@pytest.mark.parametrize("kwargs, message", [
    ({"layer": "nope", "experiment": "x", "arm": "y"}, "no layer"),
    ({"layer": "paywall", "experiment": "x", "arm": "y"}, "no experiment"),
    ({"layer": "paywall", "experiment": "trial-length", "arm": "y"}, "no arm"),
])
def test_pin_names_what_is_wrong(example_dir, kwargs, message):
    with pytest.raises(KeyError, match=message):
        with pinned(Assigner(example_dir), {"learner": "u"}, **kwargs):
            pass


def test_assigner_from_yaml_records_exposures(small_yaml):
    sink = MemorySink()
    assigner = assigner_from_yaml(small_yaml, sink=sink)
    assigner.assign({"learner": "qa-1"}).param("size")
    assert sink.records[0]["arm"] == "big"
