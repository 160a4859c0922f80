"""`pip install sortition` is the SDK alone: it assigns units without any of the audit's libraries."""

import json
import subprocess
import sys
import venv

from tests.conftest import ROOT

AUDIT_LIBRARIES = ("typer", "scipy", "numpy", "duckdb")

ASSIGN = """
import importlib.util, json
from bucketing import Assigner
got = Assigner("{config}").assign({{"learner": "L-1042"}}, {{"country": "NL", "app_version": "7.4.0"}})
print(json.dumps({{"layers": sorted(got.layers), "missing": [m for m in {libraries!r}
                   if importlib.util.find_spec(m) is None]}}))
"""


def _pip(*args: str) -> None:
    subprocess.run([sys.executable, "-m", "pip", "-q", *args], check=True, capture_output=True, timeout=600)


def test_plain_install_assigns_without_the_audit_libraries(tmp_path):
    env = tmp_path / "env"
    venv.EnvBuilder(with_pip=False).create(env)
    python = env / "bin" / "python"
    # The wheel of the working tree, built here (the test extra brings the build backend), then installed
    # with its dependencies into the new environment by this environment's pip, from the pip cache.
    _pip("wheel", "--no-deps", "--no-build-isolation", "-w", str(tmp_path / "wheel"), str(ROOT))
    (wheel,) = (tmp_path / "wheel").glob("sortition-*.whl")
    _pip("--python", str(python), "install", str(wheel))
    done = subprocess.run([str(python), "-c", ASSIGN.format(config=ROOT / "configs_example",
                                                             libraries=AUDIT_LIBRARIES)],
                          capture_output=True, text=True, cwd=tmp_path, timeout=120)
    assert done.returncode == 0, done.stderr
    report = json.loads(done.stdout)
    assert "lesson-flow" in report["layers"]
    assert report["missing"] == list(AUDIT_LIBRARIES)
    command = subprocess.run([str(env / "bin" / "sortition"), "check", "configs/"], capture_output=True, text=True,
                             cwd=tmp_path, timeout=120)
    assert command.returncode == 2 and command.stdout == ""
    assert command.stderr.strip().splitlines() == [command.stderr.strip()]
    assert "pip install 'sortition[audit]'" in command.stderr and "Traceback" not in command.stderr
    library = subprocess.run([str(python), "-c", "from audit import audit_logs"], capture_output=True, text=True,
                             cwd=tmp_path, timeout=120)
    assert library.returncode == 1
    assert library.stderr.strip().splitlines()[-1].endswith("is missing): pip install 'sortition[audit]'")
