"""`sortition check` from the command line: exit codes, turning rules off, waivers, stdin, output shapes."""

import json
import subprocess
import sys
from pathlib import Path

import pytest

from tests.conftest import CHECK_FIXTURES, EXAMPLE, ROOT


SORTITION = Path(sys.executable).parent / "sortition"


@pytest.fixture
def check(sortition):
    return lambda *args, input=None: sortition("check", *args, input=input)


def test_exit_codes_follow_the_contract(check):
    # docs/SPEC.md §6.1: exit 0 clean, 1 findings of severity error, 2 unreadable input.
    assert check(CHECK_FIXTURES / "clean.yaml", "--today", "2026-11-15").exit_code == 0
    assert check(CHECK_FIXTURES / "traffic-overlap.yaml").exit_code == 1
    assert check(CHECK_FIXTURES / "yaml-syntax.yaml").exit_code == 2


def test_warnings_alone_exit_0_unless_strict(check):
    assert check(CHECK_FIXTURES / "arm-zero-weight.yaml").exit_code == 0
    assert check(CHECK_FIXTURES / "arm-zero-weight.yaml", "--strict").exit_code == 1


def test_ignore_turns_a_warning_rule_off_for_the_run(check):
    got = check(CHECK_FIXTURES / "arm-zero-weight.yaml", "--ignore", "arm-zero-weight", "--strict", "--format", "json")
    assert got.exit_code == 0 and json.loads(got.stdout)["findings"] == []


def test_sdk_errors_cannot_be_ignored(check):
    got = check(CHECK_FIXTURES / "traffic-overlap.yaml", "--ignore", "traffic-overlap")
    assert got.exit_code == 2
    assert "cannot be turned off" in got.stderr and len(got.stderr.strip().splitlines()) == 1


def test_unknown_rule_in_ignore_is_refused(check):
    got = check(CHECK_FIXTURES / "clean.yaml", "--ignore", "no-such-rule")
    assert got.exit_code == 2 and "unknown rule" in got.stderr


def test_waivers_in_the_yaml_turn_rules_off_per_experiment_with_the_reason_on_record(check):
    got = check(CHECK_FIXTURES / "waived.yaml", "--today", "2026-12-01", "--format", "json", "--strict")
    data = json.loads(got.stdout)
    assert got.exit_code == 0 and data["findings"] == []
    assert {(w["rule"], w["reason"]) for w in data["waived"]} == {
        ("arm-zero-weight", "arm kept for the ramp that starts next month"),
        ("window-not-started", "launch is scheduled for the holidays"),
    }


def test_a_waiver_does_not_silence_an_sdk_error(check):
    got = check(CHECK_FIXTURES / "waiver-not-allowed.yaml", "--format", "json")
    rules = {f["rule"] for f in json.loads(got.stdout)["findings"]}
    assert got.exit_code == 1 and {"traffic-overlap", "waiver-not-allowed"} <= rules


def test_weekly_units_on_the_command_line_override_the_config(check):
    args = ("--today", "2026-11-15", "--format", "json")
    assert json.loads(check(CHECK_FIXTURES / "clean.yaml", *args).stdout)["findings"] == []
    got = check(CHECK_FIXTURES / "clean.yaml", *args, "--weekly-units", "learner=3000")
    rules = [f["rule"] for f in json.loads(got.stdout)["findings"]]
    # 3,000 x 98.5 % x 50 % buckets x 50 % arm = 739 < 1,000: both arms of welcome-tour (by hand);
    # tour-colour: 3,000 x 98.5 % x 10 % x 60 % = 177 and x 40 % = 118: both arms.
    assert rules == ["arm-underpowered"] * 4


def test_bad_weekly_units_is_a_one_line_error(check):
    got = check(CHECK_FIXTURES / "clean.yaml", "--weekly-units", "learner")
    assert got.exit_code == 2 and "UNIT_TYPE=COUNT" in got.stderr


def test_stdin_is_read_with_dash(check):
    text = (CHECK_FIXTURES / "traffic-overlap.yaml").read_text()
    got = check("-", "--format", "json", input=text)
    (finding,) = json.loads(got.stdout)["findings"]
    assert got.exit_code == 1 and (finding["file"], finding["rule"]) == ("<stdin>", "traffic-overlap")


def test_paths_are_merged_into_one_config_unless_separate(check, tmp_path):
    for name in ("a", "b"):
        (tmp_path / f"{name}.yaml").write_text(
            f"# Invented.\nformat: 1\nlayers:\n  - name: layer-{name}\n    unit: learner\n    salt: same\n"
            "    experiments:\n      - name: e\n        status: draft\n        buckets: [\"0-99\"]\n"
            f"        salt: exp-{name}\n        arms: [{{name: a, weight: 100}}]\n")
    merged = check(tmp_path / "a.yaml", tmp_path / "b.yaml", "--format", "json")
    assert merged.exit_code == 1
    assert [f["rule"] for f in json.loads(merged.stdout)["findings"]] == ["salt-reused"]
    assert check(tmp_path / "a.yaml", tmp_path / "b.yaml", "--separate").exit_code == 0


def test_text_lines_name_file_line_column_and_rule(check):
    got = check(CHECK_FIXTURES / "weights-total.yaml")
    first = got.stdout.splitlines()[0]
    assert first.startswith(f"{CHECK_FIXTURES / 'weights-total.yaml'}:10:9: error weights-total")
    assert got.stdout.splitlines()[-1] == "1 error(s), 0 warning(s) in 1 file(s)"


def test_rules_lists_every_rule_and_whether_it_can_be_off(check):
    got = check("--rules")
    assert got.exit_code == 0
    assert any(line.split()[:2] == ["traffic-overlap", "no"] for line in got.stdout.splitlines())
    assert any(line.split()[:2] == ["window-ended", "yes"] for line in got.stdout.splitlines())


def test_no_path_is_a_one_line_error(check):
    got = check()
    assert got.exit_code == 2 and "sortition:" in got.stderr


def test_installed_command_runs_as_ci_would(tmp_path):
    # The real console script, as a pre-commit hook or CI job calls it.
    done = subprocess.run([str(SORTITION), "check", str(EXAMPLE), "--format", "json"], capture_output=True, text=True)
    assert done.returncode == 0 and json.loads(done.stdout)["summary"]["errors"] == 0
    bad = subprocess.run([str(SORTITION), "check", str(CHECK_FIXTURES / "yaml-syntax.yaml")], capture_output=True, text=True)
    assert bad.returncode == 2 and "Traceback" not in bad.stderr


def test_pre_commit_hooks_file_names_the_check_command():
    import yaml

    hooks = yaml.safe_load((ROOT / ".pre-commit-hooks.yaml").read_text())
    by_id = {hook["id"]: hook for hook in hooks}
    # pre-commit's manifest format (pre-commit.com, "Creating new hooks"): id, name, entry, language required.
    for hook in hooks:
        assert {"id", "name", "entry", "language"} <= set(hook)
        # pre-commit installs the hook's repository with `pip install .` plus these, from the clone (from memory):
        # the command line needs the audit extra.
        assert hook["additional_dependencies"] == [".[audit]"]
    assert by_id["sortition-check"]["entry"].split()[:2] == ["sortition", "check"]
