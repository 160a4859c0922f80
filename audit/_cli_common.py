"""What every `sortition` subcommand shares: one-line errors, exit codes, KEY=VALUE options."""

from __future__ import annotations

import traceback
from typing import Callable, NoReturn

import typer

from bucketing import ConfigError

state = {"debug": False}


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
        if state["debug"]:
            traceback.print_exc()
        lines = [str(p) for p in exc.problems] or [str(exc)]
        for line in lines:
            typer.echo(f"sortition: {line}", err=True)
        raise typer.Exit(2)
    except (OSError, ValueError, KeyError) as exc:
        if state["debug"]:
            traceback.print_exc()
        fail(str(exc) if not isinstance(exc, KeyError) else str(exc.args[0]))
    raise typer.Exit(code or 0)
