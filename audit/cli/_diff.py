"""`sortition diff`: the impact of a config change, the old version from a path or from git."""

from __future__ import annotations

import dataclasses
import subprocess
import tempfile
from pathlib import Path
from typing import Optional

import typer

from bucketing import CONFIG_SUFFIXES, Config, ConfigError, parse_config

from ..checks import ConfigDiff, ExperimentChange, diff_configs, meanings
from ..render import as_json, diff_text, sarif_json
from ._exit import diff_exit, fail, guarded
from ._options import FindingsFormat, config_argument


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


def _renamed(change: ExperimentChange, renames: dict[str, str]) -> ExperimentChange:
    if change.finding is None or change.finding.file not in renames:
        return change
    return dataclasses.replace(change, finding=dataclasses.replace(change.finding, file=renames[change.finding.file]))


def register(app: typer.Typer) -> None:
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
                new = config_argument(paths)
                old, renames = _git_version(base, paths[0])
            else:
                if len(paths) != 2:
                    fail("give OLD and NEW, or --base GIT_REF NEW")
                old, new = config_argument([paths[0]]), config_argument([paths[1]])
            result = diff_configs(old, new)
            result = ConfigDiff(tuple(_renamed(c, renames) for c in result.changes))
            if fmt is FindingsFormat.sarif:
                typer.echo(sarif_json(result.findings, meanings("diff")))
            elif fmt is FindingsFormat.json:
                typer.echo(as_json(result))
            else:
                typer.echo(diff_text(result))
            return diff_exit(result)

        guarded(run)
