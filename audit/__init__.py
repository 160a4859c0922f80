"""sortition's tool side: config checks for CI and sample-ratio-mismatch audits of exposure logs.

    from audit import audit_logs

    result = audit_logs("logs/", config="configs/", segments=["country", "platform"])
    for experiment in result.results:
        print(experiment.experiment, experiment.srm, experiment.p_value)

The command line (`sortition ...`) lives in `audit.cli`. Subpackages, one
direction of imports: `cli` -> `render` -> `checks`, `srm` -> `bucketing`.
"""

from typing import TYPE_CHECKING

from bucketing import SortitionError, __version__

from ._errors import AuditError, LogError, MissingFieldError

_LAZY = {  # public names whose modules load NumPy, SciPy or DuckDB: imported on first use
    "audit_logs": "audit.srm", "AuditResult": "audit.srm", "ExperimentResult": "audit.srm",
    "ArmResult": "audit.srm", "SegmentResult": "audit.srm", "DayResult": "audit.srm", "Localisation": "audit.srm",
    "Cause": "audit.srm", "Malformed": "audit.srm", "UnknownRecords": "audit.srm",
    "check_config": "audit.checks", "CheckResult": "audit.checks", "diff_configs": "audit.checks",
    "ConfigDiff": "audit.checks", "ExperimentChange": "audit.checks", "layout_of": "audit.checks",
    "Layout": "audit.checks", "LayerLayout": "audit.checks",
}

if TYPE_CHECKING:  # the same names, for type checkers
    from .checks import (
        CheckResult, ConfigDiff, ExperimentChange, LayerLayout, Layout, check_config, diff_configs, layout_of,
    )
    from .srm import (
        ArmResult, AuditResult, Cause, DayResult, ExperimentResult, Localisation, Malformed, SegmentResult,
        UnknownRecords, audit_logs,
    )

__all__ = [
    "__version__", "SortitionError", "AuditError", "LogError", "MissingFieldError",
    "audit_logs", "AuditResult", "ExperimentResult", "ArmResult", "SegmentResult", "DayResult", "Localisation", "Cause",
    "Malformed", "UnknownRecords",
    "check_config", "CheckResult", "diff_configs", "ConfigDiff", "ExperimentChange", "layout_of", "Layout", "LayerLayout",
]


_AUDIT_EXTRA = ("typer", "click", "numpy", "scipy", "duckdb")  # what `pip install 'sortition[audit]'` adds


def _missing_extra(exc: ModuleNotFoundError) -> str | None:
    """The one-line hint when `exc` is a library of the `audit` extra missing (a plain install), else None."""
    if (exc.name or "").split(".")[0] not in _AUDIT_EXTRA:
        return None
    return f"this needs the audit extra ({exc.name} is missing): pip install 'sortition[audit]'"


def __getattr__(name: str) -> object:
    if name in _LAZY:
        import importlib

        try:
            module = importlib.import_module(_LAZY[name])
        except ModuleNotFoundError as exc:
            hint = _missing_extra(exc)
            if hint is None:
                raise
            raise ModuleNotFoundError(hint, name=exc.name) from None
        return getattr(module, name)
    raise AttributeError(f"module 'audit' has no attribute {name!r}")
