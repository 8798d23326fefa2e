"""`refit compare`: one table and one figure of what several fits say about a paleosol."""

from __future__ import annotations

import click

from refit.cli.common import (
    emit_csv, emit_json, format_option, fossil_options, guarded, print_comparison,
    print_problems_and_cautions, stdout_console,
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
@click.option("--posterior", is_flag=True,
              help="Also draw the posterior for climate of forward files beside their "
                   "interval, and of all proxies of a paleosol together.")
@click.option("--prior", metavar="SPEC",
              help="Prior of --posterior: uniform:LOW:HIGH or normal:MEAN:SD in climate "
                   "units [default: uniform over the calibration range].")
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

    from refit._util.atomic import write_bytes_atomic, write_text_atomic
    from refit.apply.compare import compare_files, figure_pngs, page_names, panel_groups
    from refit.errors import UsageError

    folder = Path(out)
    csv = folder / "comparison.csv"
    if (csv.exists() or (folder / "comparison.png").exists()) and not overwrite:
        raise UsageError(f"--out {out} already holds a comparison; pass --overwrite")
    from refit.apply.posterior import parse_prior

    if prior and not posterior:
        raise UsageError("--prior is the prior of --posterior; add --posterior")
    table, result = compare_files(list(coefficients), fossils=fossils, at=at,
                                  paleosols=paleosols, level=level, decompact=decompact,
                                  constants_file=constants_file, seed=seed,
                                  posterior=posterior, prior=parse_prior(prior))
    pngs = figure_pngs(table)
    folder.mkdir(parents=True, exist_ok=True)
    for old in folder.glob("comparison-*.png"):  # pages of an earlier, longer comparison
        old.unlink()
    write_text_atomic(csv, table.to_csv(index=False))
    figures = [folder / name for name in page_names(len(pngs))]
    for target, png in zip(figures, pngs):
        write_bytes_atomic(target, png)
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
    ctx.exit(0 if result.ok else 1)
