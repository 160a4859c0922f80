"""The config format as pydantic models: types, ranges and unknown keys.

Rules that look across several fields (overlapping ranges, weights that sum
to 100, salts used twice, ...) live in `_rules.py`, so that the SDK and the
`check` command share one implementation of each.
"""

from __future__ import annotations

import re
from datetime import date
from typing import Annotated, Any, Literal

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field

from ._errors import shown

NAME_PATTERN = r"^[A-Za-z0-9][A-Za-z0-9_.-]*$"
SALT_PATTERN = r"^[A-Za-z0-9_.-]+$"
RANGE_PATTERN = r"^ *[0-9]{1,5} *(- *[0-9]{1,5} *)?$"  # ASCII digits only; 5 digits reach past bucket 9999
CONDITION_PATTERN = re.compile(r"^\s*(>=|<=|==|!=|>|<)\s*(\S+)\s*$")

STATUSES = ("draft", "running", "paused", "done")


def _exactly_int(value: Any) -> Any:
    if type(value) is not int:  # Literal[1] alone would take true and 1.0
        raise ValueError(f"expected the integer 1, found {value!r}")
    return value


_ISO_DATE = re.compile(r"[0-9]{4}-[0-9]{2}-[0-9]{2}\Z")


def _iso_date(value: Any) -> Any:
    if isinstance(value, str):
        try:
            if not _ISO_DATE.match(value):  # Python 3.11+ would also take 20261103 or 2026-W45-2
                raise ValueError
            return date.fromisoformat(value)
        except ValueError:
            raise ValueError(f"expected an ISO date such as 2026-11-03, found {shown(value)}") from None
    return value


Name = Annotated[str, Field(pattern=NAME_PATTERN, max_length=200)]
Salt = Annotated[str, Field(pattern=SALT_PATTERN, max_length=200)]
IsoDate = Annotated[date, BeforeValidator(_iso_date)]
Number = Annotated[float, Field(allow_inf_nan=False)]
AttributeValue = str | int | float | bool
ConditionSpec = list[AttributeValue] | str  # a list of values, or a version comparison such as '>=7.2'


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", strict=True, frozen=True)


class Waiver(_Strict):
    """Turns one `check` rule off for one experiment, with the reason on record."""

    rule: Annotated[str, Field(min_length=1)]
    reason: Annotated[str, Field(min_length=1)]


class Approval(_Strict):
    """`reassign_ok` as an object: why a change may move a running experiment's units, and at most how many."""

    why: Annotated[str, Field(min_length=1)]
    moves_up_to: Annotated[Number, Field(gt=0, le=100, description=(
        "Percent of the experiment's units this change may switch to another arm or drop, as `diff` counts them; "
        "a change moving more is blocked."))]


class Arm(_Strict):
    name: Name
    weight: Annotated[Number, Field(ge=0, le=100)]
    params: dict[str, Any] = Field(default_factory=dict)

    @property
    def width(self) -> int:
        """The arm's width in the experiment's 10,000 arm buckets (weight x 100)."""
        return round(self.weight * 100)


class Experiment(_Strict):
    name: Name
    status: Literal["draft", "running", "paused", "done"]
    buckets: list[Annotated[str, Field(pattern=RANGE_PATTERN)]] = Field(min_length=1)
    salt: Salt | None = None
    arms: list[Arm] = Field(min_length=1)
    eligible: dict[str, ConditionSpec] = Field(default_factory=dict)
    overrides: dict[str, str] = Field(default_factory=dict)
    start: IsoDate | None = None
    end: IsoDate | None = None
    owner: str | None = None
    unit: Name | None = Field(default=None, description="Unit type; when given it must equal the layer's.")
    waivers: list[Waiver] = Field(default_factory=list, description="check rules turned off for this experiment.")
    reassign_ok: str | Approval | None = Field(
        default=None,
        description="Approval for this change to move units of the running experiment: the reason, or "
                    "{why, moves_up_to}. It covers only the change that adds it or changes it; `diff` reports one "
                    "carried over unchanged as stale, and it then approves nothing.",
    )
    rollout: Name | None = Field(
        default=None,
        description="A staged rollout: the name of the arm released to a growing share of units. A change that "
                    "moves units only into this arm needs no approval; one that moves units out of it does.",
    )

    @property
    def ranges(self) -> tuple[tuple[int, int], ...]:
        """The bucket ranges as (low, high) pairs, in the order written; bounds are checked by `_rules`."""
        return tuple(parse_range(text) for text in self.buckets)


class Layer(_Strict):
    name: Name
    unit: Name
    salt: Salt | None = None
    experiments: list[Experiment] = Field(default_factory=list)

    @property
    def effective_salt(self) -> str:
        return self.salt if self.salt is not None else self.name


class Holdout(_Strict):
    unit: Name
    salt: Salt
    percent: Annotated[Number, Field(ge=0.01, lt=100, description="Share of units held out, in percent; at least 0.01 (one bucket).")]

    @property
    def width(self) -> int:
        """Holdout width in buckets: units whose holdout bucket is below this are held out (percent x 100)."""
        return round(self.percent * 100)


class ConfigFile(_Strict):
    """One YAML file of the config format (`format: 1`)."""

    format: Annotated[Literal[1], BeforeValidator(_exactly_int)]
    holdout: list[Holdout] = Field(default_factory=list)
    layers: list[Layer] = Field(default_factory=list)
    weekly_units: dict[str, Annotated[int, Field(ge=0)]] = Field(
        default_factory=dict,
        description="Expected distinct units per week, per unit type; used by `check` to flag arms too small.",
    )


SCHEMA_DIALECT = "https://json-schema.org/draft/2020-12/schema"
SCHEMA_ID = "urn:sortition:config-format:1"


def config_schema() -> dict[str, Any]:
    """The JSON Schema of one config file, made from these models so it never drifts from what loads.

    Rules across fields (overlapping ranges, weights adding up to 100, ...)
    are not in it: they are `RULES`, checked when a config loads.
    """
    body = {k: v for k, v in ConfigFile.model_json_schema().items() if k not in ("title", "description")}
    return {
        "$schema": SCHEMA_DIALECT,
        "$id": SCHEMA_ID,
        "title": "sortition experiment config (format 1)",
        "description": "One YAML file of a sortition config: holdouts, layers, experiments and arms. "
                       "Run `sortition check` for the rules that look across fields.",
        **body,
    }


def experiment_salt(layer: Layer, experiment: Experiment) -> str:
    """An experiment's salt: its own, or '<layer salt>.<experiment name>' by default."""
    return experiment.salt if experiment.salt is not None else f"{layer.effective_salt}.{experiment.name}"


def parse_range(text: str) -> tuple[int, int]:
    """'0-1999' -> (0, 1999); '42' -> (42, 42). Bounds are not checked here."""
    low, _, high = text.partition("-")
    return int(low), int(high) if high.strip() else int(low)


def hundredths(value: float) -> int | None:
    """A percentage in hundredths of a percent, or None when it has more than two decimals."""
    scaled = round(value * 100)
    return scaled if abs(value * 100 - scaled) < 1e-6 else None


MAX_VERSION_PART_DIGITS = 18
MAX_VERSION_PARTS = 16


def parse_version(text: str) -> tuple[int, ...] | None:
    """'7.2.1' -> (7, 2, 1), from the characters as written; None when the text is not a dotted version.

    Parts are ASCII digits, at most 18 of them (a build number of a date and
    time fits), at most 16 parts: anything longer is not a version.
    """
    parts = text.strip().lstrip("vV").split(".")
    if len(parts) > MAX_VERSION_PARTS or not all(
            0 < len(p) <= MAX_VERSION_PART_DIGITS and p.isascii() and p.isdigit() for p in parts):
        return None
    return tuple(int(p) for p in parts)
