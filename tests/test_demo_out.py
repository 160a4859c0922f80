"""`sortition demo --out DIR` never deletes or writes into what it did not create under DIR."""

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
SMALL = ["--learners", "1000", "--days", "7"]  # the smallest demo: the run is about the folder, not the audit


def _demo(out: Path) -> subprocess.CompletedProcess:
    return subprocess.run([sys.executable, "-m", "audit", "demo", "--out", str(out), *SMALL], cwd=ROOT,
                          capture_output=True, text=True, timeout=600)


def _snapshot(root: Path) -> dict[str, bytes]:
    return {str(p.relative_to(root)): p.read_bytes() for p in sorted(root.rglob("*")) if p.is_file()}


def test_folders_the_demo_did_not_create_are_left_alone(tmp_path):
    out = tmp_path / "out"
    for name in ("change-overlap", "logs"):  # names the demo writes, made here by someone else
        (out / name).mkdir(parents=True)
        (out / name / "mine.txt").write_text("invented file of a user")
    before = _snapshot(out)
    done = _demo(out)
    assert done.returncode == 2, done.stdout[-2000:]
    assert "was not made by `sortition demo`" in done.stderr and "change-overlap" in done.stderr
    assert _snapshot(out) == before


def test_a_second_run_replaces_its_own_folders_and_keeps_everything_else(tmp_path):
    out = tmp_path / "out"
    out.mkdir()
    (out / "notes").mkdir()
    (out / "notes" / "keep.txt").write_text("invented file of a user")
    first = _demo(out)
    assert first.returncode in (0, 1) and "Traceback" not in first.stderr, first.stderr[-2000:]
    made = {p.name for p in out.iterdir()}
    assert {"change-overlap", "change-reweight", "logs", "notes"} <= made
    second = _demo(out)
    assert second.returncode == first.returncode, second.stderr[-2000:]
    assert (out / "notes" / "keep.txt").read_text() == "invented file of a user"
    assert {p.name for p in out.iterdir()} == made
