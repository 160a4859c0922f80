"""A validated, merged config and where each of its parts was written.

`Config` is what the loader returns and what the rules, the assigner and
`sortition` read; `locate` and `problem` map a merged path back to file,
line and column. It lives apart from the loader so that the rules can
read a config without importing the code that reads files.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Iterable

from ._errors import Problem
from ._model import Holdout, Layer

PathKey = tuple[Any, ...]


def format_path(path: Iterable[Any]) -> str:
    """('layers', 0, 'arms', 1, 'weight') -> 'layers[0].arms[1].weight'."""
    out = ""
    for part in path:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += ("." if out else "") + str(part)
    return out


@dataclass
class Document:
    """One file: its plain data, the mark (line, column) of every path in it, and errors found while reading
    that did not stop the reading (each makes the config unusable)."""

    file: str
    data: Any = None
    marks: dict[PathKey, tuple[int, int]] = field(default_factory=dict)
    findings: list[Problem] = field(default_factory=list)

    def locate(self, path: PathKey) -> tuple[int, int]:
        for cut in range(len(path), -1, -1):
            mark = self.marks.get(tuple(path[:cut]))
            if mark is not None:
                return mark
        return (1, 1)

    def problem(self, rule: str, path: PathKey, message: str, severity: str = "error") -> Problem:
        line, column = self.locate(path)
        return Problem(rule, severity, self.file, line, column, format_path(path), message, tuple(path))


@dataclass(frozen=True)
class Origin:
    """Where a merged element came from: its document and its path there."""

    document: Document
    path: PathKey


@dataclass(frozen=True, eq=False)
class Config:
    """A validated, merged config. `locate` maps a merged path to file, line, column."""

    layers: tuple[Layer, ...]
    holdouts: tuple[Holdout, ...]
    weekly_units: dict[str, int]
    version: str
    files: tuple[str, ...]
    _layer_origins: tuple[Origin, ...] = field(repr=False, default=())
    _holdout_origins: tuple[Origin, ...] = field(repr=False, default=())
    _weekly_origins: dict[str, Origin] = field(repr=False, default_factory=dict)

    def origin(self, path: PathKey) -> tuple[Document, PathKey]:
        head = path[0] if path else None
        if head == "layers" and len(path) > 1:
            o = self._layer_origins[path[1]]
            return o.document, o.path + tuple(path[2:])
        if head == "holdout" and len(path) > 1:
            o = self._holdout_origins[path[1]]
            return o.document, o.path + tuple(path[2:])
        if head == "weekly_units" and len(path) > 1 and path[1] in self._weekly_origins:
            o = self._weekly_origins[path[1]]
            return o.document, o.path + tuple(path[2:])
        first = (self._layer_origins or self._holdout_origins)
        document = first[0].document if first else Document(file=self.files[0] if self.files else "<config>")
        return document, tuple(path)

    def locate(self, path: PathKey) -> tuple[str, int, int]:
        document, local = self.origin(path)
        line, column = document.locate(local)
        return document.file, line, column

    def problem(self, rule: str, path: PathKey, message: str, severity: str = "error") -> Problem:
        document, local = self.origin(path)
        return document.problem(rule, local, message, severity)

    def layer(self, name: str) -> Layer | None:
        return next((layer for layer in self.layers if layer.name == name), None)
