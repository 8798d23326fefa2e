"""Text cells that look alike but differ, and text that a spreadsheet would run.

Identifiers (``profile_id``, ``sequence_id``) are normalised before any duplicate check:
Unicode NFC (``é`` typed as one character or as ``e`` plus a combining accent is the same
id), and control characters (NUL included) and invisible format characters (zero-width
space, joiners, byte-order marks; Unicode categories Cc and Cf) removed. Without that, two
ids that print the same would be admitted as two profiles. The report says which ids
changed.

A text cell that starts with ``=``, ``+``, ``-``, ``@``, a tab or a carriage return is a
formula to a spreadsheet that opens ``records.csv`` (CSV injection; common practice: OWASP,
"CSV Injection"). refit keeps the data exactly as typed (the store is data, not a
spreadsheet) and warns (rule ``formula-like-text``) so that the cell is checked; open the
store's files in a spreadsheet with the columns imported as text.
"""

from __future__ import annotations

import unicodedata

import numpy as np
import pandas as pd

ID_COLUMNS = ("profile_id", "sequence_id")
#: First characters a spreadsheet reads as a formula (OWASP, "CSV Injection").
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def normalise_id(text: str) -> str:
    """NFC, without control (Cc) or format (Cf: zero-width, BOM) characters.

    >>> normalise_id("P\\u200b1")
    'P1'
    """
    text = unicodedata.normalize("NFC", text)
    return "".join(ch for ch in text if unicodedata.category(ch) not in ("Cc", "Cf"))


def normalise_ids(frame: pd.DataFrame, rows) -> tuple[pd.DataFrame, list[str]]:
    """``frame`` with its id columns normalised (:func:`normalise_id`) and a note per column."""
    notes = []
    for name in ID_COLUMNS:
        if name not in frame.columns or pd.api.types.is_numeric_dtype(frame[name]):
            continue
        col = frame[name]
        if not _needs_normalising(col):
            continue  # printable ASCII is its own NFC, with no Cc or Cf character
        text = col.map(lambda v: normalise_id(v) if isinstance(v, str) else v)
        changed = np.flatnonzero((text != col).to_numpy(dtype=bool) & col.notna().to_numpy(dtype=bool))
        if not len(changed):
            continue
        frame = frame.copy() if not notes else frame
        frame[name] = text
        shown = ", ".join(f"row {int(rows[k])} {col.iloc[k]!a} -> {text.iloc[k]!a}"
                          for k in changed[:3])
        notes.append(f"normalised {len(changed)} {name} value(s) before the duplicate check "
                     f"(Unicode NFC; control and zero-width characters removed): {shown}"
                     + (" ..." if len(changed) > 3 else ""))
    return frame, notes


def _plain(value) -> bool:
    """Not text, or text that :func:`normalise_id` leaves as it is because it is printable
    ASCII (no control characters; ASCII has no format characters; NFC changes no ASCII)."""
    return not isinstance(value, str) or (value.isascii() and value.isprintable())


def _needs_normalising(col: pd.Series) -> bool:
    """Whether some text cell of ``col`` is not :func:`_plain` (vectorised: a character
    outside printable ASCII, U+0020..U+007E)."""
    try:
        return bool(col.str.contains(r"[^\x20-\x7e]", regex=True, na=False).any())
    except (AttributeError, TypeError):  # not a text column: cell by cell
        return not all(_plain(v) for v in col.to_numpy(dtype=object).tolist())


def _formula_like(col: pd.Series) -> np.ndarray:
    """Positions of the text cells that start with :data:`FORMULA_STARTS` and are not
    numbers (the first test vectorised, the second on those cells only)."""
    try:
        starts = np.flatnonzero(col.str.startswith(FORMULA_STARTS, na=False)
                                .to_numpy(dtype=bool))
    except (AttributeError, TypeError):  # not a text column: cell by cell
        starts = np.arange(len(col))
    values = col.iloc[starts].tolist()
    return np.array([k for k, v in zip(starts.tolist(), values) if isinstance(v, str)
                     and v.startswith(FORMULA_STARTS) and not _is_number(v)], dtype=np.int64)


def _is_number(text: str) -> bool:
    try:
        float(text)
    except ValueError:
        return False
    return True


def formula_like_problems(work: pd.DataFrame, probs, text_columns) -> None:
    """Warn (``formula-like-text``) about text cells a spreadsheet would read as formulas."""
    for name in text_columns:
        if name not in work.columns or pd.api.types.is_numeric_dtype(work[name]):
            continue
        col = work[name]
        pos = _formula_like(col)
        if len(pos):
            probs.add("warning", "formula-like-text", pos, name, col.iloc[pos].astype(str),
                      "the text starts with =, +, -, @ or a tab, which a spreadsheet runs as "
                      "a formula when it opens the file (OWASP, CSV injection); it is kept as "
                      "typed. Check the cell; open refit's files in a spreadsheet with the "
                      "columns imported as text.")
