"""Renderers: results in, text, JSON, HTML or SARIF out. They compute nothing and choose no exit code.

`srm_html` (and SciPy with it) is imported from `audit.render.html_report`
only when an HTML report is drawn.
"""

from ._json import as_json
from ._sarif import SARIF_SCHEMA_URI, SARIF_VERSION, artifact_uri, sarif_json, sarif_log
from ._text import check_text, diff_text, finding_line, layout_text, p_text, rollout_text, rules_text, srm_text, terminal_safe

__all__ = ["as_json", "sarif_log", "sarif_json", "artifact_uri", "SARIF_VERSION", "SARIF_SCHEMA_URI", "check_text", "diff_text",
           "finding_line", "layout_text", "p_text", "rollout_text", "rules_text", "srm_text", "terminal_safe"]
