"""`python -m audit` and the `sortition` console script: the command line, or one line naming the extra it needs.

A plain `pip install sortition` is the SDK alone; the command line comes
with the `audit` extra. Without it, `sortition` says so instead of a traceback.
"""

import sys

AUDIT_EXTRA = ("typer", "click", "numpy", "scipy", "duckdb")  # what `pip install 'sortition[audit]'` adds


def main() -> None:
    try:
        from audit.cli import main as run
    except ModuleNotFoundError as exc:
        if (exc.name or "").split(".")[0] not in AUDIT_EXTRA:
            raise
        sys.stderr.write(f"sortition: the command line needs the audit extra ({exc.name} is missing): "
                         "pip install 'sortition[audit]'\n")
        raise SystemExit(2) from None
    run()


if __name__ == "__main__":
    main()
