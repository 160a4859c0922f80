"""Loading configs: located errors for every kind of mistake, safe YAML, merging, version ids.

All configs here are invented fixtures.
"""

import re
import textwrap
from pathlib import Path

import pytest

from bucketing import Assigner, ConfigError, load_config, parse_config
from tests.conftest import EXAMPLE

BASE = """\
format: 1
layers:
  - name: flow
    unit: learner
    experiments:
      - name: alpha
        status: running
        buckets: ["0-4999"]
        arms:
          - {name: control, weight: 50}
          - {name: treat, weight: 50}
"""


def problems_of(text: str, name: str = "c.yaml"):
    _, problems = parse_config(Path(name), text=textwrap.dedent(text))
    return problems


def only_error(text: str):
    errors = [p for p in problems_of(text) if p.severity == "error"]
    assert len(errors) == 1, errors
    return errors[0]


def test_clean_config_loads_and_has_a_version():
    config = load_config(Path("c.yaml"), text=BASE)
    # 12 lower-case hex digits (docs/SPEC.md §4), a property of the content: a comment keeps it, another config changes it
    assert re.fullmatch(r"[0-9a-f]{12}", config.version), config.version
    assert load_config(Path("c.yaml"), text=BASE + "# a comment\n").version == config.version
    assert load_config(EXAMPLE).version != config.version
    assert problems_of(BASE) == []


def test_example_configs_load(example_dir):
    config = load_config(example_dir)
    assert {layer.name for layer in config.layers} == {"lesson-flow", "paywall", "notifications", "audio-engine"}
    assert config.holdouts[0].percent == 2


@pytest.mark.parametrize("text, rule, line, path_part", [
    (BASE.replace("status: running", "status: live"), "schema", 7, "status"),
    (BASE.replace("    unit: learner\n", "    unit: learner\n    colour: red\n"), "schema", 5, "colour"),
    (BASE.replace("weight: 50}\n          - {name: treat", "weight: 60}\n          - {name: treat"), "weights-total", 9, "arms"),
    (BASE.replace("weight: 50}\n          - {name: treat", "weight: 50.125}\n          - {name: treat"), "weight-precision", 10, "weight"),
    (BASE.replace('"0-4999"', '"4999-0"'), "range-bounds", 8, "buckets[0]"),
    (BASE.replace('"0-4999"', '"0-10000"'), "range-bounds", 8, "buckets[0]"),
    (BASE.replace('"0-4999"', '"0-4999", "4000-5999"'), "range-self-overlap", 8, "buckets[1]"),
    (BASE.replace("name: treat", "name: control"), "name-duplicate", 11, "arms[1].name"),
    (BASE + "      - name: alpha\n        status: draft\n        buckets: ['6000-6999']\n        arms: [{name: a, weight: 100}]\n",
     "name-duplicate", 12, "experiments[1].name"),
    (BASE + "      - name: beta\n        status: draft\n        buckets: ['4000-6999']\n        arms: [{name: a, weight: 100}]\n",
     "traffic-overlap", 14, "experiments[1].buckets"),
    (BASE.replace("        arms:", "        salt: flow\n        arms:"), "salt-reused", 9, "salt"),
    (BASE.replace("        arms:", "        overrides: {qa-1: nope}\n        arms:"), "override-unknown-arm", 9, "overrides"),
    (BASE.replace("        arms:", "        eligible: {app_version: '>=seven'}\n        arms:"), "condition-syntax", 9, "eligible"),
    (BASE.replace("        arms:", "        eligible: {platform: ios}\n        arms:"), "condition-syntax", 9, "eligible"),
    (BASE.replace("        arms:", "        start: 2026-12-01\n        end: 2026-11-01\n        arms:"), "window-reversed", 10, "end"),
    (BASE.replace("        arms:", "        start: 2026-13-01\n        arms:"), "schema", 9, "start"),
    (BASE.replace("        arms:", "        unit: device\n        arms:"), "unit-mismatch", 9, "unit"),
    (BASE.replace("format: 1", "format: 2"), "schema", 1, "format"),
    (BASE.replace("          - {name: treat, weight: 50}\n", "          - {name: treat, weight: fifty}\n"), "schema", 11, "weight"),
    (BASE.replace("          - {name: treat, weight: 50}\n", "          - {name: treat, weight: 50%}\n"), "schema", 11, "weight"),
    (BASE.replace("unit: learner", "unit: learner\n    unit: device"), "yaml-duplicate-key", 5, "unit"),
])
def test_each_mistake_is_reported_with_its_line(text, rule, line, path_part):
    problem = only_error(text)
    assert problem.rule == rule, problem
    assert problem.line == line, problem
    assert path_part in problem.path, problem
    assert problem.file == "c.yaml"
    assert str(problem).startswith(f"c.yaml:{line}:")


def test_load_config_raises_with_all_problems_located():
    bad = BASE.replace("weight: 50}", "weight: 40}")
    with pytest.raises(ConfigError) as caught:
        load_config(Path("c.yaml"), text=bad)
    assert caught.value.problems[0].rule == "weights-total"
    assert "c.yaml:9:" in str(caught.value)


def test_yaml_syntax_error_names_line():
    problem = only_error(BASE.replace("    unit: learner", "    unit: [learner"))
    assert problem.rule == "yaml-syntax" and problem.line >= 4


def test_python_object_tags_are_refused():
    problem = only_error(BASE.replace("status: running", "status: !!python/object/apply:os.system ['true']"))
    assert problem.rule == "yaml-syntax" and problem.line == 7


def test_alias_bomb_is_refused_without_exhausting_memory():
    bomb = ["format: 1", 'a: &a ["x","x","x","x","x","x","x","x","x","x"]']
    for i in range(1, 9):
        bomb.append(f"{chr(97 + i)}: &{chr(97 + i)} [" + ",".join([f"*{chr(96 + i)}"] * 10) + "]")
    problem = only_error("\n".join(bomb) + "\n")
    assert problem.rule == "yaml-limits"


def test_parameter_set_by_two_layers_is_an_error():
    text = BASE.replace("{name: control, weight: 50}", "{name: control, weight: 50, params: {speed: 1}}") + """\
  - name: other
    unit: learner
    experiments:
      - name: gamma
        status: running
        buckets: ["0-99"]
        arms:
          - {name: control, weight: 100, params: {speed: 2}}
"""
    problem = only_error(text)
    assert problem.rule == "param-two-layers" and problem.line == 19


def test_directory_merges_layers_and_rejects_a_layer_in_two_files(tmp_path):
    (tmp_path / "a.yaml").write_text(BASE)
    (tmp_path / "b.yml").write_text(BASE.replace("name: flow", "name: other").replace("name: alpha", "name: beta"))
    config = load_config(tmp_path)
    assert [layer.name for layer in config.layers] == ["flow", "other"]
    (tmp_path / "c.yaml").write_text(BASE)
    with pytest.raises(ConfigError) as caught:
        load_config(tmp_path)
    assert {p.rule for p in caught.value.problems} >= {"name-duplicate"}
    assert any(p.file.endswith("c.yaml") and p.line == 3 for p in caught.value.problems)


def test_version_is_stable_across_key_order_comments_quoting_and_files(tmp_path):
    reordered = """\
# the same config, written differently
layers:
- unit: learner
  experiments:
  - arms: [{weight: 50, name: control}, {name: treat, weight: 50}]
    buckets: ['0-4999']
    status: "running"
    name: alpha
  name: flow
format: 1
"""
    assert load_config(Path("a.yaml"), text=BASE).version == load_config(Path("b.yaml"), text=reordered).version
    changed = BASE.replace("weight: 50}\n          - {name: treat, weight: 50}", "weight: 40}\n          - {name: treat, weight: 60}")
    assert load_config(Path("a.yaml"), text=changed).version != load_config(Path("a.yaml"), text=BASE).version
    two = BASE + "  - name: other\n    unit: device\n"
    (tmp_path / "one").mkdir()
    (tmp_path / "one" / "all.yaml").write_text(two)
    (tmp_path / "split").mkdir()
    (tmp_path / "split" / "z.yaml").write_text(BASE)
    (tmp_path / "split" / "a.yaml").write_text("format: 1\nlayers:\n  - name: other\n    unit: device\n")
    assert load_config(tmp_path / "one").version == load_config(tmp_path / "split").version


def test_version_follows_the_documented_canonical_json():
    import hashlib
    import json
    # Recomputed by hand from the contract's definition: keys sorted, no whitespace, UTF-8.
    canonical = {"format": 1, "layers": [{"name": "flow", "unit": "learner", "experiments": [{
        "name": "alpha", "status": "running", "buckets": ["0-4999"],
        "arms": [{"name": "control", "weight": 50}, {"name": "treat", "weight": 50}]}]}]}
    text = json.dumps(canonical, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert load_config(Path("c.yaml"), text=BASE).version == hashlib.sha256(text.encode()).hexdigest()[:12]


def test_missing_path_and_empty_directory_are_errors(tmp_path):
    with pytest.raises(ConfigError, match="no such file"):
        load_config(tmp_path / "nope.yaml")
    with pytest.raises(ConfigError, match="no .yaml"):
        load_config(tmp_path)


def test_not_utf8_is_an_error(tmp_path):
    path = tmp_path / "bad.yaml"
    path.write_bytes(b"format: 1\nlayers: []\nowner: \xff\xfe\n")
    with pytest.raises(ConfigError, match="UTF-8"):
        load_config(path)


def test_bad_reload_keeps_the_old_config_serving(tmp_path):
    path = tmp_path / "c.yaml"
    path.write_text(BASE)
    assigner = Assigner(path)
    before = assigner.version
    path.write_text(BASE.replace("weight: 50}", "weight: 45}"))
    with pytest.raises(ConfigError):
        assigner.reload(path)
    assert assigner.version == before
    assert assigner.assign({"learner": "u-1"}).layers["flow"].bucket is not None


def test_unclosed_bracket_says_where_it_opened():
    problem = only_error("format: 1\nlayers:\n  - name: [x\n")
    assert problem.rule == "yaml-syntax"
    assert "started at line 3, column 11" in problem.message


ANCHORED = """\
format: 1
layers:
  - name: flow
    unit: learner
    experiments:
      - &base
        name: alpha
        status: running
        buckets: ["0-999"]
        arms: &two
          - {name: control, weight: 50}
          - {name: treat, weight: 50}
      - <<: *base
        name: beta
        buckets: ["1000-1999"]
      - <<: *base
        name: gamma
        buckets: ["1500-2999"]
        arms: *two
"""


def test_merge_keys_and_anchors_follow_yaml_and_keep_the_written_lines():
    # YAML merge keys: keys written in the mapping override merged ones (yaml.org "Merge Key
    # Language-Independent Type"; PyYAML's safe_load, from PyPI, is the reference here).
    import yaml
    config, problems = parse_config(Path("c.yaml"), text=ANCHORED)
    assert config is not None
    reference = yaml.safe_load(ANCHORED)["layers"][0]["experiments"]
    assert [e.model_dump(exclude_defaults=True) for e in config.layers[0].experiments] == reference
    overlap = [p for p in problems if p.rule == "traffic-overlap"]
    assert len(overlap) == 1 and overlap[0].line == 18


def test_a_key_written_twice_beside_a_merge_is_still_a_duplicate():
    problem = only_error(ANCHORED.replace("        name: beta\n", "        name: beta\n        name: delta\n"))
    assert problem.rule == "yaml-duplicate-key" and problem.line == 15


def test_names_and_ranges_in_the_wrong_form_say_what_form_is_expected():
    problem = only_error(BASE.replace("name: flow", "name: Checkout Flow"))
    assert problem.rule == "schema" and problem.line == 3
    assert "'Checkout Flow' is not a valid name: letters, digits" in problem.message
    problem = only_error(BASE.replace('"0-4999"', '"0 to 4999"'))
    assert "is not a bucket range such as '0-1999'" in problem.message
