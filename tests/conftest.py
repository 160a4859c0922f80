"""Shared fixtures: repository paths, one in-process `sortition` runner, the demo's audited logs (all invented)."""

import shutil
import subprocess
from pathlib import Path

import pytest
from typer.testing import CliRunner

from audit import audit_logs
from audit.cli import app
from audit.demo import write_demo_logs

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "configs_example"
CHECK_FIXTURES = ROOT / "tests" / "fixtures" / "check"
DEMO_SEGMENTS = ["country", "platform", "app_version"]

# Invented config used by several SDK tests: one layer, two experiments, a holdout.
SMALL = """\
format: 1
holdout:
  - unit: learner
    salt: small-holdout
    percent: 10
layers:
  - name: flow
    unit: learner
    experiments:
      - name: alpha
        status: running
        buckets: ["0-4999"]
        arms:
          - {name: control, weight: 50, params: {size: 1}}
          - {name: big, weight: 50, params: {size: 2}}
        overrides: {qa-1: big}
      - name: beta
        status: paused
        buckets: ["5000-9999"]
        arms:
          - {name: control, weight: 100, params: {size: 1}}
"""

_RUNNER = CliRunner()


@pytest.fixture
def example_dir() -> Path:
    return EXAMPLE


@pytest.fixture
def small_yaml() -> str:
    return SMALL


@pytest.fixture
def sortition():
    """Run `sortition ARGS...` in-process (arguments may be paths): the Click result, stdout and stderr apart."""

    def invoke(*args, input=None):
        return _RUNNER.invoke(app, [str(a) for a in args], input=input)

    return invoke


@pytest.fixture(scope="session")
def demo(tmp_path_factory):
    """Demo logs with the fault, and their audit: built once per run (generating them takes a few seconds)."""
    logs = write_demo_logs(EXAMPLE, tmp_path_factory.mktemp("demo-logs"), learners=40_000, devices=8_000)
    result = audit_logs(logs.directory, config=EXAMPLE, segments=DEMO_SEGMENTS, replay_units=20_000)
    return logs, result


def git(repo: Path, *args: str) -> None:
    """Run git in `repo` with a throwaway identity."""
    subprocess.run(["git", "-C", str(repo), "-c", "user.name=Test", "-c", "user.email=test@invalid", *args],
                   check=True, capture_output=True)


@pytest.fixture
def repo(tmp_path):
    """A git repository whose one commit holds the invented example configs under configs/."""
    shutil.copytree(EXAMPLE, tmp_path / "configs")
    git(tmp_path, "init", "-q")
    git(tmp_path, "add", ".")
    git(tmp_path, "commit", "-qm", "invented configs")
    return tmp_path
