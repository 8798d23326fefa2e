"""`refit compare`: one table and one figure of what several fits say about a paleosol."""

from __future__ import annotations

import click

from refit.cli.common import (
    fossil_options, guarded, print_comparison, print_problems_and_cautions, stdout_console,
)


@click.command("compare", short_help="Compare fits on the same paleosol: table and figure.")
@click.argument("coefficients", nargs=-1, required=True,
                type=click.Path(dir_okay=False, path_type=str))
@click.option("--fossils", metavar="TABLE", type=click.Path(dir_okay=False, path_type=str),
              help="Fossil measurement table.")
@click.option("--at", "at", multiple=True, metavar="NAME=VALUE",
              help="Evaluate at these values instead of a table (repeatable).")
@click.option("--paleosol", "paleosols", multiple=True, metavar="ID",
              help="Keep only this paleosol (repeatable) [default: all].")
@fossil_options
@click.option("--out", metavar="DIR", type=click.Path(file_okay=False, path_type=str),
              default="refit-compare", show_default=True,
              help="Folder for comparison.csv and comparison.png.")
@click.option("--overwrite", is_flag=True, help="Replace files already in --out.")
@click.pass_context
@guarded
def compare(ctx, coefficients, fossils, at, paleosols, level, decompact, constants_file,
            seed, out, overwrite) -> None:
    """Compare COEFFICIENTS files (fits, versions, published equations) on one input.

    Writes DIR/comparison.csv (one row per paleosol and fit: estimate, interval, width,
    cross-validated coverage, flags) and DIR/comparison.png (intervals as horizontal
    bars, one row per fit, the estimate marked, the CV coverage printed beside each
    interval: the narrowest interval is not necessarily the best).

    \b
    Exit codes: 0 written, 1 some fits or rows could not be evaluated (the rest is still
    written), 2 unreadable input or usage error.

    \b
    Examples:
      refit compare registry/map_from_bk_depth/*.json --at bk_depth_cm=100
      refit compare runs/bk/fits/*.json --fossils calib_demo/fossils.csv --paleosol MB-P03
    """
    from pathlib import Path

    from refit._util.atomic import write_bytes_atomic, write_text_atomic
    from refit.apply.compare import compare_files, figure_png
    from refit.errors import UsageError

    folder = Path(out)
    targets = [folder / "comparison.csv", folder / "comparison.png"]
    if any(t.exists() for t in targets) and not overwrite:
        raise UsageError(f"--out {out} already holds a comparison; pass --overwrite")
    table, result = compare_files(list(coefficients), fossils=fossils, at=at,
                                  paleosols=paleosols, level=level, decompact=decompact,
                                  constants_file=constants_file, seed=seed)
    folder.mkdir(parents=True, exist_ok=True)
    write_text_atomic(targets[0], table.to_csv(index=False))
    write_bytes_atomic(targets[1], figure_png(table))
    console = stdout_console()
    print_comparison(table, console)
    console.print(f"Written: {targets[0]}, {targets[1]}")
    print_problems_and_cautions(result, console)
    ctx.exit(0 if result.ok else 1)
