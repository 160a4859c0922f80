"""Shared fixtures: paths of the demo configs and a small inline config (invented)."""

from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "configs_example"

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


@pytest.fixture
def example_dir() -> Path:
    return EXAMPLE


@pytest.fixture
def small_yaml() -> str:
    return SMALL
