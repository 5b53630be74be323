"""The command line: argument parsing, printing, exit codes. The only layer that prints.

Layer rules: docs/architecture.md (tests/test_layers.py)."""

from __future__ import annotations

import sys
from collections.abc import Sequence

__all__ = ["main", "missing_package"]


def missing_package(exc: ModuleNotFoundError) -> int:
    """An incomplete install (a required library missing): one line, exit status 1."""
    print(f"loopscout: the required package {exc.name!r} is not installed in this "
          "Python environment; install loopscout with its dependencies (README: "
          "pip install -e .)", file=sys.stderr)
    return 1


def main(argv: Sequence[str] | None = None) -> int:
    """The ``loopscout`` command (:func:`explorer.cli.app.main`). The package is
    imported here, at the edge, so that an incomplete install (a required library
    missing) is one line and exit 1, not a traceback."""
    try:
        from explorer.cli.app import main as run
    except ModuleNotFoundError as exc:
        return missing_package(exc)
    return run(argv)
