"""Helpers for a service's own tests: pin a unit to an arm without editing YAML.

    from bucketing.testing import pinned

    def test_short_lessons_banner(assigner):
        with pinned(assigner, {"learner": "L-1"}, layer="lesson-flow",
                    experiment="shorter-lessons", arm="short"):
            assert render_home(assigner, "L-1").banner == "6-minute lessons"

A pin behaves like an override in the config (the assignment is marked
forced) and is gone when the block ends. It replaces the assigner's plan for
the duration, so it costs nothing on the hot path.
"""

from __future__ import annotations

import copy
from contextlib import contextmanager
from pathlib import Path
from typing import Iterator, Mapping

from ._assigner import Assigner
from ._exposure import ExposureSink, MemorySink
from ._loader import load_config
from ._plan import ExperimentPlan, LayerPlan, Plan

__all__ = ["pinned", "assigner_from_yaml", "MemorySink"]


def _experiment(layer: LayerPlan, name: str) -> ExperimentPlan:
    for plan in layer.table:
        if plan is not None and plan.name == name:
            return plan
    raise KeyError(f"layer {layer.name!r} has no experiment {name!r}")


@contextmanager
def pinned(assigner: Assigner, units: Mapping[str, str], *, layer: str, experiment: str, arm: str) -> Iterator[None]:
    """Within the block, the unit gets `experiment`/`arm` in `layer`, whatever its buckets."""
    original = assigner._plan
    target = next((lp for lp in original.layers if lp.name == layer), None)
    if target is None:
        raise KeyError(f"config has no layer {layer!r}")
    exp = _experiment(target, experiment)
    if arm not in exp.arms:
        raise KeyError(f"experiment {experiment!r} has no arm {arm!r}; arms: {list(exp.arms)}")
    unit = units.get(target.unit_type)
    if unit is None:
        raise KeyError(f"layer {layer!r} assigns unit type {target.unit_type!r}; pass its id")
    replacement = copy.copy(target)
    replacement.forced = {**target.forced, str(unit): (exp, exp.arms.index(arm))}
    plan = copy.copy(original)
    plan.layers = tuple(replacement if lp is target else lp for lp in original.layers)
    plan.layers_by_type = {
        t: tuple(replacement if lp is target else lp for lp in ls) for t, ls in original.layers_by_type.items()
    }
    assigner._plan = plan
    try:
        yield
    finally:
        assigner._plan = original


def assigner_from_yaml(text: str, *, name: str = "<test config>", sink: ExposureSink | None = None) -> Assigner:
    """An Assigner from YAML text, for tests that build a config inline."""
    return Assigner(load_config(Path(name), text=text), sink=sink)
