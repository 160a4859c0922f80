"""`sortition layout`: who owns which of a layer's 10,000 buckets, what is free, where a new experiment fits.

`layer_layout` turns a layer into owned and free ranges; `propose` picks
buckets for a new experiment; `render_text` draws each layer as a bar of
cells, each cell a run of buckets marked by the experiment that holds most
of them.
"""

from __future__ import annotations

import json
import string
from dataclasses import dataclass

from bucketing import BUCKETS, Config, Layer

FREE_MARK = "."
CLASH_MARK = "!"
OWNER_MARKS = string.ascii_uppercase + string.ascii_lowercase + string.digits


@dataclass(frozen=True)
class Owner:
    experiment: str
    status: str
    ranges: tuple[tuple[int, int], ...]
    mark: str

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


def layer_layout(layer: Layer) -> LayerLayout:
    owners = []
    taken = [False] * BUCKETS
    for index, exp in enumerate(layer.experiments):
        ranges = []
        for low, high in exp.ranges:
            if low <= high < BUCKETS:
                ranges.append((low, high))
                taken[low:high + 1] = [True] * (high - low + 1)
        mark = OWNER_MARKS[index] if index < len(OWNER_MARKS) else "*"
        owners.append(Owner(exp.name, exp.status, tuple(sorted(ranges)), mark))
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


def layouts(config: Config, layer: str | None = None) -> list[LayerLayout]:
    chosen = [l for l in config.layers if layer is None or l.name == layer]
    if layer is not None and not chosen:
        raise ValueError(f"no layer named {layer!r}; the layers are {[l.name for l in config.layers]}")
    return [layer_layout(l) for l in chosen]


def range_text(r: tuple[int, int]) -> str:
    return f"{r[0]}-{r[1]}" if r[0] != r[1] else str(r[0])


def _percent(buckets: int) -> str:
    return f"{buckets / 100:.2f} %"


def bar(layout: LayerLayout, width: int) -> str:
    """One character per BUCKETS/width buckets: the owner of most of them, '.' when mostly free, '!' on a clash."""
    holders: list[list[str]] = [[] for _ in range(BUCKETS)]
    for owner in layout.owners:
        for low, high in owner.ranges:
            for bucket in range(low, high + 1):
                holders[bucket].append(owner.mark)
    cells = []
    for cell in range(width):
        span = holders[cell * BUCKETS // width:(cell + 1) * BUCKETS // width]
        if any(len(h) > 1 for h in span):
            cells.append(CLASH_MARK)
            continue
        tally: dict[str, int] = {}
        for h in span:
            mark = h[0] if h else FREE_MARK
            tally[mark] = tally.get(mark, 0) + 1
        cells.append(max(tally, key=lambda m: (tally[m], m != FREE_MARK)))
    return "".join(cells)


def render_text(items: list[LayerLayout], proposals: dict[str, list[tuple[int, int]] | None],
                want: int | None, width: int = 100, top: int = 3) -> str:
    lines = []
    for layout in items:
        used = BUCKETS - layout.free_buckets
        lines.append(f"{layout.name}  (unit {layout.unit})  used {_percent(used)}, free {_percent(layout.free_buckets)}")
        lines.append(f"  0 |{bar(layout, width)}| 9999")
        for owner in layout.owners:
            ranges = ", ".join(range_text(r) for r in owner.ranges)
            lines.append(f"  {owner.mark}  {owner.experiment:<24} {owner.status:<8} {_percent(owner.buckets):>8}  {ranges}")
        widest = layout.largest_free(top)
        if widest:
            lines.append("  widest free: " + ", ".join(f"{range_text(r)} ({_percent(r[1] - r[0] + 1)})" for r in widest))
        else:
            lines.append("  no free buckets")
        if want is not None:
            picked = proposals.get(layout.name)
            if picked:
                quoted = ", ".join(f'"{range_text(r)}"' for r in picked)
                lines.append(f"  for {_percent(want)}: buckets: [{quoted}]")
            else:
                lines.append(f"  for {_percent(want)}: not enough free buckets; set finished experiments "
                             "to done and remove them to free theirs")
        lines.append("")
    return "\n".join(lines).rstrip("\n")


def render_json(items: list[LayerLayout], proposals: dict[str, list[tuple[int, int]] | None], want: int | None) -> str:
    return json.dumps({"layers": [{
        "name": layout.name,
        "unit": layout.unit,
        "used_share": (BUCKETS - layout.free_buckets) / BUCKETS,
        "free_share": layout.free_buckets / BUCKETS,
        "owners": [{"experiment": o.experiment, "status": o.status, "mark": o.mark,
                    "ranges": [range_text(r) for r in o.ranges], "share": o.buckets / BUCKETS} for o in layout.owners],
        "free": [{"range": range_text(r), "share": (r[1] - r[0] + 1) / BUCKETS} for r in layout.free],
        "proposal": None if want is None or proposals.get(layout.name) is None
        else {"share": want / BUCKETS, "buckets": [range_text(r) for r in proposals[layout.name]]},
    } for layout in items]}, indent=2, ensure_ascii=False)
