"""Finding the log files: paths, globs and directories, and each file's format from its name."""

from __future__ import annotations

import glob
from dataclasses import dataclass
from pathlib import Path
from typing import Iterable

from .._errors import LogError

FORMATS = {".jsonl": "jsonl", ".ndjson": "jsonl", ".json": "jsonl", ".csv": "csv", ".tsv": "tsv", ".parquet": "parquet"}
LOG_FORMATS = ("jsonl", "csv", "tsv", "parquet")


@dataclass(frozen=True)
class LogFile:
    path: str
    format: str  # jsonl | csv | tsv | parquet
    compressed: bool


def format_of(path: str) -> tuple[str, bool] | None:
    """(format, gzip-compressed) from a file name, or None when the name does not say."""
    name = path.lower()
    compressed = name.endswith(".gz")
    if compressed:
        name = name[:-3]
    suffix = name[name.rfind("."):] if "." in name else ""
    kind = FORMATS.get(suffix)
    return (kind, compressed) if kind else None


def resolve_files(sources: Iterable[str | Path], default_format: str | None = None) -> list[LogFile]:
    """Files named by paths, globs and directories (searched recursively), in name order."""
    if default_format is not None and default_format not in LOG_FORMATS:
        raise LogError(f"unknown log format {default_format!r}; the formats are {', '.join(LOG_FORMATS)}")
    found: list[LogFile] = []
    for source in map(str, sources):
        if any(ch in source for ch in "*?["):
            paths = sorted(glob.glob(source, recursive=True))
            if not paths:
                raise LogError(f"{source}: no files match this pattern")
        elif Path(source).is_dir():
            paths = sorted(str(p) for p in Path(source).rglob("*") if p.is_file() and format_of(str(p)))
            if not paths:
                raise LogError(f"{source}: no .jsonl, .csv, .tsv or .parquet files (plain or .gz) in this directory")
        elif Path(source).is_file():
            paths = [source]
        else:
            raise LogError(f"{source}: no such file or directory")
        for path in paths:
            detected = format_of(path)
            if detected is None and default_format:
                detected = (default_format, path.lower().endswith(".gz"))
            if detected is None:
                raise LogError(f"{path}: unknown log format; name it .jsonl, .csv, .tsv or .parquet "
                               f"(optionally .gz), or give the format")
            if detected[0] == "parquet" and detected[1]:
                raise LogError(f"{path}: Parquet compresses inside the file; gzip around it is not supported")
            found.append(LogFile(path, *detected))
    return found
