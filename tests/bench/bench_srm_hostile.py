"""Benchmark of `srm` on hostile logs, at the sizes that once broke it (all data invented, generated here).

- Many experiments: `--expect 50,50` over 1,000 to 100,000 experiment names, and twice the records at
  100,000, against a bare DuckDB count of distinct units per experiment and arm on the same file: the cost
  per experiment, and whether time grows with records.
- A record dated 9999-12-31 among a million: the time against the same logs without it.
- A gzip bomb (one line of 2 GiB, a few MB compressed) beside a good file: time and peak memory against
  reading the same gzip stream in Python, the least any reader must do.

Each measurement runs in a fresh process, so that its peak memory (ru_maxrss) is its own.
"""

from __future__ import annotations

import gzip
import json
import subprocess
import sys
import tempfile
from pathlib import Path

RECORDS = 400_000
EXPERIMENTS = (1_000, 10_000, 100_000)
DATED_RECORDS = 1_000_000
BOMB_BYTES = 2 << 30

GENERATE = """
COPY (
    SELECT TIMESTAMP '2026-11-03' + to_seconds(CAST(hash(i, 1) % 1209600 AS BIGINT)) AS ts,
           'U-' || CAST(i // 2 AS VARCHAR) AS unit, 'layer-a' AS layer,
           'exp-' || CAST(i % {experiments} AS VARCHAR) AS experiment,
           CASE WHEN hash(i, 2) % 2 = 0 THEN 'control' ELSE 'treatment' END AS arm
    FROM range({records}) t(i)
) TO '{path}' (FORMAT json)
"""

MEASURE = """
import gzip, json, resource, sys, time
kind, paths = sys.argv[1], sys.argv[2:]
started = time.perf_counter()
if kind == "bare":
    import duckdb
    duckdb.connect().execute(f"SELECT experiment, arm, count(DISTINCT unit) FROM read_json('{paths[0]}', "
                             f"format='newline_delimited') GROUP BY ALL").fetchall()
elif kind == "gunzip":
    with gzip.open(paths[0], "rb") as stream:
        while stream.read(1 << 20):
            pass
else:
    from audit import audit_logs
    result = audit_logs(paths, expect=[50, 50], replay_units=0)
    print(json.dumps({"experiments": len(result.results), "malformed": result.malformed.total}), file=sys.stderr)
print(json.dumps({"seconds": time.perf_counter() - started,
                  "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def _measure(kind: str, *paths: Path) -> dict:
    out = subprocess.run([sys.executable, "-c", MEASURE, kind, *map(str, paths)], capture_output=True, text=True,
                         check=True, cwd=Path(__file__).resolve().parents[2])
    return json.loads(out.stdout.strip().splitlines()[-1])


def _generate(path: Path, records: int, experiments: int) -> Path:
    import duckdb

    duckdb.connect().execute(GENERATE.format(records=records, experiments=experiments, path=path))
    return path


def _row(what: str, run: dict, baseline: dict) -> str:
    return (f"| {what} | {run['seconds']:.1f} s | {run['peak_mib']:.0f} MiB | "
            f"{run['seconds'] / baseline['seconds']:.1f}× |")


def _many_experiments(scratch: Path) -> list[str]:
    rows = []
    for records, experiments in [(RECORDS, e) for e in EXPERIMENTS] + [(2 * RECORDS, EXPERIMENTS[-1])]:
        path = _generate(scratch / f"many-{records}-{experiments}.jsonl", records, experiments)
        audit, bare = _measure("audit", path), _measure("bare", path)
        rows.append(_row(f"{records:,} records, {experiments:,} experiments (per experiment "
                         f"{1000 * audit['seconds'] / experiments:.2f} ms)", audit, bare))
        path.unlink()
    return rows


def _far_date(scratch: Path) -> list[str]:
    path = _generate(scratch / "dated.jsonl", DATED_RECORDS, 1)
    plain = _measure("audit", path)
    with open(path, "a") as out:
        out.write(json.dumps({"ts": "9999-12-31T23:59:59Z", "unit": "U-far", "layer": "layer-a",
                              "experiment": "exp-0", "arm": "control"}) + "\n")
    far = _measure("audit", path)
    return [_row(f"{DATED_RECORDS:,} records", plain, plain), _row("the same and one dated 9999-12-31", far, plain)]


def _bomb(scratch: Path) -> list[str]:
    bomb = scratch / "bomb.jsonl.gz"
    block = b"z" * (1 << 24)
    with gzip.open(bomb, "wb", compresslevel=9) as out:
        out.write(b'{"unit": "')
        for _ in range(BOMB_BYTES // len(block)):
            out.write(block)
        out.write(b'"}\n')
    good = _generate(scratch / "good.jsonl", 10_000, 1)
    gunzip, audit = _measure("gunzip", bomb), _measure("audit", bomb, good)
    return [_row(f"reading the gzip stream in Python ({bomb.stat().st_size / 2**20:.1f} MiB compressed, "
                 f"one line of {BOMB_BYTES / 2**30:.0f} GiB)", gunzip, gunzip),
            _row("`srm` of the bomb and a good file (the line: one `too_long` record)", audit, gunzip)]


def run() -> str:
    header = ["| what | time | peak memory | ratio to baseline |", "|---|---:|---:|---:|"]
    with tempfile.TemporaryDirectory(prefix="sortition-bench-hostile-") as scratch:
        lines = ["## srm on hostile logs", "",
                 "Many experiments (`--expect 50,50`); baseline: a bare DuckDB count(DISTINCT unit) per experiment "
                 "and arm on the same file.", "", *header, *_many_experiments(Path(scratch)), "",
                 "A far-future date; baseline: the same audit without that record.", "", *header,
                 *_far_date(Path(scratch)), "",
                 "A gzip bomb; baseline: reading its stream in Python.", "", *header, *_bomb(Path(scratch))]
    return "\n".join(lines) + "\n"
