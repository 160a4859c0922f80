"""Golden vectors and an independent reading of the contract agree with the SDK.

`reference_assign` below is a deliberately plain transcription of the
assignment rules of docs/SPEC.md over the raw YAML (mmh3 and dicts, no
precomputed tables), written separately from the SDK. The golden file
tests/vectors/assignments.jsonl is what another-language implementation
reproduces; here both must agree with the SDK on every line.
"""

import json
from datetime import date
from pathlib import Path

import mmh3
import pytest
import yaml

from bucketing import Assigner, bucket_of, load_config

VECTORS = Path(__file__).parent / "vectors" / "assignments.jsonl"


def contract_bucket(salt: str, unit: str) -> int:
    return mmh3.hash((salt + ":" + unit).encode("utf-8"), 0, signed=False) % 10000


def _version(text):
    parts = [int(p) for p in str(text).split(".")]
    while len(parts) > 1 and parts[-1] == 0:
        parts.pop()
    return parts


def _condition_holds(spec, value) -> bool:
    if value is None:
        return False
    if isinstance(spec, list):
        return str(value) in [str(v) for v in spec]
    for op in (">=", "<=", "==", "!=", ">", "<"):
        if spec.startswith(op):
            want, have = _version(spec[len(op):].strip()), _version(value)
            return {">=": have >= want, "<=": have <= want, "==": have == want,
                    "!=": have != want, ">": have > want, "<": have < want}[op]
    raise AssertionError(spec)


def reference_assign(raw: dict, unit_type: str, unit: str, attrs: dict, day: date) -> dict:
    layers_out, params, held = {}, {}, False
    for holdout in raw.get("holdout", []):
        if holdout["unit"] == unit_type and contract_bucket(holdout["salt"], unit) < holdout["percent"] * 100:
            held = True
    for layer in raw["layers"]:
        if layer["unit"] != unit_type:
            continue
        layer_salt = layer.get("salt", layer["name"])
        b = contract_bucket(layer_salt, unit)
        got = {"experiment": None, "arm": None, "bucket": b, "forced": False}
        forced = [(e, e["overrides"][unit]) for e in layer["experiments"]
                  if e["status"] == "running" and unit in e.get("overrides", {})]
        if forced:
            exp, arm = forced[0]
            got.update(experiment=exp["name"], arm=arm, forced=True)
        elif not held:
            for exp in layer["experiments"]:
                ranges = [tuple(int(x) for x in r.split("-")) for r in exp["buckets"]]
                if not any(lo <= b <= hi for lo, hi in ranges):
                    continue
                ok = exp["status"] == "running"
                ok = ok and (exp.get("start") is None or exp["start"] <= day)
                ok = ok and (exp.get("end") is None or day <= exp["end"])
                ok = ok and all(_condition_holds(spec, attrs.get(k)) for k, spec in exp.get("eligible", {}).items())
                if ok:
                    a = contract_bucket(exp.get("salt", f"{layer_salt}.{exp['name']}"), unit)
                    edge = 0
                    for arm in exp["arms"]:
                        edge += arm["weight"] * 100
                        if a < edge:
                            got.update(experiment=exp["name"], arm=arm["name"])
                            break
                break
        if got["experiment"]:
            exp = next(e for e in layer["experiments"] if e["name"] == got["experiment"])
            params.update(next(a for a in exp["arms"] if a["name"] == got["arm"]).get("params", {}))
        layers_out[layer["name"]] = got
    return {"unit": unit, "holdout": held, "layers": layers_out, "params": params}


def _raw_example(example_dir: Path) -> dict:
    merged = {"holdout": [], "layers": []}
    for path in sorted(example_dir.glob("*.yaml")):
        data = yaml.safe_load(path.read_text(encoding="utf-8"))
        merged["holdout"] += data.get("holdout", [])
        merged["layers"] += data.get("layers", [])
    return merged


def _lines():
    with VECTORS.open(encoding="utf-8") as f:
        header = json.loads(f.readline())
        return header, [json.loads(line) for line in f]


def test_vector_file_is_for_the_current_example_config(example_dir):
    header, lines = _lines()
    assert header["config"] == load_config(example_dir).version
    assert len(lines) > 300
    assert any(not v["unit"].isascii() for v in lines), "non-ASCII ids are part of the vectors"
    assert any(v["assignment"]["holdout"] for v in lines)
    assert any(la["forced"] for v in lines for la in v["assignment"]["layers"].values())


def test_vector_buckets_follow_the_hashing_rule():
    header, lines = _lines()
    for v in lines:
        for salt, bucket in v["buckets"].items():
            assert contract_bucket(salt, v["unit"]) == bucket == bucket_of(salt, v["unit"])


@pytest.mark.parametrize("impl", ["sdk", "reference"])
def test_assignments_match_golden_vectors(example_dir, impl):
    _, lines = _lines()
    assigner = Assigner(load_config(example_dir))
    raw = _raw_example(example_dir)
    for v in lines:
        day = date.fromisoformat(v["day"])
        if impl == "sdk":
            got = assigner.assign({v["unit_type"]: v["unit"]}, v["attrs"], day=day).to_dict()
        else:
            got = reference_assign(raw, v["unit_type"], v["unit"], v["attrs"], day)
        assert got == v["assignment"], v["unit"]


def test_sdk_matches_reference_on_many_random_units(example_dir):
    assigner = Assigner(load_config(example_dir))
    raw = _raw_example(example_dir)
    day = date(2026, 12, 1)
    for i in range(3000):
        attrs = {"country": ["NL", "US", "BR"][i % 3], "app_version": ["7.1", "7.2", "7.10.1"][i % 3 - 1]}
        unit = f"unit-{i * 7919}"
        assert assigner.assign({"learner": unit}, attrs, day=day).to_dict() == \
            reference_assign(raw, "learner", unit, attrs, day)
