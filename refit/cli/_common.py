"""Pieces shared by the CLI verbs: error handling and output streams."""

from __future__ import annotations

import functools
import os
import sys
import traceback
from typing import Callable, TypeVar

import click

F = TypeVar("F", bound=Callable[..., object])


def guarded(fn: F) -> F:
    """Run a command body; turn refit's errors into ``Error: ...`` and an exit code.

    An unexpected exception is still reported in one line (set ``REFIT_DEBUG=1`` for the
    traceback), so users never see a raw traceback.
    """

    @functools.wraps(fn)
    def wrapper(*args, **kwargs):
        from refit.errors import RefitError

        try:
            return fn(*args, **kwargs)
        except RefitError as exc:
            click.echo(f"Error: {exc}", err=True)
            sys.exit(exc.exit_code)
        except (click.exceptions.Exit, click.ClickException, click.Abort, SystemExit):
            raise
        except KeyboardInterrupt:
            click.echo("Error: interrupted; nothing was half-written.", err=True)
            sys.exit(1)
        except Exception as exc:  # last resort: one line, not a traceback
            if os.environ.get("REFIT_DEBUG"):
                traceback.print_exc()
            click.echo(
                f"Error: unexpected {type(exc).__name__}: {exc}. This is a refit bug; "
                "please report it with the command you ran (REFIT_DEBUG=1 shows details).",
                err=True,
            )
            sys.exit(1)

    return wrapper  # type: ignore[return-value]


def stderr_console(quiet: bool = False):
    """A rich console on stderr (progress, logs); quiet when asked or not a terminal."""
    from rich.console import Console

    return Console(stderr=True, quiet=quiet)


def stdout_console():
    """A rich console on stdout (results)."""
    from rich.console import Console

    return Console(highlight=False, soft_wrap=True)
