"""`layout_of`: who owns which of a layer's 10,000 buckets, what is free, where a new experiment fits.

`layer_layout` turns a layer into owned and free ranges; `propose` picks
buckets for a new experiment. Drawing them is `audit.render`'s job.
"""

from __future__ import annotations

import string
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Mapping

from bucketing import BUCKETS, Config, Layer, did_you_mean, hundredths, load_config

from .._errors import AuditError
from ._diff import RolloutShare, rollout_share

OWNER_MARKS = string.ascii_uppercase + string.ascii_lowercase + string.digits


@dataclass(frozen=True)
class Owner:
    experiment: str
    status: str
    ranges: tuple[tuple[int, int], ...]
    mark: str
    rollout: RolloutShare | None = None  # for a staged rollout, how far its released arm has gone

    @property
    def buckets(self) -> int:
        return sum(high - low + 1 for low, high in self.ranges)


@dataclass(frozen=True)
class LayerLayout:
    name: str
    unit: str
    owners: tuple[Owner, ...]
    free: tuple[tuple[int, int], ...]  # in bucket order

    @property
    def free_buckets(self) -> int:
        return sum(high - low + 1 for low, high in self.free)

    def largest_free(self, count: int) -> list[tuple[int, int]]:
        return sorted(self.free, key=lambda r: (-(r[1] - r[0] + 1), r[0]))[:count]


def layer_layout(config: Config, layer: Layer) -> LayerLayout:
    owners = []
    taken = [False] * BUCKETS
    for index, exp in enumerate(layer.experiments):
        ranges = []
        for low, high in exp.ranges:
            if low <= high < BUCKETS:
                ranges.append((low, high))
                taken[low:high + 1] = [True] * (high - low + 1)
        mark = OWNER_MARKS[index] if index < len(OWNER_MARKS) else "*"
        owners.append(Owner(exp.name, exp.status, tuple(sorted(ranges)), mark, rollout_share(config, layer, exp)))
    return LayerLayout(layer.name, layer.unit, tuple(owners), tuple(_runs(taken)))


def _runs(taken: list[bool]) -> list[tuple[int, int]]:
    runs = []
    start = None
    for bucket, used in enumerate(taken + [True]):
        if not used and start is None:
            start = bucket
        elif used and start is not None:
            runs.append((start, bucket - 1))
            start = None
    return runs


def propose(layout: LayerLayout, want: int) -> list[tuple[int, int]] | None:
    """Buckets for a new experiment of `want` buckets, or None when the layer has too few free.

    One range when a free range is wide enough: the narrowest that fits, so
    wide gaps stay whole for wide experiments. Otherwise the widest free
    ranges, as few as possible.
    """
    if want <= 0 or want > layout.free_buckets:
        return None
    fitting = [r for r in layout.free if r[1] - r[0] + 1 >= want]
    if fitting:
        low, _ = min(fitting, key=lambda r: (r[1] - r[0], r[0]))
        return [(low, low + want - 1)]
    picked = []
    for low, high in layout.largest_free(len(layout.free)):
        take = min(want, high - low + 1)
        picked.append((low, low + take - 1))
        want -= take
        if want == 0:
            break
    return sorted(picked)


def range_text(r: tuple[int, int]) -> str:
    return f"{r[0]}-{r[1]}" if r[0] != r[1] else str(r[0])


Ranges = tuple[tuple[int, int], ...]


@dataclass(frozen=True)
class Layout:
    """The layers asked for, and, when a width was wanted, the buckets proposed in each (None: too few free)."""

    layers: tuple[LayerLayout, ...]
    want: int | None = None  # buckets wanted for a new experiment
    proposals: Mapping[str, Ranges | None] = field(default_factory=dict)

    def to_dict(self) -> dict[str, Any]:
        """The JSON output of `sortition layout --format json`, as Python values."""
        def proposal(name: str) -> dict[str, Any] | None:
            picked = self.proposals.get(name)
            if self.want is None or picked is None:
                return None
            return {"share": self.want / BUCKETS, "buckets": [range_text(r) for r in picked]}

        return {"layers": [{
            "name": layer.name,
            "unit": layer.unit,
            "used_share": (BUCKETS - layer.free_buckets) / BUCKETS,
            "free_share": layer.free_buckets / BUCKETS,
            "owners": [{"experiment": o.experiment, "status": o.status, "mark": o.mark,
                        "ranges": [range_text(r) for r in o.ranges], "share": o.buckets / BUCKETS,
                        "rollout": o.rollout.to_dict() if o.rollout else None}
                       for o in layer.owners],
            "free": [{"range": range_text(r), "share": (r[1] - r[0] + 1) / BUCKETS} for r in layer.free],
            "proposal": proposal(layer.name),
        } for layer in self.layers]}


def layout_of(config: Config | str | Path, layer: str | None = None, want: float | None = None) -> Layout:
    """Each layer's buckets (or only `layer`'s); with `want` (a percent of the layer), buckets for a new experiment."""
    loaded = config if isinstance(config, Config) else load_config(config)
    chosen = [item for item in loaded.layers if layer is None or item.name == layer]
    if layer is not None and not chosen:
        names = [item.name for item in loaded.layers]
        raise AuditError(f"no layer named {layer!r}{did_you_mean(layer, names)}; the layers are {names}")
    wanted = None
    if want is not None:
        wanted = hundredths(want)
        if wanted is None or not 0 < wanted <= BUCKETS:
            raise AuditError(f"a new experiment takes a percent above 0 and at most 100 with at most two "
                             f"decimals, found {want}")
    layers = tuple(layer_layout(loaded, item) for item in chosen)
    proposals: dict[str, Ranges | None] = {}
    if wanted:
        for item in layers:
            picked = propose(item, wanted)
            proposals[item.name] = tuple(picked) if picked is not None else None
    return Layout(layers, wanted, proposals)


