"""Parsing option values: KEY=VALUE pairs, ISO days, segment terms, expected splits. Bad input exits 2."""

from __future__ import annotations

from datetime import date
from enum import Enum
from pathlib import Path
from typing import Optional

import typer

from bucketing import Config, ConfigError, parse_config

from ._exit import fail

AUTO_SEGMENTS = "auto"  # `--by auto`: every column of the logs that is not a field of the record


class FindingsFormat(str, Enum):
    """`--format` of the commands that report findings."""

    text = "text"
    json = "json"
    sarif = "sarif"


def key_value_pairs(pairs: list[str], option: str, shape: str) -> dict[str, str]:
    """['a=1', 'b=2'] -> {'a': '1', 'b': '2'}; a pair without '=' or a key is a one-line error."""
    parsed = {}
    for pair in pairs:
        key, sep, value = pair.partition("=")
        if not sep or not key:
            fail(f"{option} takes {shape}, found {pair!r}")
        parsed[key] = value
    return parsed


def weekly_units(pairs: list[str]) -> dict[str, int]:
    shape = "UNIT_TYPE=COUNT such as learner=1400000"
    weekly = {}
    for unit_type, count in key_value_pairs(pairs, "--weekly-units", shape).items():
        if not count.strip().replace("_", "").isdigit():
            fail(f"--weekly-units takes {shape}, found {unit_type}={count!r}")
        weekly[unit_type] = int(count.replace("_", ""))
    return weekly


def iso_day(text: Optional[str], option: str) -> Optional[date]:
    """An ISO date, or None when not given (the library then takes today)."""
    if text is None:
        return None
    try:
        return date.fromisoformat(text)
    except ValueError:
        fail(f"{option} takes an ISO date such as 2026-11-03, found {text!r}")


def column_map(pairs: list[str]) -> dict[str, str]:
    """['unit=user_id', 'arm=variant'] -> {'unit': 'user_id', 'arm': 'variant'}."""
    mapping = {}
    for pair in pairs:
        ours, sep, theirs = pair.partition("=")
        ours, theirs = ours.strip(), theirs.strip()
        if not sep or not ours or not theirs:
            fail(f"--column takes FIELD=LOG_COLUMN (e.g. unit=user_id), found {pair!r}")
        mapping[ours] = theirs
    return mapping


def segment_terms(text: Optional[str]) -> tuple[list[tuple[str, ...]], bool]:
    """'country,platform+app_version' -> ([('country',), ('platform', 'app_version')], False); 'auto' -> True."""
    if not text:
        return [], False
    terms = []
    for part in text.split(","):
        names = tuple(n.strip() for n in part.split("+") if n.strip())
        if not names:
            fail(f"--by: empty segment name in {text!r}")
        terms.append(names)
    automatic = (AUTO_SEGMENTS,) in terms
    return [t for t in dict.fromkeys(terms) if t != (AUTO_SEGMENTS,)], automatic


def expectation(text: Optional[str]) -> list[float] | dict[str, float] | None:
    """'50,50' -> [50, 50] (arms in name order); 'control=50,short=50' -> by arm name."""
    if text is None:
        return None
    parts = [p.strip() for p in text.split(",") if p.strip()]
    try:
        if all("=" in p for p in parts):
            return {name.strip(): float(value) for name, value in (p.split("=", 1) for p in parts)}
        return [float(p) for p in parts]
    except ValueError:
        fail(f"--expect takes weights such as 50,50 or control=50,short=50, found {text!r}")


def config_argument(sources: list[Path]) -> Config:
    """A config that can be analysed, or exit 2 with its located errors (one per line).

    A config with errors the SDK would refuse is still analysed, with a note:
    `check` is the command that lists them.
    """
    config, problems = parse_config(sources)
    if config is None:
        raise ConfigError(problems)
    errors = sum(1 for p in problems if p.severity == "error")
    if errors:
        typer.echo(f"sortition: note: {', '.join(map(str, sources))} has {errors} error(s); "
                   "`sortition check` lists them", err=True)
    return config
