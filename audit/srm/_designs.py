"""What each experiment should look like: its arms and expected shares, from a config or an expected split."""

from __future__ import annotations

from collections import defaultdict
from dataclasses import dataclass
from datetime import date
from typing import Iterable, Mapping, Sequence, Union

from bucketing import Config

from .._errors import AuditError
from ._stats import expected_shares

# An expected split: weights of the arms in name order, or by arm name.
Expectation = Union[Sequence[float], Mapping[str, float]]


@dataclass(frozen=True)
class Design:
    """What one experiment should look like: its arms, their expected shares, its date window."""

    layer: str
    experiment: str
    arms: tuple[str, ...]
    shares: tuple[float, ...]
    unit_type: str | None = None
    start: date | None = None
    end: date | None = None


def designs_from_config(config: Config) -> list[Design]:
    """Every experiment of the config with its arms' weights as shares."""
    return [Design(layer.name, exp.name, tuple(a.name for a in exp.arms),
                   tuple(expected_shares([a.weight for a in exp.arms])), layer.unit, exp.start, exp.end)
            for layer in config.layers for exp in layer.experiments]


def designs_from_expectation(seen: Mapping[tuple[str, str], Sequence[str]],
                             expectation: Expectation) -> list[Design]:
    """Designs for the experiments seen in the logs, all with the same expected split."""
    designs = []
    for (layer, experiment), arms in sorted(seen.items()):
        if isinstance(expectation, Mapping):
            names = tuple(expectation)
            weights = list(expectation.values())
        else:
            names = tuple(sorted(arms))
            weights = list(expectation)
            if len(names) != len(weights):
                raise AuditError(f"experiment {experiment!r} has arms {list(names)} in the logs; "
                                 f"the expected split gives {len(weights)} weights: name the arms (e.g. "
                                 f"--expect control=50,treatment=50), and an arm the logs lack is a mismatch")
        designs.append(Design(layer, experiment, names, tuple(expected_shares(weights))))
    return designs


def designs_from_logs(seen_rows: Iterable[tuple[str | None, str, str]], expectation: Expectation,
                      config: Config | None) -> list[Design]:
    """The designs of an expected split: every (layer, experiment) seen in the logs, with the arms seen.

    `seen_rows` are (layer, experiment, arm) as logged; the layer is None for
    records that do not log it: they take the config's layer, or the one
    layer logged for that experiment elsewhere.
    """
    rows = list(seen_rows)
    known = {d.experiment: d.layer for d in designs_from_config(config)} if config is not None else {}
    logged_layers: dict[str, set[str]] = defaultdict(set)
    for layer, experiment, _ in rows:
        if layer is not None:
            logged_layers[experiment].add(layer)
    for experiment, layers in logged_layers.items():
        if len(layers) == 1:
            known.setdefault(experiment, next(iter(layers)))
    seen: dict[tuple[str, str], set[str]] = defaultdict(set)
    for layer, experiment, arm in rows:
        seen[(known.get(experiment) or layer or "-", experiment)].add(arm)
    return designs_from_expectation({k: sorted(v) for k, v in seen.items()}, expectation)
