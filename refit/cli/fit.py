"""`refit fit`: run a recipe's fit matrix, print the leaderboard, write a run folder."""

from __future__ import annotations

import sys

import click

from refit.cli.common import guarded, stderr_console, stdout_console

SHOWN = 20  # leaderboard rows printed (all are in the files)
WIDTH = 150  # columns of the printed leaderboard when stdout is not a terminal


@click.command("fit", short_help="Cross-validate a recipe's candidate fits and rank them.")
@click.argument("recipe", type=click.Path(dir_okay=False, path_type=str))
@click.option("--out", "out", type=click.Path(file_okay=False, path_type=str), default=None,
              metavar="RUN", help="Run folder to write [default: runs/<function id>-<time>].")
@click.option("--overwrite", is_flag=True, help="Replace an existing run folder.")
@click.option("--jobs", type=click.IntRange(min=-1), default=1, show_default=True,
              help="Parallel worker processes for the candidates (-1: all cores; 1 is usually fastest on 2 cores).")
@click.option("--quiet", "-q", is_flag=True, help="No progress bar.")
@click.option("--store", "store", type=click.Path(path_type=str), default=None,
              help="Use this calibration store instead of the recipe's [data] (may lie anywhere).")
@click.option("--table", "table", type=click.Path(dir_okay=False, path_type=str), default=None,
              help="Use this calibration table instead of the recipe's [data].")
@guarded
def fit(recipe, out, overwrite, jobs, quiet, store, table) -> None:
    """Cross-validate every candidate of a RECIPE and rank them.

    Reads the recipe (TOML), selects the subset of the store or table it names, fits
    every valid form x estimator x direction x interval method, scores each under the
    recipe's validation scheme and under random k-fold side by side, prints the
    leaderboard and writes the run folder: leaderboard.csv/.json, oof_predictions.csv,
    fits/<candidate>.json and run.json.

    \b
    Exit codes: 0 done, 1 invalid data (missing column, too few rows, a scheme that
    cannot split the subset), 2 unreadable or invalid recipe, usage error.

    \b
    Examples:
      refit fit calib_demo/recipe.toml
      refit fit my_recipe.toml --out runs/bk-map --jobs 2
      refit fit recipes/bk.toml --store /data/soils/store   # data outside the recipe folder
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
    with _Progress(err) as progress:
        run = run_recipe(rec, n_jobs=jobs, progress=progress)
    written = write_run(run, out, argv=["refit", "fit", *sys.argv[2:]], overwrite=overwrite)
    print_run(run, written)


class _Progress:
    """A rich progress bar on stderr driven by ``progress(total=...)`` / ``(advance=1)``."""

    def __init__(self, console):
        self.console = console
        self.bar = None
        self.task = None

    def __enter__(self):
        from rich.progress import BarColumn, MofNCompleteColumn, Progress, TextColumn

        self.bar = Progress(TextColumn("{task.description}"), BarColumn(),
                            MofNCompleteColumn(), console=self.console, transient=True)
        self.bar.__enter__()
        self.task = self.bar.add_task("reading the data", total=None)
        return self

    def __call__(self, *, total=None, advance=0, label=None):
        if total is not None:
            self.bar.update(self.task, total=total)
        if advance:
            self.bar.update(self.task, advance=advance, description=label or "")

    def __exit__(self, *exc):
        self.bar.__exit__(*exc)
        return False


def _num(v, fmt="{:.1f}") -> str:
    import math

    if v is None or (isinstance(v, float) and math.isnan(v)):
        return "-"
    return fmt.format(v)


def print_run(run, out, console=None) -> None:
    """Print the data, the subset, the leaderboard, the verdict and the cautions."""
    from rich.table import Table
    from rich.text import Text

    from refit.coefficients import CAUTION

    c = console or stdout_console()
    if not c.is_terminal:
        c.width = max(c.width, WIDTH)  # files and pipes: no truncated columns
    d, m, r = run.data, run.matrix, run.recipe
    version = f", dataset version {d['version']}" if d.get("version") is not None else ""
    c.print(Text(f"Data: {d['kind']} {d['name']!r} ({d['path']}){version}, sha256 "
                 f"{d['sha256']}", style="bold"))
    c.print(f"Subset: {run.subset.n_start} records")
    for s in run.subset.steps:
        c.print(f"  {s['step']}: {s['kept']} kept ({s['removed']} removed)")
    for note in run.subset.notes:
        c.print(Text(f"  note: {note}", style="yellow"))
    main, kf = m.schemes["main"], m.schemes["kfold"]
    c.print(f"Validation: {_scheme_text(main)}{_split_text(m.split_details['main'])}"
            + (f"; beside it random {_scheme_text(kf)}" if kf is not None else ""))
    c.print(f"Candidates: {len(m.specs)} fitted, {len(m.skipped)} skipped; interval level "
            f"{r.level:g}")
    table = Table(title=f"Leaderboard: {r.function_id} ({main.name})", title_justify="left")
    heads = ["#", "candidate", "RMSEP", "bias", "coverage", "width", "score", "k-fold RMSEP",
             "k-fold score", "R² in", "AIC"]
    for h in heads:
        table.add_column(h, justify="left" if h == "candidate" else "right")
    for row in m.leaderboard.head(SHOWN).itertuples(index=False):
        table.add_row(str(row.rank), row.candidate + ("" if row.coverage_ok else " *"),
                      _num(row.rmsep), _num(row.bias), _num(row.coverage, "{:.3f}"),
                      _num(row.mean_width), _num(row.interval_score),
                      _num(row.kfold_rmsep), _num(row.kfold_interval_score),
                      _num(row.r2_in_sample, "{:.3f}"), _num(row.aic))
    c.print(table)
    if len(m.leaderboard) > SHOWN:
        c.print(f"({len(m.leaderboard) - SHOWN} more in leaderboard.csv)")
    c.print(f"* coverage more than {m.tolerance:.1%} from {r.level:.0%}: ranked after the "
            "others")
    c.print("R² in, AIC: fitted on the whole subset, each on its equation's own response "
            "(forward fits model the feature): compare AIC only within one direction.")
    c.print(Text(f"Rule: {m.verdict['rule']}.", style="dim"))
    c.print(Text(f"Top: {m.verdict['why']}.", style="bold green"))
    if m.verdict["simpler_why"]:
        c.print(Text(f"Simpler: {m.verdict['simpler_why']}.", style="cyan"))
    opt = m.verdict.get("optimism")
    if opt:
        c.print(f"Optimism: random k-fold flatters; {main.name}'s RMSEP is "
                f"{opt['median_rmsep_ratio']:.2f}x and its interval score "
                f"{opt['median_score_ratio']:.2f}x random k-fold's (median over candidates).")
    _print_skipped(c, m.skipped)
    c.print(Text(f"Caution: {CAUTION}", style="yellow"))
    c.print(f"Run written to {out}")


def _print_skipped(c, skipped) -> None:
    """Skipped combinations grouped by reason (all of them are in leaderboard.json)."""
    from rich.text import Text

    if not skipped:
        return
    by_reason: dict[str, list[str]] = {}
    for s in skipped:
        by_reason.setdefault(s["reason"], []).append(s["candidate"])
    c.print(f"Skipped {len(skipped)} combination(s):")
    for reason, labels in by_reason.items():
        shown = ", ".join(labels[:3]) + (f" and {len(labels) - 3} more" if len(labels) > 3
                                         else "")
        c.print(Text(f"  {reason}: {shown}", style="dim"))


def _split_text(d: dict) -> str:
    """Groups or blocks of a split, e.g. `` (4 groups)``, `` (25 k-means blocks, ~38 km)``."""
    if d.get("block_km") is not None:
        return f" ({d['n_blocks']} {d['block_method']} blocks, ~{d['block_km']:.0f} km)"
    if d.get("n_groups") is not None:
        return f" ({d['n_groups']} groups)"
    return ""


def _scheme_text(s) -> str:
    if s.name == "loo":
        return "leave-one-out"
    if s.name == "leave-one-group-out":
        return f"leave-one-group-out by {s.groups}"
    by = f" by {s.groups}" if s.groups and s.name != "spatial-block" else ""
    return f"{s.name} {s.folds} folds x {s.repeats} repeat(s){by}, seed {s.seed}"
