"""Command-line interface: thin wrappers that parse options, call the library and
map rotinfer's exceptions to exit codes.

Each subcommand lives in its own module, listed in ``_app.COMMANDS`` and imported only
when it runs.
"""

from __future__ import annotations

import sys

from ._app import EXIT_BAD_INPUT, EXIT_INTERNAL, EXIT_OK, cli, main

__all__ = ["EXIT_BAD_INPUT", "EXIT_INTERNAL", "EXIT_OK", "cli", "main", "run"]


def run() -> None:  # pragma: no cover - exercised through the console script
    sys.exit(main())
