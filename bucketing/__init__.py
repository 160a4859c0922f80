"""sortition's SDK: deterministic layered assignment of units to experiments and arms.

    from bucketing import Assigner, JsonLinesSink

    assigner = Assigner("configs/", sink=JsonLinesSink("exposures.jsonl"))
    got = assigner.assign({"learner": "L-1042"}, {"country": "NL", "app_version": "7.4.0"})
    minutes = got.param("lesson_minutes", 10)
"""

from ._assigner import Assigner, Assignment, LayerAssignment
from ._explain import (AfterEnd, Assigned, BeforeStart, Explanation, Forced, HeldOut, HoldoutCheck, NoExperiment,
                       NotEligible, NotRunning, Step)
from ._errors import ConfigError, Problem, SortitionError
from ._exposure import RECORD_FIELDS, CallbackSink, ExposureSink, JsonLinesSink, LoggingSink, MemorySink
from ._hashing import BUCKETS, bucket_of
from ._loader import Config, load_config, parse_config

__all__ = [
    "Assigner",
    "Assignment",
    "LayerAssignment",
    "Config",
    "load_config",
    "parse_config",
    "bucket_of",
    "BUCKETS",
    "ExposureSink",
    "MemorySink",
    "JsonLinesSink",
    "LoggingSink",
    "CallbackSink",
    "RECORD_FIELDS",
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
    "Problem",
    "SortitionError",
]
