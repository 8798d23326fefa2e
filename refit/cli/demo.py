"""``refit demo``: the whole job on the bundled invented scenario (``calib_demo/``).

A thin shell over :mod:`refit.demo`, which does the work and returns what it did.
"""

from __future__ import annotations

import click

from refit.cli._common import guarded


@click.command("demo", short_help="Run the whole job on the bundled invented demo.")
@click.option(
    "--out", "out_dir", type=click.Path(file_okay=False), default="refit-demo-out",
    show_default=True, help="Folder for everything the demo writes (replaced if it holds an earlier demo).",
)
@click.option("--quiet", is_flag=True, help="Print only where things went.")
@guarded
def demo(out_dir: str, quiet: bool) -> None:
    """Run refit on the bundled invented demo scenario and say where everything went.

    \b
    Steps that exist today: check the incoming soils, then admit them into a copy of the
    demo calibration store (rejected rows kept in quarantine with their reasons).
    The bundled files themselves are never modified.

    \b
    Example:
      refit demo --out /tmp/refit-demo
    """
    from pathlib import Path

    from refit.demo import run_demo

    from refit.cli._common import stdout_console

    from refit.cli.admit import render

    console = stdout_console()
    result = run_demo(Path(out_dir), echo=None if quiet else console.print)
    if not quiet:
        for line in render(result.admit):
            console.print(f"   {line}", markup=False)
        console.print(
            "[dim]Fitting, cross-validation, publishing, apply and the report arrive with the "
            "next issues; this demo runs the curation steps that exist.[/dim]"
        )
    console.print()
    console.print("[bold]Where everything went[/bold]")
    for label, path in result.outputs.items():
        console.print(f"  {label:<28} {path}")
