"""The SRM audit as JSON: the contract's fields first, more detail beside them."""

from __future__ import annotations

import json
import math
from typing import Any

from ._srm_model import AuditResult, ExperimentResult, SegmentResult


def _number(value: float | None) -> float | None:
    if value is None or (isinstance(value, float) and not math.isfinite(value)):
        return None
    return value


def _segment(segment: SegmentResult, arms: list[str]) -> dict[str, Any]:
    return {
        "by": segment.by, "units": segment.units, "p_value": segment.p_value, "p_adjusted": segment.p_adjusted,
        "srm": segment.srm, "chi2": segment.chi2, "arm_units": dict(zip(arms, segment.arm_units)),
        "explained": segment.explained, "p_value_without": segment.p_without,
        "replay_checked": segment.replay_checked, "replay_mismatch_share": segment.replay_mismatch_share,
    }


def experiment_dict(result: ExperimentResult) -> dict[str, Any]:
    names = [a.arm for a in result.arms]
    loc = result.localisation
    return {
        "layer": result.layer,
        "experiment": result.experiment,
        "units": result.units,
        "arms": [{
            "arm": a.arm, "units": a.units, "expected_share": a.expected_share, "observed_share": a.observed_share,
            "expected_units": a.expected_units, "excess_units": a.excess_units, "ratio": _number(a.ratio),
            "observed_share_interval": [a.share_low, a.share_high], "records": a.records,
            "duplicate_records": a.duplicate_records,
        } for a in result.arms],
        "chi2": result.chi2,
        "df": result.df,
        "p_value": result.p_value,
        "srm": result.srm,
        "records": result.records,
        "records_p_value": result.records_p_value,
        "multi_arm_units": result.multi_arm_units,
        "multi_arm_examples": result.multi_arm_examples,
        "duplicate_records": result.duplicate_records,
        "forced_units": result.forced_units,
        "outside_window_records": result.outside_window_records,
        "replay_checked": result.replay_checked,
        "replay_mismatch_share": result.replay_mismatch_share,
        "replay_examples": result.replay_examples,
        "first_srm_day": result.first_srm_day.isoformat() if result.first_srm_day else None,
        "sequential_p_value": result.sequential_p_value,
        "first_sequential_srm_day": (result.first_sequential_srm_day.isoformat()
                                     if result.first_sequential_srm_day else None),
        "days": [{"day": d.day.isoformat(), "new_units": dict(zip(names, d.arm_units)), "p_value": d.p_value,
                  "cumulative_p_value": d.cumulative_p, "sequential_p_value": d.sequential_p}
                 for d in result.days],
        "segments": [_segment(s, names) for s in result.segments],
        "without_worst_segment": None if result.without_worst is None else {
            "left_out": result.without_worst.by, "units": result.without_worst.units,
            "p_value": result.without_worst.p_value, "srm": result.without_worst.srm},
        "localised": None if loc is None else {
            "by": loc.by, "units": loc.units, "arm_units": dict(zip(names, loc.arm_units)), "p_value": loc.p_value,
            "p_value_rest": loc.p_rest, "srm_rest": loc.srm_rest,
            "first_srm_day": loc.first_srm_day.isoformat() if loc.first_srm_day else None},
        "causes": [{"kind": c.kind, "message": c.message, "segment": c.segment} for c in result.causes],
    }


def audit_dict(result: AuditResult) -> dict[str, Any]:
    return {
        "threshold": result.threshold,
        "srm": result.any_srm,
        "files": result.files,
        "records": result.records,
        "segments_by": [list(term) for term in result.segment_terms],
        "results": [experiment_dict(r) for r in result.results],
        "malformed": {
            "total": result.malformed.total,
            "counts": dict(sorted(result.malformed.counts.items())),
            "examples": [{"kind": e.kind, "file": e.file, "line": e.line, "detail": e.detail, "text": e.text}
                         for e in result.malformed.examples],
        },
        "unknown": [{"reason": u.reason, "layer": u.layer, "experiment": u.experiment, "arm": u.arm,
                     "records": u.records} for u in result.unknown],
        "notes": result.notes,
    }


def render_json(result: AuditResult) -> str:
    return json.dumps(audit_dict(result), indent=2, ensure_ascii=False, allow_nan=False)
