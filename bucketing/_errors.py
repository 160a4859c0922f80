"""Errors a service can catch: one base class, one for configs that cannot be used."""

from __future__ import annotations

import difflib
from dataclasses import dataclass
from typing import Iterable, Union

Location = tuple[Union[str, int], ...]


class SortitionError(Exception):
    """Base of every error this package raises on purpose."""


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a config, located in its source file.

    `loc` is the field's place in that file as keys and list indexes, such as
    ("layers", 0, "experiments", 1, "buckets"); `path` is the same place as
    text ("layers[0].experiments[1].buckets"), for people.
    """

    rule: str
    severity: str  # "error" or "warning"
    file: str
    line: int
    column: int
    path: str
    message: str
    loc: Location = ()

    def __str__(self) -> str:
        where = f"{self.file}:{self.line}:{self.column}"
        field = f" {self.path}:" if self.path else ""
        return f"{where}:{field} {self.message} [{self.rule}]"


def shown(value: object, limit: int = 60) -> str:
    """A value as a message quotes it: its repr, cut to `limit` characters so one hostile value cannot flood a line."""
    try:
        text = repr(value)
    except ValueError:  # an integer of more digits than Python converts to text
        return f"<{type(value).__name__} too long to show>"
    return text if len(text) <= limit else text[:limit - 4] + "...'"


def did_you_mean(word: str, choices: Iterable[str]) -> str:
    """" (did you mean 'x'?)" for the choice closest to a misspelt word, or "" when none is close.

    For messages about a name that matches nothing: a key, a status, an arm, a layer.
    """
    close = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


class ConfigError(SortitionError):
    """A config could not be loaded; `problems` lists every error found, located."""

    def __init__(self, problems: list[Problem]):
        self.problems = list(problems)
        first = str(self.problems[0]) if self.problems else "invalid config"
        more = len(self.problems) - 1
        super().__init__(first + (f" (and {more} more)" if more > 0 else ""))
