"""`sortition assign` through the real command line, on the demo configs and invented units."""

import csv
import io
import json
import subprocess
import sys
from pathlib import Path

from bucketing import Assigner

SORTITION = [str(Path(sys.executable).with_name("sortition"))]


def run(*args: str, stdin: str | None = None) -> subprocess.CompletedProcess:
    return subprocess.run(SORTITION + list(args), input=stdin, capture_output=True, text=True, timeout=60)


def test_one_unit_json_is_the_contract_shape(example_dir):
    out = run("assign", str(example_dir), "--unit", "qa-learner-1", "--unit-type", "learner", "--format", "json",
              "--attr", "country=NL", "--attr", "app_version=7.4")
    assert out.returncode == 0, out.stderr
    data = json.loads(out.stdout)
    assert set(data) == {"unit", "holdout", "layers", "params"}
    assert data["unit"] == "qa-learner-1" and data["holdout"] is False
    assert data["layers"]["lesson-flow"] == {
        "experiment": "shorter-lessons", "arm": "short", "bucket": data["layers"]["lesson-flow"]["bucket"], "forced": True}
    expected = Assigner(example_dir).assign({"learner": "qa-learner-1"}, {"country": "NL", "app_version": "7.4"})
    assert data == expected.to_dict()


def test_layer_without_experiment_has_null(example_dir):
    out = run("assign", str(example_dir), "--unit", "L-1042", "--unit-type", "learner", "--format", "json")
    layers = json.loads(out.stdout)["layers"]
    assert layers["paywall"]["experiment"] is None and layers["paywall"]["arm"] is None


def test_units_file_csv_with_attributes_gives_json_lines(example_dir, tmp_path):
    units = tmp_path / "units.csv"
    units.write_text("unit,country,app_version\nL-1,NL,7.4\nL-2,US,7.1\nЛ-3,DE,7.2\n", encoding="utf-8")
    out = run("assign", str(example_dir), "--units", str(units), "--unit-type", "learner", "--format", "json")
    assert out.returncode == 0, out.stderr
    lines = [json.loads(line) for line in out.stdout.splitlines()]
    assert [d["unit"] for d in lines] == ["L-1", "L-2", "Л-3"]
    assigner = Assigner(example_dir)
    assert lines[2] == assigner.assign({"learner": "Л-3"}, {"country": "DE", "app_version": "7.2"}).to_dict()


def test_plain_id_list_from_stdin_as_csv(example_dir):
    out = run("assign", str(example_dir), "--units", "-", "--unit-type", "device", "--format", "csv",
              "--attr", "platform=ios", stdin="D-1\nD-2\n\nD-3\n")
    rows = list(csv.DictReader(io.StringIO(out.stdout)))
    assert [r["unit"] for r in rows] == ["D-1", "D-2", "D-3"]
    assert all(r["notifications:experiment"] in ("evening-nudge", "") for r in rows)


def test_errors_are_one_line_with_exit_2(example_dir, tmp_path):
    bad = tmp_path / "bad.yaml"
    bad.write_text("format: 1\nlayers:\n  - name: x\n    unit: u\n    colour: red\n")
    for args, needle in [
        (("assign", str(bad), "--unit", "a"), "bad.yaml:5:5: layers[0].colour: unknown key 'colour'"),
        (("assign", str(example_dir), "--unit", "a"), "pick one with --unit-type"),
        (("assign", str(example_dir), "--unit", "a", "--unit-type", "robot"), "no layer"),
        (("assign", str(tmp_path / "none.yaml"), "--unit", "a"), "no such file"),
        (("assign", str(example_dir), "--unit-type", "learner"), "exactly one of"),
        (("assign", str(example_dir), "--unit", "a", "--unit-type", "learner", "--attr", "novalue"), "--attr takes KEY=VALUE"),
    ]:
        out = run(*args)
        assert out.returncode == 2, (args, out.stderr)
        assert needle in out.stderr, (needle, out.stderr)
        assert "Traceback" not in out.stderr and out.stdout == ""


def test_units_csv_with_byte_order_mark_and_crlf(example_dir, tmp_path):
    units = tmp_path / "units.csv"
    units.write_bytes("\ufeffunit,country\r\nL-1,NL\r\n".encode("utf-8"))
    out = run("assign", str(example_dir), "--units", str(units), "--unit-type", "learner", "--format", "json")
    assert out.returncode == 0, out.stderr
    assert json.loads(out.stdout)["unit"] == "L-1"


def test_units_csv_row_with_wrong_column_count_names_the_line(example_dir, tmp_path):
    units = tmp_path / "units.csv"
    units.write_text("unit,country\nL-1,NL\nL-2,NL,extra\n")
    out = run("assign", str(example_dir), "--units", str(units), "--unit-type", "learner", "--format", "json")
    assert out.returncode == 2
    assert f"{units}:3: expected 2 columns (unit,country), found 3" in out.stderr
