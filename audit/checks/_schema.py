"""`config_schema`: the JSON Schema of the config format, made from the SDK's pydantic models.

Editors that understand JSON Schema validate config YAML as people type; the
schema is the models' own, so it never drifts from what the SDK accepts
(rules across fields, such as overlapping ranges, are `sortition check`'s).
"""

from __future__ import annotations

from typing import Any

from .._sdk import ConfigFile

SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"
SCHEMA_ID = "urn:sortition:config-format:1"


def config_schema() -> dict[str, Any]:
    body = {k: v for k, v in ConfigFile.model_json_schema().items() if k not in ("title", "description")}
    return {
        "$schema": SCHEMA_DIALECT,
        "$id": SCHEMA_ID,
        "title": "sortition experiment config (format 1)",
        "description": "One YAML file of a sortition config: holdouts, layers, experiments and arms. "
                       "Run `sortition check` for the rules that look across fields.",
        **body,
    }
