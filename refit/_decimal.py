"""Decimal commas in delimited text tables: recognise them, refuse mixed evidence, convert.

Internal to :mod:`refit.tables`. Spreadsheets in many locales export tables separated by
semicolons or tabs with a comma as the decimal separator (``12,5`` for twelve and a half).
A table is read that way only when

* its delimiter is not a comma (with a comma delimiter, ``12,5`` would be two cells), and
* at least one number-looking cell is written with a decimal comma (``12,5``, ``-105,25``,
  ``,5``, ``1,5e3``) and **no** number-looking cell is written with a decimal point
  (``12.5``) or with digit grouping (``1.234,5``, ``1,234.5``, ``1.234.567``).

Integers (``300``) say nothing either way. Both kinds of cell in one table is mixed
evidence: refit does not guess which is meant and stops with a message naming the file, a
row, column and value of each kind and how to fix the export. Columns of identifiers and
of text in the schema (``profile_id``, ``source``, ``notes``, dates, ...) are not looked at
and never changed. The rule is the one ``pandas.read_csv(decimal=",")`` applies to a whole
file, made safe by refusing tables that use both separators.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd

from refit.errors import InvalidDataError

_EXP = r"(?:[eE][+-]?\d+)?"
#: A number written with one decimal comma and no point (``12,5``, ``-,5``, ``1,5e3``).
COMMA_NUMBER = rf"[+-]?(?:\d+,\d+|,\d+){_EXP}"
#: A number written with a decimal point, or with its digits grouped by points or commas.
POINT_NUMBER = (rf"[+-]?(?:\d+\.\d*|\.\d+){_EXP}"
                r"|[+-]?\d{1,3}(?:[.,]\d{3}){2,}(?:[.,]\d+)?"
                r"|[+-]?\d{1,3}(?:\.\d{3})+,\d+|[+-]?\d{1,3}(?:,\d{3})+\.\d+")
_ID_NAME = re.compile(r"(^|[^a-z])id$")


def number_columns(columns) -> list[str]:
    """The columns whose cells may hold numbers: all but identifiers and schema text.

    A column counts as text when its name maps (:func:`refit.units.canonical_for`) to a
    schema field that is not a number, or when its name ends in ``id`` as a word
    (``profile_id``, ``paleosol_id``, ``Sample ID``).
    """
    from refit.units import canonical_for, schema_fields

    text = {f["name"] for f in schema_fields() if f.get("type") not in ("number", "integer")}
    out = []
    for name in columns:
        label = str(name).strip().lower()
        if _ID_NAME.search(label) or canonical_for(label) in text:
            continue
        out.append(name)
    return out


def _text(col: pd.Series) -> pd.Series:
    """The cells as stripped text (missing cells as '')."""
    return col.astype("str").fillna("").str.strip()


def may_hold_comma_numbers(frame: pd.DataFrame) -> bool:
    """Quick test on a typed frame: does any text column hold a decimal-comma number?

    Columns that parsed as numbers cannot; only text columns are searched.
    """
    for name in number_columns(frame.columns):
        col = frame[name]
        if pd.api.types.is_numeric_dtype(col) or pd.api.types.is_bool_dtype(col):
            continue
        if _text(col).str.fullmatch(COMMA_NUMBER).any():
            return True
    return False


def decimal_comma_columns(text: pd.DataFrame, rows, path) -> tuple[list[str], str | None]:
    """The columns whose decimal-comma cells are numbers, and a note saying so.

    Parameters
    ----------
    text : pandas.DataFrame
        Every cell as the text in the file (``""`` when empty); the column names as in the
        file; not read with a comma as delimiter.
    rows : array_like of int
        The file row (1-based, as a spreadsheet numbers it) of each frame row.
    path : str or pathlib.Path
        The file, named in the message.

    Returns
    -------
    columns : list of str
        Columns with at least one decimal-comma number (empty when the table has none).
    note : str or None
        For ``Table.notes``: what was read as a decimal comma, where.

    Raises
    ------
    InvalidDataError
        The table holds numbers written with a decimal comma and numbers written with a
        decimal point (or grouped digits): mixed evidence.
    """
    rows = np.asarray(rows)
    commas, points = {}, {}
    for name in number_columns(text.columns):
        cells = _text(text[name])
        is_comma = cells.str.fullmatch(COMMA_NUMBER).to_numpy(dtype=bool)
        if is_comma.any():
            commas[name] = is_comma
        is_point = cells.str.fullmatch(POINT_NUMBER).to_numpy(dtype=bool)
        if is_point.any():
            points[name] = is_point
    if not commas:
        return [], None
    if points:
        raise InvalidDataError(_mixed_message(text, rows, path, commas, points))
    n_cells = int(sum(m.sum() for m in commas.values()))
    names = ", ".join(repr(str(c)) for c in commas)
    col, pos = _first(commas)
    example = _text(text[col]).iloc[pos]
    note = (f"decimal comma: {n_cells} number(s) written with a comma as decimal separator "
            f"(e.g. {example!r} read as {example.replace(',', '.')}) in "
            f"{len(commas)} column(s) ({names}); no number used a decimal point")
    return list(commas), note


def _first(masks: dict) -> tuple[str, int]:
    """The column and row position of the first flagged cell (the leftmost column first)."""
    col = next(iter(masks))
    return col, int(np.flatnonzero(masks[col])[0])


def _mixed_message(text, rows, path, commas, points) -> str:
    n_comma = int(sum(m.sum() for m in commas.values()))
    n_point = int(sum(m.sum() for m in points.values()))
    c_col, c_pos = _first(commas)
    p_col, p_pos = _first(points)
    c_val, p_val = _text(text[c_col]).iloc[c_pos], _text(text[p_col]).iloc[p_pos]
    return (
        f"{path}: numbers are written with two decimal separators, so refit cannot tell "
        f"which one is meant: {n_comma} cell(s) use a decimal comma (e.g. row "
        f"{int(rows[c_pos])}, column {str(c_col)!r}: {c_val!r}) and {n_point} cell(s) a "
        f"decimal point or grouped digits (e.g. row {int(rows[p_pos])}, column "
        f"{str(p_col)!r}: {p_val!r}). Export the table again with one decimal separator "
        "for every number (e.g. set the spreadsheet's decimal separator to '.' and save as "
        "CSV), or correct the odd cells by hand, and write numbers without thousands "
        "separators"
    )


def to_decimal_points(text: pd.DataFrame, columns) -> pd.DataFrame:
    """A copy of ``text`` with the decimal-comma numbers of ``columns`` written with a point.

    Only cells that are a whole decimal-comma number change (``' 12,5 '`` -> ``'12.5'``);
    every other cell, and every other column, is kept as it was.
    """
    if not len(columns):
        return text
    out = text.copy()
    for name in columns:
        cells = _text(text[name])
        is_comma = cells.str.fullmatch(COMMA_NUMBER)
        out[name] = text[name].astype(object).where(
            ~is_comma.to_numpy(dtype=bool), cells.str.replace(",", ".", regex=False))
    return out
