"""`sortition schema`: the JSON Schema of the config format, made by the SDK from its pydantic models.

Editors that understand JSON Schema validate config YAML as people type; the
schema is the models' own, so it never drifts from what the SDK accepts
(rules across fields, such as overlapping ranges, are `sortition check`'s).
"""

from __future__ import annotations

from bucketing import config_schema

__all__ = ["config_schema"]
