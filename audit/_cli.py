"""The `sortition` command: one Typer app, each subcommand registered by its own module."""

from __future__ import annotations

import typer

from . import _cli_assign, _cli_common, _cli_config, _cli_demo, _cli_srm

app = typer.Typer(
    name="sortition",
    help="Layered experiment assignment, config checks for CI, and SRM audits of exposure logs.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)


@app.callback()
def _root(debug: bool = typer.Option(False, "--debug", help="Show tracebacks instead of one-line errors.")) -> None:
    _cli_common.state["debug"] = debug


for _module in (_cli_assign, _cli_config, _cli_srm, _cli_demo):
    _module.register(app)


def main() -> None:
    app(prog_name="sortition")
