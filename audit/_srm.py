"""The SRM audit: exposure logs in, one result per experiment out (read -> compute, no rendering).

DuckDB does the counting. One pass over the records reduces them to one row
per unit and logged arm (records, exact repeats, first exposure and the
attributes then); malformed records, unknown experiments and arms, and
records outside the dates are counted from that table, and a second, small
aggregate gives one row per unit and experiment. Every later count (arms,
days, segments, drill-down) runs on that much smaller table. The statistics
come from `_stats`, the replay from the SDK itself.

    result = audit_logs(["logs/"], config=load_config("configs/"), terms=parse_terms("country,platform"))
"""

from __future__ import annotations

from collections import defaultdict
from datetime import date, timedelta
from pathlib import Path
from typing import Iterable, Mapping, Sequence

from bucketing import Assigner, Config, load_config

from . import _stats
from ._logs import LogError, LogScan, Progress, resolve_files
from ._srm_model import (
    ArmResult, AuditResult, Cause, DayResult, Design, ExperimentResult, Localisation, SegmentResult, UnknownRecords,
)

DEFAULT_REPLAY_UNITS = 50_000
EXAMPLES = 5
ARM_MISMATCH_NOTABLE = 0.01  # replayed units whose logged arm differs from the config: above 1 % is a cause


AUTO_TERM = ("auto",)  # `--by auto`: every column of the logs that is not a field of the record
AUTO_MAX_VALUES = 50  # an automatic segment attribute with more values than this is left out, with a note


def parse_terms(text: str | None) -> list[tuple[str, ...]]:
    """'country,platform+app_version' -> [('country',), ('platform', 'app_version')]; 'auto' finds them."""
    if not text:
        return []
    terms = []
    for part in text.split(","):
        names = tuple(n.strip() for n in part.split("+") if n.strip())
        if not names:
            raise ValueError(f"--by: empty segment name in {text!r}")
        terms.append(names)
    return list(dict.fromkeys(terms))


def designs_from_config(config: Config) -> list[Design]:
    """Every experiment of the config with its arms' weights as shares."""
    designs = []
    for layer in config.layers:
        for exp in layer.experiments:
            designs.append(Design(layer.name, exp.name, tuple(a.name for a in exp.arms),
                                  tuple(_stats.expected_shares([a.weight for a in exp.arms])),
                                  layer.unit, exp.start, exp.end))
    return designs


def parse_expectation(text: str) -> list[float] | dict[str, float]:
    """'50,50' -> [50, 50] (arms in name order); 'control=50,short=50' -> by arm name."""
    parts = [p.strip() for p in text.split(",") if p.strip()]
    try:
        if all("=" in p for p in parts):
            return {name.strip(): float(value) for name, value in (p.split("=", 1) for p in parts)}
        return [float(p) for p in parts]
    except ValueError:
        raise ValueError(f"--expect takes weights such as 50,50 or control=50,short=50, found {text!r}") from None


def designs_from_expectation(seen: Mapping[tuple[str, str], list[str]],
                             expectation: list[float] | dict[str, float]) -> list[Design]:
    """Designs for the experiments seen in the logs, all with the same expected split."""
    designs = []
    for (layer, experiment), arms in sorted(seen.items()):
        if isinstance(expectation, dict):
            names = tuple(expectation)
            weights = list(expectation.values())
        else:
            names = tuple(sorted(arms))
            weights = expectation
            if len(names) != len(weights):
                raise ValueError(f"experiment {experiment!r} has arms {list(names)} in the logs; "
                                 f"--expect gives {len(weights)} weights")
        designs.append(Design(layer, experiment, names, tuple(_stats.expected_shares(weights))))
    return designs


def _text(value: str) -> str:
    return "'" + value.replace("'", "''") + "'"


class _Classifier:
    """SQL expressions that map a record to its experiment index, its arm index, and whether it is outside its dates."""

    def __init__(self, designs: Sequence[Design], layer_logged: bool) -> None:
        layer_test = "(layer IS NULL OR layer = {})" if layer_logged else "true"
        exp_cases, arm_cases, window_cases = [], [], []
        for index, d in enumerate(designs):
            match = f"experiment = {_text(d.experiment)} AND " + layer_test.format(_text(d.layer))
            exp_cases.append(f"WHEN {match} THEN {index}")
            arms = " ".join(f"WHEN arm = {_text(a)} THEN {i}" for i, a in enumerate(d.arms))
            arm_cases.append(f"WHEN {match} THEN CASE {arms} END")
            window = []
            if d.start:
                window.append(f"CAST(ts AS DATE) < DATE '{d.start.isoformat()}'")
            if d.end:
                window.append(f"CAST(ts AS DATE) > DATE '{d.end.isoformat()}'")
            window_cases.append(f"WHEN {match} THEN {' OR '.join(window) or 'false'}")
        self.experiment = f"CASE {' '.join(exp_cases)} END" if designs else "NULL::INTEGER"
        self.arm = f"CASE {' '.join(arm_cases)} END" if designs else "NULL::INTEGER"
        any_window = any(d.start or d.end for d in designs)
        self.outside = f"coalesce(CASE {' '.join(window_cases)} END, false)" if any_window else "false"


def audit_logs(sources: Iterable[str], *, config: Config | None = None, expectation=None,
               terms: Sequence[tuple[str, ...]] = (), columns: Mapping[str, str] | None = None,
               threshold: float = _stats.DEFAULT_THRESHOLD, versions: str | Path | None = None,
               replay_units: int = DEFAULT_REPLAY_UNITS, log_format: str | None = None,
               progress: Progress | None = None) -> AuditResult:
    """Audit exposure logs against a config (or an expected split): the whole `sortition srm`, minus rendering."""
    if config is None and expectation is None:
        raise ValueError("give a config (--config) or an expected split (--expect 50,50)")
    files = resolve_files(sources, log_format)
    history = _load_versions(versions) if versions else {}
    replay_configs = dict(history)
    if config is not None:
        replay_configs.setdefault(config.version, config)
    automatic = AUTO_TERM in terms
    terms = [term for term in terms if term != AUTO_TERM]
    attributes = [name for term in terms for name in term]
    for cfg in replay_configs.values():
        attributes += [key for layer in cfg.layers for exp in layer.experiments for key in exp.eligible]
    scan = LogScan(files, columns, attributes, progress=progress)
    try:
        if automatic:
            found = [(name,) for name in scan.other_columns() if (name,) not in terms]
            scan.close()
            scan = LogScan(files, columns, attributes + [name for (name,) in found], progress=progress)
            terms += found
        return _Audit(scan, config, expectation, terms, threshold, replay_configs, replay_units,
                      automatic_terms=found if automatic else []).run()
    finally:
        scan.close()


def _load_versions(directory: str | Path) -> dict[str, Config]:
    """Every config version in a directory: each YAML file, or each subdirectory, is one version."""
    root = Path(directory)
    if not root.is_dir():
        raise LogError(f"{root}: --config-versions takes a directory of config versions")
    entries = sorted(p for p in root.iterdir() if p.is_dir() or p.suffix in (".yaml", ".yml"))
    configs = {}
    for entry in entries:
        loaded = load_config(entry)
        configs[loaded.version] = loaded
    if not configs:
        raise LogError(f"{root}: no config versions (YAML files or directories of them) found")
    return configs


class _Audit:
    def __init__(self, scan: LogScan, config, expectation, terms, threshold, replay_configs, replay_units,
                 automatic_terms: Sequence[tuple[str, ...]] = ()) -> None:
        self.scan = scan
        self.automatic_terms = set(automatic_terms)
        self.crowded_terms: set[tuple[str, ...]] = set()
        self.config = config
        self.expectation = expectation
        self.terms = list(terms)
        self.threshold = threshold
        self.replay_configs = replay_configs
        self.replay_units = replay_units
        self.notes: list[str] = list(scan.notes)

    def run(self) -> AuditResult:
        scan = self.scan
        layer_logged = "layer" in scan.present
        designs = self._designs_from_config()
        attrs = [scan.attribute_column(a) for a in scan.attributes]
        kept = [*(["config", "unit_type"] if self.replay_configs else []), *attrs]
        self._read_unit_arms(_Classifier(designs or [], layer_logged).outside, kept)
        census = scan.query("""
            SELECT _problem, layer, experiment, arm, outside, sum(records), sum(repeats), bool_or(epoch_times)
            FROM unit_arms GROUP BY ALL""", "counting records")
        if designs is None:
            designs = self._designs_from_logs([row[1:4] for row in census if row[0] is None])
        by_name: dict[str, list[int]] = defaultdict(list)
        for index, design in enumerate(designs):
            by_name[design.experiment].append(index)
        problems: dict[str, int] = defaultdict(int)
        outside: dict[int, int] = defaultdict(int)
        logged: dict[tuple[int, int], list[int]] = defaultdict(lambda: [0, 0])
        unknown = []
        total_records = 0
        for problem, lay, experiment, arm, out_of_window, count, repeats, _ in census:
            total_records += count
            if problem is not None:
                problems[problem] += count
                continue
            index = next((i for i in by_name.get(experiment, ()) if lay is None or designs[i].layer == lay), None)
            if index is None:
                unknown.append(UnknownRecords(experiment, None, lay, count, "unknown_experiment"))
                continue
            design = designs[index]
            if arm not in design.arms:
                unknown.append(UnknownRecords(experiment, arm, lay, count, "unknown_arm"))
            elif out_of_window:
                outside[index] += count
            else:
                totals = logged[(index, design.arms.index(arm))]
                totals[0] += count
                totals[1] += repeats
        unknown = self._merge_unknown(unknown)
        self.notes += _near_miss_notes(unknown, designs)
        if any(row[-1] for row in census):
            self.notes += scan.epoch_notes()
        malformed = scan.malformed(problems)
        if total_records and total_records == malformed.total:
            raise LogError(f"{scan.files[0].path}: no usable exposure record "
                           f"({malformed.total} malformed; first: {malformed.examples[0].detail})")
        self._unit_rows(_Classifier(designs, layer_logged), kept)
        results = [self._experiment(index, design, outside.get(index, 0),
                                    [logged.get((index, arm), [0, 0]) for arm in range(len(design.arms))])
                   for index, design in enumerate(designs)]
        results = [r for r in results if r.units or r.records or r.outside_window_records]
        results.sort(key=lambda r: (not r.srm, r.p_value, r.layer, r.experiment))
        tested = [term for term in self.terms if term not in self.crowded_terms]
        return AuditResult(self.threshold, [f.path for f in scan.files], total_records, results, malformed,
                           unknown, tested, self.notes)

    def _read_unit_arms(self, outside: str, kept: list[str]) -> None:
        """The one pass over the records: a row per unit and logged (layer, experiment, arm), `unit_arms`.

        Each row has the unit's records, how many of them repeat another one
        exactly (same unit, arm and time), and its first exposure in that arm:
        the time and the `kept` columns then. Malformed records and records
        outside their experiment's dates are only counted: their rows have no unit.
        """
        values = f"list_value({', '.join(kept)})" if kept else "NULL::VARCHAR[]"
        epoch_times = "bool_or(_ts_epoch IS NOT NULL)" if self.scan.times_as_text else "false"
        self.scan.execute(f"""
            CREATE TEMP TABLE unit_arms AS
            SELECT * EXCLUDE (times), records - list_unique(times) AS repeats
            FROM (
                SELECT _problem, layer, experiment, arm, outside, unit, count(*) AS records, min(ts) AS first_ts,
                       arg_min(kept, ts) AS first_kept, bool_or(forced) AS forced,
                       list(ts) FILTER (WHERE unit IS NOT NULL) AS times, {epoch_times} AS epoch_times
                FROM (SELECT * REPLACE (CASE WHEN _problem IS NULL AND NOT outside THEN unit END AS unit)
                      FROM (SELECT _problem, layer, experiment, arm, {outside} AS outside, unit, ts, forced,
                                   _ts_epoch, {values} AS kept
                            FROM exposure_rows))
                GROUP BY _problem, layer, experiment, arm, outside, unit)""", "reading records")

    def _unit_rows(self, classify: _Classifier, kept: list[str]) -> None:
        """One row per unit and experiment, `unit_rows`: its arm at first exposure, and whether it saw several arms.

        A unit seen in several arms is left out of every count, so which of
        them comes first when two exposures share their time does not matter.
        """
        self.scan.execute(f"""
            CREATE TEMP TABLE unit_rows AS
            SELECT * EXCLUDE (first_kept), arm_low <> arm_high AS multi
                   {''.join(f', first_kept[{i + 1}] AS {c}' for i, c in enumerate(kept))}
            FROM (
                SELECT exp, unit, min(first_ts) AS first_ts, arg_min(arm, first_ts) AS arm,
                       arg_min(first_kept, first_ts) AS first_kept, min(arm) AS arm_low, max(arm) AS arm_high,
                       bool_or(forced) AS forced
                FROM (SELECT {classify.experiment} AS exp, {classify.arm} AS arm, unit, first_ts, first_kept, forced
                      FROM unit_arms WHERE unit IS NOT NULL)
                WHERE arm IS NOT NULL
                GROUP BY exp, unit)""", "counting units")

    def _designs_from_config(self) -> list[Design] | None:
        """The designs, when the config alone gives them (otherwise they depend on the arms seen in the logs)."""
        return designs_from_config(self.config) if self.config is not None and self.expectation is None else None

    def _designs_from_logs(self, seen_rows: list[tuple]) -> list[Design]:
        """The designs of --expect: every (layer, experiment) seen in the logs, with the arms seen."""
        seen: dict[tuple[str, str], set[str]] = defaultdict(set)
        known = {d.experiment: d.layer for d in designs_from_config(self.config)} if self.config is not None else {}
        logged_layers: dict[str, set[str]] = defaultdict(set)
        for lay, experiment, _ in seen_rows:
            if lay is not None:
                logged_layers[experiment].add(lay)
        for experiment, layers in logged_layers.items():
            if len(layers) == 1:  # records without a layer (files that do not log it) join the one layer logged
                known.setdefault(experiment, next(iter(layers)))
        for lay, experiment, arm in seen_rows:
            seen[(known.get(experiment) or lay or "-", experiment)].add(arm)
        return designs_from_expectation({k: sorted(v) for k, v in seen.items()}, self.expectation)

    @staticmethod
    def _merge_unknown(unknown: list[UnknownRecords]) -> list[UnknownRecords]:
        merged: dict[tuple, UnknownRecords] = {}
        for u in unknown:
            key = (u.reason, u.layer, u.experiment, u.arm)
            if key in merged:
                merged[key].records += u.records
            else:
                merged[key] = u
        return sorted(merged.values(), key=lambda u: -u.records)

    # -- one experiment ----------------------------------------------------------------------------

    def _arm_counts(self, index: int, design: Design, where: str = "true") -> list[int]:
        counts = [0] * len(design.arms)
        for arm, units in self.scan.query(f"""
                SELECT arm, count(*) FROM unit_rows WHERE exp = {index} AND NOT multi AND NOT forced AND ({where})
                GROUP BY arm""", "counting arms"):
            counts[arm] = units
        return counts

    def _experiment(self, index: int, design: Design, outside_records: int,
                    logged: list[list[int]]) -> ExperimentResult:
        """One experiment's test; `logged` gives, per arm, its records and its repeated records."""
        scan = self.scan
        counts = self._arm_counts(index, design)
        (multi, forced), = scan.query(f"""
            SELECT count(*) FILTER (WHERE multi), count(*) FILTER (WHERE forced AND NOT multi)
            FROM unit_rows WHERE exp = {index}""")
        fit = _stats.chi_square_fit(counts, design.shares)
        gaps = _stats.arm_gaps(counts, design.shares)
        total = sum(counts)
        arms = []
        for (name, gap), (records, repeats) in zip(zip(design.arms, gaps), logged):
            low, high = _stats.share_interval(gap.observed, total)
            arms.append(ArmResult(name, gap.observed, gap.expected_share, gap.observed_share, gap.expected,
                                  gap.excess, gap.ratio, low, high, records, repeats))
        result = ExperimentResult(
            layer=design.layer, experiment=design.experiment, units=total, arms=arms, chi2=fit.statistic,
            df=fit.df, p_value=fit.pvalue, srm=fit.pvalue < self.threshold, records=sum(a.records for a in arms),
            duplicate_records=sum(a.duplicate_records for a in arms), multi_arm_units=multi, multi_arm_examples=self._multi_examples(index, design),
            forced_units=forced, outside_window_records=outside_records,
            records_p_value=_stats.chi_square_fit([a.records for a in arms], design.shares).pvalue,
        )
        if total == 0:
            return result
        result.days = self._days(index, design)
        crossing = _stats.first_crossing([d.cumulative_p for d in result.days], self.threshold)
        result.first_srm_day = result.days[crossing].day if crossing is not None else None
        if result.days:
            result.sequential_p_value = result.days[-1].sequential_p
            crossing = _stats.first_crossing([d.sequential_p for d in result.days], self.threshold)
            result.first_sequential_srm_day = result.days[crossing].day if crossing is not None else None
        self._segments(index, design, result, counts)
        self._replay(index, design, result)
        result.causes = _diagnose(result, self.threshold)
        return result

    def _multi_examples(self, index: int, design: Design) -> list[dict]:
        rows = self.scan.query(f"""
            SELECT unit, arm_low, arm_high FROM unit_rows WHERE exp = {index} AND multi ORDER BY unit LIMIT {EXAMPLES}""")
        return [{"unit": unit, "arms": [design.arms[low], design.arms[high]]} for unit, low, high in rows]

    def _days(self, index: int, design: Design, where: str = "true") -> list[DayResult]:
        by_day: dict[date, list[int]] = {}
        for day, arm, units in self.scan.query(f"""
                SELECT CAST(first_ts AS DATE), arm, count(*) FROM unit_rows
                WHERE exp = {index} AND NOT multi AND NOT forced AND ({where}) GROUP BY ALL ORDER BY 1"""):
            by_day.setdefault(day, [0] * len(design.arms))[arm] = units
        if not by_day:
            return []
        first, last = min(by_day), max(by_day)
        days = [first + timedelta(n) for n in range((last - first).days + 1)]
        daily = [by_day.get(d, [0] * len(design.arms)) for d in days]
        cumulative = _stats.cumulative_fits(daily, design.shares)
        sequential = _stats.sequential_pvalues(daily, design.shares)
        return [DayResult(d, counts, _stats.chi_square_fit(counts, design.shares).pvalue, fit.pvalue, anytime)
                for d, counts, fit, anytime in zip(days, daily, cumulative, sequential)]

    def _segments(self, index: int, design: Design, result: ExperimentResult, counts: list[int]) -> None:
        scan = self.scan
        segments: list[SegmentResult] = []
        for term in self.terms:
            cols = [scan.attribute_column(name) for name in term]
            keys = ", ".join(f"coalesce({c}, '(none)')" for c in cols)
            grouped: dict[tuple, list[int]] = {}
            if term in self.crowded_terms:
                continue
            for row in scan.query(f"""
                    SELECT {keys}, arm, count(*) FROM unit_rows
                    WHERE exp = {index} AND NOT multi AND NOT forced GROUP BY ALL""", "testing segments"):
                grouped.setdefault(tuple(row[:len(cols)]), [0] * len(design.arms))[row[len(cols)]] = row[-1]
            if term in self.automatic_terms and len(grouped) > AUTO_MAX_VALUES:
                self.crowded_terms.add(term)
                self.notes.append(f"--by auto: column {term[0]!r} has more than {AUTO_MAX_VALUES} values, "
                                  f"left out of the segments (name it in --by to test it anyway)")
                continue
            for values, arm_units in grouped.items():
                fit = _stats.chi_square_fit(arm_units, design.shares)
                shift = _stats.leave_out(counts, arm_units, design.shares)
                segments.append(SegmentResult(dict(zip(term, values)), sum(arm_units), arm_units, fit.statistic,
                                              fit.pvalue, explained=shift.explained,
                                              p_without=shift.fit_without.pvalue))
        for segment, adjusted in zip(segments, _stats.holm_adjust([s.p_value for s in segments])):
            segment.p_adjusted = adjusted
            segment.srm = adjusted < self.threshold
        segments.sort(key=lambda s: (not s.srm, -s.explained if s.srm else s.p_value, s.p_value))
        result.segments = segments
        if segments:
            worst = segments[0]
            rest = [c - s for c, s in zip(counts, worst.arm_units)]
            fit = _stats.chi_square_fit(rest, design.shares)
            result.without_worst = SegmentResult(worst.by, sum(rest), rest, fit.statistic, fit.pvalue,
                                                 srm=fit.pvalue < self.threshold)
        if result.srm:
            result.localisation = self._localise(index, design, segments)

    def _localise(self, index: int, design: Design, segments: list[SegmentResult]) -> Localisation | None:
        """Drill down from the segment that explains most of the mismatch, one attribute at a time.

        At each step, the sub-segment (by another attribute) that carries most
        of the current segment's imbalance, and is itself a mismatch, narrows
        the segment; it stops when no attribute narrows it further.
        """
        start = next((s for s in segments if s.srm and s.explained >= 0.5), None)
        if start is None:
            return None
        chosen = dict(start.by)
        counts = start.arm_units
        names = list(dict.fromkeys(name for term in self.terms if term not in self.crowded_terms for name in term))
        while True:
            where = self._where(chosen)
            best = None
            for name in (n for n in names if n not in chosen):
                column = self.scan.attribute_column(name)
                grouped: dict[str, list[int]] = {}
                for value, arm, units in self.scan.query(f"""
                        SELECT coalesce({column}, '(none)'), arm, count(*) FROM unit_rows
                        WHERE exp = {index} AND NOT multi AND NOT forced AND {where} GROUP BY ALL"""):
                    grouped.setdefault(value, [0] * len(design.arms))[arm] = units
                for value, sub in grouped.items():
                    fit = _stats.chi_square_fit(sub, design.shares)
                    shift = _stats.leave_out(counts, sub, design.shares)
                    if fit.pvalue < self.threshold and shift.explained >= 0.5 and \
                            (best is None or shift.explained > best[2]):
                        best = (name, value, shift.explained, sub)
            if best is None:
                break
            chosen[best[0]] = best[1]
            counts = best[3]
        where = self._where(chosen)
        rest = self._arm_counts(index, design, f"NOT ({where})")
        days = self._days(index, design, where)
        crossing = _stats.first_crossing([d.cumulative_p for d in days], self.threshold)
        p_rest = _stats.chi_square_fit(rest, design.shares).pvalue
        return Localisation(chosen, sum(counts), counts, _stats.chi_square_fit(counts, design.shares).pvalue,
                            p_rest, p_rest < self.threshold, days[crossing].day if crossing is not None else None)

    def _where(self, segment: Mapping[str, str]) -> str:
        return " AND ".join(f"coalesce({self.scan.attribute_column(k)}, '(none)') = {_text(v)}"
                            for k, v in segment.items())

    # -- replay ------------------------------------------------------------------------------------

    def _replay(self, index: int, design: Design, result: ExperimentResult) -> None:
        """Recompute each (sampled) unit's arm with the SDK and compare it with the logged one."""
        if not self.replay_configs:
            return
        scan = self.scan
        attrs = scan.attributes
        cols = "".join(f", {scan.attribute_column(a)}" for a in attrs)
        # The sample is the units with the smallest hash of their id: the same on every run, whatever the threads.
        sample = f"ORDER BY hash(unit), unit LIMIT {int(self.replay_units)}" if self.replay_units else ""
        rows = scan.query(f"""
            SELECT unit, arm, CAST(first_ts AS DATE), config, unit_type{cols}
            FROM unit_rows WHERE exp = {index} AND NOT multi AND NOT forced {sample}""", "replaying")
        fallback = self.config or next(iter(self.replay_configs.values()))
        groups: dict[tuple[str, date], list[tuple]] = defaultdict(list)
        unmatched_versions = 0
        for row in rows:
            version = row[3] if row[3] in self.replay_configs else fallback.version
            unmatched_versions += row[3] not in self.replay_configs
            groups[(version, row[2])].append(row)
        if unmatched_versions and len(self.replay_configs) > 1:
            self.notes.append(f"{design.experiment}: {unmatched_versions} replayed units carry a config version not "
                              f"among --config-versions; replayed against {fallback.version}")
        mismatched_rows = []
        for (version, day), members in groups.items():
            assigner = Assigner(self.replay_configs[version])
            unit_type = design.unit_type or members[0][4] or "unit"
            ids = [m[0] for m in members]
            unit_attrs = [{a: v for a, v in zip(attrs, m[5:]) if v is not None} for m in members]
            for member, got in zip(members, assigner.assign_many(unit_type, ids, unit_attrs, day=day)):
                placed = got.layers.get(design.layer)
                computed = placed.arm if placed is not None and placed.experiment == design.experiment else None
                if computed != design.arms[member[1]]:
                    mismatched_rows.append((member, computed))
        result.replay_checked = len(rows)
        result.replay_mismatched = len(mismatched_rows)
        result.replay_examples = [{"unit": m[0], "logged": design.arms[m[1]], "computed": computed,
                                   "config": m[3]} for m, computed in mismatched_rows[:EXAMPLES]]
        for segment in result.segments:
            names = list(segment.by)
            positions = [5 + attrs.index(n) for n in names]
            wanted = [segment.by[n] for n in names]

            def inside(row: tuple) -> bool:
                return [row[p] if row[p] is not None else "(none)" for p in positions] == wanted

            segment.replay_checked = sum(1 for row in rows if inside(row))
            segment.replay_mismatched = sum(1 for row, _ in mismatched_rows if inside(row))


def _near_miss_notes(unknown: list[UnknownRecords], designs: Sequence[Design]) -> list[str]:
    """Unknown names that equal a known one but for case or surrounding spaces: names are compared exactly, so say so."""
    def near(name: str, known: Iterable[str]) -> str | None:
        return next((k for k in known if k != name and k.casefold() == name.strip().casefold()), None)

    notes = []
    for u in unknown:
        if u.reason == "unknown_arm":
            design = next(d for d in designs if d.experiment == u.experiment and (u.layer is None or d.layer == u.layer))
            known, what = design.arms, f"arm {u.arm!r} of {u.experiment!r}"
            closest = near(u.arm, known)
        else:
            closest, what = near(u.experiment, (d.experiment for d in designs)), f"experiment {u.experiment!r}"
        if closest is not None:
            notes.append(f"{what} ({u.records:,} records) is unknown; it matches {closest!r} but for case or spaces, "
                         f"and names are compared exactly")
    return notes


def _diagnose(result: ExperimentResult, threshold: float) -> list[Cause]:
    """Name the likely causes, most specific first."""
    causes: list[Cause] = []
    loc = result.localisation
    stale_in: dict[str, str] | None = None
    mismatch_segments = [s for s in result.segments if s.replay_checked and _arm_mismatch_stands_out(s, result)]
    if mismatch_segments:
        worst = max(mismatch_segments, key=lambda s: (s.replay_mismatch_share, -s.units))
        stale_in = worst.by
        causes.append(Cause("arm_mismatch",
            f"{worst.replay_mismatched} of {worst.replay_checked} replayed units in {worst.label} "
            f"({worst.replay_mismatch_share:.1%}) were logged in an arm the config does not give them, against "
            f"{_rest_mismatch(worst, result):.1%} elsewhere: this segment serves a stale or wrong arm, "
            f"which is a cause of the mismatch, not a symptom", worst.by))
    elif (result.replay_mismatch_share or 0) > ARM_MISMATCH_NOTABLE:
        causes.append(Cause("arm_mismatch",
            f"{result.replay_mismatch_share:.1%} of replayed units were logged in an arm the config does not give "
            f"them, in every segment alike: check that the logs and the config are the same version"))
    if loc is not None and result.srm:
        deficits = [(i, inside_gap) for i, inside_gap in enumerate(_stats.arm_gaps(loc.arm_units, _design_shares(result)))]
        short_arm, gap = min(deficits, key=lambda item: item[1].excess)
        since = f" since {loc.first_srm_day.isoformat()}" if loc.first_srm_day else ""
        rest = "the rest of the experiment is balanced" if not loc.srm_rest else "the rest still shows a mismatch"
        shortfall = (f"in {loc.label}, arm {result.arms[short_arm].arm!r} has {-gap.excess:,.0f} units fewer than "
                     f"expected ({gap.ratio:.0%} of its expected count){since}; {rest} (p = {loc.p_rest:.2g})")
        if stale_in is not None and stale_in.items() <= loc.by.items():
            causes.append(Cause("arm_mismatch",
                f"{shortfall}: its units are logged in another arm there (the stale or wrong arm above), "
                f"not lost", loc.by))
        else:
            causes.append(Cause("dropped_exposures",
                f"{shortfall}: exposures of {result.arms[short_arm].arm!r} are being lost in this segment", loc.by))
    per_unit = [a.records_per_unit for a in result.arms if a.units]
    if result.records_p_value < threshold and not result.srm and per_unit and max(per_unit) > 1.05 * min(per_unit):
        heavy = max(result.arms, key=lambda a: a.records_per_unit)
        causes.append(Cause("duplicate_logging",
            f"record counts show a mismatch while unit counts do not: arm {heavy.arm!r} logs "
            f"{heavy.records_per_unit:.2f} records per unit against {min(per_unit):.2f}; exposures are logged more "
            f"than once in that arm (do not count records, count units)"))
    if result.multi_arm_units and result.multi_arm_units >= 0.001 * max(result.units, 1):
        causes.append(Cause("units_in_two_arms",
            f"{result.multi_arm_units:,} units were logged in more than one arm (left out of the test): "
            f"an assignment that changes over time, or a unit id shared by several people"))
    if result.outside_window_records:
        causes.append(Cause("outside_window",
            f"{result.outside_window_records:,} record{'s' if result.outside_window_records != 1 else ''} "
            f"{'fall' if result.outside_window_records != 1 else 'falls'} outside the experiment's dates (left out)"))
    if result.srm and not causes:
        causes.append(Cause("unexplained",
            "the split is off but no segment, arm replay, duplicate or two-arm pattern explains it; "
            "try more segments with --by, or combinations such as platform+app_version"))
    return causes


def _design_shares(result: ExperimentResult) -> list[float]:
    return [a.expected_share for a in result.arms]


def _rest_mismatch(segment: SegmentResult, result: ExperimentResult) -> float:
    checked = result.replay_checked - segment.replay_checked
    return (result.replay_mismatched - segment.replay_mismatched) / checked if checked else 0.0


def _arm_mismatch_stands_out(segment: SegmentResult, result: ExperimentResult) -> bool:
    share = segment.replay_mismatch_share or 0.0
    rest_checked = result.replay_checked - segment.replay_checked
    if share <= ARM_MISMATCH_NOTABLE or rest_checked <= 0:
        return False
    rest_share = _rest_mismatch(segment, result)
    p = _stats.proportion_test(segment.replay_mismatched, segment.replay_checked,
                               result.replay_mismatched - segment.replay_mismatched, rest_checked)
    return share > 3 * rest_share and p < 0.0005
