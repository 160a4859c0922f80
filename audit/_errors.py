"""The audit's errors: each one a `bucketing.SortitionError`, so that a caller catches one base class.

Messages say what is wrong with the input and where; they never name a
command-line option (the command line adds its own hints).
"""

from __future__ import annotations

from bucketing import SortitionError


class AuditError(SortitionError, ValueError):
    """Input the audit cannot use: a config, an expected split or a segment that does not fit."""


class LogError(AuditError):
    """Logs that cannot be read at all: no files, an unknown format, a field absent from every record."""


class MissingFieldError(LogError):
    """A field of the exposure record has no column in the logs; `field` names it, `column` what was looked for."""

    def __init__(self, message: str, field: str, column: str) -> None:
        super().__init__(message)
        self.field = field
        self.column = column
