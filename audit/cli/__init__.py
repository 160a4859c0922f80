"""The command line: the Typer app `sortition`, one module per subcommand.

Command modules parse options (`_options`), call the library, hand results
to `audit.render`, and pick the exit code in `_exit`, the only place that does.
"""

from ._app import app, main

__all__ = ["app", "main"]
