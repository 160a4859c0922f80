"""The one place exit codes are chosen, and errors become one line on stderr.

The contract: 0 when all is well, 1 when the command found what it looks
for (errors in a config, a blocked change, a sample ratio mismatch), 2 when
input cannot be read. `--strict` (check and srm alike) turns what is
otherwise only reported (warnings of `check`, malformed records of `srm`)
into findings: exit 1.
"""

from __future__ import annotations

import traceback
from typing import TYPE_CHECKING, Callable, NoReturn

import typer

from bucketing import ConfigError, SortitionError

from .._errors import MissingFieldError

if TYPE_CHECKING:
    from ..checks import CheckResult, ConfigDiff
    from ..srm import AuditResult

OK, FOUND, UNREADABLE = 0, 1, 2

state = {"debug": False}


def fail(message: str, code: int = UNREADABLE) -> NoReturn:
    """Print one line on stderr and exit with `code` (2: unreadable input, by the contract)."""
    typer.echo(f"sortition: {message}", err=True)
    raise typer.Exit(code)


def check_exit(result: CheckResult, strict: bool) -> int:
    """2 when input is unreadable, 1 on an error (or, with --strict, a warning), else 0."""
    if result.unreadable:
        return UNREADABLE
    return FOUND if result.errors or (strict and result.warnings) else OK


def diff_exit(diff: ConfigDiff) -> int:
    """1 when a running experiment's units would move without an approval."""
    return FOUND if diff.blocked else OK


def srm_exit(result: AuditResult, strict: bool) -> int:
    """1 on any mismatch (or, with --strict, any malformed record, named on stderr), else 0."""
    if strict and result.malformed.total:
        first = result.malformed.examples[0] if result.malformed.examples else None
        where = f"{first.file}:{first.line}: " if first and first.line else (f"{first.file}: " if first else "")
        typer.echo(f"sortition: {where}{first.detail if first else 'malformed record'} "
                   f"({result.malformed.total} malformed record(s); --strict counts them as findings)", err=True)
        return FOUND
    return FOUND if result.any_srm else OK


def demo_exit(behaved: bool) -> int:
    """1 when a step of the demo did not behave as the story says."""
    return OK if behaved else FOUND


def _hint(exc: BaseException) -> str:
    """What the command line adds to a library error: the option that fixes it."""
    if isinstance(exc, MissingFieldError) and exc.column == exc.field:
        return f"; map it with --column {exc.field}=NAME"
    return ""


def guarded(run: Callable[[], int | None]) -> None:
    """Run a command body: known errors become one line on stderr (exit 2), unless --debug."""
    try:
        code = run()
    except typer.Exit:
        raise
    except ConfigError as exc:
        if state["debug"]:
            traceback.print_exc()
        for line in [str(p) for p in exc.problems] or [str(exc)]:
            typer.echo(f"sortition: {line}", err=True)
        raise typer.Exit(UNREADABLE)
    except (SortitionError, OSError, ValueError, KeyError) as exc:
        if state["debug"]:
            traceback.print_exc()
        fail((str(exc) if not isinstance(exc, KeyError) else str(exc.args[0])) + _hint(exc))
    raise typer.Exit(code or OK)
