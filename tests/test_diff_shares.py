"""`diff` shares against two outside counts: a brute force over bucket pairs, and a replay of units through the SDK.

The brute force enumerates all 10,000 x 10,000 pairs of the two buckets that
matter in each case and applies the contract's assignment rule to each pair
(its own code, written from docs/SPEC.md, not `_diff`'s); the shares must match
exactly. The replay assigns a million synthetic unit ids with the SDK under
both configs and counts; the counts must fall within 5-sigma binomial bounds
(scipy.stats.binom) of the shares `diff` predicts.
"""

from datetime import date
from fractions import Fraction

import numpy as np
import pytest
from scipy import stats

from audit import diff_configs
from bucketing import Assigner, load_config

BUCKETS = 10_000  # docs/SPEC.md §1.1: 10,000 buckets per layer
GRID = (BUCKETS, BUCKETS)


def _yaml(layers: list[dict], holdout: dict | None = None) -> str:
    """Invented configs for these tests, written from plain descriptions."""
    lines = ["format: 1"]
    if holdout:
        lines += ["holdout:", f"  - {{unit: learner, salt: {holdout['salt']}, percent: {holdout['percent']}}}"]
    lines.append("layers:")
    for layer in layers:
        lines += [f"  - name: {layer['name']}", "    unit: learner", f"    salt: {layer['salt']}", "    experiments:"]
        for exp in layer["experiments"]:
            ranges = ", ".join(f'"{r[0]}-{r[1]}"' for r in exp["ranges"])
            arms = ", ".join(f"{{name: {n}, weight: {w}}}" for n, w in exp["arms"])
            lines += [f"      - name: {exp['name']}", "        status: running", f"        buckets: [{ranges}]",
                      f"        salt: {exp['salt']}", f"        arms: [{arms}]"]
    return "\n".join(lines) + "\n"


def _config(layers, holdout=None):
    return load_config("invented.yaml", text=_yaml(layers, holdout))


def _arm_of(weights: list[tuple[str, float]]) -> np.ndarray:
    """Arm name of each arm bucket: docs/SPEC.md §3.5, arms take consecutive ranges of weight*100 buckets."""
    names = np.empty(BUCKETS, dtype=object)
    edge = 0
    for name, weight in weights:
        width = round(weight * 100)
        names[edge:edge + width] = name
        edge += width
    return names


def _in_ranges(ranges) -> np.ndarray:
    inside = np.zeros(BUCKETS, dtype=bool)
    for low, high in ranges:
        inside[low:high + 1] = True
    return inside


def _brute(in_old: np.ndarray, in_new: np.ndarray, same_arm: np.ndarray) -> dict[str, Fraction]:
    """Shares of the old population from 10,000 x 10,000 boolean grids (one cell per bucket pair)."""
    old = int(in_old.sum())
    both = in_old & in_new
    kept = int((both & same_arm).sum())
    return {
        "kept": Fraction(kept, old),
        "switched": Fraction(int(both.sum()) - kept, old),
        "left": Fraction(int((in_old & ~in_new).sum()), old),
        "entered": Fraction(int((in_new & ~in_old).sum()), old),
    }


def _diff_shares(old, new, experiment: str) -> dict[str, Fraction]:
    (change,) = [c for c in diff_configs(old, new).changes if c.experiment == experiment]
    return {"kept": change.kept, "switched": change.switched, "left": change.left, "entered": change.entered}


def _exp(ranges, arms, salt="exp-salt", name="e"):
    return {"name": name, "ranges": ranges, "arms": arms, "salt": salt}


def _layer(exp, salt="layer-salt"):
    return [{"name": "flow", "salt": salt, "experiments": [exp]}]


SAME_SALT_CASES = {
    "weight change": (_exp([(0, 4999)], [("c", 50), ("t", 50)]), _exp([(0, 4999)], [("c", 30), ("t", 70)])),
    "arm reorder": (_exp([(0, 2999)], [("c", 40), ("t", 60)]), _exp([(0, 2999)], [("t", 60), ("c", 40)])),
    "range move and grow": (_exp([(1000, 2999)], [("c", 50), ("t", 50)]),
                            _exp([(2500, 5999), (9000, 9099)], [("c", 50), ("t", 50)])),
    "range shrink, arm added": (_exp([(0, 7999)], [("c", 25.5), ("t", 74.5)]),
                                _exp([(0, 3333)], [("c", 20), ("u", 10.25), ("t", 69.75)])),
}


@pytest.mark.parametrize("case", SAME_SALT_CASES, ids=str)
def test_same_salts_match_brute_force_over_layer_and_arm_buckets(case):
    before, after = SAME_SALT_CASES[case]
    b = np.arange(BUCKETS)[:, None]  # layer bucket, one row each
    a = np.arange(BUCKETS)[None, :]  # arm bucket, one column each
    in_old = np.broadcast_to(_in_ranges(before["ranges"])[b], GRID)
    in_new = np.broadcast_to(_in_ranges(after["ranges"])[b], GRID)
    same_arm = np.broadcast_to((_arm_of(before["arms"]) == _arm_of(after["arms"]))[a], GRID)
    expected = _brute(in_old, in_new, same_arm)
    assert _diff_shares(_config(_layer(before)), _config(_layer(after)), "e") == expected


def test_experiment_salt_change_matches_brute_force_over_old_and_new_arm_buckets():
    before = _exp([(0, 9999)], [("c", 30), ("t", 70)], salt="first-draw")
    after = _exp([(0, 9999)], [("t", 55.5), ("c", 44.5)], salt="second-draw")
    old_arm = _arm_of(before["arms"])[:, None]  # rows: arm bucket under the old salt
    new_arm = _arm_of(after["arms"])[None, :]  # columns: arm bucket under the new salt
    everyone = np.ones(GRID, dtype=bool)
    expected = _brute(everyone, everyone, old_arm == new_arm)
    assert _diff_shares(_config(_layer(before)), _config(_layer(after)), "e") == expected


def test_layer_salt_change_matches_brute_force_over_old_and_new_layer_buckets():
    exp_before = _exp([(0, 3999)], [("c", 50), ("t", 50)])
    exp_after = _exp([(2000, 6999)], [("c", 50), ("t", 50)])
    in_old = np.broadcast_to(_in_ranges(exp_before["ranges"])[:, None], GRID)
    in_new = np.broadcast_to(_in_ranges(exp_after["ranges"])[None, :], GRID)
    expected = _brute(in_old, in_new, np.ones(GRID, dtype=bool))
    got = diff_configs(_config(_layer(exp_before, salt="layer-a")), _config(_layer(exp_after, salt="layer-b")))
    (change,) = got.changes
    assert {"kept": change.kept, "switched": change.switched, "left": change.left, "entered": change.entered} == expected
    assert not change.exact and "layer salt change" in change.causes


def test_holdout_change_with_same_salt_matches_brute_force_over_holdout_and_layer_buckets():
    exp_before = _exp([(0, 4999)], [("c", 50), ("t", 50)])
    exp_after = _exp([(0, 5999)], [("c", 50), ("t", 50)])
    h = np.arange(BUCKETS)[:, None]  # holdout bucket: docs/SPEC.md §3.2 step 3, held out when below percent*100
    b = np.arange(BUCKETS)[None, :]
    in_old = (h >= 200) & _in_ranges(exp_before["ranges"])[b]
    in_new = (h >= 550) & _in_ranges(exp_after["ranges"])[b]
    expected = _brute(in_old, in_new, np.ones(GRID, dtype=bool))
    old = _config(_layer(exp_before), {"salt": "long-term", "percent": 2})
    new = _config(_layer(exp_after), {"salt": "long-term", "percent": 5.5})
    assert _diff_shares(old, new, "e") == expected


def test_holdout_salt_change_matches_brute_force_over_old_and_new_holdout_buckets():
    exp = _exp([(0, 9999)], [("c", 50), ("t", 50)])
    old_h = np.arange(BUCKETS)[:, None]
    new_h = np.arange(BUCKETS)[None, :]
    in_old = np.broadcast_to(old_h >= 300, GRID)
    in_new = np.broadcast_to(new_h >= 300, GRID)
    expected = _brute(in_old, in_new, np.ones(GRID, dtype=bool))
    old = _config(_layer(exp), {"salt": "year-one", "percent": 3})
    new = _config(_layer(exp), {"salt": "year-two", "percent": 3})
    assert _diff_shares(old, new, "e") == expected


# One pair of configs holding several kinds of change at once, replayed unit by unit.
REPLAY_OLD = [
    {"name": "flow", "salt": "flow-v1", "experiments": [
        _exp([(0, 3999)], [("c", 50), ("t", 50)], salt="ramp", name="ramped"),
        _exp([(4000, 6999)], [("c", 40), ("t", 60)], salt="order", name="reordered"),
        _exp([(7000, 9999)], [("c", 50), ("t", 50)], salt="draw-1", name="redrawn"),
    ]},
    {"name": "paywall", "salt": "paywall-v1", "experiments": [
        _exp([(0, 4999)], [("c", 50), ("t", 50)], salt="moved", name="moved"),
    ]},
]
REPLAY_NEW = [
    {"name": "flow", "salt": "flow-v1", "experiments": [
        _exp([(0, 3999)], [("c", 30), ("t", 70)], salt="ramp", name="ramped"),
        _exp([(4000, 6999)], [("t", 60), ("c", 40)], salt="order", name="reordered"),
        _exp([(7000, 9999)], [("c", 50), ("t", 50)], salt="draw-2", name="redrawn"),
    ]},
    {"name": "paywall", "salt": "paywall-v2", "experiments": [
        _exp([(2500, 7499)], [("c", 50), ("t", 50)], salt="moved", name="moved"),
    ]},
]
UNITS = 1_000_000
SIGMAS = 5  # common practice for a test that must not flake, no source


def _arms(config, ids) -> dict[str, list]:
    """Experiment/arm of every unit in every layer, as the SDK assigns them."""
    got = {"flow": [], "paywall": []}
    for assignment in Assigner(config).assign_many("learner", ids, day=date(2026, 12, 1)):
        for layer in got:
            la = assignment.layers[layer]
            got[layer].append((la.experiment, la.arm) if la.experiment else None)
    return got


def test_replayed_units_fall_within_binomial_bounds_of_the_shares():
    old = _config(REPLAY_OLD, {"salt": "keep-out", "percent": 2})
    new = _config(REPLAY_NEW, {"salt": "keep-out", "percent": 3})
    ids = [f"learner-{i}" for i in range(UNITS)]
    before, after = _arms(old, ids), _arms(new, ids)
    confidence = 1 - 2 * stats.norm.sf(SIGMAS)
    changes = {c.experiment: c for c in diff_configs(old, new).changes}
    assert set(changes) == {"ramped", "reordered", "redrawn", "moved"}
    for name, change in changes.items():
        layer = "paywall" if name == "moved" else "flow"
        counts = {"kept": 0, "switched": 0, "left": 0, "entered": 0}
        for was, now in zip(before[layer], after[layer]):
            in_old = was is not None and was[0] == name
            in_new = now is not None and now[0] == name
            if in_old and in_new:
                counts["kept" if was[1] == now[1] else "switched"] += 1
            elif in_old:
                counts["left"] += 1
            elif in_new:
                counts["entered"] += 1
        for key, count in counts.items():
            p = float(change.old_traffic * getattr(change, key))
            low, high = stats.binom.interval(confidence, UNITS, p)
            assert low <= count <= high, (name, key, count, p * UNITS)
