"""`sortition check`: lint configs for CI."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Optional

import typer

from ..checks import DEFAULT_MIN_ARM_UNITS, RULES, UNREADABLE_RULES, CheckResult, check_config, meanings
from ..checks import why_not_ignorable
from ..render import as_json, check_text, rules_text, sarif_json
from ._exit import check_exit, fail, guarded
from ._options import FindingsFormat, iso_day, weekly_units


def register(app: typer.Typer) -> None:
    @app.command(
        "check",
        epilog="Example: sortition check configs/ --format sarif --weekly-units learner=1400000 > check.sarif   "
        "(exit 0: clean, 1: errors, or warnings with --strict, 2: unreadable input)",
    )
    def check(
        paths: list[Path] = typer.Argument(None, help="Config files or directories, merged into one config; '-' reads stdin."),
        fmt: FindingsFormat = typer.Option(FindingsFormat.text, "--format", help="text, json or sarif."),
        ignore: list[str] = typer.Option([], "--ignore", help="Turn a warning rule off for this run, repeatable."),
        day: Optional[str] = typer.Option(None, "--day", help="Judge dates as of this ISO date (default: today)."),
        today: Optional[str] = typer.Option(None, "--today", hidden=True, help="Old name of --day."),
        weekly: list[str] = typer.Option([], "--weekly-units", help="Expected units a week, UNIT_TYPE=COUNT, "
                                         "repeatable; overrides the config's weekly_units."),
        min_arm_units: int = typer.Option(DEFAULT_MIN_ARM_UNITS, "--min-arm-units", min=0,
                                          help="Warn when an arm expects fewer units a week."),
        strict: bool = typer.Option(False, "--strict", help="Count warnings as findings: exit 1 on warnings too."),
        separate: bool = typer.Option(False, "--separate", help="Check each PATH as a config of its own instead of merging them."),
        rules: bool = typer.Option(False, "--rules", help="List the rule ids and exit."),
    ) -> None:
        """Lint configs for CI: exit 0 when clean, 1 on errors, 2 when a file cannot be read."""

        def run() -> int:
            if rules:
                typer.echo(rules_text())
                return 0
            if not paths:
                fail("give at least one config file or directory (or '-' for stdin)")
            for rule in ignore:
                reason = why_not_ignorable(rule)
                if reason:
                    fail(f"--ignore {rule}: {reason}" + ("" if rule in RULES else "; `sortition check --rules` lists them"))
            as_of = iso_day(day, "--day") or iso_day(today, "--today")
            weekly_counts = weekly_units(weekly)

            def checked(group: list[Path]) -> CheckResult:
                stdin = group == [Path("-")]
                return check_config(["<stdin>"] if stdin else group, day=as_of, weekly_units=weekly_counts,
                                    min_arm_units=min_arm_units, ignore=ignore,
                                    text=sys.stdin.buffer if stdin else None)  # the SDK reads it up to its size cap

            results = [checked([p]) for p in paths] if separate else [checked(paths)]
            result = sum(results[1:], results[0])
            if fmt is FindingsFormat.sarif:
                typer.echo(sarif_json(result.findings, meanings("sdk", "lint")))
            elif fmt is FindingsFormat.json:
                typer.echo(as_json(result))
            else:
                typer.echo(check_text(result))
            if result.unreadable and fmt is not FindingsFormat.text:
                for finding in result.findings:
                    if finding.rule in UNREADABLE_RULES:
                        typer.echo(f"sortition: {finding}", err=True)
            return check_exit(result, strict)

        guarded(run)
