"""Writes tests/vectors/assignments.jsonl: golden assignments under configs_example/.

Each line is one unit (invented ids, ASCII and not), its attributes and the
day, every salt's bucket for it, and the full assignment. An implementation
of the contract in another language proves it matches by reproducing every
line. Regenerate only when configs_example/ changes on purpose:

    .venv/bin/python -m tests.vectors.make_vectors
"""

from __future__ import annotations

import json
from datetime import date
from pathlib import Path

from bucketing import Assigner, bucket_of, load_config
from bucketing._rules import salt_uses

ROOT = Path(__file__).resolve().parents[2]
CONFIGS = ROOT / "configs_example"
OUT = Path(__file__).with_name("assignments.jsonl")
DAY = date(2026, 11, 20)

UNITS = (
    [("learner", f"L-{i:05d}", {"country": c, "app_version": v, "platform": p})
     for i, (c, v, p) in enumerate(
         [("NL", "7.4.0", "ios"), ("US", "7.4.0", "android"), ("DE", "7.1", "web"), ("BR", "7.2", "android"),
          ("FR", "8.0.1", "ios"), ("BE", "7.2.0", "web")] * 40)]
    + [("learner", unit, {"country": "NL", "app_version": "7.3.0"})
       for unit in ["qa-learner-1", "qa-learner-2", "Łukasz-学习者", "ученик-42", "🦊-fox", "naïve café", "", " "]]
    + [("learner", str(n), {}) for n in (0, 1, 42, 10**12, 2**31 - 1)]
    + [("device", f"D-{i:04d}", {"platform": ("ios", "android", "web")[i % 3]}) for i in range(120)]
)


def vector(assigner: Assigner, salts: list[str], unit_type: str, unit: str, attrs: dict) -> dict:
    got = assigner.assign({unit_type: unit}, attrs, day=DAY)
    return {
        "unit_type": unit_type,
        "unit": unit,
        "attrs": attrs,
        "day": DAY.isoformat(),
        "buckets": {salt: bucket_of(salt, unit) for salt in salts},
        "assignment": got.to_dict(),
    }


def main() -> None:
    config = load_config(CONFIGS)
    assigner = Assigner(config)
    salts = [salt for salt, _, _ in salt_uses(config)]
    with OUT.open("w", encoding="utf-8") as out:
        out.write(json.dumps({"config": config.version, "salts": salts}, ensure_ascii=False) + "\n")
        for unit_type, unit, attrs in UNITS:
            out.write(json.dumps(vector(assigner, salts, unit_type, unit, attrs), ensure_ascii=False) + "\n")


if __name__ == "__main__":
    main()
