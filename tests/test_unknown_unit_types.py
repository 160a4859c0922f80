"""A unit-type key that no layer or holdout uses is counted and logged once, never silent (invented configs)."""

import logging

from bucketing import bucket_of
from bucketing.testing import assigner_from_yaml
from tests.conftest import SMALL

# The shared small config (tests/conftest.py) with its layer moved to riders; the holdout stays on learners.
RIDER = SMALL.replace("unit: learner\n    experiments:", "unit: rider\n    experiments:")


def test_unused_unit_type_is_counted_every_time_and_logged_once(caplog):
    assigner = assigner_from_yaml(RIDER)
    with caplog.at_level(logging.WARNING, logger="bucketing.assigner"):
        for i in range(5):
            got = assigner.assign({"user": f"R-{i}"})
            assert got.layers == {}
        assigner.assign({"passenger": "R-1", "rider": "R-1"})
    assert assigner.errors["unknown_unit_type"] == 6
    messages = [r.getMessage() for r in caplog.records]
    assert len(messages) == 2
    assert "'user'" in messages[0] and "rider" in messages[0] and "learner" in messages[0] and "'passenger'" in messages[1]


def test_a_unit_type_with_only_a_holdout_is_known_and_held_out():
    assigner = assigner_from_yaml(RIDER)
    held = next(f"L-{i}" for i in range(1000) if bucket_of("small-holdout", f"L-{i}") < 1000)
    got = assigner.assign({"learner": held})
    assert got.holdout and got.held_out == {"learner"}
    assert assigner.errors["unknown_unit_type"] == 0


def test_the_list_of_logged_names_is_bounded(caplog, monkeypatch):
    monkeypatch.setattr("bucketing._assigner.UNKNOWN_UNIT_TYPES_LOGGED", 3)
    assigner = assigner_from_yaml(RIDER)
    with caplog.at_level(logging.WARNING, logger="bucketing.assigner"):
        for i in range(10):
            assigner.assign({f"type-{i}": "x"})
    assert len(caplog.records) == 3 and assigner.errors["unknown_unit_type"] == 10
