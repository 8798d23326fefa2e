"""`refit init`: write a commented first recipe for a calibration table or store."""

from __future__ import annotations

import click

from refit.cli.common import guarded, is_quiet, stdout_console


@click.command("init", short_help="Write a commented first recipe for a table or store.")
@click.argument("data", metavar="TABLE_OR_STORE", type=click.Path(path_type=str))
@click.option("--out", "out", type=click.Path(dir_okay=False, path_type=str),
              default="recipe.toml", show_default=True, help="The recipe file to write.")
@click.option("--force", "--overwrite", "force", is_flag=True,
              help="Replace an existing recipe file.")
@click.option("--sheet", metavar="NAME", default=None,
              help="Worksheet of an xlsx workbook to read (a name); written into the "
                   "recipe as [data] sheet. Default the first visible sheet.")
@guarded
def init(data, out, force, sheet) -> None:
    """Write a commented recipe for a calibration TABLE_OR_STORE, ready to edit.

    Reads the table (csv, tsv, xlsx, parquet; units and column names mapped as `refit
    check` maps them) or the store folder, and writes a recipe that lists the columns
    found (and those that map to no canonical name), suggests a response, a predictor
    and a groups column for grouped cross-validation with the reason for each, offers
    the subset filters with the number of soils each keeps, and fills forms, estimators,
    schemes and interval methods with refit's own defaults. The recipe loads as written:
    `refit fit` runs on it.

    An xlsx workbook is read on its first visible sheet, or on the sheet --sheet names;
    the recipe names the sheet it read ([data] sheet = "NAME"; the other sheets are
    ignored) when --sheet is given or the workbook has several visible sheets, so a
    later change of the workbook's sheet order cannot change the data a fit reads
    (e.g. `refit init field_book.xlsx --sheet Data`).

    \b
    Exit codes: 0 written, 1 nothing to fit (no climate or no feature column with
    values), 2 unreadable input, a --sheet the workbook lacks or with a file that is
    not an xlsx workbook, or the recipe file exists (pass --force).

    \b
    Examples:
      refit init store --out my-recipe.toml
      refit init incoming_soils.csv --out incoming.toml --force
    """
    from pathlib import Path

    from refit._util.atomic import write_text_atomic
    from refit.errors import UsageError
    from refit.select.scaffold import scaffold

    target = Path(out)
    if target.exists() and not force:
        raise UsageError(f"{out} already exists; pass --force to replace it, or choose "
                         "another --out")
    text, sv, pick = scaffold(data, target, sheet)
    write_text_atomic(target, text)
    if is_quiet():
        return
    console = stdout_console()
    groups = pick["groups"].value
    console.print(f"Wrote {out}: {pick['response'].value} from {pick['predictor'].value} on "
                  f"{pick['n_usable'].value} of {sv.n_rows} records"
                  + (f" (sheet {sv.sheet!r})" if sv.sheet is not None else "")
                  + (f", groups {groups!r}" if groups else ", no groups column"), markup=False)
    if sv.n_errors:
        console.print(f"Warning: the table has {sv.n_errors} error(s); `refit fit` refuses it "
                      f"until they are fixed (`refit check {data}`), or admit it to a store.",
                      markup=False)
    import tomllib

    named = {"table", "store"} & set(tomllib.loads(text)["data"])
    data_key = "" if named else f" --{sv.kind} {data}"
    console.print(f"Edit it (the comments say what each line does), then: refit fit {out}"
                  f"{data_key} --out run", markup=False)
