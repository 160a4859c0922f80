"""`sortition diff`: the impact of a config change, the old version from a path or from git.

With `--base REF` the old version is read out of git into a scratch folder.
The names come from a git tree, which anyone can craft, so every name is
checked to stay inside that folder before anything is written, and no
file is ever overwritten there.
"""

from __future__ import annotations

import dataclasses
import subprocess
import tempfile
from pathlib import Path, PurePosixPath
from typing import Optional

import typer

from bucketing import CONFIG_SUFFIXES, Config, ConfigError, SortitionError, parse_config

from .._errors import AuditError
from ..checks import ConfigDiff, ExperimentChange, diff_configs, meanings
from ..render import as_json, diff_text, sarif_json
from ._exit import diff_exit, guarded
from ._options import FindingsFormat, config_argument

REGULAR_FILE_MODES = ("100644", "100755")  # git tree modes of plain files (links and submodules are left out)


def _git(args: list[str], cwd: Path) -> subprocess.CompletedProcess[bytes]:
    try:
        return subprocess.run(["git", *args], cwd=cwd, capture_output=True)
    except FileNotFoundError:
        raise AuditError("--base reads the old version from git, and git is not installed here") from None


def _fetch_hint(ref: str, top: Path) -> str:
    """How to fetch a missing base into a clone, for the usual case of a shallow CI checkout."""
    remotes = _git(["remote"], top).stdout.decode(errors="replace").split()
    short = ref.removeprefix("refs/remotes/")
    remote, _, branch = short.partition("/")
    if remote in remotes and branch:
        return f"git fetch --depth=1 {remote} {branch}:refs/remotes/{remote}/{branch}"
    return f"git fetch --depth=1 {remotes[0] if remotes else 'origin'} {ref}"


def _missing_base(ref: str, top: Path) -> AuditError:
    shallow = _git(["rev-parse", "--is-shallow-repository"], top).stdout.strip() == b"true"
    why = ("this clone is shallow and holds only the commits it fetched" if shallow
           else "no branch, tag or commit of that name is here")
    return AuditError(f"the base {ref!r} is not in the git clone at {top} ({why}); fetch the base first, "
                      f"e.g. `{_fetch_hint(ref, top)}`, then run diff again")


def _checked_name(name: str, scratch: Path, ref: str) -> Path:
    """Where a file of the git tree goes in the scratch folder; a name that could lead outside it is refused."""
    parts = PurePosixPath(name).parts
    target = scratch.joinpath(*parts).resolve()
    if not parts or PurePosixPath(name).is_absolute() or any(p in ("..", ".", "") for p in parts) \
            or "\\" in name or not target.is_relative_to(scratch.resolve()):
        raise AuditError(f"the base {ref!r} holds a file named {name!r}, a path that leads outside the folder "
                         "it is read into; refused (nothing was written). Such a tree is crafted, not made by git")
    return target


def _git_version(ref: str, path: Path) -> tuple[Config | None, dict[str, str]]:
    """The config at `path` as it was at git `ref` (None when it did not exist), and temp-file -> 'ref:path' names."""
    start = path if path.is_dir() else path.parent
    found = _git(["rev-parse", "--show-toplevel"], start)
    if found.returncode != 0:
        raise AuditError(f"{path} is not inside a git repository, so there is no old version to read at {ref!r}; "
                         "give OLD and NEW paths instead")
    top = Path(found.stdout.decode().strip())
    try:
        relative = path.resolve().relative_to(top.resolve()).as_posix()
    except ValueError:
        raise AuditError(f"{path} is outside the git repository at {top}") from None
    if _git(["rev-parse", "--verify", "--quiet", f"{ref}^{{commit}}"], top).returncode != 0:
        raise _missing_base(ref, top)
    listed = _git(["ls-tree", "-r", "-z", "--full-name", ref, "--", relative or "."], top)
    if listed.returncode != 0:
        raise AuditError(f"cannot list the files of {relative or 'the repository'} at {ref!r} in {top}")
    blobs = []
    for entry in listed.stdout.split(b"\0"):
        meta, _, raw_name = entry.partition(b"\t")
        mode, kind, obj = (meta.decode().split() + ["", "", ""])[:3]
        name = raw_name.decode("utf-8", errors="surrogateescape")
        if kind == "blob" and mode in REGULAR_FILE_MODES and name.endswith(CONFIG_SUFFIXES):
            blobs.append((name, obj))
    if not blobs:
        return None, {}
    with tempfile.TemporaryDirectory(prefix="sortition-base-") as scratch:
        targets = [_checked_name(name, Path(scratch), ref) for name, _ in blobs]  # every name, before any write
        renames = {}
        for (name, obj), target in zip(blobs, targets):
            content = _git(["cat-file", "blob", obj], top)
            if content.returncode != 0:
                raise AuditError(f"cannot read {name!r} at {ref!r} from the git clone at {top}")
            target.parent.mkdir(parents=True, exist_ok=True)
            with open(target, "xb") as out:  # "x": two names for one place fail instead of overwriting
                out.write(content.stdout)
            renames[str(target)] = f"{ref}:{name}"
        config, problems = parse_config(targets)
    if config is None:
        raise ConfigError([dataclasses.replace(p, file=renames.get(p.file, p.file)) for p in problems])
    return config, renames


def _renamed(change: ExperimentChange, renames: dict[str, str]) -> ExperimentChange:
    """Findings placed in the old version name `ref:path`, not the scratch file they were read from."""
    findings = tuple(dataclasses.replace(f, file=renames[f.file]) if f.file in renames else f for f in change.findings)
    return dataclasses.replace(change, findings=findings)


def register(app: typer.Typer) -> None:
    @app.command(
        "diff",
        epilog="Examples: sortition diff old-configs/ configs/   |   sortition diff --base origin/main configs/ "
        "--format sarif   (exit 0: nothing blocked, 1: a running experiment would move units without approval, "
        "2: unreadable input or a base that is not in the clone; --format sarif then still writes a SARIF log that "
        "carries the error)",
    )
    def diff(
        paths: list[Path] = typer.Argument(..., help="OLD NEW (files or directories), or only NEW with --base."),
        base: Optional[str] = typer.Option(None, "--base", help="Read the old version of the path from this git "
                                           "ref (a shallow CI clone must fetch it first)."),
        fmt: FindingsFormat = typer.Option(FindingsFormat.text, "--format", help="text, json or sarif."),
    ) -> None:
        """Impact of a config change on every experiment: units that keep their arm, switch, leave, enter.

        A running experiment whose units would switch arm or leave is blocked
        unless this change adds or changes its `reassign_ok` (an approval
        carried over unchanged is stale), or it is a staged rollout
        (`rollout: ARM`) and every moving unit goes into the released arm.
        """

        def compared() -> ConfigDiff:
            renames: dict[str, str] = {}
            if base is not None:
                if len(paths) != 1:
                    raise AuditError("with --base give one path, the new version")
                new = config_argument(paths)
                old, renames = _git_version(base, paths[0])
            else:
                if len(paths) != 2:
                    raise AuditError("give OLD and NEW, or --base GIT_REF NEW")
                old, new = config_argument([paths[0]]), config_argument([paths[1]])
            result = diff_configs(old, new)
            return ConfigDiff(tuple(_renamed(c, renames) for c in result.changes))

        def run() -> int:
            try:
                result = compared()
            except (SortitionError, OSError) as exc:
                if fmt is FindingsFormat.sarif:  # an upload step needs a valid log, and this one says what failed
                    problems = exc.problems if isinstance(exc, ConfigError) else []
                    typer.echo(sarif_json(problems, meanings("sdk", "diff"), failure=str(exc)))
                raise
            if fmt is FindingsFormat.sarif:
                typer.echo(sarif_json(result.findings, meanings("diff")))
            elif fmt is FindingsFormat.json:
                typer.echo(as_json(result))
            else:
                typer.echo(diff_text(result))
            return diff_exit(result)

        guarded(run)
