"""Errors that refit raises on purpose.

Every error names what failed, what was expected, what was found and how to fix it.
The command line turns them into one ``Error: ...`` line and an exit code; Python
callers can catch them with the built-in base class (``ValueError`` or ``OSError``).

Exit codes (a contract, see README): 0 success, 1 invalid data or a failure,
2 usage error or unreadable input.
"""

from __future__ import annotations


class RefitError(Exception):
    """Base class of refit's own errors; ``exit_code`` is what the CLI returns."""

    exit_code = 1


class InvalidDataError(RefitError, ValueError):
    """The input was read but its content breaks a rule (exit code 1)."""

    exit_code = 1


class UnreadableInputError(RefitError, OSError):
    """A file is missing, empty, unreadable or in a format refit cannot parse (exit code 2)."""

    exit_code = 2


class UsageError(RefitError, ValueError):
    """Arguments that cannot work together or name unknown things (exit code 2)."""

    exit_code = 2


class StoreBusyError(RefitError):
    """Another process holds the store's lock (exit code 1)."""

    exit_code = 1
