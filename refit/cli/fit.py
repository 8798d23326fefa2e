"""`refit fit`: run a recipe's fit matrix, print the leaderboard, write a run folder."""

from __future__ import annotations

import sys

import click

from refit.cli.common import (Progress, emit_csv, emit_json, format_option, guarded, print_run,
                              stderr_console)


def _jobs(value: int) -> int:
    if value == 0:
        raise click.BadParameter("0 workers cannot fit anything; give 1 or more, or -1 for "
                                 "all cores")
    return value


@click.command("fit", short_help="Cross-validate a recipe's candidate fits and rank them.")
@click.argument("recipe", type=click.Path(dir_okay=False, path_type=str))
@click.option("--out", "out", type=click.Path(file_okay=False, path_type=str), default=None,
              metavar="RUN", help="Run folder to write [default: runs/<function id>-<time>].")
@click.option("--overwrite", is_flag=True, help="Replace an existing run folder.")
@click.option("--jobs", type=click.IntRange(min=-1, max=1024), default=1, show_default=True,
              callback=lambda ctx, param, value: _jobs(value),
              help="Parallel worker processes for the candidates, 1 or more (-1: all cores; "
                   "1 is usually fastest on 2 cores).")
@click.option("--quiet", "-q", is_flag=True,
              help="Print nothing but errors (the run folder holds every result); "
                   "--format json|csv still prints its output.")
@click.option("--store", "store", type=click.Path(path_type=str), default=None,
              help="Use this calibration store instead of the recipe's [data] (may lie anywhere).")
@click.option("--table", "table", type=click.Path(dir_okay=False, path_type=str), default=None,
              help="Use this calibration table instead of the recipe's [data].")
@format_option("json", "csv")
@guarded
def fit(recipe, out, overwrite, jobs, quiet, store, table, fmt) -> None:
    """Cross-validate every candidate of a RECIPE and rank them.

    Reads the recipe (TOML), selects the subset of the store or table it names, fits
    every valid form x estimator x direction x interval method, scores each under the
    recipe's validation scheme and under random k-fold side by side, prints the
    leaderboard and writes the run folder: leaderboard.csv/.json, oof_predictions.csv,
    fits/<candidate>.json and run.json.

    \b
    Exit codes: 0 done, 1 invalid data (missing column, too few rows, a scheme that
    cannot split the subset, no candidate could be fitted), 2 unreadable or invalid
    recipe, usage error.

    \b
    Examples:
      refit fit recipe.toml --out runs/bk-map
      refit fit recipe.toml --store store --out runs/bk --format csv > leaderboard.csv
    """
    import datetime as dt
    from pathlib import Path

    from refit.validate.candidates import run_recipe
    from refit.select.recipe import read_recipe
    from refit.validate.runfolder import check_target, write_run

    if store and table:
        from refit.errors import UsageError

        raise UsageError("give --store or --table, not both")
    given = {"store": store} if store else {"table": table} if table else None
    rec = read_recipe(recipe, data=given)
    if out is None:
        stamp = dt.datetime.now().strftime("%Y%m%d-%H%M%S")
        out = Path("runs") / f"{rec.function_id}-{stamp}"
    check_target(Path(out), overwrite=overwrite)
    err = stderr_console(quiet=quiet or not sys.stderr.isatty())
    with Progress(err) as progress:
        run = run_recipe(rec, n_jobs=jobs, progress=progress)
    if not run.matrix.specs:
        raise_nothing_fitted(recipe, run.matrix.skipped)
    written = write_run(run, out, argv=["refit", "fit", *sys.argv[2:]], overwrite=overwrite)
    if fmt == "csv":
        emit_csv(run.matrix.leaderboard)
    elif fmt == "json":
        emit_json(run_summary(run, written))
    elif not quiet:
        print_run(run, written)


def run_summary(run, written) -> dict:
    """What `refit fit --format json` prints: where the run went, the verdict, the top
    candidate's equation as used, the leaderboard, skipped candidates and notes."""
    import json
    from pathlib import Path

    from refit.report.equations import used_equation
    from refit.validate.runfolder import fit_filename

    m = run.matrix
    winner = m.verdict.get("winner")
    equation = None
    if winner:
        record = json.loads((Path(written) / "fits" / fit_filename(winner)).read_text("utf-8"))
        equation = used_equation(record)
    return {"run": str(written), "function_id": run.recipe.function_id,
            "level": run.recipe.level, "scheme": m.schemes["main"].name,
            "verdict": m.verdict, "equation": equation, "leaderboard": m.leaderboard,
            "skipped": m.skipped, "defaults_applied": list(getattr(run, "defaults", [])),
            "warnings": list(getattr(run, "warnings", []))}


def raise_nothing_fitted(recipe, skipped: list) -> None:
    """Stop with exit code 1 when every candidate failed or was skipped (nothing written)."""
    from refit.errors import InvalidDataError

    by_reason: dict[str, int] = {}
    for s in skipped:
        by_reason[s["reason"]] = by_reason.get(s["reason"], 0) + 1
    reason, n = max(by_reason.items(), key=lambda kv: kv[1]) if by_reason else ("none", 0)
    more = (f" ({len(by_reason) - 1} other reason(s))" if len(by_reason) > 1 else "")
    raise InvalidDataError(
        f"{recipe}: no candidate could be fitted ({len(skipped)} tried); {n} failed with: "
        f"{reason.removeprefix('failed: ')[:300]}{more}; no run was written: fix the data or the recipe's "
        "[subset] and [candidates], then run `refit fit` again")
