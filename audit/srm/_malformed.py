"""Reporting malformed records: counts by kind, and a few examples located by file and line.

The view `exposure_rows` keeps every record, good or bad; this module counts
the bad ones, adds the rows the CSV reader rejected, and finds the line
numbers of JSON Lines and CSV examples by reading each file only as far as
its last example.
"""

from __future__ import annotations

import csv
import gzip
import io
from typing import Any, Callable, Generator, Mapping

from . import _sql
from ._files import LogFile
from ._results import Malformed, MalformedExample
from ._scan import LogScan

PROBLEM_KINDS = ("unparseable", "truncated", "missing_field", "wrong_type")


def malformed_records(scan: LogScan, counts_by_kind: Mapping[str, int]) -> Malformed:
    """Malformed records: the kinds counted in `exposure_rows`, plus rows the CSV reader rejected."""
    counts = {k: v for k, v in counts_by_kind.items() if v}
    examples = [MalformedExample(kind, file, line, detail or kind.replace("_", " "), text)
                for kind, file, line, detail, text in scan.fetch(_sql.malformed_examples())] if counts else []
    for rejects in scan.rejects:
        for kind, file, line, detail, text in scan.fetch(_sql.rejected_rows(rejects)):
            counts[kind] = counts.get(kind, 0) + 1
            if sum(1 for ex in examples if ex.kind == kind) < _sql.EXAMPLES_PER_KIND:
                examples.append(MalformedExample(kind, file, line, detail, text))
    located = _with_lines(examples, {f.path: f for f in scan.files}, scan.delimiters)
    located.sort(key=lambda ex: (PROBLEM_KINDS.index(ex.kind), ex.file, ex.line or 0))
    return Malformed(counts, tuple(located))


def _with_lines(examples: list[MalformedExample], files: Mapping[str, LogFile],
                delimiters: Mapping[str, str]) -> list[MalformedExample]:
    """The examples, those of JSON Lines and CSV files given the line number where their text is found."""
    wanted: dict[str, dict[str, list[int]]] = {}  # file -> text -> indexes of examples without a line
    for index, ex in enumerate(examples):
        if ex.line is None and ex.text is not None and ex.file in files and files[ex.file].format != "parquet":
            wanted.setdefault(ex.file, {}).setdefault(ex.text, []).append(index)
    lines: dict[int, int] = {}
    for path, by_text in wanted.items():
        remaining = sum(len(v) for v in by_text.values())
        records = _numbered_records(files[path], delimiters.get(path))
        try:
            for number, text in records:
                unplaced = by_text.get(text[:300])
                if unplaced:
                    lines[unplaced.pop(0)] = number
                    remaining -= 1
                    if remaining == 0:
                        break
        finally:
            records.close()  # the file closes now, not when the generator is collected
    return [MalformedExample(ex.kind, ex.file, lines[i], ex.detail, ex.text) if i in lines else ex
            for i, ex in enumerate(examples)]


def _numbered_records(log: LogFile, delimiter: str | None) -> Generator[tuple[int, str], None, None]:
    """(first line number, text) of each record: a JSON line, or a CSV row's fields joined by `delimiter`."""
    opener: Callable[..., Any] = gzip.open if log.compressed else open
    with opener(log.path, "rb") as raw:
        stream = io.TextIOWrapper(raw, encoding="utf-8-sig", errors="replace", newline="" if delimiter else "\n")
        if delimiter is None:
            for number, line in enumerate(stream, start=1):
                yield number, line.rstrip("\r\n")
            return
        rows = csv.reader(stream, delimiter=delimiter)
        next(rows, None)
        start = rows.line_num + 1
        for row in rows:
            yield start, delimiter.join(row)
            start = rows.line_num + 1
