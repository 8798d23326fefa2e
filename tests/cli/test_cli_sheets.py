"""A calibration workbook whose data are not on its first sheet, from the workbook to a
fit: `refit init --sheet`, then `refit fit` on the recipe it wrote, through click's test
runner (stdout and stderr together).

The workbook is built here with openpyxl: a first sheet "Notes" (text only) and a second
"Data" with 30 invented soils (seeded numpy). The fitted line is checked against
statsmodels OLS on the same rows; the record count against the rows written.
"""

from __future__ import annotations

import json

import pandas as pd
import pytest
from _harness import SHEET_HEADER, sheet_soils, write_workbook
from click.testing import CliRunner

from refit.cli import main

N_SOILS = 30
HEADER = SHEET_HEADER


def _run(*args):
    return CliRunner().invoke(main, list(args))


@pytest.fixture
def book(tmp_path, monkeypatch):
    """book.xlsx in a fresh folder (the cwd): sheet "Notes", then sheet "Data"."""
    rows = sheet_soils(N_SOILS, 23, prefix="MB", source="Harrowfield", where=(-28.0, 137.0),
                       depth=(25.0, 160.0), line=(120.0, 3.4), sd=60.0, sources=5)
    write_workbook(tmp_path / "book.xlsx",
                   {"Notes": [["Marrow Bench soil survey (invented), field notes"],
                              ["The table is on the sheet Data."]],
                    "Data": [HEADER, *rows]})
    monkeypatch.chdir(tmp_path)
    return tmp_path, pd.DataFrame(rows, columns=HEADER)


def test_init_sheet_then_fit_reads_the_data_sheet(book):
    import statsmodels.api as sm

    folder, frame = book
    res = _run("init", "book.xlsx", "--sheet", "Data")
    assert res.exit_code == 0, res.output
    assert f"on {N_SOILS} of {N_SOILS} records (sheet 'Data')" in res.output
    text = (folder / "recipe.toml").read_text("utf-8")
    assert 'table = "book.xlsx"\n# sheet: the worksheet of book.xlsx that is read; its other ' \
           "sheets ('Notes') are ignored\nsheet = \"Data\"\n" in text
    res = _run("fit", "recipe.toml", "--out", "run", "-q")
    assert res.exit_code == 0, res.output
    run = json.loads((folder / "run" / "run.json").read_text("utf-8"))
    assert run["dataset"]["sheet"] == "Data"
    assert run["dataset"]["rows"] == N_SOILS and run["subset"]["rows_after"] == N_SOILS
    rec = json.loads((folder / "run" / "fits" / "linear__ols__inverse__analytic.json")
                     .read_text("utf-8"))
    assert rec["n"] == N_SOILS
    # reference: statsmodels OLS of map_mm on bk_depth_cm over the same 30 rows
    ref = sm.OLS(frame["map_mm"], sm.add_constant(frame["bk_depth_cm"])).fit().params
    assert rec["coefficients"] == pytest.approx(list(ref), rel=1e-9)
    assert rec["coefficients"][1] == pytest.approx(ref["bk_depth_cm"], rel=1e-9)
    # the report rebuilds the data from run.json: the same sheet, the same 30 rows
    res = _run("report", "run", "--out", "report.html", "-q")
    assert res.exit_code == 0, res.output
    assert (folder / "report.html").stat().st_size > 0


def _recipe(folder, data: str) -> None:
    (folder / "r.toml").write_text(f"[data]\n{data}\n\n[function]\nid = \"map_from_bk\"\n"
                                   "response = \"map_mm\"\npredictors = [\"bk_depth_cm\"]\n",
                                   encoding="utf-8")


@pytest.mark.parametrize("data, words", [
    ('store = "store"\nsheet = "Data"', ("r.toml, line 3: [data] sheet = 'Data' names a "
                                         "worksheet of an xlsx table, but the data are a "
                                         "store")),
    ('table = "soils.csv"\nsheet = "Data"', ("r.toml, line 3: [data] sheet = 'Data' names "
                                             "a worksheet, but table 'soils.csv' is not an "
                                             "xlsx")),
    ('table = "book.xlsx"\nsheet = "Dta"', ("r.toml, line 3: [data] sheet = 'Dta': "
                                            "workbook 'book.xlsx' has no such worksheet; its "
                                            "sheets are 'Notes', 'Data'")),
])
def test_fit_refuses_a_misplaced_or_unknown_sheet(book, data, words):
    folder, frame = book
    (folder / "store").mkdir()
    frame.to_csv(folder / "soils.csv", index=False)
    _recipe(folder, data)
    res = _run("fit", "r.toml", "--out", "run")
    assert res.exit_code == 2, res.output
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: ") and words in lines[0], res.output
    assert not (folder / "run").exists()


@pytest.mark.parametrize("args, words", [
    (["init", "soils.csv", "--sheet", "Data"], ("--sheet 'Data': soils.csv is a .csv file, "
                                                "not an xlsx workbook")),
    (["init", "book.xlsx", "--sheet", "Nope"], ("book.xlsx: --sheet 'Nope': no such "
                                                "worksheet; the workbook has 'Notes', "
                                                "'Data'")),
])
def test_init_refuses_a_sheet_of_a_csv_or_an_unknown_sheet(book, args, words):
    folder, frame = book
    frame.to_csv(folder / "soils.csv", index=False)
    res = _run(*args)
    assert res.exit_code == 2, res.output
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: ") and words in lines[0], res.output
    assert not (folder / "recipe.toml").exists()
