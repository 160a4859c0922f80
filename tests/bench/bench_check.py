"""`sortition check` on a generated config of 50 layers and 2,000 experiments: time and peak memory.

The baseline, measured in the same run, is a bare safe YAML load (libyaml, as the SDK uses) of the same
files: the least any checker must do to read them.
"""

from __future__ import annotations

import resource
import tempfile
import time
import tracemalloc
from datetime import date
from pathlib import Path

import yaml

from audit import check_config
from bucketing import parse_config

_FAST_SAFE = getattr(yaml, "CSafeLoader", yaml.SafeLoader)

LAYERS = 50
EXPERIMENTS_PER_LAYER = 40
GOAL_SECONDS = 1.0


def write_config(folder: Path) -> list[Path]:
    """Invented config: one file per layer, each experiment 2 % of the layer, two arms, dates and eligibility."""
    files = []
    for li in range(LAYERS):
        lines = ["# Invented benchmark config.", "format: 1"]
        if li == 0:
            lines += ["holdout:", "  - {unit: learner, salt: bench-holdout, percent: 2}",
                      "weekly_units: {learner: 5000000}"]
        lines += ["layers:", f"  - name: layer-{li}", "    unit: learner", f"    salt: layer-{li}-v1", "    experiments:"]
        for ei in range(EXPERIMENTS_PER_LAYER):
            low = ei * 250
            lines += [
                f"      - name: exp-{ei}", "        status: running", f'        buckets: ["{low}-{low + 199}"]',
                "        start: 2026-11-03", "        end: 2027-01-31", "        owner: bench-team",
                "        eligible:", "          country: [NL, BE, DE]", '          app_version: ">=7.2"',
                "        arms:",
                "          - name: control", "            weight: 50", f"            params: {{p{li}_size: 10, p{li}_mode: a}}",
                "          - name: treatment", "            weight: 50", f"            params: {{p{li}_size: 12, p{li}_mode: b}}",
            ]
        path = folder / f"layer-{li:02d}.yaml"
        path.write_text("\n".join(lines) + "\n", encoding="utf-8")
        files.append(path)
    return files


def _best_time(work, repeats: int = 3) -> float:
    best = float("inf")
    for _ in range(repeats):
        started = time.perf_counter()
        work()
        best = min(best, time.perf_counter() - started)
    return best


def _peak_mib(work) -> float:
    tracemalloc.start()
    work()
    peak = tracemalloc.get_traced_memory()[1] / 2**20
    tracemalloc.stop()
    return peak


def run() -> str:
    with tempfile.TemporaryDirectory(prefix="sortition-bench-") as scratch:
        folder = Path(scratch)
        files = write_config(folder)
        lines = sum(len(f.read_text().splitlines()) for f in files)
        result = check_config(folder, day=date(2026, 12, 1))
        assert result.errors == 0, result.findings[:3]

        def run_check():
            return check_config(folder, day=date(2026, 12, 1))

        def run_baseline():
            return [yaml.load(f.read_text(encoding="utf-8"), Loader=_FAST_SAFE) for f in files]

        check_s, sdk_s, base_s = _best_time(run_check), _best_time(lambda: parse_config([folder])), _best_time(run_baseline)
        check_mib, base_mib = _peak_mib(run_check), _peak_mib(run_baseline)
    rss_mib = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024
    verdict = "meets" if check_s < GOAL_SECONDS else "misses"
    return "\n".join([
        f"## check: {LAYERS} layers, {LAYERS * EXPERIMENTS_PER_LAYER:,} experiments ({lines:,} YAML lines)",
        "",
        "| what | wall time (best of 3) | peak traced memory |",
        "|---|---|---|",
        f"| `check` (read, validate, SDK rules, lint) | {check_s:.3f} s | {check_mib:.1f} MiB |",
        f"| of which the SDK's `parse_config` (YAML with marks, models, SDK rules) | {sdk_s:.3f} s | |",
        f"| baseline: bare safe YAML load (libyaml) of the same files | {base_s:.3f} s | {base_mib:.1f} MiB |",
        f"| ratio check / baseline | {check_s / base_s:.2f} | {check_mib / base_mib:.2f} |",
        "",
        f"Goal: under {GOAL_SECONDS:.0f} s; this run {verdict} it. Process peak RSS: {rss_mib:.0f} MiB.",
    ])
