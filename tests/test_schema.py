"""`sortition schema`: a valid JSON Schema (2020-12) that accepts what the SDK's models accept."""

import json
from datetime import date

import jsonschema
import pytest
import yaml

from bucketing import config_schema
from tests.conftest import CHECK_FIXTURES, EXAMPLE


@pytest.fixture(scope="module")
def schema():
    return config_schema()


def test_the_command_prints_the_schema(sortition, schema):
    got = sortition("schema")
    assert got.exit_code == 0 and json.loads(got.stdout) == schema


def _as_json(value):
    """YAML values as an editor's JSON Schema validator sees them: dates are ISO strings."""
    if isinstance(value, dict):
        return {k: _as_json(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_as_json(v) for v in value]
    return value.isoformat() if isinstance(value, date) else value


def test_schema_is_valid_json_schema_2020_12_with_our_id(schema):
    jsonschema.Draft202012Validator.check_schema(schema)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["$id"].startswith("urn:sortition:") and "sortition" in schema["title"]


@pytest.mark.parametrize("file", sorted(EXAMPLE.glob("*.yaml")) + [CHECK_FIXTURES / "clean.yaml"], ids=lambda p: p.name)
def test_configs_the_sdk_loads_pass_the_schema(schema, file):
    jsonschema.Draft202012Validator(schema).validate(_as_json(yaml.safe_load(file.read_text())))


@pytest.mark.parametrize("fixture, field", [("schema.yaml", "colour"), ("schema-type.yaml", "launched")])
def test_configs_the_sdk_rejects_for_their_shape_fail_the_schema(schema, fixture, field):
    errors = list(jsonschema.Draft202012Validator(schema).iter_errors(_as_json(yaml.safe_load((CHECK_FIXTURES / fixture).read_text()))))
    assert errors and any(field in e.message for e in errors)


def test_schema_knows_the_optional_keys(schema):
    experiment = schema["$defs"]["Experiment"]["properties"]
    assert {"waivers", "reassign_ok", "eligible", "overrides"} <= set(experiment)
    assert "weekly_units" in schema["properties"]
