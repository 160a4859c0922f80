"""CLI commands on configs: check, diff, layout, schema (registered by `register`)."""

from __future__ import annotations

import typer


def register(app: typer.Typer) -> None:
    """Add this module's subcommands to the app."""
