"""The `sortition` command: one Typer app, each subcommand registered by its own module."""

from __future__ import annotations

import traceback
from typing import Callable, NoReturn

import typer

from bucketing import ConfigError

app = typer.Typer(
    name="sortition",
    help="Layered experiment assignment, config checks for CI, and SRM audits of exposure logs.",
    no_args_is_help=True,
    add_completion=False,
    pretty_exceptions_enable=False,
)

_state = {"debug": False}


@app.callback()
def _root(debug: bool = typer.Option(False, "--debug", help="Show tracebacks instead of one-line errors.")) -> None:
    _state["debug"] = debug


def fail(message: str, code: int = 2) -> NoReturn:
    """Print one line on stderr and exit with `code` (2: unreadable input, by the contract)."""
    typer.echo(f"sortition: {message}", err=True)
    raise typer.Exit(code)


def key_value_pairs(pairs: list[str], option: str, shape: str) -> dict[str, str]:
    """['a=1', 'b=2'] -> {'a': '1', 'b': '2'}; a pair without '=' or a key is a one-line error."""
    parsed = {}
    for pair in pairs:
        key, sep, value = pair.partition("=")
        if not sep or not key:
            fail(f"{option} takes {shape}, found {pair!r}")
        parsed[key] = value
    return parsed


def guarded(run: Callable[[], int | None]) -> None:
    """Run a command body: known errors become one line on stderr, unless --debug."""
    try:
        code = run()
    except typer.Exit:
        raise
    except ConfigError as exc:
        if _state["debug"]:
            traceback.print_exc()
        lines = [str(p) for p in exc.problems] or [str(exc)]
        for line in lines:
            typer.echo(f"sortition: {line}", err=True)
        raise typer.Exit(2)
    except (OSError, ValueError, KeyError) as exc:
        if _state["debug"]:
            traceback.print_exc()
        fail(str(exc) if not isinstance(exc, KeyError) else str(exc.args[0]))
    raise typer.Exit(code or 0)


def _register_all() -> None:
    from . import _cli_assign, _cli_config, _cli_demo, _cli_srm

    for module in (_cli_assign, _cli_config, _cli_srm, _cli_demo):
        module.register(app)


_register_all()


def main() -> None:
    app(prog_name="sortition")

