"""Hostile configs: the loader raises ConfigError naming a place, and nothing else, whatever it is given.

A service's reload loop catches ConfigError; any other exception would kill
it. Each case here once raised OverflowError, RecursionError, TypeError or
a ValueError naming no file, or read without bound. All configs are invented.
"""

from __future__ import annotations

import io
import os
import subprocess
import sys
import threading
import unicodedata
from pathlib import Path

import pytest

from bucketing import ConfigError, load_config, parse_config

from .conftest import ROOT, SMALL

# The shared small config, with the fields these cases attack added: eligibility and weekly_units.
BASE = SMALL.replace("layers:", "weekly_units: {learner: 1000}\nlayers:", 1).replace(
    '["0-4999"]\n', '["0-4999"]\n        eligible: {app_version: ">=7.2"}\n', 1)
CAP = 5 * 1024 * 1024  # the documented input cap (DESIGN "Reading YAML")


def refusal(text: str, name: str = "h.yaml") -> list:
    """The located errors a hostile text gets; fails the test on any other outcome."""
    with pytest.raises(ConfigError) as caught:
        load_config(name, text=text)
    errors = caught.value.problems
    assert errors and all(p.file == name and p.line >= 1 and p.column >= 1 for p in errors)
    return errors


def test_the_base_config_loads():
    assert load_config("h.yaml", text=BASE).layers[0].name == "flow"


@pytest.mark.parametrize("old, new, loc_tail", [
    ("weight: 50,", "weight: 1.0e+308,", ("arms", 0, "weight")),
    ("weight: 50,", "weight: 1.0e+400,", ("arms", 0, "weight")),
    ("weight: 50,", "weight: -1.0e+308,", ("arms", 0, "weight")),
    ("weight: 50,", "weight: .inf,", ("arms", 0, "weight")),
    ("weight: 50,", "weight: .nan,", ("arms", 0, "weight")),
    ("weight: 50,", "weight: " + "9" * 5000 + ",", ("arms", 0, "weight")),
    ("percent: 10", "percent: 1e-300", ("holdout", 0, "percent")),
    ("percent: 10", "percent: 1.0e-300", ("holdout", 0, "percent")),
    ("percent: 10", "percent: 0.001", ("holdout", 0, "percent")),
    ("percent: 10", "percent: .inf", ("holdout", 0, "percent")),
    ("{learner: 1000}", "{learner: " + "9" * 5000 + "}", ("weekly_units", "learner")),
    ("{learner: 1000}", "{learner: 99999999999999999999}", ("weekly_units", "learner")),
    ("params: {size: 1}", "params: {size: " + "9" * 5000 + "}", ("params", "size")),
    ("params: {size: 1}", "params: {size: 0x" + "f" * 5000 + "}", ("params", "size")),
    ("params: {size: 1}", "params: {size: !!binary aGVsbG8=}", ("params", "size")),
    ('"0-4999"', '"0-' + "9" * 5000 + '"', ("buckets", 0)),
    ('"0-4999"', '"' + "1" * 5000 + '"', ("buckets", 0)),
    ('">=7.2"', '">=7.' + "1" * 5000 + '"', ("eligible", "app_version")),
    ('">=7.2"', '">=' + ".".join(["1"] * 3000) + '"', ("eligible", "app_version")),
    ('["0-4999"]\n', '["0-4999"]\n        start: 20261103\n', ("start",)),
    ('["0-4999"]\n', '["0-4999"]\n        start: 2026-W45-2\n', ("start",)),
    ('["0-4999"]\n', '["0-4999"]\n        start: 2026-02-30\n', ("start",)),
    ('["0-4999"]\n', '["0-4999"]\n        start: ２０２６-１１-０３\n', ("start",)),
    ("format: 1", "format: true", ("format",)),
    ("format: 1", "format: 01", ("format",)),
    ("format: 1", "format: 1.0", ("format",)),
    ("format: 1", 'format: "1"', ("format",)),
])
def test_hostile_values_are_refused_at_their_field(old, new, loc_tail):
    errors = refusal(BASE.replace(old, new, 1))
    assert errors[0].loc[-len(loc_tail):] == loc_tail, errors
    assert len(str(errors[0])) < 400  # a 5,000-digit value is cut in the message


NON_ASCII_DIGITS = [chr(c) for c in range(sys.maxunicode) if unicodedata.category(chr(c)) == "Nd" and c > 127]


@pytest.mark.parametrize("digit", NON_ASCII_DIGITS[::7], ids=lambda d: f"U+{ord(d):04X}")
def test_non_ascii_digits_in_a_range_are_refused(digit):
    (error,) = refusal(BASE.replace('"0-4999"', f'"0-{digit * 3}"'))
    assert error.loc == ("layers", 0, "experiments", 0, "buckets", 0)


@pytest.mark.parametrize("digit", NON_ASCII_DIGITS[::11], ids=lambda d: f"U+{ord(d):04X}")
def test_non_ascii_digits_in_a_version_are_refused(digit):
    (error,) = refusal(BASE.replace('">=7.2"', f'">=7.{digit}"'))
    assert (error.rule, error.loc[-1]) == ("condition-syntax", "app_version")


@pytest.mark.parametrize("text, rule", [
    ("format: 1\nlayers: &x [*x]\n", "yaml-syntax"),
    ("format: 1\nlayers: &x [{name: a, unit: u, experiments: *x}]\n", "yaml-syntax"),
    ("format: 1\nx: &x {<<: *x}\n", "yaml-syntax"),
    ("format: 1\nx: &x {a: {<<: *x}}\n", "yaml-syntax"),
    ("format: 1\nlayers: " + "[" * 500 + "]" * 500 + "\n", "yaml-limits"),
    ("format: 1\nlayers: " + "[" * 5000 + "]" * 5000 + "\n", "yaml-syntax"),
    ("format: 1\nx: " + "{a: " * 500 + "1" + "}" * 500 + "\n", "yaml-limits"),
    ("format: 1\n" + "".join(" " * i + "a:\n" for i in range(1, 1500)), "yaml-syntax"),
    ("format: 1\na: &a [1,1,1,1,1,1,1,1,1,1]\nb: &b [*a,*a,*a,*a,*a,*a,*a,*a,*a,*a]\nc: &c [*b,*b,*b,*b,*b,*b,*b,*b,*b,*b]\n"
     "d: &d [*c,*c,*c,*c,*c,*c,*c,*c,*c,*c]\ne: &e [*d,*d,*d,*d,*d,*d,*d,*d,*d,*d]\nf: [*e,*e,*e,*e,*e,*e,*e,*e,*e,*e]\n",
     "yaml-limits"),
    ("format: 1\nlayers: !!python/object/apply:os.system ['true']\n", "yaml-syntax"),
    ("format: 1\n? [a, b]\n: c\n", "schema"),
    ("format: 1\n!!binary aGVsbG8=: c\n", "schema"),
    ("format: 1\n--- \nformat: 1\n", "yaml-syntax"),
    # Found by the long fuzz run: a file that fails validation with layers or holdouts of the wrong shape.
    ("format: 1\nholdout: x\nlayers: [1, {name: a}]\n", "schema"),
    ("format: 1\nholdout: [7]\nlayers: {a: 1}\nweekly_units: [1]\n", "schema"),
])
def test_recursion_depth_and_shape_attacks_are_refused(text, rule):
    errors = refusal(text)
    assert errors[0].rule == rule, errors


def test_a_file_over_the_cap_is_refused_without_parsing(tmp_path):
    big = tmp_path / "big.yaml"
    big.write_bytes(b"format: 1\n" + b"#" * CAP)
    (error,) = parse_config(big)[1]
    assert error.rule == "yaml-limits"


def test_dev_zero_is_not_a_regular_file():
    (error,) = parse_config("/dev/zero")[1]
    assert (error.rule, error.file) == ("file-unreadable", "/dev/zero") and "regular file" in error.message


def _finishes(work, seconds: float = 20) -> list:
    """Run `work` in a thread; the test fails (rather than hangs) when it blocks."""
    result: list = []
    thread = threading.Thread(target=lambda: result.append(work()), daemon=True)
    thread.start()
    thread.join(seconds)
    assert result, "blocked"
    return result


def test_a_fifo_is_refused_without_blocking_even_with_no_writer(tmp_path):
    fifo = tmp_path / "config.yaml"
    os.mkfifo(fifo)
    ((config, problems),) = _finishes(lambda: parse_config(fifo))
    assert config is None and [(p.rule, p.file) for p in problems] == [("file-unreadable", str(fifo))]
    # In a folder, the FIFO is reported too, not silently skipped, and the other files still load their findings.
    (tmp_path / "good.yaml").write_text(BASE)
    ((config, problems),) = _finishes(lambda: parse_config(tmp_path))
    assert config is None and [p.file for p in problems] == [str(fifo)]


class EndlessStream(io.RawIOBase):
    """A stream that never ends, counting what is read from it (stands in for `yes | sortition check -`)."""

    def __init__(self) -> None:
        self.consumed = 0

    def readable(self) -> bool:
        return True

    def readinto(self, buffer) -> int:
        buffer[:] = b"#" * len(buffer)
        self.consumed += len(buffer)
        return len(buffer)


def test_a_stream_is_read_no_further_than_the_cap():
    stream = EndlessStream()
    config, problems = parse_config("<stdin>", text=io.BufferedReader(stream))
    assert config is None and [p.rule for p in problems] == ["yaml-limits"]
    assert stream.consumed <= CAP + io.DEFAULT_BUFFER_SIZE


def test_a_stream_that_is_not_utf8_is_located():
    config, problems = parse_config("<stdin>", text=io.BytesIO(b"format: 1\nlayers: []\n# caf\xe9\n"))
    assert [(p.rule, p.line, p.column) for p in problems] == [("file-unreadable", 3, 6)]


def test_check_reads_stdin_from_dev_zero_to_the_cap_and_stops():
    with open("/dev/zero", "rb") as zeros:
        done = subprocess.run([sys.executable, "-m", "audit", "check", "-", "--format", "json"], stdin=zeros,
                              capture_output=True, text=True, timeout=120, cwd=ROOT)
    assert done.returncode == 2 and "yaml-limits" in done.stdout, done.stdout[-500:] + done.stderr[-500:]


def test_an_error_in_one_file_hides_nothing_in_the_others(tmp_path):
    (tmp_path / "a.yaml").write_text(BASE.replace("status: running", "statu: running"))
    overlap = """\
format: 1
layers:
  - name: other
    unit: learner
    experiments:
      - {name: one, status: running, buckets: ["0-5999"], arms: [{name: a, weight: 100}]}
      - {name: two, status: running, buckets: ["4000-9999"], arms: [{name: a, weight: 100}]}
"""
    (tmp_path / "b.yaml").write_text(overlap)
    config, problems = parse_config(tmp_path)
    assert config is None
    found = {(Path(p.file).name, p.rule) for p in problems}
    assert found == {("a.yaml", "schema"), ("b.yaml", "traffic-overlap")}
    assert any("unknown key 'statu' (did you mean 'status'?)" in p.message for p in problems)


def test_a_typo_in_one_layer_hides_nothing_in_another_layer_of_the_same_file():
    second = """\
  - name: other
    unit: learner
    experiments:
      - {name: one, status: running, buckets: ["0-5999"], arms: [{name: a, weight: 100}]}
      - {name: two, status: running, buckets: ["4000-9999"], arms: [{name: a, weight: 100}]}
"""
    text = BASE.replace("status: paused", "stauts: paused") + second
    config, problems = parse_config("one.yaml", text=text)
    assert config is None
    assert {(p.rule, p.loc[:2]) for p in problems if p.severity == "error"} >= {
        ("schema", ("layers", 0)), ("traffic-overlap", ("layers", 1))}
    overlap = next(p for p in problems if p.rule == "traffic-overlap")
    assert overlap.line == text.splitlines().index('      - {name: two, status: running, buckets: ["4000-9999"], '
                                                   'arms: [{name: a, weight: 100}]}') + 1


@pytest.mark.parametrize("old, new, suggestion", [
    ("        eligible:", "        eligble:", "eligible"),
    ("    unit: learner\n    experiments", "    unit: learner\n    experiment", "experiments"),
    ("status: running", "status: runing", "running"),
    ("status: running", "status: pasued", "paused"),
    ("weekly_units", "weekly_unit", "weekly_units"),
    ("percent: 10", "precent: 10", "percent"),
])
def test_unknown_keys_and_statuses_suggest_the_nearest_valid_one(old, new, suggestion):
    errors = refusal(BASE.replace(old, new, 1))
    assert any(f"did you mean {suggestion!r}?" in e.message for e in errors), errors
