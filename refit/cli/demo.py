"""``refit demo``: the whole job on the bundled invented scenario (``calib_demo/``).

A thin shell over :mod:`refit.demo`, which does the work and returns what it did.
"""

from __future__ import annotations

import click

from refit.cli.common import (
    Progress, guarded, print_comparison, print_run, render_admit, stderr_console, stdout_console,
)

#: Paleosols whose comparison is printed (all are in the files): a typical one and the two
#: placed where equations stop holding.
SHOWN_PALEOSOLS = ("MB-P01", "CG-P07", "CG-P08")


@click.command("demo", short_help="Run the whole job on the bundled invented demo.")
@click.option(
    "--out", "out_dir", type=click.Path(file_okay=False), default="refit-demo-out",
    show_default=True, help="Folder for everything the demo writes (replaced if it holds an earlier demo).",
)
@click.option("--quiet", is_flag=True, help="Print nothing but errors.")
@guarded
def demo(out_dir: str, quiet: bool) -> None:
    """Run refit on the bundled invented demo scenario and say where everything went.

    \b
    Steps: check the incoming soils; admit them into a copy of the demo calibration
    store (rejected rows kept in quarantine with their reasons); fit and cross-validate
    the demo recipe's candidates; publish the winner into a demo registry; apply it and
    the published equations to the demo fossils; compare the intervals; write the HTML
    report. The bundled files themselves are never modified. All data are invented.

    \b
    Example:
      refit demo --out /tmp/refit-demo
    """
    import sys
    import time
    from pathlib import Path

    from refit.demo import run_demo

    console = stdout_console()
    err = stderr_console(quiet=quiet or not sys.stderr.isatty())
    start = time.perf_counter()
    with Progress(err) as progress:
        result = run_demo(Path(out_dir), echo=None if quiet else console.print,
                          progress=progress, show=None if quiet else _shower(console))
    console.print()
    console.print(f"[bold]Where everything went[/bold] ({time.perf_counter() - start:.1f} s)")
    width = max(map(len, result.outputs), default=0)
    for label, path in result.outputs.items():
        console.print(f"  {label:<{width}} {path}")
    console.print("Caution: invented data; estimates from transfer functions carry wide "
                  "intervals and are for research use, not for engineering, hazard or "
                  "regulatory decisions.")


def _shower(console):
    """Print each step's result as the demo reaches it."""

    def show(step: str, result) -> None:
        if step == "admit":
            for line in render_admit(result.admit):
                for part in line.split("\n"):  # a wrapped item keeps its indent
                    console.print(f"   {part}", markup=False)
        elif step == "fit":
            # the demo ends with its own caution (invented data); said once
            print_run(result.run, result.run_dir, console=console, caution=False)
        elif step == "compare":
            table = result.comparison
            shown = table[table["paleosol_id"].isin(SHOWN_PALEOSOLS)]
            console.print(f"   {shown['paleosol_id'].nunique()} of "
                          f"{table['paleosol_id'].nunique()} paleosols shown (a typical one "
                          "and two where equations stop holding); every row is in "
                          "estimates.csv and compare/comparison.csv")
            print_comparison(shown, console, indent="   ")

    return show
