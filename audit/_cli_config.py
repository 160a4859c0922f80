"""CLI commands on configs: check, diff, layout, schema (registered by `register`).

The edges of those commands: reading files, stdin and git, parsing options,
printing and exit codes. What they compute lives in `_check`, `_diff`,
`_layout` and `_schema`.
"""

from __future__ import annotations

import dataclasses
import json
import subprocess
import sys
import tempfile
from datetime import date
from enum import Enum
from pathlib import Path
from typing import Optional

import typer

from bucketing import CONFIG_SUFFIXES, Config, ConfigError, Problem, hundredths, parse_config

from . import _check, _diff, _layout
from ._cli_common import fail, guarded, key_value_pairs
from ._sarif import sarif_log
from ._schema import config_schema


class FindingsFormat(str, Enum):
    text = "text"
    json = "json"
    sarif = "sarif"


class TableFormat(str, Enum):
    text = "text"
    json = "json"


def _weekly_units(pairs: list[str]) -> dict[str, int]:
    weekly = {}
    for unit_type, count in key_value_pairs(pairs, "--weekly-units", "UNIT_TYPE=COUNT such as learner=1400000").items():
        if not count.strip().replace("_", "").isdigit():
            fail(f"--weekly-units takes UNIT_TYPE=COUNT such as learner=1400000, found {unit_type}={count!r}")
        weekly[unit_type] = int(count.replace("_", ""))
    return weekly


def _iso_day(text: Optional[str], option: str) -> date:
    if text is None:
        return date.today()
    try:
        return date.fromisoformat(text)
    except ValueError:
        fail(f"{option} takes an ISO date such as 2026-11-03, found {text!r}")


def _print_findings(findings: list[Problem], rules: dict[str, str], fmt: FindingsFormat, text: str, data: str) -> None:
    if fmt is FindingsFormat.sarif:
        typer.echo(json.dumps(sarif_log(findings, rules), indent=2, ensure_ascii=False))
    elif fmt is FindingsFormat.json:
        typer.echo(data)
    else:
        typer.echo(text)


def _check_stdin(options: _check.CheckOptions) -> _check.CheckResult:
    try:
        text = sys.stdin.buffer.read().decode("utf-8")
    except UnicodeDecodeError as exc:
        fail(f"<stdin>: not UTF-8 text ({exc.reason})")
    return _check.check(["<stdin>"], options, text=text)


def _merge(results: list[_check.CheckResult]) -> _check.CheckResult:
    return _check.CheckResult(
        tuple(f for r in results for f in r.findings),
        tuple(w for r in results for w in r.waived),
        tuple(f for r in results for f in r.files),
    )


def _load(sources: list[Path]) -> Config:
    """A config that can be analysed, or exit 2 with its located errors (one per line)."""
    config, problems = parse_config(sources)
    if config is None:
        raise ConfigError(problems)
    errors = sum(1 for p in problems if p.severity == "error")
    if errors:
        typer.echo(f"sortition: note: {', '.join(map(str, sources))} has {errors} error(s); "
                   "`sortition check` lists them", err=True)
    return config


def _git(args: list[str], cwd: Path) -> str:
    done = subprocess.run(["git", *args], cwd=cwd, capture_output=True, text=True)
    if done.returncode != 0:
        fail(f"git {' '.join(args)}: {(done.stderr.strip().splitlines() or ['failed'])[-1]}")
    return done.stdout


def _git_version(ref: str, path: Path) -> tuple[Config | None, dict[str, str]]:
    """The config at `path` as it was at git `ref` (None when it did not exist), and temp-file -> 'ref:path' names."""
    start = path if path.is_dir() else path.parent
    top = Path(_git(["rev-parse", "--show-toplevel"], start).strip())
    try:
        relative = path.resolve().relative_to(top.resolve()).as_posix()
    except ValueError:
        fail(f"{path} is outside the git repository at {top}")
    _git(["rev-parse", "--verify", "--quiet", f"{ref}^{{commit}}"], top)
    names = [n for n in _git(["ls-tree", "-r", "--name-only", ref, "--", relative or "."], top).splitlines()
             if n.endswith(CONFIG_SUFFIXES)]
    if not names:
        return None, {}
    with tempfile.TemporaryDirectory(prefix="sortition-base-") as scratch:
        renames = {}
        files = []
        for name in names:
            target = Path(scratch, name)
            target.parent.mkdir(parents=True, exist_ok=True)
            target.write_bytes(subprocess.run(["git", "show", f"{ref}:{name}"], cwd=top, capture_output=True,
                                              check=True).stdout)
            renames[str(target)] = f"{ref}:{name}"
            files.append(target)
        config, problems = parse_config(files)
    if config is None:
        raise ConfigError([dataclasses.replace(p, file=renames.get(p.file, p.file)) for p in problems])
    return config, renames


def _renamed(change: _diff.ExperimentChange, renames: dict[str, str]) -> _diff.ExperimentChange:
    if change.finding is None or change.finding.file not in renames:
        return change
    return dataclasses.replace(change, finding=dataclasses.replace(change.finding, file=renames[change.finding.file]))


def register(app: typer.Typer) -> None:
    """Add this module's subcommands to the app."""

    @app.command(
        "check",
        epilog="Example: sortition check configs/ --format sarif --weekly-units learner=1400000 > check.sarif",
    )
    def check(
        paths: list[Path] = typer.Argument(None, help="Config files or directories, merged into one config; '-' reads stdin."),
        fmt: FindingsFormat = typer.Option(FindingsFormat.text, "--format", help="text, json or sarif."),
        ignore: list[str] = typer.Option([], "--ignore", help="Turn a warning rule off for this run, repeatable."),
        today: Optional[str] = typer.Option(None, "--today", help="Judge dates as of this ISO date (default: today)."),
        weekly_units: list[str] = typer.Option([], "--weekly-units", help="Expected units a week, UNIT_TYPE=COUNT, repeatable; overrides the config's weekly_units."),
        min_arm_units: int = typer.Option(_check.DEFAULT_MIN_ARM_UNITS, "--min-arm-units", min=0, help="Warn when an arm expects fewer units a week."),
        strict: bool = typer.Option(False, "--strict", help="Exit 1 on warnings too."),
        separate: bool = typer.Option(False, "--separate", help="Check each PATH as a config of its own instead of merging them."),
        rules: bool = typer.Option(False, "--rules", help="List the rule ids and exit."),
    ) -> None:
        """Lint configs for CI: exit 0 when clean, 1 on errors, 2 when a file cannot be read."""

        def run() -> int:
            if rules:
                typer.echo(_check.render_rules())
                return 0
            if not paths:
                fail("give at least one config file or directory (or '-' for stdin)")
            for rule in ignore:
                reason = _check.ignorable(rule)
                if reason:
                    fail(f"--ignore {rule}: {reason}")
            options = _check.CheckOptions(_iso_day(today, "--today"), _weekly_units(weekly_units), min_arm_units,
                                          frozenset(ignore))
            groups = [[p] for p in paths] if separate else [paths]
            result = _merge([_check_stdin(options) if group == [Path("-")] else _check.check(group, options)
                             for group in groups])
            _print_findings(list(result.findings), _check.ALL_RULES, fmt, _check.render_text(result),
                            _check.render_json(result))
            if result.unreadable and fmt is not FindingsFormat.text:
                for finding in result.findings:
                    if finding.rule in _check.UNREADABLE_RULES:
                        typer.echo(f"sortition: {finding}", err=True)
            return result.exit_code(strict)

        guarded(run)

    @app.command(
        "diff",
        epilog="Examples: sortition diff old-configs/ configs/   |   sortition diff --base origin/main configs/ --format sarif",
    )
    def diff(
        paths: list[Path] = typer.Argument(..., help="OLD NEW (files or directories), or only NEW with --base."),
        base: Optional[str] = typer.Option(None, "--base", help="Read the old version of the path from this git ref."),
        fmt: FindingsFormat = typer.Option(FindingsFormat.text, "--format", help="text, json or sarif."),
    ) -> None:
        """Impact of a config change on every experiment: units that keep their arm, switch, leave, enter."""

        def run() -> int:
            renames: dict[str, str] = {}
            if base is not None:
                if len(paths) != 1:
                    fail("with --base give one path, the new version")
                new = _load(paths)
                old, renames = _git_version(base, paths[0])
            else:
                if len(paths) != 2:
                    fail("give OLD and NEW, or --base GIT_REF NEW")
                old, new = _load([paths[0]]), _load([paths[1]])
            changes = [_renamed(c, renames) for c in _diff.diff_configs(old, new)]
            _print_findings(_diff.findings(changes), _diff.DIFF_RULES, fmt, _diff.render_text(changes),
                            _diff.render_json(changes))
            return _diff.exit_code(changes)

        guarded(run)

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
            wanted = None
            if want is not None:
                wanted = hundredths(want)
                if wanted is None or not 0 < wanted <= 10_000:
                    fail(f"--want takes a percent above 0 and at most 100 with at most two decimals, found {want}")
            items = _layout.layouts(_load([config]), layer)
            proposals = {item.name: _layout.propose(item, wanted) for item in items} if wanted else {}
            if fmt is TableFormat.json:
                typer.echo(_layout.render_json(items, proposals, wanted))
            else:
                typer.echo(_layout.render_text(items, proposals, wanted, width))
            return 0

        guarded(run)

    @app.command("schema", epilog="Example: sortition schema > sortition.schema.json")
    def schema() -> None:
        """Print the JSON Schema of the config format, for editors that validate YAML as you type."""
        guarded(lambda: typer.echo(json.dumps(config_schema(), indent=2)) or 0)
