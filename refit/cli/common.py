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


def plural(n: int, word: str) -> str:
    """'1 row', '2 rows'."""
    return f"{n} {word}" if n == 1 else f"{n} {word}s"


def compact_notes(notes: list[str], width: int = 96) -> list[str]:
    """Reader and mapping notes for people: plain renames folded into a few lines.

    Unit conversions keep a line each (they change numbers, so they must stand out);
    columns that were only renamed are listed together.
    """
    import re
    import textwrap

    renamed, out = [], []
    for note in notes:
        m = re.match(r"column '(.*)' -> (\w+) \(renamed(?:; already in [^)]*)?\)$", note)
        if m:
            renamed.append(f"'{m.group(1)}'->{m.group(2)}")
        else:
            out.append(note)
    if renamed:
        text = f"renamed {plural(len(renamed), 'column')}: " + ", ".join(renamed)
        lines = textwrap.wrap(text.replace(" ", "\0").replace(",\0", ", "), width=width,
                              break_long_words=False, break_on_hyphens=False)
        out.append("\n    ".join(line.replace("\0", " ") for line in lines))
    return out
