"""`refit section`: climate against stratigraphic level (or age), one figure per section."""

from __future__ import annotations

import click

from refit.cli.common import (
    finish, fossil_options, guarded, posterior_options, posterior_prior,
    print_problems_and_cautions, problems_failure, stdout_console,
)


@click.command("section", short_help="Climate up each section: figure and table.")
@click.argument("coefficients", nargs=-1, required=True,
                type=click.Path(dir_okay=False, path_type=str))
@click.option("--fossils", required=True, metavar="TABLE",
              type=click.Path(dir_okay=False, path_type=str),
              help="Fossil table with section and level_m columns.")
@click.option("--age-column", metavar="NAME",
              help="Column of TABLE with each paleosol's age (unit in its name, e.g. "
                   "age_ma; its SD from age_sd_ma when present).")
@click.option("--age-sd-column", metavar="NAME", help="Column with the age's SD.")
@click.option("--age-model", metavar="TABLE", type=click.Path(dir_okay=False, path_type=str),
              help="Dated levels (section, level_m, age_ma[, age_sd_ma]); ages of the "
                   "paleosols by linear interpolation between them.")
@fossil_options
@posterior_options
@click.option("--out", required=True, metavar="DIR",
              type=click.Path(file_okay=False, path_type=str),
              help="Folder for section.csv, notes.txt and section-<name>.png "
                   "(section-<name>-2.png, ... when the fits need more figures).")
@click.option("--overwrite", is_flag=True, help="Replace a section table already in --out.")
@click.pass_context
@guarded
def section(ctx, coefficients, fossils, age_column, age_sd_column, age_model, level,
            decompact, constants_file, seed, posterior, prior, out, overwrite) -> None:
    """Draw the estimates of COEFFICIENTS files up each section of TABLE.

    One figure per section: estimate and interval of every fit against level_m (or age),
    one colour per fit, prediction intervals solid, published ±1 SE dashed, flagged
    estimates hollow with the flag named. DIR/section.csv holds the same numbers (one
    row per paleosol and fit); DIR/notes.txt the choices made (missing or repeated
    levels, ...) and where adjacent levels differ by less than their intervals resolve.
    A limit cut at a physical bound (flag truncated-at-bound) is marked by a triangle at
    the bound; the limit before the cut is in the table.

    More than five fits are drawn as small multiples: at most five fits a panel (each
    panel's legend names its fits), panels side by side on one level axis and one x
    range per quantity, at most four panels a figure, further figures as
    section-<name>-2.png, ...; the terminal says which fits each figure holds.

    With --posterior, each forward file's posterior median and equal-tailed interval
    (the numbers of `refit apply --posterior`, same --prior) are drawn beside its
    frequentist interval, dotted with a diamond, as the fit "<fit> posterior", and a
    paleosol measured by two or more proxies gets the combined posterior too; the
    table holds them as rows of interval_kind "posterior".

    \b
    Exit codes: 0 written, 1 some fits or rows could not be evaluated (the rest is still
    written), 2 unreadable input or usage error.

    \b
    Examples:
      refit section run/fits/*.json --fossils fossils.csv --out sections \\
          --decompact --compaction-constants compaction_constants.csv
      refit section registry/map_from_bk_depth/1.0.0.json --fossils fossils.csv \\
          --age-model age_model.csv --out sections-by-age
      refit section forward/run_forward_bk_depth/fits/linear__ols__forward__analytic.json \\
          --fossils fossils.csv --posterior --prior uniform:100:1500 --out sections-posterior
    """
    from pathlib import Path

    from refit.apply.section import section_files
    from refit.errors import UsageError
    from refit.report.section_plot import figure_contents, write_section

    if (Path(out) / "section.csv").exists() and not overwrite:
        raise UsageError(f"--out {out} already holds section.csv; pass --overwrite")
    prior_obj = posterior_prior(posterior, prior)
    result = section_files(list(coefficients), fossils, age_column=age_column,
                           age_sd_column=age_sd_column, age_model=age_model, level=level,
                           decompact=decompact, constants_file=constants_file, seed=seed,
                           posterior=posterior, prior=prior_obj)
    written = write_section(result, out)
    console = stdout_console()
    t = result.table
    drawn = t[t[result.axis].notna() & t["estimate"].notna()]
    console.print(f"{drawn['paleosol_id'].nunique()} of {t['paleosol_id'].nunique()} "
                  f"paleosols drawn in {len(written) - 2} figure(s), "
                  f"{drawn['fit'].nunique()} fit(s), against "
                  f"{'level [m]' if result.axis == 'level_m' else result.age_label}:",
                  markup=False)
    what = dict(figure_contents(result))
    for p in written[2:]:
        console.print(f"  {p}: {what.get(p.name, '')}", markup=False)
    console.print(f"Table: {written[0]}; notes: {written[1]}", markup=False)
    for note in result.notes:
        console.print(f"Note: {note}", markup=False)
    for warning in result.applied.warnings:
        console.print(f"Warning: {warning}", style="yellow", markup=False)
    print_problems_and_cautions(result.applied, console)
    finish(result.applied.ok, problems_failure(result.applied, "section"))
