"""Properties of the bucketing rules, checked with hypothesis on generated configs."""

from hypothesis import given, settings
from hypothesis import strategies as st

from bucketing.testing import assigner_from_yaml

UNITS = [f"prop-{i}" for i in range(400)]


def config(ranges_a: list[tuple[int, int]], first_weight: float, ranges_b=None) -> str:
    def ranges(rs):
        return "[" + ", ".join(f'"{lo}-{hi}"' for lo, hi in rs) + "]"
    text = f"""\
format: 1
layers:
  - name: l
    unit: u
    experiments:
      - name: a
        status: running
        buckets: {ranges(ranges_a)}
        arms:
          - {{name: grow, weight: {first_weight}}}
          - {{name: rest, weight: {round(100 - first_weight, 2)}}}
"""
    if ranges_b:
        text += f"""\
      - name: b
        status: running
        buckets: {ranges(ranges_b)}
        arms:
          - {{name: only, weight: 100}}
"""
    return text


weights = st.integers(min_value=1, max_value=9999).map(lambda h: h / 100)


@settings(max_examples=30, deadline=None)
@given(low=st.integers(0, 9000), width=st.integers(1, 900), grow=st.integers(1, 5000), weight=weights)
def test_widening_ranges_keeps_every_assigned_units_arm(low, width, grow, weight):
    narrow = assigner_from_yaml(config([(low, low + width)], weight))
    wide = assigner_from_yaml(config([(max(0, low - grow), min(9999, low + width + grow))], weight))
    for unit in UNITS:
        before = narrow.assign({"u": unit}).layers["l"]
        after = wide.assign({"u": unit}).layers["l"]
        if before.experiment is not None:
            assert (after.experiment, after.arm) == (before.experiment, before.arm)


@settings(max_examples=30, deadline=None)
@given(w1=weights, w2=weights)
def test_raising_the_first_arms_weight_only_moves_units_into_it(w1, w2):
    low, high = sorted((w1, w2))
    before = assigner_from_yaml(config([(0, 9999)], low))
    after = assigner_from_yaml(config([(0, 9999)], high))
    for unit in UNITS:
        a, b = before.assign({"u": unit}).arm("l"), after.assign({"u": unit}).arm("l")
        assert a == b or (a == "rest" and b == "grow")


@settings(max_examples=30, deadline=None)
@given(cut=st.integers(0, 9998), weight=weights)
def test_experiments_of_one_layer_never_share_a_unit(cut, weight):
    assigner = assigner_from_yaml(config([(0, cut)], weight, [(cut + 1, 9999)]))
    for unit in UNITS:
        got = assigner.assign({"u": unit}).layers["l"]
        assert got.experiment == ("a" if got.bucket <= cut else "b")
