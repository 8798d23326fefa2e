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

    import sys

    from refit.cli._common import stderr_console
    from refit.cli.admit import render
    from refit.cli.fit import _Progress, print_run

    console = stdout_console()
    say = None if quiet else console.print
    err = stderr_console(quiet=quiet or not sys.stderr.isatty())
    with _Progress(err) as progress:
        result = run_demo(Path(out_dir), echo=say, progress=progress,
                          after_admit=None if quiet else (
                              lambda adm: [console.print(f"   {line}", markup=False)
                                           for line in render(adm)]))
    if not quiet:
        print_run(result.run, result.run_dir, console=console)
        console.print(
            "[dim]Publishing, apply/compare and the HTML report arrive with the next issues; "
            "this demo runs the steps that exist (check, admit, fit).[/dim]"
        )
    console.print()
    console.print("[bold]Where everything went[/bold]")
    for label, path in result.outputs.items():
        console.print(f"  {label:<28} {path}")
