"""`refit check` (being written this session; owner replaces this module)."""

from __future__ import annotations

import click


@click.command("check")
def check() -> None:
    """Not ready yet."""
    raise click.ClickException("refit check is not ready yet")
