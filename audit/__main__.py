"""`python -m audit` and the `sortition` console script: the command line, or one line naming the extra it needs.

A plain `pip install sortition` is the SDK alone; the command line comes
with the `audit` extra. Without it, `sortition` says so instead of a traceback.
"""

import sys

from audit import _missing_extra


def main() -> None:
    try:
        from audit.cli import main as run
    except ModuleNotFoundError as exc:
        hint = _missing_extra(exc)
        if hint is None:
            raise
        sys.stderr.write(f"sortition: {hint}\n")
        raise SystemExit(2) from None
    run()


if __name__ == "__main__":
    main()
