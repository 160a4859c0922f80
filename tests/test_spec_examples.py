"""The worked examples of docs/SPEC.md, read out of the document and checked against the SDK.

Every example the specification marks *checked* is parsed here from the
Markdown itself: hash values and buckets, the MurmurHash3 reference values,
whole assignments under configs_example/, the eligibility table and the
config version id. The document therefore cannot drift from the code. Each
parser also asserts that it found its examples, so deleting or reformatting
them fails loudly instead of checking nothing.

Hashes are checked three ways: the SDK (`bucket_of`), the `mmh3` package
from PyPI, and `murmur3_from_spec`, a transcription of the algorithm as the
specification writes it out for porters.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import re
from datetime import date
from pathlib import Path

import mmh3
import pytest

from bucketing import Assigner, ConfigError, MemorySink, bucket_of, load_config

ROOT = Path(__file__).resolve().parents[1]
SPEC = (ROOT / "docs" / "SPEC.md").read_text(encoding="utf-8")
MASK = 0xFFFFFFFF


def murmur3_from_spec(data: bytes, seed: int = 0) -> int:
    """MurmurHash3 x86_32 exactly as docs/SPEC.md §1.3 writes it out."""

    def rotl(x: int, r: int) -> int:
        return ((x << r) | (x >> (32 - r))) & MASK

    c1, c2 = 0xCC9E2D51, 0x1B873593
    h = seed & MASK
    whole = len(data) - len(data) % 4
    for start in range(0, whole, 4):
        k = int.from_bytes(data[start:start + 4], "little")
        k = rotl((k * c1) & MASK, 15) * c2 & MASK
        h = rotl(h ^ k, 13)
        h = (h * 5 + 0xE6546B64) & MASK
    tail = data[whole:]
    k = 0
    if len(tail) == 3:
        k ^= tail[2] << 16
    if len(tail) >= 2:
        k ^= tail[1] << 8
    if len(tail) >= 1:
        k ^= tail[0]
        k = rotl((k * c1) & MASK, 15) * c2 & MASK
        h ^= k
    h ^= len(data)
    h = (h ^ (h >> 16)) * 0x85EBCA6B & MASK
    h = (h ^ (h >> 13)) * 0xC2B2AE35 & MASK
    return h ^ (h >> 16)


def section(title: str) -> str:
    """The text of the first section whose heading matches the regular expression `title`, up to the next
    heading of its level.

    Lines inside fenced code blocks are never headings (a YAML comment starts with '#' too).
    """
    lines = SPEC.splitlines(keepends=True)
    fenced = False
    start = level = None
    for index, line in enumerate(lines):
        if line.startswith("```"):
            fenced = not fenced
        heading = None if fenced else re.match(r"(#+) (.*)", line)
        if heading is None:
            continue
        if start is None and re.match(title, heading.group(2)):
            start, level = index + 1, len(heading.group(1))
        elif start is not None and len(heading.group(1)) <= level:
            return "".join(lines[start:index])
    assert start is not None, f"docs/SPEC.md has no section whose heading matches {title!r}"
    return "".join(lines[start:])


def fenced_blocks(text: str, info: str) -> list[str]:
    return re.findall(rf"^```{info}\n(.*?)^```", text, re.MULTILINE | re.DOTALL)


# -- hashing ---------------------------------------------------------------------------------------

REFERENCE_VALUES = re.findall(r'`"(.*?)"`,\s+`?(0x[0-9A-Fa-f]+|\d+)`? →\s+`(0x[0-9A-Fa-f]+)`', section(r"1\.3 "))
HASH_LINES = re.findall(r'^murmur3\((".*")\) = (\d+)$', SPEC, re.MULTILINE)
BUCKET_LINES = re.findall(r'^bucket\((".*?"), (".*"|-?\d+)\) = (\d+)$', SPEC, re.MULTILINE)


def test_the_spec_has_its_hash_examples():
    assert len(REFERENCE_VALUES) >= 5
    assert len(HASH_LINES) >= 3 and len(BUCKET_LINES) >= 10
    assert any(unit.lstrip("-").isdigit() for _, unit, _ in BUCKET_LINES), "an integer id is among the examples"
    assert any(not json.loads(unit).isascii() for _, unit, _ in BUCKET_LINES if unit.startswith('"'))


@pytest.mark.parametrize("text, seed, expected", REFERENCE_VALUES)
def test_spec_algorithm_gives_the_reference_values(text, seed, expected):
    # The reference values themselves are SMHasher's (see tests/test_hashing.py); mmh3 agrees.
    data = text.encode("utf-8")
    assert murmur3_from_spec(data, int(seed, 0)) == int(expected, 16) == mmh3.hash(data, int(seed, 0), signed=False)


@pytest.mark.parametrize("text, expected", HASH_LINES)
def test_hash_examples(text, expected):
    data = json.loads(text).encode("utf-8")
    assert mmh3.hash(data, 0, signed=False) == int(expected) == murmur3_from_spec(data)


@pytest.mark.parametrize("salt, unit, expected", BUCKET_LINES)
def test_bucket_examples(salt, unit, expected):
    salt, unit = json.loads(salt), json.loads(unit)
    key = (salt + ":" + str(unit)).encode("utf-8")
    assert bucket_of(salt, unit) == int(expected)
    assert mmh3.hash(key, 0, signed=False) % 10_000 == int(expected) == murmur3_from_spec(key) % 10_000


def test_hashed_bytes_example():
    text, hexed = re.search(r'`"(lesson-flow-v1:L-1042)"` is the \d+ bytes `([0-9a-f]+)`', SPEC).groups()
    assert text.encode("utf-8").hex() == hexed


def test_refused_unit_ids_give_no_layers_and_are_counted(example_dir):
    assigner = Assigner(load_config(example_dir))
    for refused in ("L-\ud800", True, 4.0, None):
        got = assigner.assign({"learner": refused})
        assert got.layers == {} and got.params == {}
    assert assigner.errors["unit_id"] == 4


# -- assignments -----------------------------------------------------------------------------------

ASSIGN_HEAD = re.compile(r'^assign (\S+) (".*?"|-?\d+) (\{.*\}) on (\d{4}-\d\d-\d\d)$')
LAYER_LINE = re.compile(r"^  (\S+): bucket (\d+) → (?:-|(\S+) / (\S+?)( \(forced\))?)$")


def parse_assignment(block: str) -> tuple[tuple, dict]:
    head, *lines = block.strip().splitlines()
    unit_type, unit, attrs, day = ASSIGN_HEAD.match(head).groups()
    holdout = re.fullmatch(r"  holdout: (true|false)", lines[0]).group(1) == "true"
    params = json.loads(re.fullmatch(r"  params: (\{.*\})", lines[-1]).group(1))
    layers = {}
    for line in lines[1:-1]:
        name, bucket, experiment, arm, forced = LAYER_LINE.match(line).groups()
        layers[name] = {"experiment": experiment, "arm": arm, "bucket": int(bucket), "forced": forced is not None}
    unit = json.loads(unit)
    expected = {"unit": unit, "holdout": holdout, "layers": layers, "params": params}
    return (unit_type, unit, json.loads(attrs), date.fromisoformat(day)), expected


ASSIGN_BLOCKS = [b for b in fenced_blocks(section(r"3\.10 "), "text") if b.startswith("assign ")]


def test_the_spec_has_its_assignment_examples(example_dir):
    assert len(ASSIGN_BLOCKS) >= 10
    version = re.search(r"version `([0-9a-f]{12})`", section(r"3\.10 ")).group(1)
    assert version == load_config(example_dir).version


@pytest.mark.parametrize("block", ASSIGN_BLOCKS, ids=[b.splitlines()[0] for b in ASSIGN_BLOCKS])
def test_assignment_examples(example_dir, block):
    (unit_type, unit, attrs, day), expected = parse_assignment(block)
    got = Assigner(load_config(example_dir)).assign({unit_type: unit}, attrs, day=day).to_dict()
    expected["unit"] = str(unit)  # the result names the unit by its key: integers as decimal text
    assert got == expected


def test_arm_intervals_example(example_dir):
    text = section(r"3\.5 ")
    intervals = re.findall(r"`([\w-]+)` (?:holds )?(\d+) … (\d+)", text)
    assert len(intervals) == 3
    assigner = Assigner(load_config(example_dir))
    review = next(e for layer in assigner.config.layers for e in layer.experiments if e.name == "review-first")
    edge = 0
    for (name, low, high), arm in zip(intervals, review.arms):
        assert (name, int(low), int(high)) == (arm.name, edge, edge + round(arm.weight * 100) - 1)
        edge += round(arm.weight * 100)


# -- eligibility -----------------------------------------------------------------------------------

ELIGIBILITY_ROWS = re.findall(r"^\| `(.+?)` \| (`.+?`|absent) \| (yes|no) \|$", section(r"3\.6 "), re.MULTILINE)
ONE_EXPERIMENT = """\
format: 1
layers:
  - name: gate
    unit: learner
    experiments:
      - name: gated
        status: running
        buckets: ["0-9999"]
        arms: [{name: only, weight: 100}]
        eligible:
          {entry}
"""


def test_the_spec_has_its_eligibility_examples():
    assert len(ELIGIBILITY_ROWS) >= 20
    assert {holds for *_, holds in ELIGIBILITY_ROWS} == {"yes", "no"}


@pytest.mark.parametrize("entry, value, holds", ELIGIBILITY_ROWS)
def test_eligibility_examples(entry, value, holds):
    config = load_config("eligibility.yaml", text=ONE_EXPERIMENT.replace("{entry}", entry))
    attribute = entry.split(":", 1)[0]
    attrs = {} if value == "absent" else {attribute: json.loads(value.strip("`"))}
    got = Assigner(config).assign({"learner": "L-1"}, attrs, day=date(2026, 11, 20))
    assert (got.layers["gate"].experiment == "gated") is (holds == "yes")


# -- dates -----------------------------------------------------------------------------------------

def test_dates_are_written_year_month_day():
    """§2.8: only YYYY-MM-DD, on every Python (3.11's fromisoformat alone would take the other forms)."""
    refused = re.search(r"other\s+ISO forms \((.*?)\) are refused", section(r"2\.8 "), re.DOTALL).group(1)
    written = re.findall(r"`([^`]+)`", refused)
    assert len(written) == 3
    for text in written:
        with pytest.raises(ConfigError, match="ISO date"):
            load_config("dates.yaml", text=ONE_EXPERIMENT.replace("        eligible:\n          {entry}\n",
                                                                  f"        start: {text}\n"))
    plain, quoted = (load_config("dates.yaml", text=ONE_EXPERIMENT.replace("        eligible:\n          {entry}\n",
                                                                           f"        start: {day}\n"))
                     for day in ("2026-11-03", '"2026-11-03"'))
    assert plain.version == quoted.version
    assert plain.layers[0].experiments[0].start == date(2026, 11, 3)


# -- config version id -----------------------------------------------------------------------------

def test_config_version_example():
    text = section(r"Worked example \(checked\)")
    (yaml_text,) = [b for b in fenced_blocks(text, "yaml") if b.startswith("# worked example: config version id")]
    (canonical,) = fenced_blocks(text, "json")
    canonical = canonical.strip()
    digest = re.search(r"SHA-256 `([0-9a-f]{64})`", text).group(1)
    version = re.search(r"version id is `([0-9a-f]{12})`", text).group(1)
    assert hashlib.sha256(canonical.encode("utf-8")).hexdigest() == digest
    assert digest[:12] == version == load_config("example.yaml", text=yaml_text).version
    # The canonical text is what §4's steps make of the data: keys sorted, no whitespace, dates as text.
    data = json.loads(canonical)
    assert json.dumps(data, sort_keys=True, separators=(",", ":"), ensure_ascii=False) == canonical
    assert data["layers"][0]["experiments"][0]["start"] == "2026-11-03"


def test_config_version_is_the_same_over_several_files(tmp_path):
    """§4: how layers are spread over files does not change the id; the example split in two files."""
    text = section(r"Worked example \(checked\)")
    (yaml_text,) = [b for b in fenced_blocks(text, "yaml") if b.startswith("# worked example: config version id")]
    layers, holdout = yaml_text.split("holdout:\n")
    (tmp_path / "b-layers.yaml").write_text(layers, encoding="utf-8")
    (tmp_path / "a-holdout.yaml").write_text("format: 1\nholdout:\n" + holdout, encoding="utf-8")
    assert load_config(tmp_path).version == load_config("one.yaml", text=yaml_text).version


# -- exposure records ------------------------------------------------------------------------------

def test_pseudonym_example(example_dir, monkeypatch):
    key, unit, expected = re.search(r'^pseudonym\("(.*)", "(.*)"\) = ([0-9a-f]{64})$', section(r"5\.3 "),
                                    re.MULTILINE).groups()
    assert hmac.new(key.encode("utf-8"), unit.encode("utf-8"), hashlib.sha256).hexdigest() == expected
    monkeypatch.setenv("SORTITION_SPEC_PSEUDONYM_KEY", key)
    sink = MemorySink()
    assigner = Assigner(load_config(example_dir), sink=sink, pseudonym_key_env="SORTITION_SPEC_PSEUDONYM_KEY")
    assigner.assign({"learner": unit}, {"country": "NL"}, day=date(2026, 11, 20)).expose()
    assert sink.records and {record["unit"] for record in sink.records} == {expected}


def test_exposure_record_fields_and_allow_list(example_dir):
    """§5.1: the eight fields, in their types, and only allow-listed attributes (targeted or named)."""
    rows = re.findall(r"^\| `(\w+)` \| (text|boolean) \|", section(r"5\.1 "), re.MULTILINE)
    assert [name for name, _ in rows] == ["ts", "unit", "unit_type", "layer", "experiment", "arm", "config", "forced"]
    sink = MemorySink()
    assigner = Assigner(load_config(example_dir), sink=sink, record_attributes=["platform"])
    attrs = {"country": "NL", "app_version": "7.4.0", "platform": "ios", "email": "someone@example.invalid",
             "arm": "not-an-arm", "latitude": float("nan")}
    assigner.assign({"learner": "L-1043"}, attrs, day=date(2026, 11, 20)).expose()
    assert len(sink.records) == 3
    for record in sink.records:
        assert list(record)[:8] == [name for name, _ in rows]
        for name, kind in rows:
            assert isinstance(record[name], bool if kind == "boolean" else str)
        assert re.fullmatch(r"\d{4}-\d\d-\d\dT\d\d:\d\d:\d\d\.\d{3}Z", record["ts"])
        assert record["arm"] != "not-an-arm" and record["config"] == assigner.version
        # country and app_version are targeted by paywall's `eligible`; platform is named by the service.
        assert {k: record[k] for k in list(record)[8:]} == {"country": "NL", "app_version": "7.4.0", "platform": "ios"}


def test_section_references_point_at_sections():
    """Every '§N.N' of the specification names one of its own headings (the YAML standard's §10.3.2 aside)."""
    outside = {"10.3.2"}
    headings = set(re.findall(r"^#+ (\d+(?:\.\d+)*)\.? ", SPEC, re.MULTILINE))
    referenced = set(re.findall(r"§(\d+(?:\.\d+)*)", SPEC)) - outside
    assert len(headings) > 30 and referenced
    assert not referenced - headings, f"docs/SPEC.md refers to sections it does not have: {sorted(referenced - headings)}"
