"""The SDK ships type information (py.typed): its own code must type-check cleanly."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_sdk_type_checks():
    done = subprocess.run([sys.executable, "-m", "mypy", "bucketing", "--ignore-missing-imports",
                           "--no-error-summary", "--cache-dir", "/dev/null"],
                          cwd=ROOT, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stdout + done.stderr
