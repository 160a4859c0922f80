"""The SRM audit's orchestration: exposure records in, one frozen `AuditResult` out (no rendering).

A counting engine (DuckDB by default) reduces the records to small tables;
this module turns them into results with the statistics of `_stats`, the
segment tests of `_segments`, the replay of `_replay` and the causes of
`_diagnosis`.

    from audit import audit_logs
    result = audit_logs("logs/", config="configs/", segments=["country", "platform"])
"""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass, field, replace
from pathlib import Path
from datetime import date
from typing import Any, Iterable, Mapping, Sequence, Union

import numpy as np

from bucketing import Config, load_config

from .._errors import AuditError, LogError
from . import _stats
from ._designs import Design, Expectation, designs_from_config, designs_from_logs
from ._diagnosis import diagnose
from ._engine import (
    CONFIG_VERSION, FIRST_DAY, CensusRow, CountingEngine, Progress, Segment, UnitTables, Window, engine_named,
)
from ._exact import split_test
from ._per_unit import duplicate_logging_evidence
from ._replay import replay, replayable, segment_replay
from ._results import ArmResult, AuditResult, ExperimentResult, SegmentResult, UnknownRecords
from ._segments import arm_totals, localise, mismatch_start, test_segments, timeline, with_onset, without_worst

DEFAULT_REPLAY_UNITS = 50_000
FIXED, ANYTIME = "fixed", "anytime"  # what the verdict rests on: the fixed-horizon tests or the anytime-valid ones
VERDICTS = (FIXED, ANYTIME)
UNNAMED_EXPERIMENT = "(unnamed)"  # with an expected split, the experiment of logs that name none
EXAMPLES = 5
AUTO_MAX_VALUES = 50  # an automatic segment attribute with more values than this is left out, with a note

Source = Union[str, Path, Sequence[Union[str, Path]], Any]  # paths, or an in-memory table
SegmentSpec = Union[str, Sequence[str]]  # a column name, or several tested in combination


def audit_logs(source: Source, *, config: Config | str | Path | None = None, expect: Expectation | None = None,
               segments: Iterable[SegmentSpec] = (), auto_segments: bool = False,
               columns: Mapping[str, str] | None = None, threshold: float = _stats.DEFAULT_THRESHOLD,
               config_versions: str | Path | None = None, replay_units: int = DEFAULT_REPLAY_UNITS,
               log_format: str | None = None, engine: str | CountingEngine = "duckdb",
               since: date | None = None, until: date | None = None, verdict: str = FIXED,
               progress: Progress | None = None) -> AuditResult:
    """Audit exposure records for sample ratio mismatch: is each experiment's split of units as designed?

    - `source`: a path, glob or directory of logs (JSON Lines, CSV, TSV, Parquet; .gz), a list of them,
      or an in-memory table with the exposure record's columns (a pandas DataFrame, a pyarrow Table,
      a DuckDB relation; with `engine="spark"`, a Spark DataFrame, a `SparkTable` of the catalog, or
      s3a:// and hdfs:// URIs).
    - `config` (a `Config` or its path) gives each experiment's expected split, dates and the arm replay;
      `expect` gives one expected split instead: weights in arm-name order (`[50, 50]`) or by arm
      (`{"control": 50, "short": 50}`).
    - `segments`: column names to test segment by segment; a tuple of names tests their combinations.
      `auto_segments` adds every other column of the logs.
    - `columns`: record field -> log column, for logs that use other names.
    - `config_versions`: a directory of past config versions; each unit is judged against the version its
      first record names (a ramp is a mixture of designs) and replayed under it.
    - `since`, `until`: audit only the records of these days (both included); each unit is taken at its
      first exposure within them.
    - `verdict`: "fixed" (default) bases the verdict on the fixed-horizon tests, right for a one-off audit;
      "anytime" on the anytime-valid tests, right for a job that re-runs every day on the growing logs.

    Returns a frozen `AuditResult`; `result.to_dict()` is the JSON of `sortition srm --format json`.
    """
    if not 0 < threshold < 1:
        raise AuditError(f"the threshold must be between 0 and 1, found {threshold}")
    if verdict not in VERDICTS:
        raise AuditError(f"the verdict is based on one of {', '.join(VERDICTS)}, found {verdict!r}")
    if since is not None and until is not None and since > until:
        raise AuditError(f"the window starts ({since}) after it ends ({until})")
    loaded = config if config is None or isinstance(config, Config) else load_config(Path(config))
    if loaded is None and expect is None:
        raise AuditError("give a config or an expected split")
    replay_configs = _load_versions(config_versions) if config_versions is not None else {}
    if loaded is not None:
        replay_configs.setdefault(loaded.version, loaded)
    terms = list(dict.fromkeys((s,) if isinstance(s, str) else tuple(s) for s in segments))
    attributes = [name for term in terms for name in term]
    for cfg in replay_configs.values():
        attributes += [key for layer in cfg.layers for exp in layer.experiments for key in exp.eligible]
    counting = engine_named(engine)
    paths = [source] if isinstance(source, (str, Path)) else source
    if isinstance(paths, (list, tuple)):
        paths = [str(p) for p in paths]

    def read(names: list[str]) -> UnitTables:
        return counting.read(paths, columns, names, keep_versions=bool(replay_configs), log_format=log_format,
                             progress=progress, defaults={"experiment": UNNAMED_EXPERIMENT} if expect else None)

    tables = read(attributes)
    try:
        automatic: list[tuple[str, ...]] = []
        if auto_segments:
            automatic = [(name,) for name in tables.other_columns() if (name,) not in terms]
            tables.close()
            tables = read(attributes + [name for (name,) in automatic])
        plan = _Plan(loaded, expect, terms + automatic, set(automatic), threshold, replay_configs, replay_units,
                     (since, until), verdict)
        return _audit(tables, plan)
    finally:
        tables.close()


def _load_versions(directory: str | Path) -> dict[str, Config]:
    """Every config version in a directory: each YAML file, or each subdirectory, is one version."""
    root = Path(directory)
    if not root.is_dir():
        raise AuditError(f"{root}: config versions are read from a directory (one YAML file or subdirectory each)")
    configs = {}
    for entry in sorted(p for p in root.iterdir() if p.is_dir() or p.suffix in (".yaml", ".yml")):
        loaded = load_config(entry)
        configs[loaded.version] = loaded
    if not configs:
        raise AuditError(f"{root}: no config versions (YAML files or directories of them) found")
    return configs


@dataclass
class _Plan:
    """What the audit was asked, and what it learns on the way (crowded automatic segments, notes)."""

    config: Config | None
    expect: Expectation | None
    terms: list[tuple[str, ...]]
    automatic: set[tuple[str, ...]]
    threshold: float
    replay_configs: dict[str, Config]
    replay_units: int
    window: Window = (None, None)
    verdict: str = "fixed"
    crowded: set[tuple[str, ...]] = field(default_factory=set)
    notes: list[str] = field(default_factory=list)

    def tested_terms(self) -> list[tuple[str, ...]]:
        return [term for term in self.terms if term not in self.crowded]


@dataclass
class _Census:
    """The records by what became of them: malformed kinds, outside the dates, per arm, unknown."""

    records: int = 0
    problems: dict[str, int] = field(default_factory=lambda: defaultdict(int))
    outside: dict[int, int] = field(default_factory=lambda: defaultdict(int))
    logged: dict[tuple[int, int], list[int]] = field(default_factory=lambda: defaultdict(lambda: [0, 0]))
    unknown: list[UnknownRecords] = field(default_factory=list)


def _audit(tables: UnitTables, plan: _Plan) -> AuditResult:
    designs = designs_from_config(plan.config) if plan.config is not None and plan.expect is None else None
    rows = tables.census(designs or [], plan.window)
    plan.notes += tables.notes  # after the census, which notes what it found in the records (implausible dates)
    if designs is None:
        assert plan.expect is not None
        designs = designs_from_logs([(r.layer, r.experiment, r.arm) for r in rows
                                     if r.problem is None and r.experiment is not None and r.arm is not None],
                                    plan.expect, plan.config)
    census = _sort_census(rows, designs)
    since, until = plan.window
    if (since or until) and census.records == sum(census.problems.values()):
        plan.notes.append(f"no usable record is dated within {since or 'the first day'} to {until or 'the last day'} "
                          f"(--since/--until): nothing to audit there")
    plan.notes += _near_miss_notes(census.unknown, designs)
    if any(r.epoch_times for r in rows):
        plan.notes += tables.epoch_notes()
    malformed = tables.malformed(census.problems)
    if census.records and census.records == malformed.total:
        raise LogError(f"{tables.sources[0]}: no usable exposure record "
                       f"({malformed.total} malformed; first: {malformed.examples[0].detail})")
    tables.place_units(designs)
    results = [_experiment(tables, plan, index, design, census.outside.get(index, 0),
                           [census.logged.get((index, arm), [0, 0]) for arm in range(len(design.arms))])
               for index, design in enumerate(designs)]
    kept = [r for r in results if r.units or r.records or r.outside_window_records]
    kept.sort(key=lambda r: (not r.srm, r.p_value, r.layer, r.experiment))
    return AuditResult(plan.threshold, tuple(tables.sources), census.records, tuple(kept), malformed,
                       tuple(census.unknown), tuple(plan.tested_terms()), tuple(plan.notes), tuple(tables.unreadable))


def _sort_census(rows: Sequence[CensusRow], designs: Sequence[Design]) -> _Census:
    census = _Census()
    by_name: dict[str, list[int]] = defaultdict(list)
    for position, design in enumerate(designs):
        by_name[design.experiment].append(position)
    unknown: dict[tuple, UnknownRecords] = {}
    for row in rows:
        census.records += row.records
        if row.problem is not None:
            census.problems[row.problem] += row.records
            continue
        index = next((i for i in by_name.get(row.experiment or "", ()) if row.layer is None
                      or designs[i].layer == row.layer), None)
        if index is None:
            reason, arm = "unknown_experiment", None
        elif row.arm not in designs[index].arms:
            reason, arm = "unknown_arm", row.arm
        elif row.outside:
            census.outside[index] += row.records
            continue
        else:
            totals = census.logged[(index, designs[index].arms.index(row.arm))]
            totals[0] += row.records
            totals[1] += row.repeats
            continue
        key = (reason, row.layer, row.experiment, arm)
        before = unknown.get(key)
        unknown[key] = UnknownRecords(row.experiment or "", arm, row.layer,
                                      row.records + (before.records if before else 0), reason)
    # Ties in records are ordered by name, so the report does not depend on the engine's row order.
    census.unknown = sorted(unknown.values(), key=lambda u: (-u.records, u.reason, u.layer or "",
                                                             u.experiment, u.arm or ""))
    return census


def _near_miss_notes(unknown: Sequence[UnknownRecords], designs: Sequence[Design]) -> list[str]:
    """Unknown names that equal a known one but for case or surrounding spaces: names are compared exactly, so say so."""
    def near(name: str, known: Iterable[str]) -> str | None:
        return next((k for k in known if k != name and k.casefold() == name.strip().casefold()), None)

    notes = []
    for u in unknown:
        if u.reason == "unknown_arm" and u.arm is not None:
            design = next(d for d in designs if d.experiment == u.experiment and (u.layer is None or d.layer == u.layer))
            closest, what = near(u.arm, design.arms), f"arm {u.arm!r} of {u.experiment!r}"
        else:
            closest, what = near(u.experiment, (d.experiment for d in designs)), f"experiment {u.experiment!r}"
        if closest is not None:
            notes.append(f"{what} ({u.records:,} records) is unknown; it matches {closest!r} but for case or spaces, "
                         f"and names are compared exactly")
    return notes


class _Splits:
    """An experiment's units per arm, or per design version and arm when its weights were ramped (`Splits`).

    With a ramp, row 0 of `shares` is the design of the config audited against (for units whose record
    names no version among the ramp's), then one row per config version.
    """

    def __init__(self, tables: UnitTables, experiment: int, design: Design,
                 versions: Mapping[str, tuple[float, ...]]) -> None:
        self.tables = tables
        self.experiment = experiment
        self.rows = {version: row + 1 for row, version in enumerate(versions)}
        self.shares = np.asarray([design.shares, *versions.values()] if versions else design.shares)

    def _grouped(self, keys: Sequence[str], within: Segment | None = None,
                 without: Segment | None = None) -> dict[tuple, np.ndarray]:
        if not self.rows:
            return {key: np.asarray(c) for key, c in
                    self.tables.grouped_units(self.experiment, keys, within, without).items()}
        folded: dict[tuple, np.ndarray] = {}
        for key, counts in self.tables.grouped_units(self.experiment, (*keys, CONFIG_VERSION), within,
                                                     without).items():
            split = folded.setdefault(key[:-1], np.zeros(self.shares.shape, dtype=np.int64))
            split[self.rows.get(key[-1], 0)] += counts
        return folded

    def split(self, within: Segment | None = None, without: Segment | None = None) -> np.ndarray:
        return self._grouped((), within, without).get((), np.zeros(self.shares.shape, dtype=np.int64))

    def daily(self, within: Segment | None = None) -> dict[date, np.ndarray]:
        return {day: counts for (day,), counts in sorted(self._grouped((FIRST_DAY,), within).items())}

    def by_value(self, names: Sequence[str], within: Segment | None = None) -> dict[tuple[str, ...], np.ndarray]:
        return self._grouped(tuple(names), within)


def _version_shares(design: Design, plan: _Plan) -> dict[str, tuple[float, ...]]:
    """Each config version's shares of the design's arms (0 for an arm it lacks), when versions differ.

    Empty when the audit runs on an expected split, or every version gives the design's shares.
    """
    if plan.expect is not None:
        return {}
    found = {}
    for version, config in plan.replay_configs.items():
        match = next((d for d in designs_from_config(config)
                      if (d.layer, d.experiment) == (design.layer, design.experiment)), None)
        if match is not None:
            by_arm = dict(zip(match.arms, match.shares))
            found[version] = tuple(by_arm.get(arm, 0.0) for arm in design.arms)
    return found if set(found.values()) - {design.shares} else {}


def _experiment(tables: UnitTables, plan: _Plan, index: int, design: Design, outside_records: int,
                logged: list[list[int]]) -> ExperimentResult:
    """One experiment's test; `logged` gives, per arm, its records and its repeated records."""
    splits = _Splits(tables, index, design, _version_shares(design, plan))
    overall = splits.split()
    counts = list(arm_totals(overall))
    summary = tables.unit_summary(index, EXAMPLES)
    test = split_test(overall, splits.shares)
    total = sum(counts)
    shares = _stats.mixture_shares(overall, splits.shares)
    arms = []
    for name, gap, (records, repeats) in zip(design.arms, _stats.arm_gaps(counts, shares), logged):
        low, high = _stats.share_interval(gap.observed, total)
        arms.append(ArmResult(name, gap.observed, gap.expected_share, gap.observed_share, gap.expected,
                              gap.excess, gap.ratio, low, high, records, repeats))
    histogram = tables.records_per_unit(index) if total else {}
    duplicates = duplicate_logging_evidence(
        list(histogram), np.array(list(histogram.values()), dtype=np.int64).T.reshape(len(design.arms), -1),
        [a.records for a in arms], [a.duplicate_records for a in arms], plan.threshold)
    result = ExperimentResult(
        layer=design.layer, experiment=design.experiment, units=total, arms=tuple(arms), chi2=test.statistic,
        df=test.df, p_value=test.p_value, srm=test.p_value < plan.threshold, records=sum(a.records for a in arms),
        duplicate_records=sum(a.duplicate_records for a in arms), multi_arm_units=summary.multi_arm,
        multi_arm_examples=tuple({"unit": unit, "arms": [design.arms[low], design.arms[high]]}
                                 for unit, low, high in summary.multi_arm_examples),
        forced_units=summary.forced, outside_window_records=outside_records, moved_with_version_units=summary.moved,
        records_p_value=duplicates.rank_test.p_value, test=test.test, mc_error=test.mc_error,
        closed_arm_units=test.closed_units,
        duplicate_arm=design.arms[duplicates.arm] if duplicates.arm is not None else None,
        duplicate_basis=duplicates.basis,
    )
    if total == 0:
        return result
    anytime = plan.verdict == ANYTIME
    segments = test_segments(splits, overall, _segment_counts(splits, plan), plan.threshold, anytime)
    dated = timeline(splits, plan.threshold, dated=False)  # the onset only for a mismatch: see below
    overall_off = dated.days[-1].sequential_p < plan.threshold if anytime else result.srm
    scope = "overall" if overall_off else "segment" if any(s.srm for s in segments) else None
    sequential = _stats.first_crossing([d.sequential_p for d in dated.days], plan.threshold)
    start = mismatch_start(segments, scope)
    if scope is not None:
        dated = with_onset(splits, dated)
    result = replace(
        result, srm=scope is not None, srm_scope=scope, verdict=plan.verdict, days=tuple(dated.days),
        first_srm_day=dated.first_crossing if scope else None,
        onset_day=dated.onset_day if scope else None, onset_interval=dated.onset_interval if scope else None,
        sequential_p_value=dated.days[-1].sequential_p if dated.days else 1.0,
        first_sequential_srm_day=dated.days[sequential].day if sequential is not None else None,
        without_worst=without_worst(splits, overall, segments, plan.threshold),
        localisation=localise(splits, start, _names(plan), plan.threshold) if start is not None else None)
    if result.srm:
        plan.notes += _versions_hint(tables, plan, index, design)
    if plan.replay_configs:
        result = _with_replay(tables, plan, index, design, result, segments)
    else:
        result = replace(result, segments=tuple(segments))
    return replace(result, causes=diagnose(result, plan.threshold))


def _versions_hint(tables: UnitTables, plan: _Plan, index: int, design: Design) -> list[str]:
    """For a mismatch audited against one config: whether its records name other config versions (a ramp?)."""
    if plan.expect is not None or plan.config is None or len(plan.replay_configs) > 1:
        return []
    others = sorted(version for (version,) in tables.grouped_units(index, (CONFIG_VERSION,))
                    if version is not None and version != plan.config.version)
    if not others:
        return []
    return [f"{design.layer} / {design.experiment}: its units were first exposed under {len(others)} other config "
            f"version(s) than the one audited ({', '.join(others[:3])}{', …' if len(others) > 3 else ''}); if the "
            f"weights changed (a ramp), give those versions with --config-versions DIR so that each unit is judged "
            f"against the design in force at its first exposure"]


def _names(plan: _Plan) -> list[str]:
    return list(dict.fromkeys(name for term in plan.tested_terms() for name in term))


def _segment_counts(splits: _Splits, plan: _Plan) -> list[tuple[tuple[str, ...], dict]]:
    """Splits per value of each segment term; an automatic term with too many values is dropped, with a note."""
    grouped = []
    for term in plan.tested_terms():
        by_value = splits.by_value(term)
        if term in plan.automatic and len(by_value) > AUTO_MAX_VALUES:
            plan.crowded.add(term)
            plan.notes.append(f"automatic segments: column {term[0]!r} has more than {AUTO_MAX_VALUES} values, "
                              f"left out of the segments (name it as a segment to test it anyway)")
            continue
        grouped.append((term, by_value))
    return grouped


def _with_replay(tables: UnitTables, plan: _Plan, index: int, design: Design, result: ExperimentResult,
                 segments: list[SegmentResult]) -> ExperimentResult:
    """Each (sampled) unit's arm recomputed with the SDK and compared with the logged one."""
    fallback = plan.config or next(iter(plan.replay_configs.values()))
    arms = tables.replay_arms(index, plan.replay_units, design, plan.replay_configs, fallback)
    arms, lacking = replayable(arms, design, tables.attributes, plan.replay_configs, fallback)
    summary, mismatched, notes = replay(arms, design, plan.replay_configs, fallback)
    units = [unit for unit, _ in arms]
    plan.notes += lacking + notes
    replayed = []
    for segment in segments:
        checked, off = segment_replay(segment, units, mismatched, tables.attributes)
        replayed.append(replace(segment, replay_checked=checked, replay_mismatched=off))
    return replace(result, segments=tuple(replayed), replay_checked=summary.checked,
                   replay_mismatched=summary.mismatched, replay_examples=summary.examples)
