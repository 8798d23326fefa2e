"""`refit report`: one self-contained HTML file with the figures and numbers of a run."""

from __future__ import annotations

import sys

import click

from refit.cli.common import guarded, say, stderr_console


@click.command("report", short_help="Write a self-contained HTML report of a fit run.")
@click.argument("run", type=click.Path(file_okay=False, path_type=str))
@click.option("--out", "out", type=click.Path(dir_okay=False, path_type=str), default=None,
              metavar="FILE.html",
              help="Report file to write [default: reports/<run folder name>.html].")
@click.option("--candidate", default=None, metavar="LABEL",
              help="Report this leaderboard candidate (e.g. quadratic__ols__forward__analytic, as the leaderboard and fits/ name it) "
                   "instead of the run's top one.")
@click.option("--store", "store", type=click.Path(path_type=str), default=None,
              metavar="PATH", help="Where the run's store (or table) is now, if it moved.")
@click.option("--compare", "compare", type=click.Path(path_type=str), default=None,
              metavar="DIR", help="Folder written by `refit compare` (comparison.csv): add "
                                  "its interval figure and table to the report.")
@click.option("--section", "section", type=click.Path(path_type=str), default=None,
              metavar="DIR", help="Folder written by `refit section` (section.csv): add its "
                                  "climate-through-the-section figures to the report.")
@click.option("--overwrite", is_flag=True, help="Replace an existing report file.")
@click.option("--quiet", "-q", is_flag=True, help="Print nothing but errors.")
@guarded
def report(run, out, candidate, store, compare, section, overwrite, quiet) -> None:
    """Write one HTML file reporting the fit RUN folder (from `refit fit --out RUN`).

    The report reloads the run's calibration data (the store version or table recorded in
    run.json, checked against its sha256), rebuilds the subset and refits the chosen
    candidate, then shows: the dataset and its hash, the subset, the leaderboard, the
    chosen equation with coefficients and standard errors, the recipe's cross-validation
    against random k-fold, flags and cautions, the figures (embedded; the file needs no
    network) and the commands that reproduce it. With --compare DIR it also shows the
    fossil estimates of several fits side by side (from `refit compare --out DIR`); with
    --section DIR the climate of each measured section against level or age (from
    `refit section --out DIR`).

    \b
    Exit codes: 0 written, 1 the data are no longer the run's, 2 unreadable run folder,
    missing data, usage error.

    \b
    Examples:
      refit report run --out reports/run.html
      refit report run --candidate linear__ols__inverse__analytic --compare compare \
          --section section --out reports/linear.html
    """
    from pathlib import Path

    from refit.errors import UsageError
    from refit.report.html import write_report

    target = Path(out) if out else Path("reports") / f"{Path(run).resolve().name}.html"
    if target.is_dir():
        raise UsageError(f"--out {target} is a folder; name the .html file to write")
    if target.exists() and not overwrite:
        raise UsageError(f"{target} already exists; choose another --out or pass "
                         "--overwrite to replace it")
    err = stderr_console(quiet=quiet or not sys.stderr.isatty())
    with err.status("reading the run") as status:
        written = write_report(run, target, candidate=candidate, store=store,
                               command=_command(run, target, candidate, store, compare,
                                                section, overwrite),
                               progress=lambda text: status.update(text), compare=compare,
                               section=section)
    say(f"Report written to {written}")


def _command(run, target, candidate, store, compare, section, overwrite) -> list[str]:
    """The command that rewrites this report (shown in it)."""
    cmd = ["refit", "report", str(run), "--out", str(target)]
    cmd += ["--overwrite"] if overwrite else []
    cmd += ["--candidate", candidate] if candidate else []
    cmd += ["--compare", str(compare)] if compare else []
    cmd += ["--section", str(section)] if section else []
    return cmd + (["--store", str(store)] if store else [])
