"""`sortition diff` from the command line: named causes, exit codes, reassign_ok, git base, output shapes."""

import json
import shutil
from pathlib import Path

import pytest

from tests.conftest import EXAMPLE


@pytest.fixture
def configs(tmp_path):
    """Two copies of the invented example configs: `old` untouched, `new` to edit."""
    shutil.copytree(EXAMPLE, tmp_path / "old")
    shutil.copytree(EXAMPLE, tmp_path / "new")
    return tmp_path / "old", tmp_path / "new"


def _edit(path: Path, old: str, new: str) -> None:
    text = path.read_text()
    assert old in text, f"{old!r} not in {path}"
    path.write_text(text.replace(old, new, 1))


def _diff(sortition, *args):
    got = sortition("diff", *args, "--format", "json")
    return got, json.loads(got.stdout) if got.stdout.startswith("{") else None


def _experiment(data, name):
    (row,) = [e for e in data["experiments"] if e["experiment"] == name]
    return row


def test_unchanged_configs_keep_every_unit(sortition, configs):
    got, data = _diff(sortition, *configs)
    assert got.exit_code == 0
    for row in data["experiments"]:
        assert (row["kept_share"], row["switched_share"], row["left_share"], row["entered_share"]) == (1, 0, 0, 0)
        assert row["cause"] == ""


@pytest.mark.parametrize("file, old, new, experiment, cause", [
    ("lessons.yaml", "salt: shorter-lessons-1", "salt: shorter-lessons-2", "shorter-lessons", "salt change"),
    ("lessons.yaml", "salt: lesson-flow-v1", "salt: lesson-flow-v2", "shorter-lessons", "layer salt change"),
    ("audio.yaml", "weight: 20", "weight: 25", "new-audio-engine", "weight change (units only move into 'new-engine')"),
    ("lessons.yaml", "weight: 34", "weight: 30", "review-first", "weight change"),
    ("lessons.yaml", '["4000-5999"]', '["4000-4999"]', "review-first", "range shrink"),
    ("lessons.yaml", '["4000-5999"]', '["6000-7999"]', "review-first", "range move"),
    ("holdout.yaml", "percent: 2", "percent: 4", "trial-length", "holdout change"),
])
def test_running_experiment_that_moves_units_is_blocked_with_its_cause(sortition, configs, file, old, new, experiment, cause):
    _edit(configs[1] / file, old, new)
    if file == "audio.yaml":
        _edit(configs[1] / file, "weight: 80", "weight: 75")
    if old == "weight: 34":  # 34/33/33 -> 30/33/37: units move into review-first and into review-mixed
        _edit(configs[1] / file, "name: review-mixed\n            weight: 33", "name: review-mixed\n            weight: 37")
    got, data = _diff(sortition, *configs)
    assert got.exit_code == 1
    row = _experiment(data, experiment)
    assert cause in row["causes"] and row["verdict"] == "blocked"
    assert row["switched_share"] + row["left_share"] > 0


def test_arm_reorder_switches_units_between_arms(sortition, configs):
    _edit(configs[1] / "audio.yaml", """          - name: new-engine
            weight: 20
            params: {audio_engine: v2}
          - name: old-engine
            weight: 80
            params: {audio_engine: v1}""", """          - name: old-engine
            weight: 80
            params: {audio_engine: v1}
          - name: new-engine
            weight: 20
            params: {audio_engine: v2}""")
    got, data = _diff(sortition, *configs)
    row = _experiment(data, "new-audio-engine")
    assert got.exit_code == 1 and row["causes"] == ["arm reorder"]
    # By hand: arm buckets 0-1999 go new-engine -> old-engine, 8000-9999 old-engine -> new-engine: 4,000 of 10,000.
    assert row["switched_share"] == pytest.approx(0.4)
    assert {(m["from"], m["to"]) for m in row["moves"]} == {("new-engine", "old-engine"), ("old-engine", "new-engine")}


def test_widening_ranges_keeps_arms_and_passes(sortition, configs):
    # docs/SPEC.md §3.4: widening an experiment's ranges keeps every unit already in it in the same arm.
    _edit(configs[1] / "lessons.yaml", '["4000-5999"]', '["4000-6999"]')
    got, data = _diff(sortition, *configs)
    row = _experiment(data, "review-first")
    assert got.exit_code == 0
    assert (row["kept_share"], row["switched_share"], row["left_share"]) == (1, 0, 0)
    assert row["entered_share"] == pytest.approx(0.5)  # 1,000 new buckets on 2,000: by hand
    assert row["causes"] == ["range grow"] and row["exact"] is True


def test_reassign_ok_reports_instead_of_failing(sortition, configs):
    _edit(configs[1] / "audio.yaml", "weight: 20", "weight: 30")
    _edit(configs[1] / "audio.yaml", "weight: 80", "weight: 70")
    _edit(configs[1] / "audio.yaml", "owner: platform-team", 'owner: platform-team\n        reassign_ok: "ramp to 30 % agreed"')
    got, data = _diff(sortition, *configs)
    row = _experiment(data, "new-audio-engine")
    assert got.exit_code == 0
    assert row["verdict"] == "accepted" and row["reassign_ok"] == "ramp to 30 % agreed"
    # The growing arm comes first, so the ramp only moves units into it (docs/SPEC.md §3.5); 10 of 80 points move.
    assert row["moves"] == [{"from": "old-engine", "to": "new-engine", "share": pytest.approx(0.1)}]


def test_stopping_an_experiment_is_a_status_change_not_a_failure(sortition, configs):
    _edit(configs[1] / "paywall.yaml", "status: running", "status: paused")
    got, data = _diff(sortition, *configs)
    row = _experiment(data, "trial-length")
    assert got.exit_code == 0
    assert row["causes"] == ["status change (running → paused)"]


def test_eligibility_and_date_changes_have_unknown_share(sortition, configs):
    _edit(configs[1] / "notifications.yaml", "platform: [ios, android]", "platform: [ios]")
    _edit(configs[1] / "notifications.yaml", "start: 2026-11-03", "start: 2026-11-05")
    got, data = _diff(sortition, *configs)
    row = _experiment(data, "evening-nudge")
    assert got.exit_code == 0 and row["verdict"] == "warn"
    assert row["unknown_share_causes"] == ["eligibility change", "date change"]
    assert "share unknown" in row["cause"]


def test_removed_and_added_experiments_are_listed(sortition, configs):
    _edit(configs[1] / "paywall.yaml", "name: price-display", "name: price-layout")
    got, data = _diff(sortition, *configs)
    presence = {e["experiment"]: e["presence"] for e in data["experiments"]}
    assert presence["price-layout"] == "added" and presence["price-display"] == "removed"
    assert got.exit_code == 0


def test_moving_an_experiment_to_another_layer_is_followed(sortition, configs):
    text = (configs[1] / "paywall.yaml").read_text()
    cut = text.index("      - name: price-display")
    (configs[1] / "paywall.yaml").write_text(text[:cut])
    (configs[1] / "extra.yaml").write_text(
        "# Invented: the paused experiment moves to a layer of its own.\nformat: 1\nlayers:\n"
        "  - name: pricing\n    unit: learner\n    experiments:\n" + text[cut:])
    got, data = _diff(sortition, *configs)
    row = _experiment(data, "price-display")
    assert row["presence"] == "both" and row["layer"] == "pricing"
    assert "layer move (paywall → pricing)" in row["causes"] and row["exact"] is False


def test_blocked_change_names_the_changed_line_in_text(sortition, configs):
    _edit(configs[1] / "lessons.yaml", "salt: shorter-lessons-1", "salt: shorter-lessons-9")
    got = sortition("diff", str(configs[0]), str(configs[1]))
    assert got.exit_code == 1
    line = next(line for line in got.stdout.splitlines() if "reassign-running" in line)
    lines = (configs[1] / "lessons.yaml").read_text().splitlines()
    reported = int(line.split(":")[1])
    assert lines[reported - 1].strip() == "salt: shorter-lessons-9"


def test_base_reads_the_old_directory_fromgit(sortition, repo):
    _edit(repo / "configs" / "audio.yaml", "weight: 20", "weight: 10")
    _edit(repo / "configs" / "audio.yaml", "weight: 80", "weight: 90")
    got, data = _diff(sortition, repo / "configs", "--base", "HEAD")
    assert got.exit_code == 1
    row = _experiment(data, "new-audio-engine")
    assert row["left_share"] == 0 and row["switched_share"] == pytest.approx(0.1)


def test_base_reads_one_file_fromgit(sortition, repo):
    _edit(repo / "configs" / "lessons.yaml", '["4000-5999"]', '["4000-4999"]')
    got, data = _diff(sortition, repo / "configs" / "lessons.yaml", "--base", "HEAD")
    assert got.exit_code == 1
    assert _experiment(data, "review-first")["left_share"] == pytest.approx(0.5)


def test_base_where_the_file_is_new_lists_everything_as_added(sortition, repo):
    (repo / "configs" / "more.yaml").write_text(
        "# Invented.\nformat: 1\nlayers:\n  - name: quiz\n    unit: learner\n    experiments:\n"
        "      - name: hints\n        status: draft\n        buckets: [\"0-99\"]\n"
        "        arms: [{name: a, weight: 100}]\n")
    got, data = _diff(sortition, repo / "configs" / "more.yaml", "--base", "HEAD")
    assert got.exit_code == 0
    # The file alone is the config here (no holdout file beside it): 100 of 10,000 buckets.
    assert [(e["experiment"], e["presence"], e["new_traffic"]) for e in data["experiments"]] == [("hints", "added", 0.01)]


def test_unknown_git_ref_is_one_line_and_exit_2(sortition, repo):
    got = sortition("diff", str(repo / "configs"), "--base", "no-such-branch")
    assert got.exit_code == 2
    assert len(got.stderr.strip().splitlines()) == 1 and "no-such-branch" in got.stderr


def test_unreadable_new_config_exits_2_naming_the_line(sortition, configs):
    (configs[1] / "lessons.yaml").write_text("format: 1\nlayers: [\n")
    got = sortition("diff", str(configs[0]), str(configs[1]))
    assert got.exit_code == 2
    assert "lessons.yaml:3" in got.stderr and "Traceback" not in got.stderr


def test_json_has_the_documented_fields(sortition, configs):
    _, data = _diff(sortition, *configs)
    for row in data["experiments"]:
        assert {"layer", "experiment", "status", "kept_share", "switched_share", "left_share", "entered_share",
                "cause"} <= set(row)
