"""Reading incoming tables (refit.curate.tables.read_table).

Oracles: pandas.read_csv / pandas.read_parquet on the same bytes (reference library), the
codecs of Python's standard library, and the row numbers a spreadsheet shows (row 1 is the
first line of the file).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from refit.errors import InvalidDataError, UnreadableInputError
from refit.curate.tables import read_table

ROWS = [["profile_id", "latitude", "longitude", "source", "map_mm", "notes"],
        ["A-007", "-40.5", "52.25", "SRC-1", "300", "café"],
        ["A-008", "-40.75", "52.5", "SRC-1", "1.50", ""]]


def write(path, rows, delim=",", encoding="utf-8", bom=b"", end="\n", before=()):
    text = "".join(line + end for line in before)
    text += "".join(delim.join(r) + end for r in rows)
    path.write_bytes(bom + text.encode(encoding))
    return path


@pytest.mark.parametrize("delim", [",", ";", "\t", "|"])
def test_delimiters_are_sniffed(tmp_path, delim):
    t = read_table(write(tmp_path / "t.csv", ROWS, delim), as_text=True)
    assert list(t.frame.columns) == ROWS[0]
    assert t.frame.values.tolist() == ROWS[1:]
    assert t.source_rows.tolist() == [2, 3]


@pytest.mark.parametrize("encoding, bom", [
    ("utf-8", b""), ("utf-8", b"\xef\xbb\xbf"), ("utf-16-le", b"\xff\xfe"),
    ("utf-16-be", b"\xfe\xff"), ("cp1252", b""),
])
def test_encodings_are_detected(tmp_path, encoding, bom):
    path = write(tmp_path / "t.csv", ROWS, ";", encoding=encoding, bom=bom)
    t = read_table(path, as_text=True)
    assert list(t.frame.columns) == ROWS[0]  # no BOM glued to the first name
    assert t.frame["notes"].tolist() == ["café", ""]
    typed = read_table(path)
    assert typed.frame["map_mm"].tolist() == [300.0, 1.5]


def test_as_text_keeps_original_strings(tmp_path):
    t = read_table(write(tmp_path / "t.csv", ROWS), as_text=True)
    assert t.frame["map_mm"].tolist() == ["300", "1.50"]
    assert t.frame["notes"].tolist() == ["café", ""]


def test_fast_path_equals_pandas(tmp_path):
    # reference: a bare pandas.read_csv of the same file
    path = write(tmp_path / "t.csv", ROWS)
    t = read_table(path)
    pd.testing.assert_frame_equal(t.frame, pd.read_csv(path))
    assert t.source_rows.tolist() == [2, 3]
    import hashlib
    assert t.sha256 == hashlib.sha256(path.read_bytes()).hexdigest()


def test_title_rows_and_blank_lines_keep_spreadsheet_row_numbers(tmp_path):
    rows = [ROWS[0], ROWS[1], [""], ROWS[2], [""], [""]]
    path = write(tmp_path / "t.csv", rows, before=["Survey of the test basin, 2024", ""])
    for as_text in (True, False):
        t = read_table(path, as_text=as_text)
        assert list(t.frame.columns) == ROWS[0]
        # title on 1, blank 2, header 3, data 4, blank 5, data 6
        assert t.source_rows.tolist() == [4, 6]
        assert any("skipped 1 row(s) above the header as title or notes (rows 1)" in n
                   for n in t.notes)  # the blank row 2 is neither title nor data


def test_title_row_padded_with_delimiters_is_skipped(tmp_path):
    title = "Soil survey" + "," * 5
    t = read_table(write(tmp_path / "t.csv", ROWS, before=[title]), as_text=True)
    assert list(t.frame.columns) == ROWS[0] and t.source_rows.tolist() == [3, 4]


def test_blank_line_inside_typed_read_counts(tmp_path):
    path = write(tmp_path / "t.csv", [ROWS[0], ROWS[1], [""], ROWS[2]])
    t = read_table(path)
    assert t.source_rows.tolist() == [2, 4]
    assert t.frame["map_mm"].tolist() == [300.0, 1.5]


def test_quoted_line_break_is_one_spreadsheet_row(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text('profile_id,map_mm,notes\nA,1,"two\nlines"\nB,2,x\n', encoding="utf-8")
    for as_text in (True, False):
        t = read_table(path, as_text=as_text)
        assert t.source_rows.tolist() == [2, 3]
        assert t.frame["notes"].tolist() == ["two\nlines", "x"]


def make_xlsx(path, rows, title_rows=()):
    from openpyxl import Workbook

    book = Workbook()
    sheet = book.active
    sheet.title = "soils"
    for row in title_rows:
        sheet.append(row)
    for row in rows:
        sheet.append(row)
    book.save(path)
    return path


def test_xlsx_with_title_row(tmp_path):
    rows = [ROWS[0], ["A-007", -40.5, 52.25, "SRC-1", 300, "café"],
            ["A-008", -40.75, 52.5, "SRC-1", 1.5, None]]
    path = make_xlsx(tmp_path / "t.xlsx", rows, title_rows=[["Field campaign 2025"], []])
    t = read_table(path, as_text=True)
    assert list(t.frame.columns) == ROWS[0]
    assert t.frame["map_mm"].tolist() == ["300", "1.5"]
    assert t.frame["notes"].tolist() == ["café", ""]
    assert t.source_rows.tolist() == [4, 5]
    typed = read_table(path)
    assert typed.frame["latitude"].tolist() == [-40.5, -40.75]
    assert read_table(path, sheet="soils").frame.shape == (2, 6)
    with pytest.raises(UnreadableInputError, match="no worksheet 'other'"):
        read_table(path, sheet="other")


def test_parquet_matches_pandas(tmp_path):
    frame = pd.DataFrame({"profile_id": ["A", "B"], "map_mm": [300.0, np.nan]})
    path = tmp_path / "t.parquet"
    frame.to_parquet(path)
    t = read_table(path)
    pd.testing.assert_frame_equal(t.frame, pd.read_parquet(path))
    assert read_table(path, as_text=True).frame["map_mm"].tolist() == ["300", ""]


@pytest.mark.parametrize("name, content, pattern", [
    ("missing.csv", None, "no such file"),
    ("empty.csv", b"", "is empty"),
    ("blank.csv", b"\n\n  \n", "only blank lines"),
    ("header.csv", b"profile_id,latitude\n", "no data rows"),
    ("header2.csv", b"profile_id,latitude\n\n,\n", "no data rows"),
    ("t.dat", b"a,b\n1,2\n", "unknown file type '.dat'"),
    ("colon.csv", b"a:b:c\n1:2:3\n4:5:6\n", "colon"),
    ("bad.xlsx", b"PK\x03\x04 not really a zip", "not a readable xlsx"),
    ("bad.parquet", b"PAR1 nonsense", "not a readable parquet"),
    ("bin.csv", bytes(range(256)) * 8, "not text"),
])
def test_unreadable_inputs_name_the_file(tmp_path, name, content, pattern):
    path = tmp_path / name
    if content is not None:
        path.write_bytes(content)
    with pytest.raises(UnreadableInputError, match=pattern) as err:
        read_table(path, as_text=True)
    assert str(path) in str(err.value)
    assert err.value.exit_code == 2


def test_folder_is_refused(tmp_path):
    with pytest.raises(UnreadableInputError, match="is a folder"):
        read_table(tmp_path)


def test_ragged_rows_are_padded(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("profile_id,map_mm,notes\nA,1\nB,2,x\n", encoding="utf-8")
    t = read_table(path, as_text=True)
    assert t.frame.values.tolist() == [["A", "1", ""], ["B", "2", "x"]]


def test_header_narrower_than_body_is_found_by_its_names(tmp_path):
    # the header (row 2) names two columns; the values of a third have no name: refused,
    # naming the column by its spreadsheet letter and the header row
    path = tmp_path / "t.csv"
    path.write_text("Campaign 2025\nprofile_id,map_mm\nA,1,extra\nB,2,extra\n",
                    encoding="utf-8")
    with pytest.raises(InvalidDataError) as err:
        read_table(path, as_text=True)
    assert str(err.value).startswith(
        f"{path}: column C (column 3) has values but no name in the header on row 2 "
        "(e.g. 'extra' on row 3 in C). Type a name for it in row 2")
    path.write_text("Campaign 2025\nprofile_id,map_mm\nA,1\nB,2\n", encoding="utf-8")
    t = read_table(path, as_text=True)
    assert list(t.frame.columns) == ["profile_id", "map_mm"]
    assert t.source_rows.tolist() == [3, 4]


def test_digest_can_be_skipped_and_is_otherwise_the_file_hash(tmp_path):
    """`refit check` records no provenance, so it skips hashing; admit keeps it."""
    import hashlib

    path = tmp_path / "t.csv"
    path.write_bytes(b"profile_id,latitude\nA,1\nB,2\n")
    assert read_table(path).sha256 == hashlib.sha256(path.read_bytes()).hexdigest()
    quick = read_table(path, digest=False)
    assert quick.sha256 == "" and list(quick.frame["profile_id"]) == ["A", "B"]


# --- the header row: repeated and blank names ---------------------------------------------

def test_column_letters_match_openpyxl():
    # reference: openpyxl.utils.get_column_letter, the letters a spreadsheet shows
    from openpyxl.utils import get_column_letter

    from refit.curate.headers import column_letter

    for position in (1, 2, 26, 27, 52, 53, 702, 703, 16384):
        assert column_letter(position) == get_column_letter(position)


@pytest.mark.parametrize("as_text", [False, True])
def test_repeated_column_name_is_refused_naming_positions_and_letters(tmp_path, as_text):
    path = tmp_path / "t.csv"
    path.write_text("profile_id,latitude,longitude,source,map_mm,map_mm\n"
                    "A,1,2,S,300,310\n", encoding="utf-8")
    with pytest.raises(InvalidDataError) as err:
        read_table(path, as_text=as_text)
    assert str(err.value) == (
        f"{path}: columns 5 and 6 are both named 'map_mm' (spreadsheet columns E and F) in "
        "the header on row 1; refit cannot tell which one to use. Rename the columns so "
        "each name appears once (e.g. add the unit or a qualifier), or delete the copies "
        "you do not need")
    assert err.value.exit_code == 1


def test_names_repeated_after_spaces_and_three_times_below_a_title(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("Survey 2024\nnotes,profile_id, notes,map_mm,notes \nx,A,y,1,z\n",
                    encoding="utf-8")
    with pytest.raises(InvalidDataError, match=r"columns 1, 3 and 5 are all named 'notes' "
                       r"\(spreadsheet columns A, C and E\) in the header on row 2;"):
        read_table(path)


def test_blank_name_over_values_is_refused_and_over_nothing_left_out(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("profile_id,,map_mm,\nA,,300,\nB,wet,310,\n", encoding="utf-8")
    for as_text in (False, True):
        with pytest.raises(InvalidDataError) as err:
            read_table(path, as_text=as_text)
        assert str(err.value).startswith(
            f"{path}: column B (column 2) has values but no name in the header on row 1 "
            "(e.g. 'wet' on row 3 in B). Type a name for it in row 1")
    path.write_text("profile_id,,map_mm,\nA,,300,\nB, ,310,\n", encoding="utf-8")
    t = read_table(path)
    assert list(t.frame.columns) == ["profile_id", "map_mm"]
    assert t.frame["map_mm"].tolist() == [300, 310]
    assert t.file_columns == {"profile_id": 1, "map_mm": 3}
    assert "left out 1 empty column(s) without a name (B)" in t.notes  # D: trailing


def test_blank_names_in_a_workbook_are_named_by_letter(tmp_path):
    rows = [["profile_id", None, "map_mm", None], ["A", 1.5, 300, None],
            ["B", None, 310, "dry"]]
    path = make_xlsx(tmp_path / "t.xlsx", rows)
    with pytest.raises(InvalidDataError) as err:
        read_table(path)
    assert str(err.value).startswith(
        f"{path}: columns B and D (columns 2 and 4) have values but no name in the header "
        "on row 1 (e.g. '1.5' on row 2 in B, 'dry' on row 3 in D). Type a name for each")
