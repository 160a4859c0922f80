"""Each rule of `sortition check` fires on its own invented fixture, at the marked line, and not elsewhere.

A fixture marks each line that must be flagged with a trailing comment
`# <- rule-id` (several ids separated by commas); options for the run come
from a `# check-args:` line. The test runs the real CLI and compares its JSON
with the markers both ways: every marker is found, and nothing unmarked is.
"""

import json
import re
import shlex
from pathlib import Path

import pytest

from audit.checks import meanings
from tests.conftest import CHECK_FIXTURES, EXAMPLE

MARKER = re.compile(r"#\s*<-\s*([a-z0-9-]+(?:\s*,\s*[a-z0-9-]+)*)\s*$")
UNREADABLE = {"file-unreadable", "yaml-syntax", "yaml-limits"}


def _fixture_files(fixture: Path) -> list[Path]:
    return sorted(fixture.rglob("*.yaml")) if fixture.is_dir() else [fixture]


def _expected(fixture: Path) -> tuple[set[tuple[str, int, str]], list[str]]:
    marks, args = set(), []
    for file in _fixture_files(fixture):
        for number, line in enumerate(file.read_text(encoding="utf-8").splitlines(), start=1):
            if line.startswith("# check-args:"):
                args += shlex.split(line.partition(":")[2])
            found = MARKER.search(line)
            if found:
                for rule in found.group(1).split(","):
                    marks.add((str(file), number, rule.strip()))
    return marks, args


def _run(sortition, *args: str):
    return sortition("check", *args, "--format", "json")


FIXTURE_CASES = sorted(p for p in CHECK_FIXTURES.iterdir() if p.name != "clean.yaml" and p.name != "waived.yaml")


@pytest.mark.parametrize("fixture", FIXTURE_CASES, ids=lambda p: p.name)
def test_fixture_findings_match_its_markers(sortition, fixture):
    marks, args = _expected(fixture)
    assert marks, f"{fixture.name} marks no line"
    got = _run(sortition, str(fixture), *args)
    findings = json.loads(got.stdout)["findings"]
    assert {(f["file"], f["line"], f["rule"]) for f in findings} == marks
    rules = {rule for _, _, rule in marks}
    errors = any(f["severity"] == "error" for f in findings)
    assert got.exit_code == (2 if rules & UNREADABLE else 1 if errors else 0)


def test_every_rule_has_a_fixture():
    # Rules that need a file no marker can sit in (bytes that are not UTF-8, a missing file) are tested below.
    covered = {rule for fixture in FIXTURE_CASES for _, _, rule in _expected(fixture)[0]}
    assert set(meanings("sdk", "lint")) - covered == {"file-unreadable"}


def test_clean_fixture_has_no_findings_at_all(sortition):
    got = _run(sortition, str(CHECK_FIXTURES / "clean.yaml"), "--today", "2026-11-15")
    assert got.exit_code == 0
    assert json.loads(got.stdout)["findings"] == []


def test_example_configs_have_no_errors(sortition):
    got = _run(sortition, str(EXAMPLE), "--today", "2026-11-15")
    assert got.exit_code == 0
    assert [f for f in json.loads(got.stdout)["findings"] if f["severity"] == "error"] == []


def test_bytes_that_are_not_utf8_are_unreadable_at_their_line(sortition, tmp_path):
    bad = tmp_path / "latin1.yaml"
    bad.write_bytes("format: 1\n# caf\xe9\n".encode("latin-1"))
    got = _run(sortition, str(bad))
    assert got.exit_code == 2
    (finding,) = json.loads(got.stdout)["findings"]
    assert (finding["rule"], finding["line"], finding["column"]) == ("file-unreadable", 2, 6)
    assert "UTF-8" in finding["message"]


def test_missing_file_is_unreadable(sortition, tmp_path):
    got = _run(sortition, str(tmp_path / "nowhere.yaml"))
    assert got.exit_code == 2
    assert json.loads(got.stdout)["findings"][0]["rule"] == "file-unreadable"


def test_columns_point_at_the_flagged_node(sortition):
    got = _run(sortition, str(CHECK_FIXTURES / "traffic-overlap.yaml"))
    (finding,) = json.loads(got.stdout)["findings"]
    line = (CHECK_FIXTURES / "traffic-overlap.yaml").read_text().splitlines()[finding["line"] - 1]
    assert line[finding["column"] - 1:].startswith("buckets:")
