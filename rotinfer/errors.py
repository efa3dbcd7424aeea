"""Exception and warning types raised by rotinfer.

Every error a user can cause derives from :class:`RotinferError`. The command
line maps :class:`InputError` and :class:`ConfigError` to exit code 2 and prints
their one-line message; anything else is an internal error (exit code 1).
"""

from __future__ import annotations

__all__ = [
    "ConfigError",
    "ConvergenceWarning",
    "InputError",
    "NotConvergedError",
    "RotinferError",
]


class RotinferError(Exception):
    """Base class for every error rotinfer raises on purpose."""


class InputError(RotinferError, ValueError):
    """A light curve or other input cannot be used.

    Parameters
    ----------
    source : str or None
        The file (or other origin, such as ``"<array>"``) the problem is in.
    problem : str
        One line saying what is wrong and, where it helps, what is allowed.
    """

    def __init__(self, source: str | None, problem: str):
        self.source = source
        self.problem = problem
        text = f"{source}: {problem}" if source else problem
        super().__init__(text)


class ConfigError(RotinferError, ValueError):
    """A configuration value or option is not allowed; the message lists the choices."""


class NotConvergedError(RotinferError):
    """A sampler stopped at its cap before meeting the convergence rule.

    It carries what was obtained so far (compare ``emcee.autocorr.AutocorrError``,
    which keeps ``.tau``) so a caller can still inspect the partial result.
    """

    def __init__(self, message: str, partial=None):
        super().__init__(message)
        self.partial = partial


class ConvergenceWarning(UserWarning):
    """A result is returned but its convergence diagnostics fail the documented rule."""
