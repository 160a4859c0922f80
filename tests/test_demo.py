"""`sortition demo` runs the whole story and the audit finds the planted fault."""

import subprocess
import sys

from tests.conftest import ROOT


def test_demo_runs_every_step_and_finds_the_planted_fault(tmp_path):
    done = subprocess.run([sys.executable, "-m", "audit", "demo", "--out", str(tmp_path)],
                          cwd=ROOT, capture_output=True, text=True, timeout=600)
    assert done.returncode == 0, done.stdout[-3000:] + done.stderr[-2000:]
    assert "UNEXPECTED" not in done.stdout and "Traceback" not in done.stdout + done.stderr
    assert "lessons.yaml:27:9: error traffic-overlap" in done.stdout
    assert "reassign-running" in done.stdout
    assert "Found by the audit: yes" in done.stdout
    report = tmp_path / "srm-report.html"
    assert report.stat().st_size > 10_000 and "<script src=" not in report.read_text(encoding="utf-8")


def test_demo_outside_the_repository_says_where_to_run_it(tmp_path):
    done = subprocess.run([sys.executable, "-m", "audit", "demo", "--out", str(tmp_path / "o")],
                          cwd=tmp_path, capture_output=True, text=True, timeout=60)
    assert done.returncode == 2 and "run the demo from the repository top" in done.stderr
