"""CLI command `srm`: the sample-ratio-mismatch audit of exposure logs."""

from __future__ import annotations

import typer


def register(app: typer.Typer) -> None:
    """Add this module's subcommands to the app."""
