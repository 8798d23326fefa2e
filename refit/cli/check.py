"""`refit check`: validate a table and report every problem at once."""

from __future__ import annotations

import click

from refit.cli.common import compact_notes, finish, guarded, plural, stdout_console

MAX_ROWS_DEFAULT = 50


@click.command("check", short_help="Check a calibration table and report every problem.")
@click.argument("table", type=click.Path(dir_okay=False, path_type=str))
@click.option("--kind", type=click.Choice(["calibration", "fossil"]), default="calibration",
              show_default=True, help="What the table holds.")
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text",
              show_default=True, help="text for people, json (one document) for programs.")
@click.option("--vocab", "vocab_files", multiple=True, type=click.Path(dir_okay=False),
              metavar="FILE",
              help='Extra vocabulary terms, a JSON file like {"vegetation": ["new term"]}; '
                   "repeatable.")
@click.option("--sheet", metavar="NAME", default=None,
              help="Worksheet of an xlsx workbook; default the first visible sheet.")
@click.option("--max-rows", type=click.IntRange(min=0), default=MAX_ROWS_DEFAULT,
              show_default=True,
              help="Blocks of problems (one per rule, column and value) listed per "
                   "severity in text mode.")
@click.pass_context
@guarded
def check(ctx, table, kind, fmt, vocab_files, sheet, max_rows) -> None:
    """Check a calibration table (csv, tsv, xlsx or parquet) against refit's schema.

    Every problem is reported at once with its file row, profile_id, column, value,
    rule and how to fix it; warnings are listed apart from errors, then a count per
    rule. Column names with another unit or a known synonym are mapped first.

    \b
    Exit codes: 0 valid (warnings allowed), 1 invalid, 2 unreadable input or usage error.

    \b
    Examples:
      refit check incoming_soils.csv
      refit check incoming_soils.csv --format json > problems.json
      refit check fossils.csv --kind fossil
    """
    import json

    from refit.curate.checks import check_file, load_vocabularies

    vocab = load_vocabularies(*vocab_files)
    report = check_file(table, kind=kind, vocabularies=vocab, sheet=sheet)
    if fmt == "json":
        click.echo(json.dumps(report.to_dict(), ensure_ascii=False, indent=1))
    else:
        print_report(report, max_rows=max_rows)
    finish(report.ok, f"{report.path}: {plural(len(report.errors), 'error')} found; "
                      "`refit check` without -q lists them")


def print_report(report, *, max_rows: int = MAX_ROWS_DEFAULT, console=None) -> None:
    """Print a CheckReport for people: notes, errors, warnings, summary, verdict."""
    from rich.text import Text

    console = console or stdout_console()
    console.print(Text(f"Checked {report.path}: {plural(report.n_rows, 'row')}", style="bold"))
    for note in compact_notes(report.notes):
        console.print(Text(f"  - {note}", style="dim"))
    for severity, frame, style in (("errors", report.errors, "red"),
                                   ("warnings", report.warnings, "yellow")):
        if len(frame):
            _problem_table(console, frame, severity, style, max_rows, report.kind)
    if len(report.problems):
        _summary_table(console, report.summary())
    n_err, n_warn = len(report.errors), len(report.warnings)
    if report.ok:
        verdict = Text(f"VALID: no errors, {plural(n_warn, 'warning')}.", style="bold green")
    else:
        verdict = Text(f"INVALID: {plural(n_err, 'error')} in "
                       f"{plural(len(report.bad_rows()), 'row')} and "
                       f"{len(report.table_errors())} about the whole table; "
                       f"{plural(n_warn, 'warning')}.", style="bold red")
    console.print(verdict)


def _problem_table(console, frame, title, style, max_rows, kind="calibration") -> None:
    """One block per (rule, column, value): where and how often, then the reason and fix
    once (a list rather than a grid: the reasons are sentences and stay readable in a
    narrow terminal or a log file)."""
    from rich.text import Text

    from refit.cli.common import problem_block_lines
    from refit.curate.problems import group_problems

    groups = group_problems(frame)
    label = title if len(frame) != 1 else title.rstrip("s")
    console.print(Text(f"{len(frame)} {label} in {plural(len(groups), 'block')} "
                       "(one per rule, column and value)", style=f"bold {style}"))
    what = "paleosol " if kind == "fossil" else ""
    for line in problem_block_lines(groups, max_rows, what=what):
        console.print(Text(line), soft_wrap=True)
    if len(groups) > max_rows:
        console.print(Text(f"... {len(groups) - max_rows} more blocks of {title} "
                           "(raise --max-rows, or --format json for every problem)",
                           style=style))
    console.print()


def _text(value) -> str:
    import pandas as pd

    return "" if value is None or pd.isna(value) else str(value)


def _summary_table(console, summary) -> None:
    from rich.table import Table
    from rich.text import Text

    table = Table(title="summary per rule", title_justify="left", title_style="bold")
    table.add_column("rule")
    table.add_column("severity")
    table.add_column("count", justify="right")
    for rule, severity, count in summary.itertuples(index=False):
        table.add_row(Text(rule), Text(severity), Text(str(count)))
    console.print(table)
