"""The demo's invented logs: written through the SDK, the planted fault found, localised and explained."""

import json


from audit import audit_logs
from audit.demo import FAULT_ARM, FAULT_EXPERIMENT, FAULT_SEGMENT, write_demo_logs
from bucketing import Assigner, load_config
from tests.conftest import DEMO_SEGMENTS, EXAMPLE as CONFIG


def test_records_follow_the_contract_and_the_sdk(demo):
    logs, _ = demo
    assigner = Assigner(load_config(CONFIG))
    checked = 0
    with open(logs.files[5], encoding="utf-8") as stream:
        for line in stream:
            record = json.loads(line)
            if record.get("forced") or "arm" not in record or record["experiment"] == "lesson-streaks":
                continue
            assert {"ts", "unit", "unit_type", "layer", "experiment", "arm", "config", "forced"} <= set(record)
            attrs = {k: record[k] for k in ("country", "platform", "app_version")}
            day = logs.files[5].stem.removeprefix("exposures-")
            from datetime import date
            got = assigner.assign({record["unit_type"]: record["unit"]}, attrs, day=date.fromisoformat(day))
            assert got.layers[record["layer"]].arm == record["arm"]
            assert record["config"] == assigner.version
            checked += 1
            if checked == 300:
                break
    assert checked == 300


def test_the_faulty_experiment_alone_is_a_mismatch(demo):
    _, result = demo
    flagged = [r.experiment for r in result.results if r.srm]
    assert flagged == [FAULT_EXPERIMENT]


def test_the_fault_is_localised_to_its_segment_and_arm(demo):
    logs, result = demo
    faulty = next(r for r in result.results if r.experiment == FAULT_EXPERIMENT)
    assert faulty.localisation is not None
    assert faulty.localisation.by == FAULT_SEGMENT
    assert not faulty.localisation.srm_rest
    assert faulty.segments[0].srm and set(faulty.segments[0].by.items()) <= set(FAULT_SEGMENT.items())
    assert faulty.without_worst is not None and not faulty.without_worst.srm
    dropped = next(c for c in faulty.causes if c.kind == "dropped_exposures")
    assert f"'{FAULT_ARM}'" in dropped.message and dropped.segment == FAULT_SEGMENT
    assert faulty.localisation.first_srm_day.isoformat() >= logs.fault["since"]
    assert faulty.replay_mismatch_share == 0.0


def test_the_noise_is_reported(demo):
    logs, result = demo
    assert result.malformed.total == logs.noise["malformed_lines"]
    assert set(result.malformed.counts) == {"unparseable", "truncated", "missing_field", "wrong_type"}
    assert sum(r.duplicate_records for r in result.results) > 0
    assert [u.experiment for u in result.unknown] == ["lesson-streaks"]
    assert sum(r.outside_window_records for r in result.results) == logs.noise["early_clock_records"]
    assert sum(r.forced_units for r in result.results) >= 2


def test_without_a_fault_flags_stay_near_the_threshold(tmp_path):
    logs = write_demo_logs(CONFIG, tmp_path, seed=99, learners=20_000, devices=5_000, fault=False, noise=False)
    alpha = 0.05
    result = audit_logs([str(tmp_path)], config=load_config(CONFIG), segments=DEMO_SEGMENTS, threshold=alpha, replay_units=0)
    segments = [s for r in result.results for s in r.segments if s.units >= 50]
    flagged = sum(s.p_value < alpha for s in segments) / len(segments)
    assert len(segments) > 40
    # about alpha; with ~60 segment tests, 3 binomial s.d. above alpha is about 0.13
    assert flagged <= 0.13
    assert not any(s.srm for r in result.results for s in r.segments)  # Holm-adjusted
    assert logs.fault is None
