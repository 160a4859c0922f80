"""CLI command `demo`: writes and runs the demo scenario end to end."""

from __future__ import annotations

import typer


def register(app: typer.Typer) -> None:
    """Add this module's subcommands to the app."""
