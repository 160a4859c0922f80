"""`sortition layout`: owned and free buckets, the bar, and proposals the SDK accepts."""

import json
import shutil

import pytest

from audit.checks import LayerLayout, propose
from bucketing import load_config
from tests.conftest import EXAMPLE


def _layout(sortition, *args):
    got = sortition("layout", *args, "--format", "json")
    assert got.exit_code == 0, got.stderr
    return {layer["name"]: layer for layer in json.loads(got.stdout)["layers"]}


def test_owned_and_free_ranges_of_the_examples(sortition):
    layers = _layout(sortition, EXAMPLE)
    # lessons.yaml (invented example): 0-3999 and 4000-5999 owned, so 6000-9999 is free.
    lesson = layers["lesson-flow"]
    assert [(o["experiment"], o["ranges"]) for o in lesson["owners"]] == [
        ("shorter-lessons", ["0-3999"]), ("review-first", ["4000-5999"])]
    assert lesson["free"] == [{"range": "6000-9999", "share": 0.4}]
    assert layers["audio-engine"]["free"] == []


def test_bar_marks_owners_and_free_cells(sortition):
    got = sortition("layout", str(EXAMPLE), "--layer", "lesson-flow", "--width", "10")
    bar = next(line for line in got.stdout.splitlines() if line.strip().startswith("0 |"))
    # 10 cells of 1,000 buckets: 4 of shorter-lessons (A), 2 of review-first (B), 4 free.
    assert bar.strip() == "0 |AAAABB....| 9999"


def test_want_proposes_a_range_the_sdk_accepts(sortition, tmp_path):
    layers = _layout(sortition, EXAMPLE, "--layer", "paywall", "--want", "12.5")
    proposal = layers["paywall"]["proposal"]
    assert proposal["buckets"] == ["7000-8249"]
    shutil.copytree(EXAMPLE, tmp_path / "configs")
    paywall = tmp_path / "configs" / "paywall.yaml"
    quoted = ", ".join(f'"{r}"' for r in proposal["buckets"])
    paywall.write_text(paywall.read_text() + (
        f"      - name: new-one\n        status: draft\n        buckets: [{quoted}]\n"
        "        arms: [{name: a, weight: 50, params: {trial_days: 7}}, {name: b, weight: 50, params: {trial_days: 10}}]\n"))
    config = load_config(tmp_path / "configs")  # raises on overlapping traffic
    assert [e.name for e in config.layer("paywall").experiments][-1] == "new-one"


def test_proposal_prefers_the_narrowest_gap_that_fits():
    layout = LayerLayout("l", "learner", (), ((0, 99), (200, 1199), (5000, 9999)))
    assert propose(layout, 500) == [(200, 699)]
    assert propose(layout, 100) == [(0, 99)]


def test_proposal_spreads_over_gaps_when_none_is_wide_enough():
    layout = LayerLayout("l", "learner", (), ((0, 99), (200, 399), (600, 649)))
    picked = propose(layout, 280)
    assert sum(high - low + 1 for low, high in picked) == 280
    assert picked == [(0, 79), (200, 399)]
    assert propose(layout, 351) is None


def test_want_with_no_room_says_so(sortition):
    got = sortition("layout", str(EXAMPLE), "--layer", "audio-engine", "--want", "5")
    assert got.exit_code == 0 and "not enough free buckets" in got.stdout


@pytest.mark.parametrize("args, message", [
    (["--want", "0.001"], "two decimals"),
    (["--layer", "nowhere"], "no layer named"),
])
def test_bad_options_are_one_line_errors(sortition, args, message):
    got = sortition("layout", str(EXAMPLE), *args)
    assert got.exit_code == 2 and message in got.stderr and len(got.stderr.strip().splitlines()) == 1


def test_overlapping_experiments_show_as_clash_cells(sortition, tmp_path):
    (tmp_path / "c.yaml").write_text(
        "# Invented.\nformat: 1\nlayers:\n  - name: l\n    unit: learner\n    experiments:\n"
        "      - {name: a, status: draft, buckets: [\"0-4999\"], arms: [{name: x, weight: 100}]}\n"
        "      - {name: b, status: draft, buckets: [\"4000-5999\"], arms: [{name: x, weight: 100}]}\n")
    got = sortition("layout", str(tmp_path / "c.yaml"), "--width", "10")
    assert "0 |AAAA!B....| 9999" in got.stdout
    assert "error" in got.stderr
