"""sortition's SDK: deterministic layered assignment of units to experiments and arms.

    from bucketing import Assigner, JsonLinesSink

    assigner = Assigner("configs/", sink=JsonLinesSink("exposures.jsonl"))
    got = assigner.assign({"learner": "L-1042"}, {"country": "NL", "app_version": "7.4.0"})
    minutes = got.param("lesson_minutes", 10)

Everything public is named in `__all__`; modules whose names start with an
underscore are private and may change without notice.
"""

from importlib import metadata as _metadata

from ._assigner import Assigner, Assignment, LayerAssignment
from ._config import Config, format_path
from ._errors import ConfigError, Location, Problem, SortitionError, did_you_mean
from ._explain import (AfterEnd, Assigned, BeforeStart, Explanation, Forced, HeldOut, HoldoutCheck, NoExperiment,
                       NotEligible, NotRunning, Step)
from ._exposure import RECORD_FIELDS, CallbackSink, ExposureSink, JsonLinesSink, LoggingSink, MemorySink
from ._hashing import BUCKETS, bucket_of
from ._loader import CONFIG_SUFFIXES, load_config, parse_config
from ._model import Approval, Arm, ConfigFile, Experiment, Holdout, Layer, Waiver, config_schema, experiment_salt, hundredths
from ._rules import RULES
from ._watch import ConfigWatcher, ReloadAttempt

try:  # one version for the distribution, the SDK's and the audit's
    __version__ = _metadata.version("sortition")
except _metadata.PackageNotFoundError:  # a source tree that was never installed
    __version__ = "0+unknown"

__all__ = [
    "__version__",
    "Assigner",
    "Assignment",
    "LayerAssignment",
    "Config",
    "ConfigFile",
    "Layer",
    "Experiment",
    "Arm",
    "Approval",
    "Holdout",
    "Waiver",
    "load_config",
    "parse_config",
    "config_schema",
    "CONFIG_SUFFIXES",
    "RULES",
    "experiment_salt",
    "hundredths",
    "format_path",
    "bucket_of",
    "BUCKETS",
    "ExposureSink",
    "MemorySink",
    "JsonLinesSink",
    "LoggingSink",
    "CallbackSink",
    "RECORD_FIELDS",
    "ConfigWatcher",
    "ReloadAttempt",
    "Explanation",
    "HoldoutCheck",
    "Step",
    "Forced",
    "HeldOut",
    "NoExperiment",
    "NotRunning",
    "BeforeStart",
    "AfterEnd",
    "NotEligible",
    "Assigned",
    "ConfigError",
    "did_you_mean",
    "Location",
    "Problem",
    "SortitionError",
]
