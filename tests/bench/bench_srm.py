"""Benchmark of `sortition srm`: the audit against a bare DuckDB GROUP BY on the same file, same run.

Invented logs are generated with DuckDB SQL in a temporary directory:
10,000,000 Parquet records of 2,000,000 units with three segment columns,
and 1,000,000 JSON Lines records. Each measurement runs in its own Python
process so that its peak memory (ru_maxrss) is its own.
"""

from __future__ import annotations

import json
import statistics
import subprocess
import sys
import tempfile
from pathlib import Path

RECORDS = 10_000_000
UNITS = 2_000_000
JSON_RECORDS = 1_000_000
RUNS = 3  # timings on a shared machine vary by a third from run to run: report the median

GENERATE = """
COPY (
    SELECT TIMESTAMP '2026-11-03' + to_seconds(CAST(hash(i, 1) % 1209600 AS BIGINT)) AS ts,
           'U-' || CAST(u AS VARCHAR) AS unit, 'learner' AS unit_type, 'layer-a' AS layer,
           'exp-a' AS experiment, CASE WHEN hash(u, 2) % 2 = 0 THEN 'control' ELSE 'treatment' END AS arm,
           '0123456789ab' AS config, false AS forced,
           ['AA', 'BB', 'CC', 'DD', 'EE', 'FF', 'GG', 'HH'][CAST(hash(u, 3) % 8 AS INTEGER) + 1] AS country,
           ['web', 'ios', 'android'][CAST(hash(u, 4) % 3 AS INTEGER) + 1] AS platform,
           ['7.1', '7.2', '7.3', '7.4', '7.5'][CAST(hash(u, 5) % 5 AS INTEGER) + 1] AS app_version
    FROM (SELECT i, i % {units} AS u FROM range({records}) t(i))
) TO '{path}' ({options})
"""

MEASURE = """
import json, resource, sys, time
import duckdb
from audit import audit_logs
kind, path = sys.argv[1], sys.argv[2]
started = time.perf_counter()
if kind == "bare":
    source = f"read_parquet('{path}')" if path.endswith(".parquet") else f"read_json('{path}', format='newline_delimited')"
    duckdb.connect().execute(f"SELECT experiment, arm, count(*) FROM {source} GROUP BY ALL").fetchall()
elif kind == "bare-distinct":
    source = f"read_parquet('{path}')" if path.endswith(".parquet") else f"read_json('{path}', format='newline_delimited')"
    duckdb.connect().execute(f"SELECT experiment, arm, count(DISTINCT unit) FROM {source} GROUP BY ALL").fetchall()
else:
    result = audit_logs(path, expect=[50, 50], segments=["country", "platform"], replay_units=0)
    assert result.results[0].units > 0
print(json.dumps({"seconds": time.perf_counter() - started,
                  "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024}))
"""


def _measure(kind: str, path: Path) -> dict:
    """The median time of RUNS fresh processes, and the largest peak memory among them."""
    runs = []
    for _ in range(RUNS):
        out = subprocess.run([sys.executable, "-c", MEASURE, kind, str(path)], capture_output=True, text=True,
                             check=True, cwd=Path(__file__).resolve().parents[2])
        runs.append(json.loads(out.stdout.strip().splitlines()[-1]))
    return {"seconds": statistics.median(r["seconds"] for r in runs), "peak_mib": max(r["peak_mib"] for r in runs)}


def _generate(path: Path, records: int, units: int, options: str) -> None:
    import duckdb

    duckdb.connect().execute(GENERATE.format(units=units, records=records, path=path, options=options))


def _rows(label: str, path: Path, records: int) -> list[str]:
    bare = _measure("bare", path)
    distinct = _measure("bare-distinct", path)
    audit = _measure("audit", path)
    return [
        f"| {label}: bare `GROUP BY experiment, arm` count(DISTINCT unit) | {distinct['seconds']:.2f} s "
        f"| {distinct['peak_mib']:.0f} MiB | 1.0× | {distinct['seconds'] / bare['seconds']:.1f}× |",
        f"| {label}: bare `GROUP BY experiment, arm` count(*) | {bare['seconds']:.2f} s | {bare['peak_mib']:.0f} MiB "
        f"| {bare['seconds'] / distinct['seconds']:.1f}× | 1.0× |",
        f"| {label}: `sortition srm --by country,platform` | {audit['seconds']:.2f} s | {audit['peak_mib']:.0f} MiB "
        f"| **{audit['seconds'] / distinct['seconds']:.1f}×** | {audit['seconds'] / bare['seconds']:.1f}× |",
    ]


def run() -> str:
    with tempfile.TemporaryDirectory(prefix="sortition-bench-srm-") as scratch:
        parquet = Path(scratch) / "exposures.parquet"
        jsonl = Path(scratch) / "exposures.jsonl"
        _generate(parquet, RECORDS, UNITS, "FORMAT parquet")
        _generate(jsonl, JSON_RECORDS, JSON_RECORDS // 5, "FORMAT json")
        lines = ["## srm: audit of exposure logs against a bare DuckDB count", "",
                 f"Invented logs: Parquet {RECORDS:,} records / {UNITS:,} units; JSON Lines {JSON_RECORDS:,} records "
                 f"/ {JSON_RECORDS // 5:,} units; three segment columns; one 50/50 experiment (`--expect 50,50`, "
                 f"so no arm replay). Each time is the median of {RUNS} runs, each in a fresh process, timed after imports; "
                 "peak memory is the largest maximum resident set among them (imports included). The headline ratio is "
                 "against the bare count of distinct units per experiment and arm, the least a sample-ratio test needs; "
                 "the ratio against a bare count(*) is beside it.", "",
                 "| what | time | peak memory | ratio to count(DISTINCT unit) | ratio to count(*) |",
                 "|---|---:|---:|---:|---:|"]
        lines += _rows(f"Parquet {RECORDS // 1_000_000} M", parquet, RECORDS)
        lines += _rows(f"JSON Lines {JSON_RECORDS // 1_000_000} M", jsonl, JSON_RECORDS)
    return "\n".join(lines) + "\n"
