"""The SRM audit: exposure records in, per experiment a test of its split, where it breaks, and why.

Layers inside, one direction: `_files`/`_scan`/`_sql`/`_malformed` read
(DuckDB), `_engine` is the counting-engine interface, `_duckdb` its
default implementation and `_spark` the Apache Spark one,
`_stats`/`_exact`/`_onset`/`_sequential`/`_per_unit`/`_segments`/`_replay`/`_diagnosis` compute
on small tables, `_results` holds the frozen results, `_audit` runs it all.
Nothing here renders or chooses an exit code.
"""

from ._audit import AUTO_MAX_VALUES, DEFAULT_REPLAY_UNITS, audit_logs
from ._designs import Design, Expectation, designs_from_config, designs_from_expectation
from ._diagnosis import CAUSES, diagnose
from ._engine import ENGINES, CensusRow, CountingEngine, ReplayUnit, UnitSummary, UnitTables, engine_named
from ._files import LOG_FORMATS, LogFile, resolve_files
from ._spark import SparkEngine, SparkTable, spark_session
from ._results import (
    ArmResult, AuditResult, Cause, DayResult, ExperimentResult, Localisation, Malformed, MalformedExample,
    SegmentResult, UnknownRecords,
)
from ._exact import SplitTest, SplitTests, binomial_p_values, split_test, split_tests
from ._onset import Onset, onset
from ._per_unit import DuplicateEvidence, RankTest, duplicate_logging_evidence, records_rank_test
from ._sequential import sequential_p_values
from ._stats import (
    DEFAULT_THRESHOLD, ArmGap, SegmentShift, arm_gaps, cumulative_tests, expected_shares, first_crossing, holm_adjust,
    leave_out, mixture_shares, proportion_test, share_interval,
)

__all__ = [
    "audit_logs", "DEFAULT_REPLAY_UNITS", "AUTO_MAX_VALUES",
    "AuditResult", "ExperimentResult", "ArmResult", "SegmentResult", "DayResult", "Localisation", "Cause",
    "UnknownRecords", "Malformed", "MalformedExample",
    "Design", "Expectation", "designs_from_config", "designs_from_expectation",
    "CAUSES", "diagnose",
    "CountingEngine", "UnitTables", "CensusRow", "UnitSummary", "ReplayUnit", "ENGINES", "engine_named",
    "SparkEngine", "SparkTable", "spark_session",
    "LogFile", "LOG_FORMATS", "resolve_files",
    "DEFAULT_THRESHOLD", "ArmGap", "SegmentShift", "arm_gaps", "holm_adjust", "leave_out", "cumulative_tests",
    "first_crossing", "share_interval", "proportion_test", "expected_shares", "mixture_shares",
    "SplitTest", "SplitTests", "split_test", "split_tests", "binomial_p_values", "Onset", "onset",
    "sequential_p_values", "RankTest", "DuplicateEvidence", "records_rank_test", "duplicate_logging_evidence",
]
