"""Decimal commas in delimited text tables: recognise them, refuse mixed evidence, convert.

Internal to :mod:`refit.curate.tables`. Spreadsheets in many locales export tables separated by
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

    A column counts as text when its name maps (:func:`refit.curate.units.canonical_for`) to a
    schema field that is not a number, or when its name ends in ``id`` as a word
    (``profile_id``, ``paleosol_id``, ``Sample ID``).
    """
    from refit.curate.units import canonical_for, schema_fields

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


_SPACE = r"[\s\x{00A0}\x{2007}\x{202F}]*"  # spaces, also the no-break ones of spreadsheets


def matches(col: pd.Series, pattern: str) -> np.ndarray:
    """Which cells are, spaces around them aside, wholly ``pattern`` (missing: False).

    pyarrow's RE2 matcher (about ten times faster here than ``Series.str.fullmatch``).
    """
    import pyarrow as pa
    import pyarrow.compute as pc

    cells = pa.array(col.astype("str"), from_pandas=True)
    hit = pc.match_substring_regex(cells, f"^{_SPACE}(?:{pattern}){_SPACE}$")
    return hit.fill_null(False).to_numpy(zero_copy_only=False)


class Evidence:
    """Where number-looking cells use a decimal comma and where a point (or grouping).

    ``commas`` and ``points`` map a column to ``(mask, cells)``: the flagged rows and the
    column's cells (for the examples in messages), in column order.
    """

    def __init__(self) -> None:
        self.commas: dict = {}
        self.points: dict = {}

    def scan(self, frame: pd.DataFrame, columns, *, commas: bool = True,
             points: bool = True) -> Evidence:
        """Add the evidence of ``columns`` of ``frame`` (text cells; missing = no evidence)."""
        kinds = [(self.commas, COMMA_NUMBER)] * commas + [(self.points, POINT_NUMBER)] * points
        for name in columns:
            cells = frame[name]
            for kind, pattern in kinds:
                mask = matches(cells, pattern)
                if mask.any():
                    kind[name] = (mask, cells)
        return self

    def decide(self, rows, path) -> tuple[list[str], str | None]:
        """(columns with decimal-comma numbers, note); raise on mixed evidence."""
        if not self.commas:
            return [], None
        if self.points:
            raise InvalidDataError(_mixed_message(np.asarray(rows), path, self.commas,
                                                  self.points))
        n_cells = int(sum(m.sum() for m, _ in self.commas.values()))
        names = ", ".join(repr(str(c)) for c in self.commas)
        example = _first(self.commas)[2]
        note = (f"decimal comma: {n_cells} number(s) written with a comma as decimal "
                f"separator (e.g. {example!r} read as {example.replace(',', '.')}) in "
                f"{len(self.commas)} column(s) ({names}); no number used a decimal point")
        return list(self.commas), note


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
    columns = number_columns(text.columns)
    evidence = Evidence().scan(text, columns, points=False)
    if evidence.commas:  # points only matter beside commas
        evidence.scan(text, columns, commas=False)
    return evidence.decide(rows, path)


def read_typed_with_commas(frame: pd.DataFrame, read, rows, path):
    """A typed frame of a non-comma-delimited file, with its decimal commas read as such.

    ``frame`` comes from one ``pandas.read_csv`` call (column names stripped); ``read(**kw)``
    reads the same file again with extra ``read_csv`` keywords. Text columns are searched
    for decimal commas; only if some are found are the float columns read again as text
    (a float column parsed from e.g. '35.0' holds points that its values no longer show),
    and the comma columns read again with ``decimal=","`` (the C parser; a column that
    still holds text gets its decimal-comma cells written with a point).

    Returns
    -------
    frame, columns, note
        As :func:`decimal_comma_columns`; ``frame`` unchanged when there are no commas.
    """
    candidates = number_columns(frame.columns)
    texts = [c for c in candidates if not (pd.api.types.is_numeric_dtype(frame[c])
                                           or pd.api.types.is_bool_dtype(frame[c]))]
    evidence = Evidence().scan(frame, texts, points=False)
    if not evidence.commas:
        return frame, [], None
    evidence.scan(frame, texts, commas=False)
    at = {c: j for j, c in enumerate(frame.columns)}
    floats = [c for c in candidates if pd.api.types.is_float_dtype(frame[c])]
    if floats:
        text = read(usecols=[at[c] for c in floats], dtype=str, keep_default_na=False,
                    na_filter=False)
        text.columns = floats
        evidence.scan(text, floats, commas=False)
    columns, note = evidence.decide(rows, path)
    again = read(usecols=[at[c] for c in columns], decimal=",")
    again.columns = [frame.columns[at[c]] for c in sorted(columns, key=at.get)]
    out = frame.copy(deep=False)
    for name in columns:
        col = again[name]
        numeric = pd.api.types.is_numeric_dtype(col)
        out[name] = col if numeric else to_decimal_points(again[[name]], [name])[name]
    return out, columns, note


def _first(masks: dict) -> tuple[str, int, str]:
    """Column, row position and text of the first flagged cell (leftmost column first)."""
    col = next(iter(masks))
    mask, cells = masks[col]
    pos = int(np.flatnonzero(mask)[0])
    return col, pos, str(cells.iloc[pos]).strip()


def _mixed_message(rows, path, commas, points) -> str:
    n_comma = int(sum(m.sum() for m, _ in commas.values()))
    n_point = int(sum(m.sum() for m, _ in points.values()))
    c_col, c_pos, c_val = _first(commas)
    p_col, p_pos, p_val = _first(points)
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
        is_comma = matches(text[name], COMMA_NUMBER)
        fixed = _text(text[name]).str.replace(",", ".", regex=False)
        out[name] = text[name].astype(object).where(~is_comma, fixed)
    return out
