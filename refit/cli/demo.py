"""`refit demo` (being written this session; owner replaces this module)."""

from __future__ import annotations

import click


@click.command("demo")
def demo() -> None:
    """Not ready yet."""
    raise click.ClickException("refit demo is not ready yet")
