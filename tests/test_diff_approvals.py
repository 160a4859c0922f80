"""Approvals (`reassign_ok`) cover only the change that adds or changes them, across successive commits.

Each test plays a short history in a real git repository of the invented
example configs, committing each change and diffing the next one against
`--base HEAD`, as CI does on a pull request.
"""

import json
from pathlib import Path

import pytest

from audit import diff_configs
from bucketing import load_config
from tests.conftest import EXAMPLE, git


def _set_weights(repo: Path, new_engine: float) -> None:
    """Give the audio rollout's arms new-engine/old-engine the weights new_engine/100 - new_engine."""
    path = repo / "configs" / "audio.yaml"
    text = path.read_text()
    current = next(int(line.split(":")[1]) for line in text.splitlines() if line.strip().startswith("weight:"))
    text = text.replace(f"weight: {current}\n", f"weight: {new_engine:g}\n", 1)
    text = text.replace(f"weight: {100 - current}\n", f"weight: {100 - new_engine:g}\n", 1)
    path.write_text(text)


def _audio(repo: Path, new_engine: float, approval: str | None) -> None:
    """Set the audio rollout's weights and its approval line (None: no approval)."""
    _set_weights(repo, new_engine)
    path = repo / "configs" / "audio.yaml"
    text = "".join(line for line in path.read_text().splitlines(keepends=True) if "reassign_ok" not in line)
    if approval is not None:
        text = text.replace("owner: platform-team\n", f"owner: platform-team\n        reassign_ok: {approval}\n", 1)
    path.write_text(text)


def _diff(sortition, repo: Path) -> tuple[int, dict]:
    got = sortition("diff", repo / "configs", "--base", "HEAD", "--format", "json")
    return got.exit_code, json.loads(got.stdout)


def _row(report: dict, name: str = "new-audio-engine") -> dict:
    (row,) = [e for e in report["experiments"] if e["experiment"] == name]
    return row


def _rules(report: dict) -> list[str]:
    return [f["rule"] for f in report["findings"]]


def test_an_approval_passes_its_own_change_and_blocks_the_next_one(sortition, repo):
    _audio(repo, 25, '"ramp 20 -> 25 %, agreed in review"')
    code, report = _diff(sortition, repo)
    assert code == 0 and _row(report)["verdict"] == "accepted"
    assert _row(report)["approval"] == {"why": "ramp 20 -> 25 %, agreed in review", "moves_up_to": None,
                                        "state": "new"}
    git(repo, "commit", "-qam", "ramp to 25 %")

    _set_weights(repo, 5)  # a ramp-down, with the approval left as it was
    code, report = _diff(sortition, repo)
    row = _row(report)
    assert code == 1 and row["verdict"] == "blocked" and row["approval"]["state"] == "stale"
    assert _rules(report) == ["reassign-running", "reassign-stale"]
    stale = report["findings"][1]
    assert stale["severity"] == "warning" and stale["path"].endswith("reassign_ok")


def test_a_salt_change_under_an_unchanged_approval_is_blocked(sortition, repo):
    _audio(repo, 25, '"ramp 20 -> 25 %"')
    git(repo, "commit", "-qam", "ramp to 25 % with an approval")
    path = repo / "configs" / "audio.yaml"
    path.write_text(path.read_text().replace("owner: platform-team\n",
                                             "owner: platform-team\n        salt: audio-redraw\n", 1))
    code, report = _diff(sortition, repo)
    row = _row(report)
    assert code == 1 and row["verdict"] == "blocked" and "salt change" in row["causes"]
    # Old and new arm buckets are independent hashes: 25 % x 75 % + 75 % x 25 % switch (docs/SPEC.md §6.4).
    assert row["switched_share"] == pytest.approx(0.375)


def test_changing_the_approval_text_approves_the_next_change(sortition, repo):
    _audio(repo, 25, '"ramp 20 -> 25 %"')
    git(repo, "commit", "-qam", "ramp to 25 %")
    _audio(repo, 5, '"ramp-down 25 -> 5 % after the crash report"')
    code, report = _diff(sortition, repo)
    assert code == 0 and _row(report)["verdict"] == "accepted"
    assert _row(report)["approval"]["state"] == "changed" and "reassign-stale" not in _rules(report)


def test_an_unchanged_approval_on_an_unmoved_experiment_is_reported_stale_but_does_not_fail(sortition, repo):
    _audio(repo, 25, '"ramp 20 -> 25 %"')
    git(repo, "commit", "-qam", "ramp to 25 %")
    lessons = repo / "configs" / "lessons.yaml"
    lessons.write_text(lessons.read_text().replace('["4000-5999"]', '["4000-6999"]'))  # widening moves nobody
    code, report = _diff(sortition, repo)
    assert code == 0 and _rules(report) == ["reassign-stale"]
    assert _row(report)["verdict"] == "ok" and _row(report)["approval"]["state"] == "stale"
    text = sortition("diff", repo / "configs", "--base", "HEAD").stdout
    assert "STALE" in text and "warning reassign-stale" in text


@pytest.mark.parametrize("limit, verdict, code", [(10, "blocked", 1), (20, "accepted", 0), (25, "accepted", 0)])
def test_the_object_form_approves_at_most_the_share_it_names(sortition, repo, limit, verdict, code):
    # 20 -> 40 % with the growing arm first moves 20 of the old-engine's 80 points: 20 % of the experiment's units.
    _audio(repo, 40, f'{{why: "ramp to 40 %", moves_up_to: {limit}}}')
    got, report = _diff(sortition, repo)
    row = _row(report)
    assert got == code and row["verdict"] == verdict and row["switched_share"] == pytest.approx(0.2)
    assert row["approval"] == {"why": "ramp to 40 %", "moves_up_to": limit, "state": "new"}
    if verdict == "blocked":
        assert "at most 10.00 %" in report["findings"][0]["message"]


def test_an_unchanged_approval_no_longer_silences_an_eligibility_change(tmp_path):
    base = (EXAMPLE / "notifications.yaml").read_text().replace(
        "    experiments:\n      - name: evening-nudge\n",
        "    experiments:\n      - name: evening-nudge\n        reassign_ok: \"first launch\"\n", 1)
    assert "first launch" in base
    (tmp_path / "old.yaml").write_text(base)
    (tmp_path / "new.yaml").write_text(base.replace("platform: [ios, android]", "platform: [ios]"))
    (tmp_path / "approved.yaml").write_text(base.replace("platform: [ios, android]", "platform: [ios]")
                                            .replace("first launch", "iOS only from now on"))
    old = load_config(tmp_path / "old.yaml")
    (stale,) = diff_configs(old, load_config(tmp_path / "new.yaml")).changes
    assert stale.verdict == "warn" and [f.rule for f in stale.findings] == ["share-unknown", "reassign-stale"]
    (fresh,) = diff_configs(old, load_config(tmp_path / "approved.yaml")).changes
    assert fresh.verdict == "ok" and fresh.findings == ()


def test_the_approval_schema_accepts_text_and_the_object_form_only(tmp_path):
    from bucketing import parse_config

    base = (EXAMPLE / "audio.yaml").read_text()
    for value, ok in [('"why"', True), ('{why: "ramp", moves_up_to: 12.5}', True), ("{why: ramp}", False),
                      ("{why: ramp, moves_up_to: 0}", False), ("{why: ramp, moves_up_to: 101}", False),
                      ("{why: ramp, moves_up_to: 5, who: me}", False)]:
        path = tmp_path / "audio.yaml"
        path.write_text(base.replace("owner: platform-team\n", f"owner: platform-team\n        reassign_ok: {value}\n"))
        config, problems = parse_config([path])
        assert (config is not None and not [p for p in problems if p.severity == "error"]) == ok, (value, problems)
