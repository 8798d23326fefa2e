"""`refit admit`: add the rows of a table to a calibration store (thin shell over refit.curate.store)."""

from __future__ import annotations

import click

from refit.cli.common import finish, guarded, render_admit, say


@click.command("admit", short_help="Admit new soils into a versioned calibration store.")
@click.argument("table", required=False, type=click.Path(dir_okay=True, path_type=str))
@click.option("--into", "store", metavar="STORE", type=click.Path(path_type=str),
              help="Store folder; created (named after the folder) if it does not exist.")
@click.option("--repair-manifest", "repair", metavar="STORE", type=click.Path(path_type=str),
              help="Recompute STORE/manifest.json from records.csv (hash, row count, "
                   "version; a 'repair' changelog entry when records.csv changed) and say "
                   "what changed; admits nothing.")
@click.option("--dry-run", is_flag=True, help="Show what would happen; write nothing.")
@click.option("--vocab", "vocab_files", metavar="FILE", multiple=True,
              type=click.Path(dir_okay=False, path_type=str),
              help='Extra vocabulary terms, a JSON file like {"vegetation": ["new term"]}, '
                   "on top of STORE/vocabularies.json; repeatable.")
@click.option("--format", "fmt", type=click.Choice(["text", "json"]), default="text",
              show_default=True, help="Report for people (text) or programs (json).")
@click.option("--strict", is_flag=True,
              help="Exit with code 1 when any row was rejected (the admit still lands).")
@click.option("--unit", "unit_items", metavar="COLUMN=UNIT", multiple=True,
              help="Confirm or set the unit of a column (file or canonical name), e.g. "
                   "--unit 'MAP (in)=in' or --unit bk_depth_cm=m; repeatable.")
@click.option("--accept-suspect", is_flag=True,
              help="Admit the rows the consistency test holds as suspect (listed as "
                   "warnings) instead of quarantining them.")
@click.option("--again", is_flag=True,
              help="Admit a file whose SHA-256 the store's changelog already holds.")
@click.option("--sheet", metavar="NAME", default=None,
              help="Worksheet of an xlsx workbook; default the first visible sheet.")
@click.option("--max-rows", type=click.IntRange(min=0), default=50, show_default=True,
              help="Blocks of problems (one per rule, column and value) listed.")
@guarded
def admit(table: str | None, store: str | None, repair: str | None, dry_run: bool, vocab_files: tuple[str, ...], fmt: str,
          strict: bool, unit_items: tuple[str, ...], accept_suspect: bool, again: bool,
          sheet: str | None, max_rows: int) -> None:
    """Admit the soils of TABLE (csv, tsv, xlsx, parquet) into the store STORE.

    Column names and units are mapped to the canonical ones (e.g. 'MAP (in)' -> map_mm),
    every row is checked, duplicates of stored soils are caught, accepted rows are appended
    as a new dataset version, and every rejected row is kept unchanged, with its reasons, in
    STORE/quarantine/. The whole admit lands or nothing does; an interrupted admit is
    finished or undone by the next command that opens the store. A second admit into the
    same store waits up to 5 s for the first, then stops with a 'busy' error.

    Rows that disagree with any of the store's reference lines (MAP on Bk depth, MAP on
    CIA-K from the oxides) beyond a robust |z| of 3.5 are held as suspect in quarantine,
    each pair named in the reasons (--accept-suspect admits them); a column
    whose values look like another unit stops the admit until --unit confirms it; the same
    file twice stops unless --again.

    \b
    Exit codes: 0 admitted (rejected rows are in quarantine; see --strict), 1 invalid
    table (nothing written) or busy store, 2 unreadable input or usage error.

    A store whose manifest disagrees with its records.csv (hand edits, a lost changelog)
    is refused until 'refit admit --repair-manifest STORE' recomputes the manifest from
    records.csv; it prints every change it makes.

    \b
    Example:
      refit admit incoming_soils.csv --into store --dry-run
    """
    import json

    from refit.errors import UsageError

    if repair is not None:
        if table is not None or store is not None:
            raise UsageError("--repair-manifest STORE works alone; run it without TABLE and "
                             "--into, then admit")
        _repair(repair)
        return
    if table is None or store is None:
        raise UsageError("give the TABLE to admit and the store with --into STORE, e.g. "
                         "'refit admit soils.csv --into my_store'")
    from refit.curate.columns import parse_unit_options
    from refit.curate.store import admit as run_admit

    result = run_admit(table, store, dry_run=dry_run, vocab_files=list(vocab_files),
                       units=parse_unit_options(unit_items), accept_suspect=accept_suspect,
                       again=again, sheet=sheet)
    if fmt == "json":
        click.echo(json.dumps(result.to_dict(), indent=2, ensure_ascii=False, default=str))
    else:
        say("\n".join(render_admit(result, max_rows=max_rows)))
    if strict and result.rejected:
        finish(False, f"{table}: {result.rejected} row(s) rejected (--strict); they "
                      "are in the store's quarantine, `refit admit` without -q lists them")


def _repair(store: str) -> None:
    from refit.curate.store_manifest import repair_manifest

    changes = repair_manifest(store)
    if not changes:
        say(f"{store}: manifest.json already agrees with records.csv; nothing changed.")
        return
    say(f"{store}: manifest.json rebuilt from records.csv:")
    for change in changes:
        say(f"  - {change}")
