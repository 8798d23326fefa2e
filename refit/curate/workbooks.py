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


def open_workbook(path: Path):
    """The workbook at ``path`` opened read-only with its saved cell values (openpyxl);
    close it when done.

    Raises
    ------
    UnreadableInputError
        The file is not a readable xlsx workbook.
    """
    import zipfile

    from openpyxl import load_workbook
    from openpyxl.utils.exceptions import InvalidFileException

    try:
        return load_workbook(path, read_only=True, data_only=True)
    except (zipfile.BadZipFile, InvalidFileException, KeyError, OSError, ValueError) as exc:
        raise UnreadableInputError(
            f"{path}: not a readable xlsx workbook ({type(exc).__name__}: {exc}); open it in a "
            "spreadsheet program and save it again as .xlsx, or export the sheet as CSV"
        ) from None


def read_excel_rows(path: Path, sheet) -> tuple[list[list[str]], list[str], str]:
    """Rows of one worksheet as display text, the reader's notes and the file's sha256."""
    from refit._util.atomic import sha256_file

    book = open_workbook(path)
    try:
        ws, note = _pick_sheet(book, sheet, path)
        rows = [[_cell_text(v) for v in row] for row in ws.iter_rows(values_only=True)]
        title = ws.title
    finally:
        book.close()
    _refuse_uncached_formulas(path, title, rows)
    if not any(cell.strip() for row in rows for cell in row):
        raise UnreadableInputError(f"{path}: worksheet {title!r} is empty; put the table there")
    notes = [f"read {path.name} as an xlsx workbook", f"sheet {title!r}" + note]
    return rows, notes, sha256_file(path)


def sheet_names(path: Path) -> tuple[list[str], list[str]]:
    """Every worksheet name of an xlsx workbook, in order, and the visible ones.

    Raises
    ------
    UnreadableInputError
        The file is not a readable xlsx workbook.
    """
    book = open_workbook(path)
    try:
        return (list(book.sheetnames),
                [ws.title for ws in book.worksheets if ws.sheet_state == "visible"])
    finally:
        book.close()


def _pick_sheet(book, sheet, path: Path):
    """The worksheet asked for (name or 0-based index); by default the first visible one."""
    names = book.sheetnames
    if sheet is None:
        visible = [ws for ws in book.worksheets if ws.sheet_state == "visible"]
        if not visible:
            raise UnreadableInputError(f"{path}: every worksheet is hidden; name one with "
                                       f"--sheet (the workbook has {', '.join(map(repr, names))})")
        ws = visible[0]
        others = [repr(w.title) + ("" if w.sheet_state == "visible" else " (hidden)")
                  for w in book.worksheets if w is not ws]
        note = (f" (the first visible sheet; not read: {', '.join(others)}; name another "
                "with --sheet NAME)") if others else ""
        return ws, note
    if isinstance(sheet, int) and 0 <= sheet < len(names):
        return book.worksheets[sheet], ""
    if isinstance(sheet, str) and sheet in names:
        return book[sheet], ""
    raise UnreadableInputError(
        f"{path}: no worksheet {sheet!r}; the workbook has {', '.join(map(repr, names))}")


def _refuse_uncached_formulas(path: Path, title: str, rows: list[list[str]]) -> None:
    """Refuse formula cells the workbook holds no saved value for, naming their addresses.

    A workbook written by a program (not a spreadsheet) may hold formulas without the value
    a spreadsheet saves beside them; reading the saved values alone would turn such a cell
    into an empty one and lose it silently. Cells with a saved value are read with it.
    """
    from openpyxl import load_workbook
    from openpyxl.utils import get_column_letter

    book = load_workbook(path, read_only=True, data_only=False)
    try:
        ws = book[title]
        missing = []
        for i, row in enumerate(ws.iter_rows(values_only=True)):
            for j, value in enumerate(row):
                if isinstance(value, str) and value.startswith("=") and \
                        (i >= len(rows) or j >= len(rows[i]) or rows[i][j] == ""):
                    missing.append(f"{get_column_letter(j + 1)}{i + 1} ({value})")
    finally:
        book.close()
    if missing:
        more = f" and {len(missing) - 5} more" if len(missing) > 5 else ""
        raise UnreadableInputError(
            f"{path}: sheet {title!r} has {len(missing)} formula cell(s) without a saved value: "
            f"{', '.join(missing[:5])}{more}; refit reads the values a spreadsheet saves, not "
            "formulas. Open the workbook in a spreadsheet program and save it (that stores "
            "the values), or replace the formulas by their values")


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
    frame, widened = _float32_as_shown(frame)
    rows = np.arange(2, len(frame) + 2)
    refuse_repeated(list(frame.columns), path, 1)
    blank = blank_columns(list(frame.columns), frame.astype(object).map(_cell_text).values,
                          path, 1, rows) if "" in frame.columns else []
    keep = [j for j in range(frame.shape[1]) if j not in blank]
    frame = frame.iloc[:, keep]
    if as_text:
        frame = frame.astype(object).map(_cell_text)
    notes = [f"read {path.name} as parquet", "row 1 stands for the column names, data from row 2"]
    if widened:
        notes.append("single-precision (float32) column(s) " + ", ".join(widened) + " read at "
                     "the precision they show (240.3 stays 240.3, not 240.300003052)")
    return (frame.reset_index(drop=True), rows, sha256_file(path), notes,
            {str(c): j + 1 for j, c in zip(keep, frame.columns)})


def _float32_as_shown(frame: pd.DataFrame) -> tuple[pd.DataFrame, list[str]]:
    """float32 columns as float64 numbers equal to their shortest decimal text.

    A float32 cannot hold 240.3; widened bit for bit it becomes 240.300003052. Its shortest
    text that reads back to the same float32 (numpy's repr, the digits a program shows) is
    what the author typed, so that text is read as float64.
    """
    widened = []
    for j, name in enumerate(frame.columns):
        col = frame.iloc[:, j]
        if str(col.dtype) in ("float32", "Float32"):
            values = col.to_numpy(dtype=np.float32, na_value=np.nan)
            frame[name] = values.astype(str).astype(np.float64)
            widened.append(str(name))
    return frame, widened


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
