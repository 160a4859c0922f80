"""A small SARIF 2.1.0 writer: located findings in, one SARIF log (a dict) out.

Any command that produces findings can use it: each finding needs `rule`,
`severity` ("error", "warning" or "note"), `file`, `line`, `column` and
`message`; the rule registry maps rule ids to one-line descriptions, so that
review tools can show what a rule is for.
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


class LocatedFinding(Protocol):
    @property
    def rule(self) -> str: ...
    @property
    def severity(self) -> str: ...
    @property
    def file(self) -> str: ...
    @property
    def line(self) -> int: ...
    @property
    def column(self) -> int: ...
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


def sarif_log(findings: Iterable[LocatedFinding], rules: Mapping[str, str], *,
              tool: str = "sortition", version: str | None = None, root: Path | None = None) -> dict[str, Any]:
    """One SARIF run: the rule registry as the driver's rules, each finding as a result."""
    rule_ids = list(rules)
    index = {rule: i for i, rule in enumerate(rule_ids)}
    results = []
    for finding in findings:
        result: dict[str, Any] = {
            "ruleId": finding.rule,
            "level": LEVELS.get(finding.severity, "warning"),
            "message": {"text": finding.message},
            "locations": [{
                "physicalLocation": {
                    "artifactLocation": {"uri": artifact_uri(finding.file, root)},
                    "region": {"startLine": max(1, finding.line), "startColumn": max(1, finding.column)},
                },
            }],
        }
        if finding.rule in index:
            result["ruleIndex"] = index[finding.rule]
        results.append(result)
    driver = {
        "name": tool,
        "version": version or __version__,
        "rules": [{"id": rule, "shortDescription": {"text": rules[rule]}} for rule in rule_ids],
    }
    return {
        "$schema": SARIF_SCHEMA_URI,
        "version": SARIF_VERSION,
        "runs": [{"tool": {"driver": driver}, "columnKind": "unicodeCodePoints", "results": results}],
    }


def sarif_json(findings: Iterable[LocatedFinding], rules: Mapping[str, str]) -> str:
    """The SARIF log as indented JSON, for stdout."""
    return json.dumps(sarif_log(findings, rules), indent=2, ensure_ascii=False)
