"""Staged rollouts (`rollout: <arm>`): which changes pass without approval, and each rollout's exact share.

Shares are checked against a brute force over every pair of buckets that
matters (layer bucket x arm bucket, holdout bucket x arm bucket), applying
the assignment rule of docs/SPEC.md §3 to each of the 10^8 pairs, as
tests/test_diff_shares.py does for the diff's shares.
"""

import json
from fractions import Fraction

import numpy as np
import pytest

from audit import diff_configs, layout_of
from bucketing import load_config

BUCKETS = 10_000  # docs/SPEC.md §1.1


def _yaml(arms, ranges=((0, 9999),), rollout="new", salt="rollout-salt", status="running", holdout=None,
          approval=None, eligible=None) -> str:
    """An invented one-experiment config: arms as (name, weight) in order."""
    lines = ["format: 1"]
    if holdout:
        lines += ["holdout:", f"  - {{unit: learner, salt: keep-out, percent: {holdout}}}"]
    lines += ["layers:", "  - name: player", "    unit: learner", "    experiments:", "      - name: engine",
              f"        status: {status}", f"        buckets: [{', '.join(f'{chr(34)}{a}-{b}{chr(34)}' for a, b in ranges)}]",
              f"        salt: {salt}", f"        arms: [{', '.join(f'{{name: {n}, weight: {w}}}' for n, w in arms)}]"]
    if rollout:
        lines.append(f"        rollout: {rollout}")
    if approval:
        lines.append(f"        reassign_ok: {approval}")
    if eligible:
        lines.append(f"        eligible: {eligible}")
    return "\n".join(lines) + "\n"


def _config(**kwargs):
    return load_config("invented.yaml", text=_yaml(**kwargs))


def _change(old: dict, new: dict):
    (change,) = diff_configs(_config(**old), _config(**new)).changes
    return change


RAMP_CASES = {
    "ramp up": (dict(arms=[("new", 10), ("old", 90)]), dict(arms=[("new", 25), ("old", 75)]), "ramp"),
    "ramp up taking from the next arm": (dict(arms=[("new", 10), ("a", 45), ("b", 45)]),
                                         dict(arms=[("new", 40), ("a", 15), ("b", 45)]), "ramp"),
    # Taking from both others shifts b's edge: arm buckets 5500-6999 go from b to a.
    "ramp up taking from two arms": (dict(arms=[("new", 10), ("a", 45), ("b", 45)]),
                                     dict(arms=[("new", 40), ("a", 30), ("b", 30)]), "blocked"),
    "ramp up while the range grows": (dict(arms=[("new", 10), ("old", 90)], ranges=[(0, 4999)]),
                                      dict(arms=[("new", 20), ("old", 80)], ranges=[(0, 7999)]), "ramp"),
    "ramp down": (dict(arms=[("new", 25), ("old", 75)]), dict(arms=[("new", 5), ("old", 95)]), "blocked"),
    "reorder": (dict(arms=[("new", 25), ("old", 75)]), dict(arms=[("old", 75), ("new", 25)]), "blocked"),
    "salt change": (dict(arms=[("new", 25), ("old", 75)]), dict(arms=[("new", 25), ("old", 75)], salt="other"),
                    "blocked"),
    "range shrink": (dict(arms=[("new", 25), ("old", 75)], ranges=[(0, 7999)]),
                     dict(arms=[("new", 25), ("old", 75)], ranges=[(0, 3999)]), "blocked"),
    "units move between the other arms": (dict(arms=[("new", 20), ("a", 40), ("b", 40)]),
                                          dict(arms=[("new", 20), ("a", 30), ("b", 50)]), "blocked"),
    "ramp up with the released arm last": (dict(arms=[("old", 90), ("new", 10)]), dict(arms=[("old", 75), ("new", 25)]),
                                           "ramp"),
    "ramp down, approved in this change": (dict(arms=[("new", 25), ("old", 75)]),
                                           dict(arms=[("new", 5), ("old", 95)], approval='"crash on old phones"'),
                                           "accepted"),
    "ramp up of a paused rollout": (dict(arms=[("new", 10), ("old", 90)], status="paused"),
                                    dict(arms=[("new", 25), ("old", 75)], status="paused"), "ok"),
    "ramp up with an eligibility change": (dict(arms=[("new", 10), ("old", 90)]),
                                           dict(arms=[("new", 25), ("old", 75)], eligible="{country: [NL]}"), "warn"),
    "no rollout declared": (dict(arms=[("new", 10), ("old", 90)], rollout=None),
                            dict(arms=[("new", 25), ("old", 75)], rollout=None), "blocked"),
}


@pytest.mark.parametrize("case", RAMP_CASES, ids=str)
def test_only_units_moving_into_the_released_arm_pass_without_approval(case):
    old, new, verdict = RAMP_CASES[case]
    change = _change(old, new)
    assert change.verdict == verdict
    if verdict == "ramp":
        assert change.moves and {to for _, to, _ in change.moves} == {"new"} and change.left == 0
        assert change.findings == ()
    if verdict == "blocked":
        (finding,) = change.findings
        assert finding.rule == "reassign-running"


def test_a_blocked_ramp_down_says_how_much_leaves_the_released_arm():
    change = _change(dict(arms=[("new", 25), ("old", 75)]), dict(arms=[("new", 5), ("old", 95)]))
    # By hand: arm buckets 500-2499 go new -> old, 2,000 of 10,000 = 20 % of the experiment's units.
    assert change.moves == (("new", "old", Fraction(1, 5)),)
    assert "20.00 % of them not into the released arm 'new'" in change.findings[0].message


def _arm_is(arms, name) -> np.ndarray:
    """Arm buckets of arm `name`: docs/SPEC.md §3.5, consecutive ranges of weight*100 buckets in declared order."""
    inside = np.zeros(BUCKETS, dtype=bool)
    edge = 0
    for arm, weight in arms:
        width = round(weight * 100)
        if arm == name:
            inside[edge:edge + width] = True
        edge += width
    return inside


def _in_ranges(ranges) -> np.ndarray:
    inside = np.zeros(BUCKETS, dtype=bool)
    for low, high in ranges:
        inside[low:high + 1] = True
    return inside


SHARE_CASES = [
    dict(arms=[("new", 12.34), ("old", 87.66)], ranges=[(0, 4999)]),
    dict(arms=[("a", 33.33), ("new", 0.01), ("b", 66.66)], ranges=[(17, 17), (2000, 2999), (9000, 9999)]),
    dict(arms=[("new", 100)], ranges=[(123, 4567)]),
]


@pytest.mark.parametrize("spec", SHARE_CASES, ids=lambda s: str(s["arms"]))
def test_rollout_shares_match_a_brute_force_over_layer_and_arm_buckets(spec):
    layer_bucket = np.arange(BUCKETS)[:, None]
    arm_bucket = np.arange(BUCKETS)[None, :]
    cells = _in_ranges(spec["ranges"])[layer_bucket] & _arm_is(spec["arms"], "new")[arm_bucket]
    in_arm = Fraction(int(cells.sum()), BUCKETS * BUCKETS)
    of_experiment = Fraction(int(_arm_is(spec["arms"], "new").sum()), BUCKETS)
    config = _config(**spec)
    (owner,) = layout_of(config).layers[0].owners
    assert (owner.rollout.of_units, owner.rollout.of_experiment) == (in_arm, of_experiment)
    change = _change(spec, spec)
    assert change.rollout_before == change.rollout_after == owner.rollout


def test_rollout_share_with_a_holdout_matches_a_brute_force_over_holdout_and_arm_buckets():
    spec = dict(arms=[("new", 37.5), ("old", 62.5)], holdout=2.5)
    holdout_bucket = np.arange(BUCKETS)[:, None]  # held out when below percent*100: docs/SPEC.md §3.3
    arm_bucket = np.arange(BUCKETS)[None, :]
    cells = (holdout_bucket >= 250) & _arm_is(spec["arms"], "new")[arm_bucket]
    (owner,) = layout_of(_config(**spec)).layers[0].owners
    assert owner.rollout.of_units == Fraction(int(cells.sum()), BUCKETS * BUCKETS)


def test_diff_and_layout_show_the_rollout_share(sortition, tmp_path):
    (tmp_path / "old.yaml").write_text(_yaml(arms=[("new", 10), ("old", 90)], ranges=[(0, 4999)]))
    (tmp_path / "new.yaml").write_text(_yaml(arms=[("new", 25), ("old", 75)], ranges=[(0, 4999)]))
    got = sortition("diff", tmp_path / "old.yaml", tmp_path / "new.yaml")
    assert got.exit_code == 0
    assert "ramp     player/engine" in got.stdout
    assert "rollout of 'new': 10.00 % → 25.00 % of the experiment, 5.00 % → 12.50 % of learner units" in got.stdout
    report = json.loads(sortition("diff", tmp_path / "old.yaml", tmp_path / "new.yaml", "--format", "json").stdout)
    (row,) = report["experiments"]
    assert row["verdict"] == "ramp" and row["rollout"] == {
        "arm": "new", "old": {"arm": "new", "experiment_share": 0.1, "layer_share": 0.05},
        "new": {"arm": "new", "experiment_share": 0.25, "layer_share": 0.125}}
    layout = sortition("layout", tmp_path / "new.yaml")
    assert "rollout: 'new' at 25.00 % of the experiment, 12.50 % of learner units" in layout.stdout
    owner = json.loads(sortition("layout", tmp_path / "new.yaml", "--format", "json").stdout)["layers"][0]["owners"][0]
    assert owner["rollout"] == {"arm": "new", "experiment_share": 0.25, "layer_share": 0.125}


def test_check_warns_when_the_released_arm_is_not_first(sortition, tmp_path):
    (tmp_path / "last.yaml").write_text(_yaml(arms=[("old", 90), ("new", 10)]))
    (tmp_path / "first.yaml").write_text(_yaml(arms=[("new", 10), ("old", 90)]))
    last = json.loads(sortition("check", tmp_path / "last.yaml", "--format", "json").stdout)
    assert [f["rule"] for f in last["findings"]] == ["rollout-not-first"]
    first = json.loads(sortition("check", tmp_path / "first.yaml", "--format", "json").stdout)
    assert first["findings"] == []
