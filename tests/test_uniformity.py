"""Statistical checks of the hashing rule: uniform buckets, independent layers, arm shares.

Reference computations come from scipy (PyPI): `chisquare`, `chi2_contingency`
and `binom`. Unit ids are synthetic.
"""

import numpy as np
from scipy import stats

from bucketing import Assigner, BUCKETS, bucket_of
from bucketing.testing import assigner_from_yaml

N = 200_000
UNITS = [f"user-{i}" for i in range(N)]


def test_buckets_are_uniform_over_10000():
    counts = np.bincount([bucket_of("uniformity-salt", u) for u in UNITS], minlength=BUCKETS)
    result = stats.chisquare(counts)
    # Goodness of fit at 10,000 buckets: a failure at p < 1e-4 would mean a skewed hash.
    assert result.pvalue > 1e-4, result


def test_two_layers_buckets_are_independent():
    a = np.array([bucket_of("layer-a", u) for u in UNITS]) // 1000
    b = np.array([bucket_of("layer-b", u) for u in UNITS]) // 1000
    table = np.zeros((10, 10), dtype=int)
    np.add.at(table, (a, b), 1)
    result = stats.chi2_contingency(table)
    assert result.pvalue > 1e-4, result


def test_arm_shares_within_binomial_bounds():
    assigner = assigner_from_yaml("""\
format: 1
layers:
  - name: split
    unit: learner
    experiments:
      - name: three-way
        status: running
        buckets: ["0-9999"]
        arms:
          - {name: a, weight: 20}
          - {name: b, weight: 33.33}
          - {name: c, weight: 46.67}
""")
    arms = [got.arm("split") for got in assigner.assign_many("learner", UNITS)]
    for arm, share in [("a", 0.20), ("b", 0.3333), ("c", 0.4667)]:
        low, high = stats.binom.interval(1 - 1e-6, N, share)
        assert low <= arms.count(arm) <= high, (arm, arms.count(arm))


def test_experiment_shares_within_a_layer_follow_their_ranges(example_dir):
    assigner = Assigner(example_dir)
    layers = [got.layers["paywall"].bucket for got in assigner.assign_many("learner", UNITS[:50_000])]
    in_trial = sum(1 for b in layers if b < 5000)
    low, high = stats.binom.interval(1 - 1e-6, 50_000, 0.5)
    assert low <= in_trial <= high
