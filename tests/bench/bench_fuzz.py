"""The loader fuzz property of tests/test_config_fuzz.py, run long: configs tried, loaded, refused, exceptions.

The CI test runs a few hundred mutated configs; this runs many thousands
(FUZZ_EXAMPLES) with a fresh random seed each time, so each `make bench`
explores new mutations. The baseline, in the same run, is a bare safe YAML
load (libyaml) of the unmutated example configs, per config.
"""

from __future__ import annotations

import os
import time
import traceback
from collections import Counter

import yaml
from hypothesis import HealthCheck, given, settings

from bucketing import Config
from tests.test_config_fuzz import SEEDS, load_or_refuse, mutated_config

FUZZ_EXAMPLES = int(os.environ.get("FUZZ_EXAMPLES", "5000"))


def _where(exc: BaseException) -> str:
    frame = traceback.extract_tb(exc.__traceback__)[-1]
    return f"{os.path.basename(frame.filename)}:{frame.lineno}"


def run() -> str:
    counts: Counter = Counter()

    @settings(max_examples=FUZZ_EXAMPLES, deadline=None, database=None, suppress_health_check=list(HealthCheck))
    @given(mutated_config())
    def fuzz(text: str) -> None:
        counts["tried"] += 1
        counts["loaded" if isinstance(load_or_refuse(text), Config) else "refused"] += 1

    started = time.perf_counter()
    try:
        fuzz()
        failure = "none"
    except Exception as exc:  # the bench reports what the property found instead of stopping
        found = getattr(exc, "exceptions", [exc])  # hypothesis groups distinct failures
        failure = "; ".join(sorted({f"{type(e).__name__} at {_where(e)}" for e in found}))
    per_config = (time.perf_counter() - started) / max(counts["tried"], 1)
    loader = getattr(yaml, "CSafeLoader", yaml.SafeLoader)
    started = time.perf_counter()
    for _ in range(20):
        for seed in SEEDS:
            yaml.load(seed, Loader=loader)
    baseline = (time.perf_counter() - started) / (20 * len(SEEDS))
    return "\n".join([
        f"## fuzz: mutated configs through load_config and Assigner ({FUZZ_EXAMPLES:,} asked)",
        "",
        "| what | figure |",
        "|---|---|",
        f"| configs tried | {counts['tried']:,} |",
        f"| loaded (and assigned) | {counts['loaded']:,} |",
        f"| refused with a located ConfigError | {counts['refused']:,} |",
        f"| other exceptions (distinct, shrunk) | {failure} |",
        f"| time per config / bare libyaml load of a seed | {per_config * 1e3:.2f} ms / {baseline * 1e3:.3f} ms "
        f"= {per_config / baseline:.0f} |",
    ])
