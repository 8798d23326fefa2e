"""`refit apply`: estimates, intervals and flags for fossil soils from coefficient files."""

from __future__ import annotations

import click

from refit.cli.common import (
    emit_csv, emit_json, finish, fmt_number, format_option, fossil_options, guarded,
    posterior_options, posterior_prior, print_problems_and_cautions, problems_failure,
    stdout_console,
)


@click.command("apply", short_help="Apply coefficient files to fossil soils, with flags.")
@click.argument("coefficients", nargs=-1, required=True,
                type=click.Path(dir_okay=False, path_type=str))
@click.option("--fossils", required=True, metavar="TABLE",
              type=click.Path(dir_okay=False, path_type=str),
              help="Fossil measurement table (csv, tsv, xlsx or parquet).")
@fossil_options
@click.option("--out", metavar="CSV", type=click.Path(dir_okay=False, path_type=str),
              help="Write the results (and, with --decompact, CSV.decompaction.csv).")
@click.option("--overwrite", is_flag=True, help="Replace an existing --out file.")
@click.option("--combine", is_flag=True,
              help="Add a combined estimate per paleosol across proxies, weighted by "
                   "cross-validated errors and tested for consistency (proxies-disagree).")
@posterior_options
@click.option("--ignore-columns", "ignore_columns", metavar="COLUMN", multiple=True,
              help="Go on without an unmapped column that looks like a measurement SD "
                   "(its error is then not propagated); repeatable.")
@format_option("json", "csv")
@click.pass_context
@guarded
def apply(ctx, coefficients, fossils, level, decompact, constants_file, seed, out,
          overwrite, combine, ignore_columns, fmt, posterior=False,
          prior=None) -> None:
    """Estimate the climate of each paleosol in TABLE with each COEFFICIENTS file.

    For each paleosol and each file whose predictors the table has: estimate, lower and
    upper limits and flags (outside-calibration-range, beyond-turning-point, unbounded,
    two-roots, setting-mismatch with the fit's subset, published-plus-minus-only, ...).
    Measurement SDs (columns like bk_depth_sd_cm) and, with --decompact, the burial
    depth SD are propagated into the interval by seeded Monte Carlo. Rows with bad
    values are reported and the others still evaluated.

    A limit cut at a physical bound (e.g. MAP below 0 mm) is written as the bound and
    flagged truncated-at-bound; the limit before the cut is in lower_untruncated /
    upper_untruncated. A forward line's set that is two rays (flag two-rays) gives
    the ray holding the estimate as lower/upper and the other one in other_lower /
    other_upper (NaN otherwise; at the measured value, without propagation).

    With --posterior, forward files also give the posterior for climate (columns
    posterior_median, posterior_mode, posterior_lower, posterior_upper, HDI, flags,
    proxy_chi2 and proxy_chi2_p beside the frequentist ones; its prior and grid go to
    CSV.posterior.json); a paleosol measured by two or more proxies gets one "posterior"
    row, the combined answer, flagged proxies-disagree when they do not agree.

    \b
    Exit codes: 0 every row evaluated, 1 some rows or files could not be (the rest is
    still written), 2 unreadable input or usage error.

    \b
    Examples:
      refit apply run/fits/*.json --fossils fossils.csv
      refit apply registry/map_from_bk_depth/1.0.0.json --fossils fossils.csv --decompact \\
          --compaction-constants compaction_constants.csv --out my-estimates.csv
      refit apply registry/map_from_bk_depth/1.0.0.json --fossils fossils.csv --format json
      refit apply forward/run_forward_bk_depth/fits/linear__ols__forward__analytic.json \\
          forward/run_forward_cia_k/fits/linear__ols__forward__analytic.json \\
          --fossils fossils.csv --posterior --prior uniform:100:1500 --out posterior.csv
    """
    from pathlib import Path

    from refit.apply.estimates import apply_files
    from refit.errors import UsageError

    if out and Path(out).exists() and not overwrite:
        raise UsageError(f"--out {out} exists; pass --overwrite to replace it")
    prior_obj = posterior_prior(posterior, prior)
    result = apply_files(list(coefficients), fossils, level=level, decompact=decompact,
                         constants_file=constants_file, seed=seed, combine=combine,
                         posterior=posterior, prior=prior_obj, ignore_columns=ignore_columns)
    if out:
        _write(result, out)
    if fmt != "text":
        _emit(result, fmt)
        ctx.exit(0 if result.ok else 1)
    console = stdout_console()
    print_results(result.results, console)
    if out:
        console.print(f"Results written to {out}")
    for warning in result.warnings:  # e.g. depths applied without decompaction
        console.print(f"Warning: {warning}", style="yellow", markup=False)
    print_problems_and_cautions(result, console)
    finish(result.ok, problems_failure(result, "apply"))


def _emit(result, fmt: str) -> None:
    """``--format csv``: the results table; ``json``: it with the problems, warnings and
    cautions (every column of ``--out``)."""
    if fmt == "csv":
        emit_csv(result.results)
        return
    emit_json({"results": result.results, "problems": result.problems,
               "warnings": result.warnings, "cautions": result.cautions, "ok": result.ok})


def _write(result, out: str) -> None:
    from refit._util.atomic import write_text_atomic

    write_text_atomic(out, result.results.to_csv(index=False))
    if result.posteriors:
        import json

        from refit.apply.posterior import posterior_record

        level = result.posteriors[0]["level"]
        write_text_atomic(out + ".posterior.json",
                          json.dumps(posterior_record(result.posteriors, level), indent=2,
                                     default=float) + "\n")
    if result.decompaction is not None:
        write_text_atomic(out + ".decompaction.csv",
                          result.decompaction.to_csv(index=False))


def print_results(results, console) -> None:
    """The results as a table for people."""
    from rich.table import Table
    from rich.text import Text

    from refit._util.numbers import reading_texts
    from refit.apply.compare import fit_label
    from refit.curate.schema import unit_notation

    table = Table(title="Estimates", title_justify="left", title_style="bold")
    for col in ("paleosol", "fit", "estimate", "interval", "level", "MC", "CV cov.",
                "flags / problem"):
        table.add_column(col, justify="right" if col in ("estimate", "level") else "left")
    for r in results.itertuples(index=False):
        fit = fit_label(r)
        level = "±1 SE" if r.status == "published" and (r.level is None or r.level != r.level) \
            else fmt_number(r.level)
        cov = f"{r.cv_coverage:.0%}" if isinstance(r.cv_coverage, (int, float)) and \
            r.cv_coverage == r.cv_coverage else "-"
        mc = "yes" if str(r.propagation).startswith("monte-carlo") else ""
        note = Text(r.problem, style="red") if r.problem else Text(str(r.flags))
        est, lo, hi = reading_texts(r.estimate, r.lower, r.upper)
        interval = f"[{lo}, {hi}] {unit_notation(r.unit)}"
        table.add_row(str(r.paleosol_id), fit, est, interval, level, mc, cov, note)
    console.print(table)
