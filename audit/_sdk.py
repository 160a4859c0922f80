"""What the audit takes from the SDK beyond `bucketing`'s public names, in one place.

Until the SDK exports these (model types, the default salt, its rule ids,
the config schema, the path formatter), this is the one module of `audit`
that reaches into `bucketing`'s private modules; the rest imports from here.
"""

from bucketing._loader import CONFIG_SUFFIXES, format_path
from bucketing._model import ConfigFile, Experiment, Layer, experiment_salt, hundredths
from bucketing._rules import RULES as SDK_RULES

__all__ = ["CONFIG_SUFFIXES", "format_path", "ConfigFile", "Experiment", "Layer", "experiment_salt", "hundredths",
           "SDK_RULES"]
