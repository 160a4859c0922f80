"""Config checks: lint (with waivers), the impact of a change, the bucket layout, the config's JSON Schema.

Data in, findings out: nothing here renders or chooses an exit code. Every
rule id lives in one registry, `RULES`.
"""

from ._diff import (ApprovalState, ChangedLine, ConfigDiff, DiffFinding, ExperimentChange, RolloutShare, diff_configs,
                    percent_text, rollout_share)
from ._layout import LayerLayout, Layout, Owner, layout_of, propose, range_text
from ._lint import DEFAULT_MIN_ARM_UNITS, CheckResult, check_config, finding_dict
from ._rules import RULES, UNREADABLE_RULES, Rule, meanings, why_not_ignorable
from ._waivers import Waived

__all__ = [
    "check_config", "CheckResult", "Waived", "DEFAULT_MIN_ARM_UNITS", "finding_dict",
    "diff_configs", "ConfigDiff", "ExperimentChange", "ApprovalState", "ChangedLine", "DiffFinding", "RolloutShare",
    "rollout_share", "percent_text",
    "layout_of", "Layout", "LayerLayout", "Owner", "propose", "range_text",
    "RULES", "Rule", "UNREADABLE_RULES", "meanings", "why_not_ignorable",
]
