"""What batch assignment must give for a unit: `Assigner.assign`'s answer, in the shape of the added columns.

Shared by the pandas tests (tests/test_batch.py), the Spark ones (tests/spark/)
and the batch benchmark. The units generated here are invented: ids of
several shapes, attributes with gaps, a spread of days.
"""

from __future__ import annotations

import json
from datetime import date, timedelta
from pathlib import Path
from typing import Any

import numpy as np

from bucketing import Assigner
from bucketing.batch import LAYER_FIELDS, layer_column

VECTORS = Path(__file__).parent / "vectors" / "assignments.jsonl"
ATTRIBUTES = ("country", "app_version", "platform")


def assignment_columns(layers) -> list[str]:
    """The columns batch assignment adds, in order."""
    return ["holdout", *(layer_column(layer, field) for layer in layers for field in LAYER_FIELDS)]


def expected_row(assigner: Assigner, unit_type: str, unit: Any, attrs: dict, day: date, layers) -> tuple:
    """The assignment columns of one row, from `Assigner.assign`: nulls in every column of a layer that gave nothing."""
    got = assigner.assign({unit_type: unit}, attrs, day=day)
    row: list[Any] = [got.holdout]
    for layer in layers:
        placed = got.layers.get(layer)
        row += [None] * 4 if placed is None else [placed.experiment, placed.arm, placed.bucket, placed.forced]
    return tuple(row)


def golden_units(unit_type: str) -> list[dict[str, Any]]:
    """The golden vectors of one unit type as rows: unit, day (ISO text) and attributes."""
    with VECTORS.open(encoding="utf-8") as f:
        lines = [json.loads(line) for line in f][1:]
    return [{"unit": v["unit"], "day": v["day"], **v["attrs"]} for v in lines if v["unit_type"] == unit_type]


def generated_units(count: int, seed: int = 11) -> dict[str, list]:
    """Invented learners as columns: string ids (a few forced ones), attributes with nulls, days around
    the example config's start dates."""
    rng = np.random.default_rng(seed)
    choices = {
        "country": ["NL", "BE", "DE", "US", "BR", "JP", None],
        "app_version": ["7.1", "7.2", "7.2.0", "7.4.0", "7.10.1", "8.0", "bogus", None],
        "platform": ["ios", "android", "web", None],
    }
    ids = [f"L-{n:x}" for n in rng.integers(0, 2**40, size=count).tolist()]
    for i in range(0, count, 997):
        ids[i] = ("qa-learner-1", "qa-learner-2")[i % 2]  # overridden in configs_example
    days = [date(2026, 10, 25) + timedelta(days=d) for d in range(60)]
    columns: dict[str, list] = {"unit": ids}
    for name, values in choices.items():
        columns[name] = [values[i] for i in rng.integers(0, len(values), size=count).tolist()]
    columns["day"] = [days[i] for i in rng.integers(0, len(days), size=count).tolist()]
    return columns
