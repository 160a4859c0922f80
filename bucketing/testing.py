"""Helpers for a service's own tests: pin a unit to an arm without editing YAML.

    from bucketing.testing import pinned

    def test_short_lessons_banner(assigner):
        with pinned(assigner, {"learner": "L-1"}, layer="lesson-flow",
                    experiment="shorter-lessons", arm="short"):
            assert render_home(assigner, "L-1").banner == "6-minute lessons"

A pin behaves like an override in the config (the assignment is marked
forced) and is gone when the block ends. It swaps in a plan built with the
pin for the duration, so it costs nothing on the hot path.
"""

from __future__ import annotations

from contextlib import contextmanager
from pathlib import Path
from typing import Any, Iterator, Mapping

from ._assigner import Assigner
from ._errors import did_you_mean
from ._exposure import ExposureSink, MemorySink
from ._loader import load_config
from ._plan import Plan

__all__ = ["pinned", "assigner_from_yaml", "MemorySink"]


@contextmanager
def pinned(assigner: Assigner, units: Mapping[str, str], *, layer: str, experiment: str, arm: str) -> Iterator[None]:
    """Within the block, the unit gets `experiment`/`arm` in `layer`, whatever its buckets or status."""
    original = assigner._plan
    target = original.config.layer(layer)
    if target is None:
        raise KeyError(f"config has no layer {layer!r}{did_you_mean(layer, [x.name for x in original.config.layers])}")
    exp = next((e for e in target.experiments if e.name == experiment), None)
    if exp is None:
        raise KeyError(f"layer {layer!r} has no experiment {experiment!r}")
    if arm not in [a.name for a in exp.arms]:
        raise KeyError(f"experiment {experiment!r} has no arm {arm!r}; arms: {[a.name for a in exp.arms]}")
    unit = units.get(target.unit)
    if unit is None:
        raise KeyError(f"layer {layer!r} assigns unit type {target.unit!r}; pass its id")
    pins = {name: dict(by_unit) for name, by_unit in original.pins.items()}
    pins.setdefault(layer, {})[str(unit)] = (experiment, arm)
    assigner._plan = Plan(original.config, pins)
    try:
        yield
    finally:
        assigner._plan = original


def assigner_from_yaml(text: str, *, name: str = "<test config>", sink: ExposureSink | None = None,
                       **options: Any) -> Assigner:
    """An Assigner from YAML text, for tests that build a config inline; `options` go to `Assigner`."""
    return Assigner(load_config(Path(name), text=text), sink=sink, **options)
