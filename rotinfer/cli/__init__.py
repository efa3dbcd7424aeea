"""Command-line interface: thin wrappers that parse options, call the library and
map rotinfer's exceptions to exit codes. Each subcommand lives in its own module.
"""

from __future__ import annotations

import sys

from ._app import EXIT_BAD_INPUT, EXIT_INTERNAL, EXIT_OK, cli, main

# Subcommands register themselves on ``cli`` when imported (one module each).
from . import scan  # noqa: F401  isort: skip

__all__ = ["EXIT_BAD_INPUT", "EXIT_INTERNAL", "EXIT_OK", "cli", "main", "run"]


def run() -> None:  # pragma: no cover - exercised through the console script
    sys.exit(main())


from . import survey  # noqa: E402,F401  isort: skip
from . import simulate  # noqa: E402,F401  isort: skip
