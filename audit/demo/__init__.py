"""The demo scenario: invented exposure logs of an invented language-learning app, and the runner of the demo."""

from ._logs import FAULT_ARM, FAULT_EXPERIMENT, FAULT_SEGMENT, DemoLogs, write_demo_logs
from ._runner import run_demo

__all__ = ["write_demo_logs", "DemoLogs", "FAULT_EXPERIMENT", "FAULT_ARM", "FAULT_SEGMENT", "run_demo"]
