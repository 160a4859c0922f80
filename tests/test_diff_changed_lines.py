"""Findings of `diff` point at the lines that changed, so a pull request shows them where the edit is."""

import json
import shutil

import pytest

from tests.conftest import EXAMPLE


@pytest.fixture
def configs(tmp_path):
    shutil.copytree(EXAMPLE, tmp_path / "old")
    shutil.copytree(EXAMPLE, tmp_path / "new")
    return tmp_path / "old", tmp_path / "new"


def _edit(path, old, new):
    text = path.read_text()
    assert old in text
    path.write_text(text.replace(old, new, 1))


AUDIO_ARMS = """          - name: new-engine
            weight: 20
            params: {audio_engine: v2}
          - name: old-engine
            weight: 80
            params: {audio_engine: v1}"""
AUDIO_REORDERED = "\n".join(AUDIO_ARMS.splitlines()[3:] + AUDIO_ARMS.splitlines()[:3])  # old-engine first


@pytest.mark.parametrize("file, old, new, experiment, first_line, related_lines", [
    ("lessons.yaml", '["4000-5999"]', '["4000-4999"]', "review-first",
     'buckets: ["4000-4999"]', ['buckets: ["4000-4999"]']),
    ("audio.yaml", AUDIO_ARMS, AUDIO_REORDERED, "new-audio-engine",
     "- name: old-engine", ["- name: old-engine", "- name: new-engine"]),
    ("lessons.yaml", "salt: lesson-flow-v1", "salt: lesson-flow-v2", "shorter-lessons",
     "salt: lesson-flow-v2", ["salt: lesson-flow-v2"]),
    ("holdout.yaml", "percent: 2", "percent: 4", "trial-length", "percent: 4", ["percent: 4"]),
])
def test_reassign_running_is_placed_on_the_changed_line(sortition, configs, file, old, new, experiment, first_line,
                                                        related_lines):
    _edit(configs[1] / file, old, new)
    got = sortition("diff", configs[0], configs[1], "--format", "json")
    assert got.exit_code == 1
    report = json.loads(got.stdout)
    (finding,) = [f for f in report["findings"] if f["rule"] == "reassign-running" and experiment in f["message"]]
    text_of = {}
    for place in [finding, *finding["related"]]:
        text_of[(place["file"], place["line"])] = open(place["file"]).read().splitlines()[place["line"] - 1].strip()
    assert finding["file"].endswith(file) and text_of[(finding["file"], finding["line"])] == first_line
    assert [text_of[(p["file"], p["line"])] for p in finding["related"]] == related_lines
    (row,) = [e for e in report["experiments"] if e["experiment"] == experiment]
    assert [(p["file"], p["line"]) for p in row["changed_lines"]] == [(p["file"], p["line"]) for p in finding["related"]]


def test_an_eligibility_change_is_placed_on_the_eligibility_line(sortition, configs):
    _edit(configs[1] / "notifications.yaml", "platform: [ios, android]", "platform: [ios]")
    report = json.loads(sortition("diff", configs[0], configs[1], "--format", "json").stdout)
    (finding,) = report["findings"]
    assert finding["rule"] == "share-unknown"
    line = (configs[1] / "notifications.yaml").read_text().splitlines()[finding["line"] - 1]
    assert line.strip() == "platform: [ios]"


def test_the_text_lists_the_changed_lines(sortition, configs):
    _edit(configs[1] / "lessons.yaml", "salt: shorter-lessons-1", "salt: shorter-lessons-2")
    text = sortition("diff", configs[0], configs[1]).stdout
    assert "changed " in text and "salt 'shorter-lessons-1' → 'shorter-lessons-2'" in text
