"""The SRM verdict end to end: segment-only mismatches, closed arms, the onset day, duplicate-logging evidence.

Invented logs, written to files and audited through the command line or `audit_logs`.
"""

import json
import random
from datetime import date, timedelta

from audit import audit_logs
from tests.invented_logs import write_jsonl

START = date(2026, 11, 3)


def daily_log(tmp_path, *, days=14, per_day=1500, countries=("AA", "BB", "CC", "DD", "EE", "FF"),
              broken=None, arms=("left", "right"), shares=(0.5, 0.5), seed=1, records_per_unit=lambda rng, arm: 1):
    """Invented exposures: new units each day split by `shares`; `broken(day, country, arm)` drops a unit when true."""
    rng = random.Random(seed)
    records = []
    for day in range(days):
        for n in range(per_day):
            unit, country = f"U-{day}-{n}", rng.choice(countries)
            arm = rng.choices(arms, shares)[0]
            if broken is not None and broken(day, country, arm, rng):
                continue
            for k in range(records_per_unit(rng, arm)):
                ts = f"{(START + timedelta(day)).isoformat()}T{10 + k % 12:02d}:{k // 12 % 60:02d}:{n % 60:02d}.000Z"
                records.append({"ts": ts, "unit": unit, "unit_type": "learner", "layer": "layer-a",
                                "experiment": "exp-a", "arm": arm, "forced": False, "country": country})
    return write_jsonl(tmp_path / "log.jsonl", records)


def country_drop(day, country, arm, rng):
    """From day 6, country BB loses a third of arm 'right''s new units."""
    return day >= 6 and country == "BB" and arm == "right" and rng.random() < 1 / 3


def test_a_mismatch_in_one_segment_is_a_mismatch_with_its_scope_segment_and_onset(sortition, tmp_path):
    log = daily_log(tmp_path, broken=country_drop)
    got = sortition("srm", log, "--expect", "50,50", "--by", "country", "--format", "json", "--quiet")
    assert got.exit_code == 1, got.output
    result, = json.loads(got.stdout)["results"]
    assert result["p_value"] > 0.0005  # the overall test alone would call it balanced
    assert result["srm"] is True and result["srm_scope"] == "segment"
    assert result["localised"]["by"] == {"country": "BB"}
    assert abs(date.fromisoformat(result["localised"]["onset_day"]) - (START + timedelta(6))) <= timedelta(1)
    causes = [c for c in result["causes"] if c["kind"] == "dropped_exposures"]
    assert causes and causes[0]["segment"] == {"country": "BB"}
    text = sortition("srm", log, "--expect", "50,50", "--by", "country", "--quiet")
    assert text.exit_code == 1
    assert "MISMATCH" in text.stdout and "segment country=BB" in text.stdout and "broke in country=BB" in text.stdout
    localised = result["localised"]
    assert localised["days"] and localised["days"][-1]["cumulative_p_value"] < 0.0005  # the segment's own days
    page = tmp_path / "report.html"
    html = sortition("srm", log, "--expect", "50,50", "--by", "country", "--format", "html", "--out", page, "--quiet")
    assert html.exit_code == 1
    # the day chart follows the segment where the mismatch is, not the balanced whole
    assert "in <b>country=BB</b>, where the mismatch is" in page.read_text() and 'class="onset"' in page.read_text()


def test_the_experiment_onset_and_the_crossing_day_are_told_apart(tmp_path):
    log = daily_log(tmp_path, per_day=3000, broken=lambda day, country, arm, rng: day >= 8 and arm == "right"
                    and rng.random() < 0.25)
    result, = audit_logs(log, expect=[50, 50]).results
    assert result.srm_scope == "overall"
    assert abs(result.onset_day - (START + timedelta(8))) <= timedelta(1)
    assert result.onset_interval[0] <= result.onset_day <= result.onset_interval[1]
    assert result.first_srm_day >= result.onset_day


def test_a_balanced_experiment_has_no_onset_and_no_crossing_day(tmp_path):
    result, = audit_logs(daily_log(tmp_path), expect=[50, 50], segments=["country"]).results
    assert not result.srm and result.srm_scope is None
    assert result.onset_day is None and result.first_srm_day is None


def test_units_in_a_closed_arm_are_a_mismatch_with_their_own_cause(sortition, tmp_path):
    # 900 of 6,900 units in an arm whose expected share is 0; the open arms are balanced.
    log = daily_log(tmp_path, days=1, per_day=6900, arms=("left", "right", "old"), shares=(3000, 3000, 900))
    got = sortition("srm", log, "--expect", "left=50,right=50,old=0", "--format", "json", "--quiet")
    assert got.exit_code == 1
    result, = json.loads(got.stdout)["results"]
    assert result["srm"] is True and result["p_value"] == 0 and result["closed_arm_units"] > 800
    assert result["causes"][0]["kind"] == "closed_arm"
    text = sortition("srm", log, "--expect", "left=50,right=50,old=0").stdout
    assert "units are in 'old', closed by the design (weight 0)" in text
    assert "nan" not in text and "—" in text  # the closed arm has no observed/expected ratio


def test_heavy_tailed_records_per_unit_do_not_name_duplicate_logging(tmp_path):
    # Healthy logs whose units log Pareto(1.3) records each: clustered, heavy-tailed, the same in both arms.
    log = daily_log(tmp_path, days=2, per_day=3000,
                    records_per_unit=lambda rng, arm: min(int(rng.paretovariate(1.3)), 60))
    result, = audit_logs(log, expect=[50, 50]).results
    assert "duplicate_logging" not in [c.kind for c in result.causes]


def test_an_arm_logging_twice_is_named_and_the_text_lists_exact_repeats(sortition, tmp_path):
    log = daily_log(tmp_path, days=2, per_day=3000,
                    records_per_unit=lambda rng, arm: 2 if arm == "right" and rng.random() < 0.5 else 1)
    result, = audit_logs(log, expect=[50, 50]).results
    named = [c for c in result.causes if c.kind == "duplicate_logging"]
    assert named and "'right'" in named[0].message
    records = [json.loads(line) for line in log.read_text().splitlines()]
    repeated = write_jsonl(tmp_path / "repeated.jsonl", records + records[:40])
    got = sortition("srm", repeated, "--expect", "50,50", "--quiet")
    assert "exact repeats:" in got.stdout


def test_the_demo_fault_is_dated_on_its_first_day(demo):
    # The demo drops exposures in one segment from 2026-11-05 (audit/demo writes it so).
    _, result = demo
    shorter = next(r for r in result.results if r.experiment == "shorter-lessons")
    assert shorter.srm and shorter.localisation is not None
    assert shorter.localisation.onset_day == date(2026, 11, 5)


def test_an_experiment_logging_one_arm_needs_named_weights_and_is_then_a_mismatch(sortition, tmp_path):
    log = write_jsonl(tmp_path / "one-arm.jsonl", [{"ts": "2026-11-04T09:00:00Z", "unit": f"U-{n}", "experiment": "exp-a",
                                                   "arm": "left"} for n in range(60)])
    positional = sortition("srm", log, "--expect", "50,50", "--quiet")
    assert positional.exit_code == 2 and "name the arms" in positional.stderr
    named = sortition("srm", log, "--expect", "left=50,right=50", "--format", "json", "--quiet")
    assert named.exit_code == 1 and json.loads(named.stdout)["results"][0]["srm"] is True
