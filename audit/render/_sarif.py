"""A small SARIF 2.1.0 writer: located findings in, one SARIF log (a dict) out.

Any command that produces findings can use it: each finding needs `rule`,
`severity` ("error", "warning" or "note"), `file`, `line`, `column` and
`message`; the rule registry maps rule ids to one-line descriptions, so that
review tools can show what a rule is for. A finding may also have `related`
places (each with `file`, `line`, `column` and `what`), such as every line a
config change touched; they become the result's related locations. A run
that failed still writes a valid log: no results it could not compute, and
the failure as a notification of an unsuccessful invocation.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any, Iterable, Mapping, Protocol
from urllib.parse import quote

from bucketing import __version__

SARIF_VERSION = "2.1.0"
SARIF_SCHEMA_URI = "https://docs.oasis-open.org/sarif/sarif/v2.1.0/errata01/os/schemas/sarif-schema-2.1.0.json"
LEVELS = {"error": "error", "warning": "warning", "note": "note"}


class Place(Protocol):
    @property
    def file(self) -> str: ...
    @property
    def line(self) -> int: ...
    @property
    def column(self) -> int: ...


class LocatedFinding(Place, Protocol):
    @property
    def rule(self) -> str: ...
    @property
    def severity(self) -> str: ...
    @property
    def message(self) -> str: ...


def artifact_uri(file: str, root: Path | None = None) -> str:
    """A file name as a SARIF artifact URI: relative to `root` (default: cwd) when inside it."""
    path = Path(file)
    root = (root or Path.cwd()).resolve()
    if path.is_absolute():
        try:
            path = path.resolve().relative_to(root)
        except ValueError:
            return path.as_uri()
    return quote(path.as_posix())


def _physical(place: Place, root: Path | None) -> dict[str, Any]:
    return {"physicalLocation": {
        "artifactLocation": {"uri": artifact_uri(place.file, root)},
        "region": {"startLine": max(1, place.line), "startColumn": max(1, place.column)},
    }}


def sarif_log(findings: Iterable[LocatedFinding], rules: Mapping[str, str], *, tool: str = "sortition",
              version: str | None = None, root: Path | None = None, failure: str | None = None) -> dict[str, Any]:
    """One SARIF run: the rule registry as the driver's rules, each finding as a result.

    `failure` says why the run could not finish; the log then records an
    unsuccessful invocation with that message.
    """
    rule_ids = list(rules)
    index = {rule: i for i, rule in enumerate(rule_ids)}
    results = []
    for finding in findings:
        result: dict[str, Any] = {
            "ruleId": finding.rule,
            "level": LEVELS.get(finding.severity, "warning"),
            "message": {"text": finding.message},
            "locations": [_physical(finding, root)],
        }
        related = getattr(finding, "related", ())  # optional: findings of most commands have no related places
        if related:
            result["relatedLocations"] = [{"id": i, **_physical(place, root), "message": {"text": place.what}}
                                          for i, place in enumerate(related)]
        if finding.rule in index:
            result["ruleIndex"] = index[finding.rule]
        results.append(result)
    invocation: dict[str, Any] = {"executionSuccessful": failure is None}
    if failure is not None:
        invocation["toolExecutionNotifications"] = [{"level": "error", "message": {"text": failure}}]
    driver = {
        "name": tool,
        "version": version or __version__,
        "rules": [{"id": rule, "shortDescription": {"text": rules[rule]}} for rule in rule_ids],
    }
    return {
        "$schema": SARIF_SCHEMA_URI,
        "version": SARIF_VERSION,
        "runs": [{"tool": {"driver": driver}, "invocations": [invocation], "columnKind": "unicodeCodePoints",
                  "results": results}],
    }


def sarif_json(findings: Iterable[LocatedFinding], rules: Mapping[str, str], failure: str | None = None) -> str:
    """The SARIF log as indented JSON, for stdout."""
    return json.dumps(sarif_log(findings, rules, failure=failure), indent=2, ensure_ascii=False)
