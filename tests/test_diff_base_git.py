"""`diff --base REF`: a missing base said in plain words, a shallow clone told how to fetch it, crafted trees refused.

All against real git repositories: a shallow clone made with `git clone
--depth=1`, and trees with `..` entries built object by object with
`git hash-object` and `git mktree`, as an attacker would.
"""

import json
import os
import subprocess
import sys
from pathlib import Path

from tests.conftest import git


def _out(repo: Path, *args: str) -> str:
    return subprocess.run(["git", "-C", str(repo), *args], check=True, capture_output=True, text=True).stdout.strip()


def _sortition(*args, cwd: Path, env: dict | None = None) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "audit", *map(str, args)], capture_output=True, text=True, cwd=cwd,
                          env={**os.environ, **(env or {})}, timeout=120)


def test_an_unknown_base_is_said_in_plain_words_with_the_fetch_to_run(sortition, repo):
    got = sortition("diff", repo / "configs", "--base", "nosuchref")
    assert got.exit_code == 2 and len(got.stderr.strip().splitlines()) == 1
    message = got.stderr
    assert "the base 'nosuchref' is not in the git clone" in message
    assert "`git fetch --depth=1 origin nosuchref`" in message
    for raw in ("rev-parse", "fatal:", "^{commit}", "ls-tree"):
        assert raw not in message


def test_a_shallow_clone_is_told_how_to_fetch_the_base_and_the_fetch_works(repo, tmp_path):
    git(repo, "branch", "release")
    clone = tmp_path / "clone"
    subprocess.run(["git", "clone", "-q", "--depth=1", "--single-branch", "--branch", _out(repo, "branch", "--show-current"),
                    f"file://{repo}", str(clone)], check=True, capture_output=True)
    got = _sortition("diff", clone / "configs", "--base", "origin/release", cwd=clone)
    assert got.returncode == 2 and "this clone is shallow" in got.stderr
    fetch = got.stderr.split("`")[1]
    assert fetch == "git fetch --depth=1 origin release:refs/remotes/origin/release"
    subprocess.run(fetch.split(), cwd=clone, check=True, capture_output=True)  # the hint, run as CI would
    again = _sortition("diff", clone / "configs", "--base", "origin/release", cwd=clone)
    assert again.returncode == 0, again.stderr


def test_a_path_outside_git_says_so(sortition, tmp_path):
    (tmp_path / "c.yaml").write_text("# Invented.\nformat: 1\n")
    got = sortition("diff", tmp_path / "c.yaml", "--base", "HEAD")
    assert got.exit_code == 2 and "is not inside a git repository" in got.stderr


def _crafted_commit(repo: Path, ups: int) -> str:
    """A commit whose configs/ tree holds `..` entries `ups` deep, ending in evil.yaml (a valid config)."""
    blob = subprocess.run(["git", "-C", str(repo), "hash-object", "-w", "--stdin"], check=True, capture_output=True,
                          input=b"# Invented.\nformat: 1\nlayers: []\n").stdout.decode().strip()

    def tree(entry: str) -> str:
        return subprocess.run(["git", "-C", str(repo), "mktree"], check=True, capture_output=True,
                              input=entry.encode()).stdout.decode().strip()

    inner = tree(f"100644 blob {blob}\tevil.yaml\n")
    for _ in range(ups):
        inner = tree(f"040000 tree {inner}\t..\n")
    top = tree(f"040000 tree {inner}\tconfigs\n")
    return subprocess.run(["git", "-C", str(repo), "commit-tree", "-m", "crafted", top], check=True,
                          capture_output=True, text=True,
                          env={**os.environ, "GIT_AUTHOR_NAME": "T", "GIT_AUTHOR_EMAIL": "t@invalid",
                               "GIT_COMMITTER_NAME": "T", "GIT_COMMITTER_EMAIL": "t@invalid"}).stdout.strip()


def test_a_crafted_tree_with_dot_dot_entries_writes_nothing_outside_the_scratch_folder(repo, tmp_path):
    scratch_root = tmp_path / "tmp" / "deeper"
    scratch_root.mkdir(parents=True)
    commit = _crafted_commit(repo, ups=4)
    listed = _out(repo, "ls-tree", "-r", "--name-only", commit)
    assert listed == "configs/../../../../evil.yaml"
    # Without the check, the file would land here: <scratch root>/sortition-base-XXXX/configs/../../../../evil.yaml.
    would_land = (scratch_root / "sortition-base-x" / listed).resolve()
    assert would_land == tmp_path / "evil.yaml"
    for fmt in ("text", "sarif"):
        got = _sortition("diff", repo / "configs", "--base", commit, "--format", fmt, cwd=repo,
                         env={"TMPDIR": str(scratch_root)})
        assert got.returncode == 2 and "leads outside the folder" in got.stderr and "refused" in got.stderr
        assert not would_land.exists() and not (tmp_path / "tmp" / "evil.yaml").exists()
    assert list(scratch_root.iterdir()) == []  # the scratch folder itself is gone too
    log = json.loads(got.stdout)
    assert log["runs"][0]["invocations"][0]["executionSuccessful"] is False


def test_a_crafted_tree_that_stays_inside_but_uses_dot_dot_is_refused_too(repo):
    commit = _crafted_commit(repo, ups=1)  # configs/../evil.yaml: inside the scratch folder, still not git-made
    got = _sortition("diff", repo / "configs", "--base", commit, cwd=repo)
    assert got.returncode == 2 and "configs/../evil.yaml" in got.stderr
