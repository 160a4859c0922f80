"""JSON for stdout: each result's `to_dict()`, written the same way for every command."""

from __future__ import annotations

import json
from typing import Protocol


class HasDict(Protocol):
    def to_dict(self) -> dict: ...


def as_json(result: HasDict) -> str:
    """The result as indented JSON; NaN and infinities are refused (the results write them as null)."""
    return json.dumps(result.to_dict(), indent=2, ensure_ascii=False, allow_nan=False)
