"""Allow ``python -m rotinfer``."""

from .cli import run

run()
