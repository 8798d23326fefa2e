"""The header row of an incoming table: repeated and blank column names.

Internal to :mod:`refit.curate.tables` (and used by :mod:`refit.curate.units` for its messages). A
researcher finds a column by the letter a spreadsheet shows above it (A, B, ..., Z, AA),
so every message names the column by its position and its letter, and the header row.
"""

from __future__ import annotations

from collections import defaultdict

from refit.errors import InvalidDataError


def column_letter(position: int) -> str:
    """The spreadsheet letter of a 1-based column position: 1 -> 'A', 27 -> 'AA'.

    >>> column_letter(28)
    'AB'
    """
    if position < 1:
        raise ValueError(f"column positions start at 1, got {position}")
    letters = ""
    while position:
        position, rest = divmod(position - 1, 26)
        letters = chr(ord("A") + rest) + letters
    return letters


def _and(items: list[str]) -> str:
    return items[0] if len(items) == 1 else ", ".join(items[:-1]) + " and " + items[-1]


def refuse_repeated(header: list[str], path, header_row: int) -> None:
    """Raise when two or more columns of ``header`` (names already stripped) share a name.

    Raises
    ------
    InvalidDataError
        Naming, for each repeated name, the column positions and letters, the header row
        and how to fix it.
    """
    where: dict[str, list[int]] = defaultdict(list)
    for j, name in enumerate(header, start=1):
        if name:
            where[name].append(j)
    repeated = {name: pos for name, pos in where.items() if len(pos) > 1}
    if not repeated:
        return
    parts = []
    for name, pos in repeated.items():
        both = "both" if len(pos) == 2 else "all"
        parts.append(f"columns {_and([str(p) for p in pos])} are {both} named {name!r} "
                     f"(spreadsheet columns {_and([column_letter(p) for p in pos])})")
    raise InvalidDataError(
        f"{path}: {'; '.join(parts)} in the header on row {header_row}; refit cannot tell "
        "which one to use. Rename the columns so each name appears once (e.g. add the unit "
        "or a qualifier), or delete the copies you do not need"
    )


def blank_columns(header: list[str], body: list[list[str]], path,
                  header_row: int, body_rows: list[int]) -> list[int]:
    """0-based positions of the columns without a name; raise if any of them holds values.

    A column with no name and no values (e.g. a delimiter at the end of every line) is
    harmless and returned, so the reader can leave it out.

    Raises
    ------
    InvalidDataError
        Naming each blank-named column that holds values by position and letter, the
        first value in it with its row, the header row and how to fix it.
    """
    blank = [j for j, name in enumerate(header) if not name]
    filled = []
    for j in blank:
        first = next(((k, row[j]) for k, row in zip(body_rows, body)
                      if str(row[j]).strip()), None)
        if first is not None:
            filled.append((j, first))
    if filled:
        letters = _and([column_letter(j + 1) for j, _ in filled])
        numbers = _and([str(j + 1) for j, _ in filled])
        examples = ", ".join(f"{str(v).strip()!r} on row {k} in {column_letter(j + 1)}"
                             for j, (k, v) in filled)
        one = len(filled) == 1
        raise InvalidDataError(
            f"{path}: column{'' if one else 's'} {letters} (column{'' if one else 's'} "
            f"{numbers}) {'has' if one else 'have'} values but no name in the header on row "
            f"{header_row} (e.g. {examples}). Type a name for {'it' if one else 'each'} in "
            f"row {header_row} (e.g. notes, or a column name from the glossary), or delete "
            f"the column{'' if one else 's'} if not needed"
        )
    return blank


def _is_number(text: str) -> bool:
    try:
        float(text.replace(",", "."))
    except ValueError:
        return False
    return True


def data_rows_above(rows: list[list[str]], header_at: int, sample: int = 200,
                    kinds: list | None = None) -> list[int]:
    """0-based indices of the rows above the header that have the shape of data rows.

    A row above the header is data (not a title or a note) when it fills at least half as
    many cells as the median data row below the header (and at least two), and every cell it
    fills in a column whose cells below the header are numbers (80 % of them or more) is a
    number too. Where ``kinds`` gives a column's type (``number`` or ``text``, from the
    schema for a header naming a canonical column: an id column stays text even when the
    rows below happen to hold ids like ``+2``), that type decides; other columns are
    judged by their cells. A title (one cell) or a note row
    never has that shape; a data row pasted above the header does, and is read as data so
    that every row of the file is accounted for (admitted or quarantined), never skipped.
    """
    if header_at == 0:
        return []
    body = [[str(c).strip() for c in r] for r in rows[header_at + 1: header_at + 1 + sample]]
    body = [r for r in body if any(r)]
    if not body:
        return []
    width = max(len(r) for r in body)
    numeric = []
    for j in range(width):
        cells = [r[j] for r in body if j < len(r) and r[j]]
        kind = kinds[j] if kinds is not None and j < len(kinds) else None
        if kind == "number" or (kind is None and cells
                                    and sum(map(_is_number, cells)) >= 0.8 * len(cells)):
            numeric.append(j)
    filled = sorted(sum(1 for c in r if c) for r in body)
    need = max(2, filled[len(filled) // 2] / 2)
    found = []
    for i, row in enumerate(rows[:header_at]):
        cells = [str(c).strip() for c in row]
        if sum(1 for c in cells if c) < need:
            continue
        if all(_is_number(cells[j]) for j in numeric if j < len(cells) and cells[j]):
            found.append(i)
    return found
