"""Invented exposure records for the log tests (two invented experiments), their plain-Python counts, and writers."""

import csv
import gzip
import json
import random
from collections import defaultdict
from pathlib import Path

import duckdb

FIELDS = ["ts", "unit", "unit_type", "layer", "experiment", "arm", "config", "forced", "country"]


def invented_records(seed: int = 3, units: int = 400) -> list[dict]:
    """Invented exposure records: two experiments, repeats, a few units in two arms, a forced unit."""
    rng = random.Random(seed)
    records = []
    for n in range(units):
        unit = f"U-{n:04d}"
        country = rng.choice(["AA", "BB", "CC"])
        for experiment, arms in (("exp-a", ["left", "right"]), ("exp-b", ["one", "two", "three"])):
            if rng.random() < 0.3:
                continue
            arm = rng.choice(arms)
            for _ in range(rng.randint(1, 3)):
                day = rng.randint(1, 9)
                logged = rng.choice(arms) if rng.random() < 0.03 else arm
                records.append({"ts": f"2026-11-0{day}T{rng.randint(10, 23)}:00:00.000Z", "unit": unit,
                                "unit_type": "learner", "layer": f"layer-{experiment[-1]}", "experiment": experiment,
                                "arm": logged, "config": "0123456789ab", "forced": n == 7, "country": country})
    return records


def python_counts(records: list[dict]) -> dict[tuple[str, str], int]:
    """Distinct units per experiment and arm at first exposure, units in two arms and forced units left out."""
    by_unit = defaultdict(list)
    for r in records:
        by_unit[(r["experiment"], r["unit"])].append(r)
    counts: dict[tuple[str, str], int] = defaultdict(int)
    for (experiment, _), rows in by_unit.items():
        if len({r["arm"] for r in rows}) > 1 or any(r["forced"] for r in rows):
            continue
        first = min(rows, key=lambda r: r["ts"])
        counts[(experiment, first["arm"])] += 1
    return dict(counts)


def write_jsonl(path: Path, records: list[dict], gz: bool = False) -> Path:
    text = "".join(json.dumps(r) + "\n" for r in records)
    if gz:
        with gzip.open(path, "wt", encoding="utf-8") as out:
            out.write(text)
    else:
        path.write_text(text, encoding="utf-8")
    return path


def write_csv(path: Path, records: list[dict], gz: bool = False, names: dict | None = None) -> Path:
    names = names or {}
    opener = gzip.open if gz else open
    with opener(path, "wt", encoding="utf-8", newline="") as out:
        writer = csv.writer(out)
        writer.writerow([names.get(f, f) for f in FIELDS])
        for r in records:
            writer.writerow([str(r[f]).lower() if f == "forced" else r[f] for f in FIELDS])
    return path


def write_parquet(path: Path, records: list[dict]) -> Path:
    source = write_jsonl(path.with_suffix(".tmp.jsonl"), records)
    duckdb.sql(f"COPY (SELECT * FROM read_json('{source}')) TO '{path}' (FORMAT parquet)")
    source.unlink()
    return path


def counts_of(result) -> dict[tuple[str, str], int]:
    return {(r.experiment, a.arm): a.units for r in result.results for a in r.arms if a.units}


def python_units(records: list[dict]) -> dict[str, str]:
    """Unit -> arm for the units a test counts (one arm only, not forced)."""
    arms, forced = defaultdict(set), set()
    for r in records:
        arms[r["unit"]].add(r["arm"])
        if r["forced"]:
            forced.add(r["unit"])
    return {u: next(iter(a)) for u, a in arms.items() if len(a) == 1 and u not in forced}
