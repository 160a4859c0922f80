"""`sortition demo`: write and run the demo scenario."""

from __future__ import annotations

from pathlib import Path

import typer

from ..demo import run_demo
from ._exit import demo_exit, guarded


def register(app: typer.Typer) -> None:
    @app.command("demo", epilog="Example: sortition demo --out demo-output")
    def demo(
        out: Path = typer.Option(Path("demo-output"), "--out", help="Folder for the changed configs, logs and report."),
        configs: Path = typer.Option(Path("configs_example"), "--configs", help="The demo scenario's configs."),
        learners: int = typer.Option(60_000, "--learners", min=1000, help="Signed-in learners in the invented logs."),
        days: int = typer.Option(14, "--days", min=7, max=60, help="Days of invented logs."),
        seed: int = typer.Option(2026, "--seed", help="Seed of the invented logs."),
    ) -> None:
        """Run the whole job on the invented demo scenario: assign, check, diff, layout, and the SRM audit."""
        guarded(lambda: demo_exit(run_demo(configs, out, learners, days, seed, echo=typer.echo)))
