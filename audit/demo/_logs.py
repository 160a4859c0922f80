"""Invented exposure logs for the demo scenario, with one planted fault for the audit to find.

Learners and devices of the invented language-learning app get attributes
(country, platform, app version), come back on some days of a two-week
window, and are assigned by the real SDK (`Assigner.assign`) on each day
they show up; every experiment they are in yields one exposure record in
the contract's format, in one JSON Lines file per day.

The planted fault: from `FAULT_START` on, the Android client 7.3.0 in
Brazil loses the exposures of arm `short` of `shorter-lessons` (say, a
crash in the code path that logs them). Around it, the usual noise: a few
records logged twice, QA accounts forced into an arm, a client that still
logs a retired experiment, clocks a day early, and a few broken lines,
the last one cut short.
"""

from __future__ import annotations

import json
import random
from dataclasses import dataclass, field
from datetime import date, datetime, timedelta
from pathlib import Path

from bucketing import Assigner, Assignment, Config, load_config

DEMO_START = date(2026, 11, 3)
FAULT_EXPERIMENT = "shorter-lessons"
FAULT_ARM = "short"
FAULT_SEGMENT = {"country": "BR", "platform": "android", "app_version": "7.3.0"}
FAULT_START_DAY = 2  # days after the first day of the logs

COUNTRIES = {"BR": 30, "US": 18, "DE": 15, "FR": 12, "NL": 10, "JP": 10, "BE": 5}
PLATFORMS = {"android": 45, "ios": 30, "web": 25}
VERSIONS = {
    "android": {"7.1.5": 10, "7.2.1": 15, "7.3.0": 50, "7.4.0": 25},
    "ios": {"7.2.1": 25, "7.3.0": 40, "7.4.0": 35},
    "web": {"7.4.0": 100},
}
RETIRED_EXPERIMENT = ("lesson-flow", "lesson-streaks", "streak-banner")


@dataclass
class DemoLogs:
    """What `write_demo_logs` wrote, and the fault it planted."""

    directory: Path
    files: list[Path]
    records: int
    units: int
    fault: dict | None
    noise: dict[str, int] = field(default_factory=dict)


def _pick(rng: random.Random, weights: dict[str, int]) -> str:
    return rng.choices(list(weights), weights=list(weights.values()))[0]


def write_demo_logs(config: Config | str | Path, out_dir: str | Path, *, seed: int = 2026,
                    learners: int = 60_000, devices: int = 15_000, days: int = 14,
                    start: date = DEMO_START, fault: bool = True, noise: bool = True) -> DemoLogs:
    """Write invented exposure logs for the demo config into `out_dir`, one JSON Lines file per day."""
    loaded = config if isinstance(config, Config) else load_config(config)
    assigner = Assigner(loaded)
    rng = random.Random(seed)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    day_list = [start + timedelta(n) for n in range(days)]
    lines: list[list[str]] = [[] for _ in day_list]
    counts = {"duplicate_records": 0, "forced_records": 0, "retired_experiment_records": 0,
              "early_clock_records": 0, "malformed_lines": 0}
    fault_day = FAULT_START_DAY if fault else None
    windowed = [e for layer in loaded.layers for e in layer.experiments if e.start or e.end]
    # assignments only change when a day enters or leaves an experiment's dates: assign once per such state
    day_state = [tuple((e.start is None or e.start <= day) and (e.end is None or day <= e.end) for e in windowed)
                 for day in day_list]

    def emit(day_index: int, record: dict) -> None:
        text = json.dumps(record, separators=(",", ":"))
        lines[day_index].append(text)
        if noise and rng.random() < 0.003:
            lines[day_index].append(text)
            counts["duplicate_records"] += 1

    def population(prefix: str, size: int, unit_type: str) -> None:
        for n in range(size):
            unit = f"{prefix}-{n:06d}"
            country = _pick(rng, COUNTRIES)
            platform = _pick(rng, PLATFORMS if unit_type == "learner" else {"android": 50, "ios": 35, "web": 15})
            attrs = {"country": country, "platform": platform, "app_version": _pick(rng, VERSIONS[platform])}
            first = 0 if rng.random() < 0.25 else rng.randrange(days)
            active = [first] + [d for d in range(first + 1, days) if rng.random() < 0.35]
            assigned: dict[tuple[bool, ...], Assignment] = {}
            for d in active:
                got = assigned.get(day_state[d])
                if got is None:
                    got = assigned[day_state[d]] = assigner.assign({unit_type: unit}, attrs, day=day_list[d])
                for layer, la in got.layers.items():
                    if la.experiment is None:
                        continue
                    if (fault_day is not None and d >= fault_day and la.experiment == FAULT_EXPERIMENT
                            and la.arm == FAULT_ARM and all(attrs[k] == v for k, v in FAULT_SEGMENT.items())):
                        continue
                    emit(d, _record(day_list[d], rng, unit, unit_type, layer, la.experiment, la.arm,
                                    got.config_version, False, attrs))

    population("L", learners, "learner")
    population("D", devices, "device")
    if noise:
        _plant_noise(assigner, rng, day_list, lines, counts)
    files = []
    for day, day_lines in zip(day_list, lines):
        path = out / f"exposures-{day.isoformat()}.jsonl"
        if noise and day == day_list[-1]:
            day_lines[-1] = day_lines[-1][: len(day_lines[-1]) // 2]
            counts["malformed_lines"] += 1
        text = "\n".join(day_lines) + ("" if noise and day == day_list[-1] else "\n")
        path.write_text(text, encoding="utf-8")
        files.append(path)
    described = {"experiment": FAULT_EXPERIMENT, "arm": FAULT_ARM, "segment": dict(FAULT_SEGMENT),
                 "since": day_list[FAULT_START_DAY].isoformat()} if fault else None
    return DemoLogs(out, files, sum(len(x) for x in lines), learners + devices, described, counts)


def _record(day: date, rng: random.Random, unit: str, unit_type: str, layer: str, experiment: str | None,
            arm: str | None, version: str | None, forced: bool, attrs: dict) -> dict:
    moment = datetime(day.year, day.month, day.day) + timedelta(seconds=rng.randrange(86_400),
                                                                milliseconds=rng.randrange(1000))
    return {"ts": moment.isoformat(timespec="milliseconds") + "Z", "unit": unit, "unit_type": unit_type,
            "layer": layer, "experiment": experiment, "arm": arm, "config": version, "forced": forced, **attrs}


def _plant_noise(assigner: Assigner, rng: random.Random, day_list: list[date], lines: list[list[str]],
                 counts: dict[str, int]) -> None:
    """QA accounts, a retired experiment, clocks a day early, broken lines."""
    qa_attrs = {"country": "NL", "platform": "ios", "app_version": "7.4.0"}
    for qa in ("qa-learner-1", "qa-learner-2"):
        for d in range(len(day_list)):
            got = assigner.assign({"learner": qa}, qa_attrs, day=day_list[d])
            for layer, la in got.layers.items():
                if la.forced:
                    lines[d].append(json.dumps(_record(day_list[d], rng, qa, "learner", layer, la.experiment, la.arm,
                                                       got.config_version, True, qa_attrs), separators=(",", ":")))
                    counts["forced_records"] += 1
    old_client = {"country": "DE", "platform": "android", "app_version": "7.1.5"}
    layer, experiment, arm = RETIRED_EXPERIMENT
    for n in range(40):
        d = rng.randrange(len(day_list))
        lines[d].append(json.dumps(_record(day_list[d], rng, f"L-{rng.randrange(1000):06d}", "learner", layer,
                                           experiment, arm, assigner.version, False, old_client), separators=(",", ":")))
        counts["retired_experiment_records"] += 1
    for exp in (e for layer in assigner.config.layers for e in layer.experiments):
        before = exp.start - timedelta(1) if exp.start else None
        if before is not None and before in day_list:
            d = day_list.index(before)
            for n in range(12):
                lines[d].append(json.dumps(_record(before, rng, f"L-{rng.randrange(1000):06d}", "learner",
                                                   _layer_of(assigner.config, exp.name), exp.name, exp.arms[0].name,
                                                   assigner.version, False, qa_attrs), separators=(",", ":")))
                counts["early_clock_records"] += 1
    broken = ['--- log rotated ---', '{"ts":"2026-11-05T10:00:00.000Z","unit":"L-000001","experiment":"shorter-lessons"}',
              '{"ts":"last tuesday","unit":"L-000002","unit_type":"learner","experiment":"shorter-lessons","arm":"control"}']
    for text in broken:
        d = rng.randrange(len(day_list))
        lines[d].insert(rng.randrange(len(lines[d]) + 1), text)
        counts["malformed_lines"] += 1


def _layer_of(config: Config, experiment: str) -> str:
    return next(layer.name for layer in config.layers for e in layer.experiments if e.name == experiment)
