"""The `sortition` command: one Typer app, each subcommand registered by its own module."""

from __future__ import annotations

import typer

from .. import __version__
from . import _assign, _check, _demo, _diff, _layout, _schema, _srm
from ._exit import state

app = typer.Typer(
    name="sortition",
    help="Layered experiment assignment, config checks for CI, and SRM audits of exposure logs.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


def _print_version(asked: bool) -> None:
    if asked:
        typer.echo(f"sortition {__version__}")
        raise typer.Exit(0)


@app.callback()
def _root(
    debug: bool = typer.Option(False, "--debug", help="Show tracebacks instead of one-line errors."),
    version: bool = typer.Option(False, "--version", callback=_print_version, is_eager=True,
                                 help="Print the version and exit."),
) -> None:
    state["debug"] = debug


for _module in (_assign, _check, _diff, _layout, _schema, _srm, _demo):
    _module.register(app)


def main() -> None:
    app(prog_name="sortition")
