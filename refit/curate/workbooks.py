"""Workbooks (xlsx) and parquet files for :func:`refit.curate.tables.read_table`.

Internal to :mod:`refit.curate.tables`, which imports this module (never the other way round):
a worksheet becomes rows of display text (which :mod:`refit.curate.tables` then reads like a
text table, title rows and all); a parquet file becomes a frame with its own column types,
its file row numbers and column positions, which :mod:`refit.curate.tables` wraps in its
``Table``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from refit.curate.headers import blank_columns, refuse_repeated
from refit.errors import UnreadableInputError


# ---------------------------------------------------------------------------------------
# workbooks


def read_excel_rows(path: Path, sheet) -> tuple[list[list[str]], list[str], str]:
    """Rows of one worksheet as display text, the reader's notes and the file's sha256."""
    import zipfile

    from openpyxl import load_workbook
    from openpyxl.utils.exceptions import InvalidFileException

    from refit._util.atomic import sha256_file

    try:
        book = load_workbook(path, read_only=True, data_only=True)
    except (zipfile.BadZipFile, InvalidFileException, KeyError, OSError, ValueError) as exc:
        raise UnreadableInputError(
            f"{path}: not a readable xlsx workbook ({type(exc).__name__}: {exc}); open it in a "
            "spreadsheet program and save it again as .xlsx, or export the sheet as CSV"
        ) from None
    try:
        names = book.sheetnames
        if sheet is None:
            ws = book.worksheets[0]
        elif isinstance(sheet, int) and 0 <= sheet < len(names):
            ws = book.worksheets[sheet]
        elif isinstance(sheet, str) and sheet in names:
            ws = book[sheet]
        else:
            raise UnreadableInputError(
                f"{path}: no worksheet {sheet!r}; the workbook has {', '.join(map(repr, names))}"
            )
        rows = [[_cell_text(v) for v in row] for row in ws.iter_rows(values_only=True)]
        title = ws.title
    finally:
        book.close()
    if not any(cell.strip() for row in rows for cell in row):
        raise UnreadableInputError(f"{path}: worksheet {title!r} is empty; put the table there")
    notes = [f"read {path.name} as an xlsx workbook", f"sheet {title!r}"]
    return rows, notes, sha256_file(path)


# ---------------------------------------------------------------------------------------
# parquet


def read_parquet(path: Path, as_text: bool
                 ) -> tuple[pd.DataFrame, np.ndarray, str, list[str], dict[str, int]]:
    """A parquet file's frame and what :class:`refit.curate.tables.Table` records of it.

    Returns
    -------
    frame : pandas.DataFrame
        Data rows, column names stripped, unnamed empty columns left out (as text when
        ``as_text``).
    source_rows : numpy.ndarray
        File row of each frame row (row 1 stands for the column names).
    sha256 : str
        Hex SHA-256 of the file's bytes.
    notes : list of str
        What the reader did.
    file_columns : dict of str to int
        1-based position in the file of each frame column.
    """
    from refit._util.atomic import sha256_file

    try:
        frame = pd.read_parquet(path)
    except Exception as exc:  # pyarrow raises many kinds for a damaged file
        raise UnreadableInputError(
            f"{path}: not a readable parquet file ({type(exc).__name__}: {exc}); "
            "export it again or save the table as CSV"
        ) from None
    if len(frame) == 0:
        raise UnreadableInputError(f"{path} has columns but no data rows; add the soil profiles")
    frame.columns = [str(c).strip() for c in frame.columns]
    rows = np.arange(2, len(frame) + 2)
    refuse_repeated(list(frame.columns), path, 1)
    blank = blank_columns(list(frame.columns), frame.astype(object).map(_cell_text).values,
                          path, 1, rows) if "" in frame.columns else []
    keep = [j for j in range(frame.shape[1]) if j not in blank]
    frame = frame.iloc[:, keep]
    if as_text:
        frame = frame.astype(object).map(_cell_text)
    notes = [f"read {path.name} as parquet", "row 1 stands for the column names, data from row 2"]
    return (frame.reset_index(drop=True), rows, sha256_file(path), notes,
            {str(c): j + 1 for j, c in zip(keep, frame.columns)})


def _cell_text(value) -> str:
    """The text a spreadsheet would show for a typed cell ("" when missing)."""
    import datetime as dt
    import math

    if value is None or (isinstance(value, float) and math.isnan(value)) or value is pd.NA:
        return ""
    if isinstance(value, bool):
        return "TRUE" if value else "FALSE"
    if isinstance(value, float) and value.is_integer() and abs(value) < 1e15:
        return str(int(value))
    if isinstance(value, dt.datetime):
        return value.date().isoformat() if value.time() == dt.time(0) else value.isoformat()
    if isinstance(value, dt.date):
        return value.isoformat()
    return str(value)
