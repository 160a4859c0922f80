"""The contract's hashing rule: one function, used by every other module."""

from __future__ import annotations

import mmh3

BUCKETS = 10_000


def bucket_of(salt: str, unit: str) -> int:
    """Bucket 0..9999 of `unit` under `salt`: murmur3_x86_32(salt ":" unit, seed 0) mod 10000."""
    return mmh3.hash(f"{salt}:{unit_key(unit)}", 0, False) % BUCKETS


def unit_key(unit: object) -> str:
    """The string a unit id is hashed as: strings as they are, integers in decimal.

    Raises ValueError for a string that has no UTF-8 form (a lone surrogate):
    such a string must never reach the hash function, which does not expect it.
    """
    if isinstance(unit, str):
        if not unit.isascii():
            try:
                unit.encode("utf-8")
            except UnicodeEncodeError:
                raise ValueError(f"unit id {unit!r} is not valid Unicode text") from None
        return unit
    if isinstance(unit, int) and not isinstance(unit, bool):
        return str(unit)
    raise TypeError(f"unit id must be a string or an integer, not {type(unit).__name__}")
