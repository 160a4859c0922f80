"""`sortition layout`: each layer's buckets, and where a new experiment fits."""

from __future__ import annotations

from enum import Enum
from pathlib import Path
from typing import Optional

import typer

from ..checks import layout_of
from ..render import as_json, layout_text
from ._exit import guarded
from ._options import config_argument


class TableFormat(str, Enum):
    text = "text"
    json = "json"


def register(app: typer.Typer) -> None:
    @app.command("layout", epilog="Example: sortition layout configs/ --layer paywall --want 12.5")
    def layout(
        config: Path = typer.Argument(..., help="Config file or directory."),
        layer: Optional[str] = typer.Option(None, "--layer", help="Show only this layer."),
        want: Optional[float] = typer.Option(None, "--want", help="Propose buckets for a new experiment of this percent of the layer."),
        width: int = typer.Option(100, "--width", min=10, max=1000, help="Characters per bar."),
        fmt: TableFormat = typer.Option(TableFormat.text, "--format", help="text or json."),
    ) -> None:
        """Each layer's 10,000 buckets: who owns what, what is free, and where a new experiment fits."""

        def run() -> int:
            result = layout_of(config_argument([config]), layer, want)
            typer.echo(as_json(result) if fmt is TableFormat.json else layout_text(result, width))
            return 0

        guarded(run)
