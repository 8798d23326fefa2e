"""`refit admit` (being written this session; owner replaces this module)."""

from __future__ import annotations

import click


@click.command("admit")
def admit() -> None:
    """Not ready yet."""
    raise click.ClickException("refit admit is not ready yet")
