"""`sortition schema`: the JSON Schema of the config format, for editors."""

from __future__ import annotations

import json

import typer

from bucketing import config_schema

from ._exit import guarded


def register(app: typer.Typer) -> None:
    @app.command("schema", epilog="Example: sortition schema > sortition.schema.json")
    def schema() -> None:
        """Print the JSON Schema of the config format, for editors that validate YAML as you type."""
        def run() -> int:
            typer.echo(json.dumps(config_schema(), indent=2))
            return 0

        guarded(run)
