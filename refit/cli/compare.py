"""`refit compare`: one table and one figure of what several fits say about a paleosol."""

from __future__ import annotations

import click

from refit.cli.common import (
    emit_csv, emit_json, finish, format_option, fossil_options, guarded, posterior_options,
    posterior_prior, print_comparison, print_problems_and_cautions, problems_failure,
    stdout_console,
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
@posterior_options
@format_option("json", "csv")
@click.pass_context
@guarded
def compare(ctx, coefficients, fossils, at, paleosols, level, decompact, constants_file,
            seed, out, overwrite, fmt, posterior=False, prior=None) -> None:
    """Compare COEFFICIENTS files (fits, versions, published equations) on one input.

    Writes DIR/comparison.csv (one row per paleosol and fit: estimate, interval, width,
    cross-validated coverage, flags) and DIR/comparison.png (intervals as horizontal
    bars, one row per fit, the estimate marked, the CV coverage printed beside each
    interval: the narrowest interval is not necessarily the best). Every paleosol is
    drawn: beyond 12 panels the figure continues in comparison-2.png, comparison-3.png,
    ... and the terminal names each file. With --posterior, forward files also get the
    posterior for climate (hatched bar, open circle at its median, columns
    posterior_median/lower/upper) and a paleosol with two or more proxies a "posterior"
    row, all proxies multiplied.

    \b
    Exit codes: 0 written, 1 some fits or rows could not be evaluated (the rest is still
    written), 2 unreadable input or usage error.

    \b
    Examples:
      refit compare registry/map_from_bk_depth/*.json --at bk_depth_cm=100
      refit compare run/fits/*.json --fossils fossils.csv --paleosol MB-P03 --out cmp
      refit compare registry/map_from_bk_depth/*.json --at bk_depth_cm=100 --format csv \\
          --out cmp-100 > at-100.csv
    """
    from pathlib import Path

    from refit.apply.compare import compare_files, panel_groups, write_comparison
    from refit.errors import UsageError

    folder = Path(out)
    csv = folder / "comparison.csv"
    if (csv.exists() or (folder / "comparison.png").exists()) and not overwrite:
        raise UsageError(f"--out {out} already holds a comparison; pass --overwrite")
    prior_spec = posterior_prior(posterior, prior)
    table, result = compare_files(list(coefficients), fossils=fossils, at=at,
                                  paleosols=paleosols, level=level, decompact=decompact,
                                  constants_file=constants_file, seed=seed,
                                  posterior=posterior, prior=prior_spec)
    figures = write_comparison(table, folder)
    if fmt == "csv":
        emit_csv(table)
        ctx.exit(0 if result.ok else 1)
    if fmt == "json":
        emit_json({"comparison": table, "figures": [str(f) for f in figures],
                   "table": str(csv), "problems": result.problems,
                   "warnings": result.warnings, "cautions": result.cautions, "ok": result.ok})
        ctx.exit(0 if result.ok else 1)
    console = stdout_console()
    print_comparison(table, console)
    n_panels = len(panel_groups(table))
    console.print(f"Drawn: all {n_panels} panel(s) ({table['paleosol_id'].nunique()} "
                  f"paleosol(s)) in {len(figures)} figure file(s): "
                  + ", ".join(map(str, figures)))
    console.print(f"Table: {csv}")
    for warning in result.warnings:
        console.print(f"Warning: {warning}", style="yellow", markup=False)
    print_problems_and_cautions(result, console)
    finish(result.ok, problems_failure(result, "compare"))
