"""The contract's hashing rule: one function, used by every other module."""

from __future__ import annotations

import mmh3

BUCKETS = 10_000


def bucket_of(salt: str, unit: str) -> int:
    """Bucket 0..9999 of `unit` under `salt`: murmur3_x86_32(salt ":" unit, seed 0) mod 10000."""
    return mmh3.hash(f"{salt}:{unit}", 0, False) % BUCKETS


def unit_key(unit: object) -> str:
    """The string a unit id is hashed as: strings as they are, integers in decimal."""
    if isinstance(unit, str):
        return unit
    if isinstance(unit, int) and not isinstance(unit, bool):
        return str(unit)
    raise TypeError(f"unit id must be a string or an integer, not {type(unit).__name__}")
