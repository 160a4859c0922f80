"""Every JSON field the commands print is described in docs/SPEC.md.

The real `sortition` command runs, as a user runs it, on configs_example/,
on edited copies of it (so that findings, waivers and moving units appear)
and on a small exposure log written by the SDK with planted faults (so
that every part of the SRM report is filled in). Then:

- every top-level field of a command's JSON has a row of its own in that
  command's section of the specification (`| `field` | ...`), and every
  top-level row of the section's first table is a field the command prints;
- every nested field name appears, in backticks, somewhere in that section.

A command that gains a field fails this test until the specification says
what the field means. Objects keyed by data (layer names, arm names,
attribute values) are walked through without asking for their keys.
"""

from __future__ import annotations

import json
import random
import re
import shutil
import subprocess
import sys
from datetime import date
from pathlib import Path

import pytest

from bucketing import Assigner, MemorySink, load_config
from tests.test_spec_examples import SPEC, section

ROOT = Path(__file__).resolve().parents[1]
EXAMPLE = ROOT / "configs_example"

# Paths (in the notation of `field_paths`) of objects whose keys are data, not field names.
DATA_KEYED = {
    "assign": {"layers", "params"},
    "check": set(),
    "diff": set(),
    "layout": set(),
    "schema": set(),  # only its top level and its definitions' names: below them it is JSON Schema's own vocabulary
    "srm": {"malformed.counts", "results[].days[].new_units", "results[].localised.days[].new_units",
            "results[].segments[].by",
            "results[].segments[].arm_units", "results[].without_worst_segment.left_out",
            "results[].localised.by", "results[].localised.arm_units", "results[].causes[].segment"},
}


def sortition(*args: str | Path, ok: tuple[int, ...] = (0, 1)) -> dict:
    """Run the installed `sortition` command; its standard output parsed as JSON."""
    command = Path(sys.executable).with_name("sortition")
    done = subprocess.run([str(command), *map(str, args)], capture_output=True, text=True, cwd=ROOT, timeout=300)
    assert done.returncode in ok, (args, done.returncode, done.stderr)
    return json.loads(done.stdout)


def field_paths(value, keyed: set[str], path: str = "") -> set[str]:
    """Every field path in a JSON value: 'a.b', 'a[].b'; data-keyed objects contribute 'a.*'."""
    found: set[str] = set()
    if isinstance(value, dict):
        data_keys = path in keyed
        for key, item in value.items():
            child = f"{path}.{'*' if data_keys else key}" if path else ("*" if data_keys else key)
            if not data_keys:
                found.add(child)
            found |= field_paths(item, keyed, child)
    elif isinstance(value, list):
        for item in value:
            found |= field_paths(item, keyed, f"{path}[]")
    return found


def command_section(command: str) -> str:
    """The specification's section on `sortition <command>`."""
    return section(rf"[\d.]+ `sortition {command}`")


def assert_described(command: str, outputs: list) -> None:
    # Code fences out first: their backticks would pair up every later `name` wrongly.
    text = re.sub(r"^```.*?^```", "", command_section(command), flags=re.MULTILINE | re.DOTALL)
    rows = set(re.findall(r"^\| `([^`]+)`", text, re.MULTILINE))
    words = {word for quoted in re.findall(r"`([^`]+)`", text) for word in re.findall(r"[\w$]+", quoted)}
    words |= {word for braced in re.findall(r"\{([\w, ]+)\}", text) for word in re.findall(r"\w+", braced)}
    paths: set[str] = set()
    for output in outputs:
        paths |= field_paths(output, DATA_KEYED[command])
    assert paths, f"`sortition {command}` printed no fields"
    top = {p for p in paths if "." not in p and "[" not in p}
    missing_rows = sorted(top - rows)
    assert not missing_rows, (f"`sortition {command} --format json` prints top-level field(s) {missing_rows} that "
                              f"docs/SPEC.md does not describe: add a table row for each in its `sortition {command}` "
                              "section")
    first_table = re.search(r"^\|.*?(?=^[^|]|\Z)", text, re.MULTILINE | re.DOTALL).group(0)
    promised = {row for row in re.findall(r"^\| `([^`]+)`", first_table, re.MULTILINE) if re.fullmatch(r"[\w$]+", row)}
    gone = sorted(promised - top)
    assert not gone, (f"docs/SPEC.md describes top-level field(s) {gone} of `sortition {command}` that the command "
                      "no longer prints: update its section")
    nested = {re.split(r"[.\[\]]+", p.rstrip("]"))[-1] for p in paths - top} - {"*", ""}
    missing = sorted(nested - words)
    assert not missing, (f"`sortition {command} --format json` prints field(s) {missing} that the `sortition "
                         f"{command}` section of docs/SPEC.md never names: describe them there")


# -- inputs ----------------------------------------------------------------------------------------

def edit(path: Path, old: str, new: str) -> None:
    text = path.read_text(encoding="utf-8")
    assert old in text, (path, old)
    path.write_text(text.replace(old, new, 1), encoding="utf-8")


@pytest.fixture(scope="module")
def changed_configs(tmp_path_factory) -> tuple[Path, Path]:
    """configs_example/ and an edited copy: a rollout ramped, an approved ramp-down, an experiment added, one
    removed, a warning waived."""
    root = tmp_path_factory.mktemp("configs")
    new = root / "new"
    shutil.copytree(EXAMPLE, new)
    edit(new / "audio.yaml", "weight: 20", "weight: 30")
    edit(new / "audio.yaml", "weight: 80", "weight: 70")
    assert "rollout: new-engine" in (new / "audio.yaml").read_text()  # the example's audio engine is a rollout
    edit(new / "lessons.yaml", 'buckets: ["0-3999"]', 'buckets: ["0-2999"]')
    edit(new / "lessons.yaml", "        salt: shorter-lessons-1\n", "        salt: shorter-lessons-1\n"
         "        reassign_ok: {why: invented ramp-down to 30 % of the layer, moves_up_to: 30}\n")
    edit(new / "paywall.yaml", "      - name: price-display", "      - name: price-display-2")
    edit(new / "paywall.yaml", "        owner: growth-team\n        arms:\n          - name: control\n"
         "            weight: 50\n            params: {trial_days: 7}\n          - name: monthly-first",
         "        owner: growth-team\n        overrides: {qa-learner-3: control}\n"
         "        waivers: [{rule: override-inactive, reason: invented QA account kept for the restart}]\n"
         "        arms:\n          - name: control\n            weight: 50\n            params: {trial_days: 7}\n"
         "          - name: monthly-first")
    (new / "empty.yaml").write_text("# Invented: a layer with no experiments yet.\nformat: 1\nlayers:\n"
                                    "  - name: streaks\n    unit: learner\n", encoding="utf-8")
    return EXAMPLE, new


@pytest.fixture(scope="module")
def exposure_log(tmp_path_factory) -> Path:
    """Invented exposures from the SDK over three days, with planted faults for every part of the report.

    Arm `short` of shorter-lessons loses its exposures in BR from the second
    day; one unit is logged in two arms, one in an arm the config does not
    give it, one record repeats, one names an unknown experiment, one line is cut.
    """
    sink = MemorySink()
    assigner = Assigner(load_config(EXAMPLE), sink=sink)
    rng = random.Random(20261110)
    records = []
    for n in range(3000):
        attrs = {"country": rng.choice(["BR", "NL", "US"]), "platform": rng.choice(["ios", "android"]),
                 "app_version": "7.4.0"}
        day = date(2026, 11, 10 + n % 3)
        sink.clear()
        assigner.assign({"learner": f"L-{n}"}, attrs, day=day).expose()
        for record in sink.records:
            record["ts"] = f"{day.isoformat()}T09:00:00.000Z"
            if not (record["arm"] == "short" and attrs["country"] == "BR" and day.day > 10):
                records.append(record)
    lessons = [r for r in records if r["experiment"] == "shorter-lessons"]
    other_arm = {"control": "short", "short": "control"}
    records.append(dict(lessons[0], arm=other_arm[lessons[0]["arm"]]))
    lessons[1]["arm"] = other_arm[lessons[1]["arm"]]
    records.append(dict(lessons[2]))
    records.append(dict(lessons[3], experiment="retired-banner"))
    path = tmp_path_factory.mktemp("logs") / "exposures.jsonl"
    with path.open("w", encoding="utf-8") as out:
        out.writelines(json.dumps(r) + "\n" for r in records)
        out.write('{"ts": "2026-11-12T09:00:00.000Z", "unit": "L-cut"\n')
    return path


# -- the commands ----------------------------------------------------------------------------------

def test_assign_fields_are_specified(tmp_path):
    units = tmp_path / "units.csv"
    units.write_text("unit,country,app_version\nL-1043,NL,7.4.0\nqa-learner-1,US,7.1\nL-10,NL,7.4.0\n")
    one = sortition("assign", EXAMPLE, "--unit", "L-1042", "--unit-type", "learner", "--attr", "country=NL",
                    "--day", "2026-11-20", "--format", "json")
    command = Path(sys.executable).with_name("sortition")
    lines = subprocess.run([str(command), "assign", str(EXAMPLE), "--units", str(units), "--unit-type", "learner",
                            "--day", "2026-11-20", "--format", "json"], capture_output=True, text=True, check=True)
    many = [json.loads(line) for line in lines.stdout.splitlines()]
    assert len(many) == 3
    assert_described("assign", [one, *many])


def test_assign_json_example_is_what_the_command_prints():
    """The JSON example of the `assign` section is the command's real output for L-1042."""
    (example,) = re.findall(r"^```json\n(.*?)^```", command_section("assign"), re.MULTILINE | re.DOTALL)
    printed = sortition("assign", EXAMPLE, "--unit", "L-1042", "--unit-type", "learner", "--attr", "country=NL",
                        "--day", "2026-11-20", "--format", "json")
    assert json.loads(example) == printed


def test_check_fields_are_specified(changed_configs):
    clean = sortition("check", EXAMPLE, "--format", "json", "--today", "2026-11-20")
    _, new = changed_configs
    found = sortition("check", new, "--format", "json", "--today", "2026-11-20")
    assert found["findings"] and found["waived"], found
    assert_described("check", [clean, found])


def test_check_rule_ids_are_specified():
    command = Path(sys.executable).with_name("sortition")
    listed = subprocess.run([str(command), "check", "--rules"], capture_output=True, text=True, check=True).stdout
    rule_ids = set(re.findall(r"^\s*([a-z]+(?:-[a-z]+)+)\b", listed, re.MULTILINE))
    assert len(rule_ids) > 20
    described = set(re.findall(r"^\| `([a-z-]+)` \|", SPEC, re.MULTILINE))
    assert not rule_ids - described, f"rule ids missing from docs/SPEC.md: {sorted(rule_ids - described)}"


def test_diff_fields_are_specified(changed_configs):
    old, new = changed_configs
    report = sortition("diff", old, new, "--format", "json")
    presences = {e["presence"] for e in report["experiments"]}
    assert presences == {"both", "added", "removed"} and any(e["moves"] for e in report["experiments"])
    verdicts = {e["verdict"] for e in report["experiments"]}
    assert {"accepted", "ramp"} <= verdicts, verdicts  # so that `approval` and `rollout` are filled in
    assert_described("diff", [report])


def test_layout_fields_are_specified():
    report = sortition("layout", EXAMPLE, "--want", "10", "--format", "json")
    assert any(layer["proposal"] for layer in report["layers"])
    assert_described("layout", [report])


def test_schema_fields_are_specified():
    schema = sortition("schema")
    assert_described("schema", [{key: None for key in schema}])
    unnamed = sorted(set(schema["$defs"]) - set(re.findall(r"`(\w+)`", command_section("schema"))))
    assert not unnamed, f"definitions {unnamed} of `sortition schema` are not named in docs/SPEC.md"


def test_srm_fields_are_specified(exposure_log):
    report = sortition("srm", exposure_log, "--config", EXAMPLE, "--by", "country,platform", "--format", "json",
                       "--quiet")
    (lessons,) = [r for r in report["results"] if r["experiment"] == "shorter-lessons"]
    for part in ("multi_arm_examples", "replay_examples", "localised", "causes", "segments", "days"):
        assert lessons[part], f"the planted faults no longer fill in {part!r}; the test would not see its fields"
    assert report["malformed"]["examples"] and report["unknown"]
    assert_described("srm", [report])


def test_the_repository_points_at_its_own_specification():
    """A clone holds everything it refers to: nothing points at the design file outside the repository."""
    pointers = ("../" "shared", "DESIGN" ".md")  # written in two pieces so that this file does not match itself
    skipped_dirs = {"demo-output", "node_modules"}
    offenders = []
    for path in ROOT.rglob("*"):
        parts = path.relative_to(ROOT).parts
        if any(p.startswith(".") or p in skipped_dirs or p.endswith(".egg-info") for p in parts[:-1]):
            continue
        if path.is_file() and (path.suffix in (".md", ".py", ".yaml", ".yml", ".toml", ".sh") or path.name == "Makefile"):
            text = path.read_text(encoding="utf-8", errors="replace")
            if any(pointer in text for pointer in pointers):
                offenders.append(str(path.relative_to(ROOT)))
    assert not offenders, f"these files point outside the repository; point at docs/SPEC.md instead: {offenders}"
