"""Reading incoming tables: csv/tsv/txt, xlsx and parquet, into one :class:`Table` shape.

A researcher's table rarely arrives clean: semicolons instead of commas, a Windows code
page, a byte-order mark, a title row or two above the header, blank lines at the end.
:func:`read_table` finds its way through those and says what it did in ``Table.notes``.

Two reading modes serve two jobs:

* ``as_text=True`` keeps every cell as the exact string in the file (``""`` for an empty
  cell). ``admit`` uses it so that a rejected row goes to quarantine unchanged.
* ``as_text=False`` lets pandas infer column types. On the common case (UTF-8, header on the
  first row, one delimiter, no blank lines inside) this is one ``pandas.read_csv`` call, so
  ``check`` on a million rows costs little more than reading the file.

Row numbers (``Table.source_rows``) are the 1-based rows a spreadsheet shows for the file:
with the header on row 1, the first data row is row 2. Empty rows are dropped from the frame
but keep their numbers counted.

A table separated by semicolons, tabs or pipes may write its numbers with a decimal comma
(``12,5``); :mod:`refit.curate.decimal_commas` decides from every number-looking cell and refuses a table
that mixes decimal commas and points. A column name used twice, or a column of values
without a name, is refused naming the columns by position and spreadsheet letter
(:mod:`refit.curate.headers`). Workbooks and parquet files are opened in :mod:`refit.curate.workbooks`.
"""

from __future__ import annotations

import csv
import io
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from refit.curate.encodings import decode as _decode_bytes, detect_encoding  # noqa: F401
from refit.curate.encodings import utf8_prefix as _utf8_prefix
from refit.curate.decimal_commas import decimal_comma_columns, read_typed_with_commas, to_decimal_points
from refit.curate.headers import blank_columns, column_letter, data_rows_above, refuse_repeated
from refit.errors import UnreadableInputError

TEXT_SUFFIXES = {".csv", ".tsv", ".txt", ".tab"}
EXCEL_SUFFIXES = {".xlsx", ".xlsm"}
PARQUET_SUFFIXES = {".parquet", ".pq"}
DELIMITERS = (",", ";", "\t", "|")
MISSING_TEXT = ("", "NA", "NaN", "nan", "null")  # as in schemas/calibration.table.json
_SAMPLE_BYTES = 256 * 1024
_SAMPLE_ROWS = 200
#: Largest table file refit reads [bytes]; larger files are refused before reading, so a
#: huge or sparse file never fills the memory (reading costs about ten times the file size).
MAX_TABLE_BYTES = 512 * 2**20
#: Longest cell of a text table [characters] (the csv module's default limit).
MAX_FIELD_CHARS = 131_072


@dataclass
class Table:
    """A table read from a file.

    Attributes
    ----------
    frame : pandas.DataFrame
        Data rows; column names stripped of surrounding spaces; values as read.
    path : pathlib.Path
        The file.
    source_rows : numpy.ndarray
        For each frame row, its 1-based row number in the file as a spreadsheet shows it.
    sha256 : str
        Hex SHA-256 of the file's bytes.
    notes : list of str
        What the reader did (format, encoding, delimiter, skipped rows, sheet, decimal
        comma).
    decimal_comma : tuple of str
        Columns whose numbers the file writes with a decimal comma (``12,5``; see
        :mod:`refit.curate.decimal_commas`). A typed read has already converted them; with
        ``as_text=True`` the cells keep the file's text and
        :func:`refit.curate.decimal_commas.to_decimal_points` converts them.
    file_columns : dict of str to int
        The 1-based position in the file (as a spreadsheet counts columns) of each frame
        column.
    """

    frame: pd.DataFrame
    path: Path
    source_rows: np.ndarray
    sha256: str
    notes: list[str] = field(default_factory=list)
    decimal_comma: tuple[str, ...] = ()
    file_columns: dict[str, int] = field(default_factory=dict)


def read_table(path, *, as_text: bool = False, sheet: str | int | None = None,
               digest: bool = True) -> Table:
    """Read a csv/tsv/txt, xlsx or parquet table.

    Parameters
    ----------
    path : str or pathlib.Path
        The file to read.
    as_text : bool
        Keep every cell as its original string (``""`` when empty) instead of inferring types.
    sheet : str or int, optional
        Worksheet of an xlsx file (name or 0-based index); default the first visible
        sheet (hidden sheets are passed over).
    digest : bool
        Compute the file's SHA-256 (``Table.sha256``). A caller that records no provenance
        (``refit check``) can skip it on csv files: ``sha256`` is then ``""``.

    Returns
    -------
    Table

    Raises
    ------
    UnreadableInputError
        The file is missing, a folder, empty, has a header but no rows, cannot be decoded,
        has an unknown extension, is a corrupt workbook or parquet file, or uses a delimiter
        refit does not read.
    InvalidDataError
        The header names a column twice, or a column holds values but has no name, or the
        numbers mix decimal commas and decimal points (the message says where and how to
        fix it).
    """
    path = Path(path)
    _check_exists(path)
    suffix = path.suffix.lower()
    if suffix in TEXT_SUFFIXES:
        return _read_text_table(path, as_text, digest)
    if suffix in EXCEL_SUFFIXES:
        from refit.curate.workbooks import read_excel_rows

        rows, notes, digest = read_excel_rows(path, sheet)
        return _table_from_rows(path, rows, as_text, notes, digest, delim=None)
    if suffix in PARQUET_SUFFIXES:
        from refit.curate.workbooks import read_parquet

        frame, rows, digest, notes, columns = read_parquet(path, as_text)
        return Table(frame, path, rows, digest, notes, file_columns=columns)
    if suffix == ".xls":
        raise UnreadableInputError(
            f"{path}: the old binary Excel format (.xls) is not read; open it in a spreadsheet "
            "program and save it as .xlsx or .csv"
        )
    raise UnreadableInputError(
        f"{path}: unknown file type {suffix or '(no extension)'!r}; refit reads .csv, .tsv, "
        ".txt, .xlsx and .parquet tables; rename or re-save the file with one of those"
    )


def is_workbook(path) -> bool:
    """Whether ``path`` names an xlsx workbook (by its extension, as :func:`read_table`)."""
    return Path(path).suffix.lower() in EXCEL_SUFFIXES


def workbook_sheets(path) -> tuple[list[str], list[str]]:
    """The worksheet names of an xlsx workbook, in order, and the visible ones.

    Raises
    ------
    UnreadableInputError
        The file is missing or is not a readable xlsx workbook.
    """
    from refit.curate.workbooks import sheet_names

    path = Path(path)
    _check_exists(path)
    return sheet_names(path)


def _check_exists(path: Path) -> None:
    import stat

    try:
        info = path.stat()
    except FileNotFoundError:
        raise UnreadableInputError(f"{path}: no such file; check the path and spelling") from None
    except OSError as exc:
        raise UnreadableInputError(f"{path} cannot be opened ({exc.strerror or exc}); check "
                                   "its permissions") from None
    if stat.S_ISDIR(info.st_mode):
        raise UnreadableInputError(f"{path} is a folder, not a table; give the path of a file")
    if not stat.S_ISREG(info.st_mode):
        kind = ("a named pipe (FIFO)" if stat.S_ISFIFO(info.st_mode) else
                "a device" if stat.S_ISCHR(info.st_mode) or stat.S_ISBLK(info.st_mode) else
                "a socket" if stat.S_ISSOCK(info.st_mode) else "not a file")
        raise UnreadableInputError(
            f"{path} is {kind}, not a regular file; refit reads tables from files only. "
            "Save the table to a file and give its path")
    if info.st_size == 0:
        raise UnreadableInputError(
            f"{path} is empty (0 bytes); export the table again with a header row and data rows"
        )
    if info.st_size > MAX_TABLE_BYTES:
        raise UnreadableInputError(
            f"{path} is {info.st_size / 2**20:,.0f} MiB; refit reads tables of at most "
            f"{MAX_TABLE_BYTES // 2**20} MiB (a calibration table of a million profiles is "
            "about 150 MiB). Split it into smaller tables and admit them one by one")


# ---------------------------------------------------------------------------------------
# text tables


def _scan(path: Path, with_digest: bool = True) -> tuple[str, bytes, int, bytes]:
    """One pass over the file: sha256 ('' when not asked), the head, the number of
    newlines, the tail."""
    import hashlib

    digest = hashlib.sha256() if with_digest else None
    head = b""
    tail = b""
    newlines = 0
    with open(path, "rb") as fh:
        while block := fh.read(1 << 22):
            if digest is not None:
                digest.update(block)
            newlines += block.count(b"\n")
            if len(head) < _SAMPLE_BYTES:
                head += block[: _SAMPLE_BYTES - len(head)]
            tail = (tail + block)[-4096:]
    return (digest.hexdigest() if digest is not None else ""), head, newlines, tail


def sniff_delimiter(lines: list[str], path: Path) -> str:
    """Pick the delimiter (comma, semicolon, tab, pipe) that splits lines most consistently."""
    best, best_key = ",", (-1.0, 0)
    for delim in DELIMITERS:
        try:
            widths = [len(r) for r in csv.reader(lines, delimiter=delim) if r]
        except csv.Error:  # e.g. a cell longer than the limit: not this delimiter's doing
            continue
        if not widths:
            continue
        modal, count = Counter(widths).most_common(1)[0]
        if modal < 2:
            continue
        key = (round(count / len(widths), 1), modal)
        if key > best_key:
            best, best_key = delim, key
    if best_key[0] < 0:
        _refuse_single_column(lines, path)
    return best


def _refuse_single_column(lines: list[str], path: Path) -> None:
    """A one-column file is fine unless its lines are clearly split by another character."""
    body = [ln for ln in lines if ln.strip()][:50]
    if len(body) < 2:
        return
    for char, label in ((":", "colon ':'"), ("  ", "runs of spaces"), (" ", "spaces"),
                        ("/", "slash '/'"), ("~", "tilde '~'"), ("^", "caret '^'")):
        counts = [ln.count(char) for ln in body]
        modal, n = Counter(counts).most_common(1)[0]
        if modal >= 1 and n >= 0.8 * len(body):
            raise UnreadableInputError(
                f"{path}: found no comma, semicolon, tab or pipe between values, but every line "
                f"holds {label}; refit reads tables delimited by comma, semicolon, tab or pipe. "
                "Re-save the table as CSV (comma-separated)"
            )


def _read_text_table(path: Path, as_text: bool, digest: bool = True) -> Table:
    from concurrent.futures import ThreadPoolExecutor

    with open(path, "rb") as fh:
        head = fh.read(_SAMPLE_BYTES)
    # hashing runs beside the parsing (hashlib releases the GIL): the sha256 costs no time
    with ThreadPoolExecutor(max_workers=1) as pool:
        scan = pool.submit(_scan, path, digest)
        return _parse_text_table(path, as_text, head, scan)


def _parse_text_table(path: Path, as_text: bool, head: bytes, scan) -> Table:
    codec, enc_note = detect_encoding(head, path)
    text = None
    if codec.startswith("utf-8"):
        head_text = _utf8_prefix(head).lstrip("\ufeff")
    else:
        text = _decode_bytes(path.read_bytes(), codec, path).lstrip("\ufeff")
        head_text = text[:_SAMPLE_BYTES]
    if not head_text.strip():
        raise UnreadableInputError(f"{path} holds only blank lines; export the table again")
    lines = head_text.splitlines()[:_SAMPLE_ROWS]
    if len(head) == _SAMPLE_BYTES and len(lines) > 1:
        lines = lines[:-1]  # the last sampled line may be cut
    delim = sniff_delimiter(lines, path)
    rows = csv_rows(lines, delim, path)
    header_at = find_header(rows)
    refuse_repeated([str(c).strip() for c in rows[header_at]], path, header_at + 1)
    notes = [f"read {path.name} as delimited text", enc_note, f"delimiter {_DELIM_NAMES[delim]}"]
    if not as_text and codec.startswith("utf-8") and header_at == 0:
        fast = _fast_typed(path, codec, delim, scan, notes)
        if fast is not None:
            return fast
    if text is None:
        text = _decode_bytes(path.read_bytes(), codec, path).lstrip("\ufeff")
    all_rows = csv_rows(io.StringIO(text, newline=""), delim, path)
    return _table_from_rows(path, all_rows, as_text, notes, scan.result()[0], delim=delim)


def csv_rows(source, delim: str, path: Path) -> list[list[str]]:
    """All rows of delimited text; a cell over ``MAX_FIELD_CHARS`` is refused with its line."""
    reader = csv.reader(source, delimiter=delim)
    # the limit is process-wide and other libraries raise it (frictionless does): set ours
    previous = csv.field_size_limit(MAX_FIELD_CHARS)
    try:
        return list(reader)
    except csv.Error as exc:
        if "field larger than field limit" in str(exc):
            raise UnreadableInputError(
                f"{path}: a cell on line {reader.line_num} is longer than "
                f"{MAX_FIELD_CHARS:,} characters, the most refit reads in one cell; is a quote "
                "(\") opened and never closed? Close the quote or shorten the cell") from None
        raise UnreadableInputError(f"{path}: line {reader.line_num} is not valid delimited "
                                   f"text ({exc}); export the table again as CSV") from None
    finally:
        csv.field_size_limit(previous)


_DELIM_NAMES = {",": "comma ','", ";": "semicolon ';'", "\t": "tab", "|": "pipe '|'"}


def _fast_typed(path, codec, delim, scan, notes) -> Table | None:
    """One ``read_csv`` call for the common case; None when the file needs the careful path.

    The row count is checked against the file's line count: blank lines inside the table or
    line breaks inside quoted values send the file to the careful path, which numbers rows
    exactly.
    """
    try:
        frame = pd.read_csv(path, sep=delim, encoding=codec)
    except (pd.errors.ParserError, UnicodeDecodeError, ValueError):
        return None
    digest, _, newlines, tail = scan.result()
    stripped = tail.rstrip(b"\r\n \t")
    trailing = tail[len(stripped):].count(b"\n")
    content_lines = newlines - trailing + 1
    if len(frame) != content_lines - 1 or len(frame) == 0:
        return None  # blank lines inside or line breaks inside quoted values: count exactly
    frame.columns = [str(c).strip() for c in frame.columns]
    if any(c.startswith("Unnamed: ") for c in frame.columns) or _has_dupes(frame.columns):
        return None
    rows = np.arange(2, len(frame) + 2)
    comma = []
    if delim != ",":  # a decimal comma is possible: look, and read those columns again
        def read(**kw):
            return pd.read_csv(path, sep=delim, encoding=codec, **kw)

        frame, comma, note = read_typed_with_commas(frame, read, rows, path)
        if comma:
            notes.append(note)
    empty = frame.iloc[:, 0].isna().to_numpy(copy=True)  # writable (pandas 3 views are not)
    if empty.any():
        empty[empty] = frame.loc[empty].isna().all(axis=1).to_numpy()
    if empty.any():
        frame, rows = frame.loc[~empty].reset_index(drop=True), rows[~empty]
        notes.append(f"skipped {int(empty.sum())} empty row(s)")
    notes.append("header on row 1")
    return Table(frame, path, rows, digest, notes, tuple(comma),
                 {str(c): j for j, c in enumerate(frame.columns, start=1)})


def _has_dupes(names) -> bool:
    return len(set(names)) != len(list(names))


# ---------------------------------------------------------------------------------------
# rows -> frame (text tables on the careful path and workbooks)


def _is_number(text: str) -> bool:
    try:
        float(text.replace(",", "."))
    except ValueError:
        return False
    return True


def _effective_width(row) -> int:
    for j in range(len(row) - 1, -1, -1):
        if str(row[j]).strip():
            return j + 1
    return 0


def find_header(rows: list[list[str]]) -> int:
    """Index of the header row among ``rows`` (title rows above it are skipped).

    The header is the first row that is as wide as the body's modal width and either names a
    column refit knows (e.g. ``profile_id``, ``Latitude``, ``MAP (mm)``) or is mostly
    non-numeric text filling at least half of its cells.
    """
    from refit.curate.units import canonical_for

    sample = rows[:_SAMPLE_ROWS]
    widths = [_effective_width(r) for r in sample]
    filled = [w for w in widths if w > 0]
    if not filled:
        return 0
    modal = Counter(filled).most_common(1)[0][0]
    for i, row in enumerate(sample):
        if widths[i] < max(modal, 1) or widths[i] == 0:
            continue
        cells = [str(c).strip() for c in row[: widths[i]]]
        non_empty = [c for c in cells if c]
        if any(canonical_for(c) is not None for c in non_empty):
            return i
        text = [c for c in non_empty if not _is_number(c)]
        if len(non_empty) >= 0.5 * len(cells) and len(text) >= 0.75 * len(non_empty):
            return i
    for i, row in enumerate(sample):  # narrower than the body, but names known columns
        if sum(canonical_for(str(c).strip()) is not None for c in row if str(c).strip()) >= 2:
            return i
    return next(i for i, w in enumerate(widths) if w > 0)


def header_kinds(header) -> list[str | None]:
    """Per header cell: ``number`` or ``text`` where it names a canonical column (its
    schema type), else None."""
    from refit.curate.schema import fields
    from refit.curate.units import canonical_for

    known = fields()
    out = []
    for cell in header:
        name = str(cell).strip()
        canon = canonical_for(name) if name else None
        kind = known.get(canon, {}).get("type") if canon else None
        out.append(None if kind is None else
                   "number" if kind in ("number", "integer") else "text")
    return out


def _table_from_rows(path, rows, as_text, notes, digest, delim=None) -> Table:
    """Rows of text cells (header and title rows included) -> Table; ``delim`` is the
    delimiter of a text file (None for a workbook)."""
    header_at = find_header(rows)
    above = data_rows_above(rows, header_at, kinds=header_kinds(rows[header_at]))
    _note_above(notes, rows, header_at, above)
    header = [str(c).strip() for c in rows[header_at]]
    width = max([_effective_width(header)] + [_effective_width(rows[i]) for i in above]
                + [_effective_width(r) for r in rows[header_at + 1:]])
    header = (header + [""] * width)[:width]
    body, numbers = [], []
    pairs = [(i + 1, rows[i]) for i in above]
    pairs += list(enumerate(rows[header_at + 1:], start=header_at + 2))
    for k, row in pairs:
        if _effective_width(row) == 0:
            continue
        body.append((list(row) + [""] * width)[:width])
        numbers.append(k)
    refuse_repeated(header, path, header_at + 1)
    blank = blank_columns(header, body, path, header_at + 1, numbers)
    if not body:
        # a workbook: which sheet was read, and the sheets left unread (--sheet names one)
        sheet = next((n for n in notes if delim is None and n.startswith("sheet ")), "")
        raise UnreadableInputError(
            f"{path}{', ' + sheet + ',' if sheet else ''} has a header (row {header_at + 1}) "
            "but no data rows; add the soil profiles below the header"
        )
    notes.append(f"header on row {header_at + 1}")
    if blank:
        notes.append(f"left out {len(blank)} empty column(s) without a name ("
                     + ", ".join(column_letter(j + 1) for j in blank) + ")")
    keep = [j for j in range(width) if j not in blank]
    frame = pd.DataFrame(body, dtype=object).iloc[:, keep]
    frame.columns = [header[j] for j in keep]
    frame = frame.reset_index(drop=True)
    comma = []
    if delim not in (None, ","):
        comma, note = decimal_comma_columns(frame, numbers, path)
        if comma:
            notes.append(note)
    frame = frame.astype(str) if as_text else infer_types(to_decimal_points(frame, comma))
    return Table(frame, path, np.asarray(numbers, dtype=np.int64), digest, notes,
                 tuple(comma), {header[j]: j + 1 for j in keep})


def _note_above(notes: list[str], rows, header_at: int, above: list[int]) -> None:
    """Say which rows above the header were read as data and which were skipped."""
    if header_at == 0:
        return
    if above:
        notes.append(f"read {len(above)} row(s) above the header as data (rows "
                     + ", ".join(str(i + 1) for i in above) + "): they have the shape of "
                     "the data rows below it")
    skipped = [i + 1 for i in range(header_at) if i not in above and _effective_width(rows[i])]
    if skipped:
        notes.append(f"skipped {len(skipped)} row(s) above the header as title or notes "
                     "(rows " + ", ".join(map(str, skipped)) + ")")


def infer_types(frame: pd.DataFrame) -> pd.DataFrame:
    """Numbers where a whole column of text cells parses as numbers, else text (spaces
    around a cell removed); missing markers -> NaN. Vectorised per column."""
    out = {}
    for name in frame.columns:
        col = frame[name].astype("str").str.strip()
        col = col.where(~col.isin(MISSING_TEXT))
        try:
            out[name] = pd.to_numeric(col)
        except (ValueError, TypeError):
            out[name] = col
    return pd.DataFrame(out, index=frame.index)
