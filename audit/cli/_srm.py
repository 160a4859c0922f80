"""`sortition srm`: the sample-ratio-mismatch audit of exposure logs."""

from __future__ import annotations

import shutil
import sys
import tempfile
import time
from enum import Enum
from pathlib import Path
from typing import TYPE_CHECKING, Any, Optional

import typer

from ..render import as_json, srm_text
from ._exit import fail, guarded, srm_exit
from ._options import column_map, expectation, iso_day, key_value_pairs, segment_terms

if TYPE_CHECKING:  # the audit loads SciPy (and its engine DuckDB): imported when `srm` runs, not at start-up
    from ..srm import AuditResult


class Verdict(str, Enum):
    fixed = "fixed"
    anytime = "anytime"


class SrmFormat(str, Enum):
    text = "text"
    json = "json"
    html = "html"


class _StderrProgress:
    """Stage names on stderr; a moving bar when stderr is a terminal."""

    def __init__(self) -> None:
        self.live = sys.stderr.isatty()
        self.started: dict[str, float] = {}

    def __call__(self, label: str, fraction: float) -> None:
        first = label not in self.started
        self.started.setdefault(label, time.perf_counter())
        if fraction >= 1.0:
            elapsed = time.perf_counter() - self.started.pop(label)
            if elapsed >= 0.5 or self.live:
                sys.stderr.write(f"\r{label}: done in {elapsed:.1f} s{' ' * 20}\n")
        elif self.live:
            filled = int(fraction * 30)
            sys.stderr.write(f"\r{label}: [{'#' * filled}{'.' * (30 - filled)}] {fraction:5.0%}")
        elif first:
            sys.stderr.write(f"{label}...\n")
        sys.stderr.flush()


def _report(result: AuditResult, fmt: SrmFormat) -> str:
    if fmt is SrmFormat.json:
        return as_json(result)
    if fmt is SrmFormat.html:
        from ..render.html_report import srm_html  # SciPy's interval, loaded for HTML reports only

        return srm_html(result)
    return srm_text(result)


def _stdin_to_file(directory: str) -> str:
    path = Path(directory) / "stdin.jsonl"
    with open(path, "wb") as out:
        shutil.copyfileobj(sys.stdin.buffer, out)
    return str(path)


def register(app: typer.Typer) -> None:
    @app.command(
        "srm",
        epilog="Example: sortition srm logs/ --config configs_example --by country,platform,app_version "
        "--format html --out srm.html   (exit 0: no mismatch, 1: mismatch, or malformed records with --strict, 2: unreadable input)",
    )
    def srm(
        logs: list[str] = typer.Argument(None, help="Log files, globs or directories (.jsonl, .csv, .tsv, .parquet, "
                                                    "plain or .gz); '-' reads JSON Lines from stdin. With --engine "
                                                    "spark, also s3a:// or hdfs:// URIs."),
        config: Optional[Path] = typer.Option(None, "--config", help="Config file or directory: expected shares, "
                                                                     "date windows, and the arm replay."),
        config_versions: Optional[Path] = typer.Option(None, "--config-versions", help="Directory of past config "
            "versions (one YAML file or subdirectory each); records are replayed under the version they name, and "
            "each unit is judged against the weights of the version in force at its first exposure (a ramp)."),
        by: Optional[str] = typer.Option(None, "--by", help="Segment attributes, comma-separated; join with + to "
                                                            "test combinations, e.g. country,platform+app_version; "
                                                            "'auto' tests every other column of the logs."),
        column: list[str] = typer.Option([], "--column", help="FIELD=LOG_COLUMN when the logs use other names, "
                                         "for fields of the record and for segment or eligibility attributes, "
                                         "e.g. --column unit=user_id --column arm=variant --column app_version=appVer; "
                                         "a column the logs do not have is an error that lists theirs."),
        expect: Optional[str] = typer.Option(None, "--expect", help="Expected split when there is no config "
                                             "(or to override it): 50,50 (arms in name order) or control=50,short=50."),
        threshold: Optional[float] = typer.Option(None, "--threshold", help="p-value below which a split is a "
                                                  "mismatch (default 0.0005, per Fabijan et al., KDD 2019)."),
        fmt: SrmFormat = typer.Option(SrmFormat.text, "--format", help="text, json or html."),
        out: Optional[Path] = typer.Option(None, "--out", help="Write the report to this file instead of stdout."),
        strict: bool = typer.Option(False, "--strict", help="Count malformed records as findings: exit 1 if any."),
        replay_units: Optional[int] = typer.Option(None, "--replay-units", help="Units per experiment whose arm is "
                                                   "recomputed from the config (a sample; default 50,000); 0 for all."),
        log_format: Optional[str] = typer.Option(None, "--log-format", help="jsonl, csv, tsv or parquet, for "
                                                 "files whose name does not say."),
        quiet: bool = typer.Option(False, "--quiet", help="No progress on stderr."),
        engine: str = typer.Option("duckdb", "--engine", help="The engine that counts the records (default duckdb)."),
        since: Optional[str] = typer.Option(None, "--since", help="First day of records to audit (YYYY-MM-DD, UTC); "
                                            "each unit is taken at its first exposure from then."),
        until: Optional[str] = typer.Option(None, "--until", help="Last day of records to audit (YYYY-MM-DD, UTC)."),
        verdict: Verdict = typer.Option(Verdict.fixed, "--verdict", help="What the verdict and the exit code rest "
                                        "on: 'fixed' (fixed-horizon tests; a one-off audit) or 'anytime' "
                                        "(anytime-valid tests; a job that re-runs every day on growing logs)."),
        spark_conf: list[str] = typer.Option([], "--spark-conf", help="KEY=VALUE for a new Spark session "
                                             "(repeatable), e.g. --spark-conf spark.master=yarn."),
        table: Optional[str] = typer.Option(None, "--table", help="A table of the Spark catalog (db.name) instead "
                                            "of log files; needs --engine spark."),
        table_filter: list[str] = typer.Option([], "--table-filter", help="SQL condition on --table, e.g. on its "
                                               "partitions: \"day BETWEEN '2026-11-03' AND '2026-11-16'\" (repeatable)."),
    ) -> None:
        """Sample-ratio-mismatch audit of exposure logs: is each split as designed, where not, since when, why.

        MISMATCH: the overall test, or a segment's Holm-adjusted test, is below the threshold.
        With --verdict anytime: their anytime-valid versions instead, safe for a job that re-runs daily.
        Onset day: the most likely day the split broke (a change point in the daily new units).
        Crossing day: the first day the cumulative test fell below the threshold (later; both for mismatches only).
        Exit 0: no mismatch; 1: a mismatch (or, with --strict, a malformed record); 2: unreadable input.
        """

        def run() -> int:
            from ..srm import DEFAULT_REPLAY_UNITS, DEFAULT_THRESHOLD, LOG_FORMATS, audit_logs

            cutoff = DEFAULT_THRESHOLD if threshold is None else threshold
            if not 0 < cutoff < 1:
                fail(f"--threshold must be between 0 and 1, found {cutoff}")
            if log_format is not None and log_format not in LOG_FORMATS:
                fail(f"--log-format must be jsonl, csv, tsv or parquet, found {log_format!r}")
            terms, automatic = segment_terms(by)
            expected = expectation(expect)
            if config is None and expected is None:
                fail("give a config (--config) or an expected split (--expect 50,50)")
            if (table is not None or spark_conf or table_filter) and engine != "spark":
                fail("--table, --table-filter and --spark-conf need --engine spark")
            if table is None and not logs:
                fail("give log files, globs or directories (or --table with --engine spark)")
            if table_filter and table is None:
                fail("--table-filter filters --table; give the table too")
            counting: Any = engine
            if engine == "spark":
                from ..srm import SparkEngine, SparkTable

                counting = SparkEngine(key_value_pairs(spark_conf, "--spark-conf", "KEY=VALUE"))
            with tempfile.TemporaryDirectory(prefix="sortition-srm-") as scratch:
                sources: Any = SparkTable(table, tuple(table_filter)) if table is not None else \
                    [_stdin_to_file(scratch) if s == "-" else s for s in logs]
                result = audit_logs(
                    sources, config=config, expect=expected, segments=terms, auto_segments=automatic,
                    columns=column_map(column), threshold=cutoff, config_versions=config_versions,
                    replay_units=DEFAULT_REPLAY_UNITS if replay_units is None else replay_units,
                    log_format=log_format, engine=counting, since=iso_day(since, "--since"),
                    until=iso_day(until, "--until"), verdict=verdict.value,
                    progress=None if quiet else _StderrProgress())
            report = _report(result, fmt)
            if out is not None:
                out.write_text(report, encoding="utf-8")
                typer.echo(f"wrote {out}", err=True)
            else:
                sys.stdout.write(report)
            return srm_exit(result, strict)

        guarded(run)
