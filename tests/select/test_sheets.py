"""A recipe's ``[data] sheet`` and ``refit init``'s sheet: which worksheet of an xlsx
calibration table is read, and the refusals around it.

The workbooks are built here with openpyxl (invented soils, seeded numpy): a first sheet
"Notes" with text only and a second "Data" with 30 soils. What the reader returns is
checked against the generated rows themselves, and each refusal against the recipe line
and the workbook's sheet names as openpyxl lists them.
"""

from __future__ import annotations

import tomllib

import pytest
from _harness import SHEET_HEADER, sheet_soils, write_workbook

from refit.errors import UnreadableInputError, UsageError
from refit.select.dataset import dataset_from_recipe, open_recorded_data
from refit.select.recipe import read_recipe
from refit.select.scaffold import scaffold

N_SOILS = 30
HEADER = SHEET_HEADER


def soils(seed: int = 11, n: int = N_SOILS) -> list[list]:
    """Invented soils of an invented basin: MAP rises with Bk depth, plus noise."""
    return sheet_soils(n, seed, prefix="QV", source="Tessary")


workbook = write_workbook


NOTES = [["Field book of the Quillan Vale campaign (invented)"], ["text only, no table"]]


@pytest.fixture
def book(tmp_path):
    rows = soils()
    workbook(tmp_path / "book.xlsx", {"Notes": NOTES, "Data": [HEADER, *rows]})
    return tmp_path / "book.xlsx", rows


def unwrapped(text: str) -> str:
    """Comment lines wrapped by the recipe writer, joined again."""
    import re

    return re.sub(r"\n#   ", " ", text)


def _recipe(folder, data: str):
    path = folder / "recipe.toml"
    path.write_text(f"[data]\n{data}\n\n[function]\nid = \"map_from_bk\"\nresponse = "
                    "\"map_mm\"\npredictors = [\"bk_depth_cm\"]\n", encoding="utf-8")
    return path


def test_a_recipe_sheet_reads_that_worksheet(book):
    path, rows = book
    rec = read_recipe(_recipe(path.parent, 'table = "book.xlsx"\nsheet = "Data"'))
    assert rec.sheet == "Data"
    ds = dataset_from_recipe(rec)
    assert len(ds.records) == N_SOILS and ds.source.rows == N_SOILS
    assert list(ds.records["profile_id"]) == [r[0] for r in rows]
    assert ds.records["map_mm"].tolist() == pytest.approx([r[4] for r in rows], abs=1e-9)
    assert ds.source.to_dict()["sheet"] == "Data"
    assert ds.source.describe() == "table 'book.xlsx' (sheet 'Data')"
    # the provenance rebuilds the same rows from the same sheet
    frame, source = open_recorded_data(ds.source.to_dict())
    assert list(frame["profile_id"]) == [r[0] for r in rows] and source.sheet == "Data"


@pytest.mark.parametrize("data, words", [
    ('store = "store"\nsheet = "Data"', "the data are a store, which has no sheets"),
    ('table = "soils.csv"\nsheet = "Data"', "table 'soils.csv' is not an xlsx workbook"),
    ('table = "book.xlsx"\nsheet = 1', 'must be a worksheet name in quotes'),
    ('table = "book.xlsx"\nsheet = ""', 'must be a worksheet name in quotes'),
])
def test_a_sheet_without_an_xlsx_table_is_a_usage_error(book, data, words):
    path, _ = book
    (path.parent / "store").mkdir()
    (path.parent / "soils.csv").write_text(",".join(HEADER) + "\n", encoding="utf-8")
    with pytest.raises(UsageError) as exc:
        read_recipe(_recipe(path.parent, data))
    msg = str(exc.value)
    assert msg.startswith(f"{path.parent / 'recipe.toml'}, line 3: [data] sheet"), msg
    assert words in msg and "\n" not in msg


def test_an_unknown_sheet_lists_the_workbook_sheets(book):
    from openpyxl import load_workbook

    path, _ = book
    rec = read_recipe(_recipe(path.parent, 'table = "book.xlsx"\nsheet = "Dta"'))
    with pytest.raises(UnreadableInputError) as exc:
        dataset_from_recipe(rec)
    names = load_workbook(path).sheetnames  # openpyxl's own list of the sheets
    assert names == ["Notes", "Data"]
    msg = str(exc.value)
    assert "line 3: [data] sheet = 'Dta'" in msg and "\n" not in msg
    assert "its sheets are 'Notes', 'Data' (did you mean 'Data'?)" in msg


def test_scaffold_with_a_sheet_writes_it(book):
    path, _ = book
    text, sv, pick = scaffold(path, path.parent / "recipe.toml", "Data")
    data = tomllib.loads(text)["data"]
    assert data == {"table": "book.xlsx", "sheet": "Data"}
    assert "# sheet: the worksheet of book.xlsx that is read; its other sheets ('Notes') " \
           "are ignored" in unwrapped(text)
    assert sv.n_rows == N_SOILS and pick["n_usable"].value == N_SOILS


def test_scaffold_names_the_first_visible_of_several_sheets(tmp_path):
    """Without a sheet: a workbook with several visible sheets gets the one read named;
    a hidden first sheet is skipped; a csv table gets no sheet key (as before)."""
    rows = soils(seed=5)
    workbook(tmp_path / "two.xlsx", {"Draft": [HEADER, *rows[:5]],
                                    "Final": [HEADER, *rows], "Older": [HEADER, *rows[:9]]})
    from openpyxl import load_workbook

    b = load_workbook(tmp_path / "two.xlsx")
    b["Draft"].sheet_state = "hidden"
    b.save(tmp_path / "two.xlsx")
    text, sv, _ = scaffold(tmp_path / "two.xlsx", tmp_path / "r.toml")
    assert tomllib.loads(text)["data"] == {"table": "two.xlsx", "sheet": "Final"}
    assert sv.n_rows == N_SOILS
    assert "its other sheets ('Draft', 'Older') are ignored" in unwrapped(text)
    (tmp_path / "soils.csv").write_text("\n".join(",".join(map(str, r))
                                                  for r in [HEADER, *rows]) + "\n", "utf-8")
    text, sv, _ = scaffold(tmp_path / "soils.csv", tmp_path / "r.toml")
    assert tomllib.loads(text)["data"] == {"table": "soils.csv"} and sv.sheet is None


def test_scaffold_refuses_a_sheet_of_a_csv_or_an_unknown_sheet(book):
    path, _ = book
    (path.parent / "soils.csv").write_text(",".join(HEADER) + "\n", encoding="utf-8")
    with pytest.raises(UsageError, match=r"--sheet 'Data': .*soils.csv is a .csv file, not "
                                         r"an xlsx workbook"):
        scaffold(path.parent / "soils.csv", path.parent / "r.toml", "Data")
    with pytest.raises(UnreadableInputError, match=r"--sheet 'Nope': no such worksheet; the "
                                                   r"workbook has 'Notes', 'Data'"):
        scaffold(path, path.parent / "r.toml", "Nope")
