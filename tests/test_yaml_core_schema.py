"""Configs mean what they say: the YAML 1.2 core schema, text kept as written, YAML 1.1 readings refused.

Cases are generated: every YAML 1.1 boolean, integer, float and base-60
spelling is put into every field that holds text (it must come out as the
characters written, or as a located error), every field that holds a number
and every parameter (it must come out as YAML 1.2 reads it, or be refused
where YAML 1.1 reads it differently). All configs are invented.
"""

from __future__ import annotations

import math
import re
from pathlib import Path

import pytest

from bucketing import Assigner, ConfigError, MemorySink, load_config, parse_config

# YAML 1.1 boolean spellings: https://yaml.org/type/bool.html (the YAML 1.1 type repository).
YAML11_BOOLS = [w for base in ("y", "yes", "n", "no", "true", "false", "on", "off")
                for w in (base, base.capitalize(), base.upper())]
# YAML 1.1 int and float forms: https://yaml.org/type/int.html and https://yaml.org/type/float.html
# (binary, octal with a leading 0, underscores, base 60), plus the examples of the issue.
YAML11_INTS = ["0b1010", "0123", "062", "01", "1_000", "+1_000", "12:30", "190:20:30", "0x_1A", "-0b11", "00"]
YAML11_FLOATS = ["7.10", "7.0", "1.5e+3", "6.8523015e+5", "685.230_15e+03", "685_230.15", "190:20:30.15",
                 "-.inf", ".NaN", "1.", "0.5"]
# YAML 1.2.2 spec, example 10.9 (core schema tag resolution).
CORE_EXAMPLE = {"null": None, "": None, "true": True, "True": True, "false": False, "FALSE": False,
                "0": 0, "0o7": 7, "0x3A": 58, "-19": -19, "0.": 0.0, "-0.0": -0.0, ".5": 0.5, "+12e03": 12000.0,
                "-2E+05": -200000.0, ".inf": math.inf, "-.Inf": -math.inf, "+.INF": math.inf, ".NAN": math.nan}
SPELLINGS = sorted(set(YAML11_BOOLS + YAML11_INTS + YAML11_FLOATS + ["NO", "SE", "7.10.2", "1e3", "0o17", "0x1F"]))

TEMPLATE = """\
format: 1
weekly_units: {{{weekly_key}: 1000}}
layers:
  - name: {layer}
    unit: {unit}
    salt: {salt}
    experiments:
      - name: {experiment}
        status: running
        buckets: ["0-4999"]
        owner: {owner}
        reassign_ok: {reason}
        eligible: {{{attr}: [{value}], plan: [free]}}
        overrides: {{{override_key}: {arm}}}
        arms:
          - {{name: {arm}, weight: 50, params: {{{param_key}: 1}}}}
          - {{name: other, weight: 50}}
"""
DEFAULTS = dict(weekly_key="learner", layer="flow", unit="learner", salt="flow-salt", experiment="alpha",
                owner="team-a", reason="ramp", attr="country", value="NL", override_key="qa-1", arm="treat",
                param_key="size")
# Where each placeholder ends up in the loaded config.
READERS = {
    "weekly_key": lambda c: next(iter(c.weekly_units)),
    "layer": lambda c: c.layers[0].name,
    "unit": lambda c: c.layers[0].unit,
    "salt": lambda c: c.layers[0].salt,
    "experiment": lambda c: c.layers[0].experiments[0].name,
    "owner": lambda c: c.layers[0].experiments[0].owner,
    "reason": lambda c: c.layers[0].experiments[0].reassign_ok,
    "attr": lambda c: next(iter(c.layers[0].experiments[0].eligible)),
    "value": lambda c: next(iter(c.layers[0].experiments[0].eligible.values()))[0],
    "override_key": lambda c: next(iter(c.layers[0].experiments[0].overrides)),
    "arm": lambda c: c.layers[0].experiments[0].arms[0].name,
    "param_key": lambda c: next(iter(c.layers[0].experiments[0].arms[0].params)),
}


def config_with(**fields: str) -> str:
    return TEMPLATE.format(**{**DEFAULTS, **fields})


def test_the_template_loads_with_its_defaults():
    config = load_config("t.yaml", text=config_with())
    assert {field: read(config) for field, read in READERS.items()} == DEFAULTS


# Fields whose text must also be a valid name or salt (the format's patterns, DESIGN "Config format").
NAME_FIELDS = {"layer", "unit", "experiment", "arm"}
VALID_NAME = re.compile(r"[A-Za-z0-9][A-Za-z0-9_.-]*\Z")
VALID_SALT = re.compile(r"[A-Za-z0-9_.-]+\Z")


@pytest.mark.parametrize("field", sorted(READERS))
@pytest.mark.parametrize("spelling", SPELLINGS)
def test_a_text_field_keeps_the_characters_written_or_refuses_them_at_that_field(field, spelling):
    text = config_with(**{field: spelling})
    config, problems = parse_config("t.yaml", text=text)
    pattern = VALID_NAME if field in NAME_FIELDS else VALID_SALT if field == "salt" else None
    if pattern is None or pattern.match(spelling):
        assert problems == [] and config is not None
        assert READERS[field](config) == spelling
    else:
        lines = {number for number, line in enumerate(text.splitlines(), start=1) if spelling in line}
        assert problems and all(p.line in lines and p.rule == "schema" and repr(spelling) in p.message
                                for p in problems), problems


@pytest.mark.parametrize("spelling", ["~", "null", "Null", "NULL"])
def test_null_in_an_optional_text_field_means_absent_and_in_a_required_one_is_refused(spelling):
    config = load_config("t.yaml", text=config_with(salt=spelling, owner=spelling))
    assert config.layers[0].salt is None and config.layers[0].experiments[0].owner is None
    with pytest.raises(ConfigError) as caught:
        load_config("t.yaml", text=config_with(unit=spelling))
    assert caught.value.problems[0].loc == ("layers", 0, "unit")


# Weights that YAML 1.1 and 1.2 read alike, with that value (worked out by hand from both specs).
AGREED_WEIGHTS = {"0x32": 50, "5.0e+1": 50, "50": 50, "50.0": 50, "+50": 50, "7.10": 7.1, "7.0": 7, "0.5": 0.5,
                  "1.": 1, "0x1F": 31}


@pytest.mark.parametrize("spelling", SPELLINGS + ["0x32", "0o62", "5.0e+1", "50", "50.0", "+50"])
def test_a_number_field_gets_the_yaml_12_value_or_a_located_refusal(spelling):
    text = config_with().replace("weight: 50, params", f"weight: {spelling}, params")
    config, problems = parse_config("t.yaml", text=text)
    weight_loc = ("layers", 0, "experiments", 0, "arms", 0, "weight")
    refusals = [p for p in problems if p.loc == weight_loc]
    if spelling in AGREED_WEIGHTS:
        assert refusals == [] and config is not None
        assert config.layers[0].experiments[0].arms[0].weight == AGREED_WEIGHTS[spelling]
    else:
        assert config is None and len(refusals) == 1 and refusals[0].line == 16, problems
        assert refusals[0].rule in ("yaml-ambiguous", "schema")


# Parameter spellings that YAML 1.1 and 1.2 read alike, with that value (worked out by hand from both specs).
AGREED_PARAMS = {"true": True, "True": True, "TRUE": True, "false": False, "False": False, "FALSE": False,
                 "7.10": 7.1, "7.0": 7.0, "1.5e+3": 1500.0, "6.8523015e+5": 685230.15, "-.inf": -math.inf,
                 ".NaN": math.nan, "1.": 1.0, "0.5": 0.5, "0x1F": 31, "SE": "SE", "7.10.2": "7.10.2"}


@pytest.mark.parametrize("spelling", SPELLINGS + list(CORE_EXAMPLE))
def test_a_parameter_never_means_something_else_than_yaml_12_says(spelling):
    text = config_with().replace("params: {size: 1}", f"params: {{size: {spelling}}}" if spelling else "params: {size: }")
    config, problems = parse_config("t.yaml", text=text)
    if config is None:
        (problem,) = problems
        assert (problem.rule, problem.loc) == ("yaml-ambiguous", ("layers", 0, "experiments", 0, "arms", 0, "params", "size"))
        assert "quote it if it is text" in problem.message and spelling not in AGREED_PARAMS
        return
    got = config.layers[0].experiments[0].arms[0].params["size"]
    want = CORE_EXAMPLE[spelling] if spelling in CORE_EXAMPLE else AGREED_PARAMS[spelling]
    if isinstance(want, float) and math.isnan(want):
        assert math.isnan(got)
    else:
        assert got == want and type(got) is type(want)


@pytest.mark.parametrize("tag", ["!!binary aGVsbG8=", "!!timestamp 2026-11-03", "!!set {a, b}", "!!omap [{a: 1}]",
                                 "!local thing", "!!python/object/apply:os.system ['true']", "!!float 7"])
def test_other_tags_are_refused_where_they_stand(tag):
    text = config_with().replace("params: {size: 1}", f"params: {{size: {tag}}}")
    with pytest.raises(ConfigError) as caught:
        load_config("t.yaml", text=text)
    (problem,) = caught.value.problems
    assert problem.loc[-2:] == ("params", "size") and problem.line == 16


def test_explicit_core_tags_are_honoured():
    text = config_with().replace("params: {size: 1}", "params: {size: !!str 0123, big: !!int 7, flag: !!bool true}")
    params = load_config("t.yaml", text=text).layers[0].experiments[0].arms[0].params
    assert params == {"size": "0123", "big": 7, "flag": True}


def _arm_of(config_text: str, unit: str, attrs: dict) -> str | None:
    assigner = Assigner(load_config("t.yaml", text=config_text), sink=MemorySink())
    return assigner.assign({"learner": unit}, attrs).arm("flow")


def test_norway_is_a_country_and_not_false():
    text = config_with(value="SE, NO, DK").replace('["0-4999"]', '["0-9999"]')
    arms = {_arm_of(text, f"L-{i}", {"country": "NO", "plan": "free"}) for i in range(50)}
    assert arms == {"treat", "other"}
    assert {_arm_of(text, f"L-{i}", {"country": "false", "plan": "free"}) for i in range(50)} == {None}


def test_an_override_key_0123_forces_unit_0123_and_not_unit_83():
    text = config_with(override_key="0123")
    assigner = Assigner(load_config("t.yaml", text=text), sink=MemorySink())
    forced = assigner.assign({"learner": "0123"}, {"country": "NL", "plan": "free"}).arm("flow")
    assert forced == "treat"
    assert "83" not in load_config("t.yaml", text=text).layers[0].experiments[0].overrides


def test_a_listed_version_matches_as_written():
    text = config_with(attr="app_version", value="7.10").replace('["0-4999"]', '["0-9999"]')
    assert _arm_of(text, "L-1", {"app_version": "7.10", "plan": "free"}) is not None
    assert _arm_of(text, "L-1", {"app_version": "7.1", "plan": "free"}) is None


@pytest.mark.parametrize("written, version, eligible", [
    (">=7.10", "7.9", False), (">=7.10", "7.10", True), (">=7.10", "7.10.0", True), ("<7.10", "7.9.9", True),
    (">=7.2", "7.10", True), ("==7.010", "7.10", True), ("!=7.10", "7.1", True),
])
def test_version_comparisons_work_on_the_written_text(written, version, eligible):
    text = config_with(attr="app_version").replace("[NL]", f'"{written}"').replace('["0-4999"]', '["0-9999"]')
    assert (_arm_of(text, "L-1", {"app_version": version, "plan": "free"}) is not None) is eligible


def test_the_config_version_id_follows_the_meaning():
    # `NO` was false under YAML 1.1; the version id now hashes the text, so it differs from the id of `false`.
    assert load_config("t.yaml", text=config_with(value="NO")).version != \
        load_config("t.yaml", text=config_with(value="false")).version


def test_every_error_of_a_file_with_many_ambiguous_values_is_reported():
    text = config_with().replace("params: {size: 1}", "params: {a: yes, b: 1_000, c: 12:30, d: 0123}")
    with pytest.raises(ConfigError) as caught:
        load_config(Path("t.yaml"), text=text)
    assert [p.loc[-1] for p in caught.value.problems] == ["a", "b", "c", "d"]
    assert {p.rule for p in caught.value.problems} == {"yaml-ambiguous"}


def test_an_ambiguous_value_hides_nothing_else_in_the_file():
    # A refused value in one layer; a misspelt rollout arm in a second layer and an unknown key elsewhere still show.
    text = config_with().replace("params: {size: 1}", "params: {size: yes}") + """\
  - name: second
    unit: learner
    experiments:
      - {name: beta, status: running, buckets: ["0-99"], rollout: tret, arms: [{name: treat, weight: 100}]}
"""
    text = text.replace("weekly_units:", "weekly_unit:")
    config, problems = parse_config("t.yaml", text=text)
    assert config is None
    assert [(p.rule, p.loc[:2]) for p in problems] == [
        ("yaml-ambiguous", ("layers", 0)), ("schema", ("weekly_unit",)), ("rollout-unknown-arm", ("layers", 1))]
