"""The worksheet a fit was read from is part of its coefficient file's provenance
(``provenance.dataset.sheet``, coefficient-file schema 1.4.0): `refit verify --store
book.xlsx` rereads that sheet, `refit diff` and `refit report` show it, and a fit from a csv
table has no sheet member and stays a schema 1.3.0 file, byte for byte as before.

The workbook is built here with openpyxl: a first sheet "Notes" (text only) and a second
"Data" with 30 invented soils (seeded numpy). References: the fitted line is checked
against statsmodels OLS on the same rows; the files against the JSON Schema with the
jsonschema package's Draft 2020-12 reference validator; hashes with hashlib (FIPS 180-4).
"""

from __future__ import annotations

import hashlib
import json

import pandas as pd
import pytest
from _harness import SHEET_HEADER, sheet_soils, write_workbook
from click.testing import CliRunner

from refit.cli import main

N_SOILS = 30
HEADER = SHEET_HEADER
FIT = "linear__ols__inverse__analytic.json"


def _run(*args):
    return CliRunner().invoke(main, list(args))


def _rows():
    return sheet_soils(N_SOILS, 41, prefix="TQ", source="Tarrow Quay", depth=(25.0, 160.0),
                       line=(150.0, 3.1), sources=5)


_workbook = write_workbook


@pytest.fixture
def book(tmp_path, monkeypatch):
    """book.xlsx (sheet "Notes", then "Data") in a fresh folder (the cwd), fitted by a
    recipe naming sheet "Data" into run/."""
    rows = _rows()
    _workbook(tmp_path / "book.xlsx",
              {"Notes": [["Tarrow Quay soil survey (invented), field notes"],
                         ["The table is on the sheet Data."]],
               "Data": [HEADER, *rows]})
    monkeypatch.chdir(tmp_path)
    res = _run("init", "book.xlsx", "--sheet", "Data")
    assert res.exit_code == 0, res.output
    res = _run("fit", "recipe.toml", "--out", "run", "-q")
    assert res.exit_code == 0, res.output
    return tmp_path, pd.DataFrame(rows, columns=HEADER)


def _schema_validator():
    from jsonschema import Draft202012Validator

    from refit._util.resources import schemas_dir

    schema = json.loads((schemas_dir() / "coefficients.schema.json").read_text("utf-8"))
    Draft202012Validator.check_schema(schema)
    return Draft202012Validator(schema)


def _one_error_line(res, *words):
    lines = res.output.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: "), res.output
    for w in words:
        assert w in lines[0], res.output


def test_a_sheet_fit_records_its_sheet_and_verifies_from_the_workbook(book):
    import statsmodels.api as sm

    folder, frame = book
    path = folder / "run" / "fits" / FIT
    rec = json.loads(path.read_text("utf-8"))
    assert rec["provenance"]["dataset"]["sheet"] == "Data"
    assert rec["schema_version"] == "1.4.0"
    # reference: statsmodels OLS of map_mm on bk_depth_cm over the Data sheet's 30 rows
    ref = sm.OLS(frame["map_mm"], sm.add_constant(frame["bk_depth_cm"])).fit().params
    assert rec["coefficients"] == pytest.approx(list(ref), rel=1e-9)
    # reference: the jsonschema package's Draft 2020-12 validator on the shipped schema
    validator = _schema_validator()
    assert list(validator.iter_errors(rec)) == []
    bad = json.loads(json.dumps(rec))
    bad["provenance"]["dataset"]["sheet"] = ""
    assert [e.message for e in validator.iter_errors(bad)] == ["'' should be non-empty"]
    # reference: hashlib SHA-256 of the canonical content (keys sorted, no whitespace)
    body = {k: v for k, v in rec.items() if k != "sha256"}
    canon = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert rec["sha256"] == hashlib.sha256(canon.encode("utf-8")).hexdigest()

    res = _run("verify", str(path), "--store", "book.xlsx")
    assert res.exit_code == 0, res.output
    assert "refitted from table 'book.xlsx' (sheet 'Data') (30 rows after the subset): " \
           "every fitted number, the valid domain and the cross-validated skill agree" \
           in res.output
    # published, the file keeps its sheet and still verifies from the workbook
    res = _run("publish", str(path), "--to", "registry", "--init", "-q")
    assert res.exit_code == 0, res.output
    published = folder / "registry" / rec["function_id"] / "1.0.0.json"
    pub = json.loads(published.read_text("utf-8"))
    assert pub["provenance"]["dataset"]["sheet"] == "Data"
    assert list(validator.iter_errors(pub)) == []
    res = _run("verify", str(published), "--store", "book.xlsx")
    assert res.exit_code == 0, res.output
    assert "(sheet 'Data')" in res.output and "every fitted number" in res.output


def test_verify_refuses_a_table_without_the_recorded_sheet(book):
    folder, frame = book
    path = str(folder / "run" / "fits" / FIT)
    frame.to_csv(folder / "soils.csv", index=False)
    res = _run("verify", path, "--store", "soils.csv")
    assert res.exit_code == 2, res.output
    _one_error_line(res, "sheet 'Data' of workbook 'book.xlsx'",
                    "'soils.csv' is not an xlsx workbook")
    _workbook(folder / "other.xlsx", {"Notes": [["x"]], "Soils": [HEADER, *_rows()]})
    res = _run("verify", path, "--store", "other.xlsx")
    assert res.exit_code == 2, res.output
    _one_error_line(res, "sheet 'Data'", "its sheets are 'Notes', 'Soils'")


def test_verify_sheet_option_reads_a_sheet_the_file_does_not_record(book):
    from refit.coefficients import content_sha256, dumps

    folder, _ = book
    rec = json.loads((folder / "run" / "fits" / FIT).read_text("utf-8"))
    # a file as schema 1.3.0 wrote it from the same fit: no sheet member
    old = json.loads(json.dumps(rec))
    del old["provenance"]["dataset"]["sheet"]
    old["schema_version"] = "1.3.0"
    old.pop("sha256")
    old["sha256"] = content_sha256(old)
    (folder / "old.json").write_text(dumps(old), encoding="utf-8")
    res = _run("verify", "old.json", "--store", "book.xlsx")    # first sheet: Notes
    assert res.exit_code == 1, res.output
    res = _run("verify", "old.json", "--store", "book.xlsx", "--sheet", "Data")
    assert res.exit_code == 0, res.output
    assert "(sheet 'Data') (given by --sheet; the file records no sheet)" in res.output
    # a sheet given with --sheet that the workbook lacks: the message does not claim the
    # file recorded it
    res = _run("verify", "old.json", "--store", "book.xlsx", "--sheet", "Dat")
    assert res.exit_code == 2, res.output
    _one_error_line(res, "rebuilt from sheet 'Dat'", "or given with --sheet",
                    "its sheets are 'Notes', 'Data'")
    assert "the fit was made on sheet" not in res.output
    res = _run("verify", "old.json", "--sheet", "Data")
    assert res.exit_code == 2, res.output
    _one_error_line(res, "--sheet", "without --store")


def test_a_csv_fit_has_no_sheet_and_stays_schema_1_3_0(book):
    from refit.coefficients import SCHEMA_VERSION

    folder, frame = book
    frame.to_csv(folder / "soils.csv", index=False)
    res = _run("init", "soils.csv", "--out", "csv.toml")
    assert res.exit_code == 0, res.output
    res = _run("fit", "csv.toml", "--out", "csvrun", "-q")
    assert res.exit_code == 0, res.output
    raw = (folder / "csvrun" / "fits" / FIT).read_bytes()
    rec = json.loads(raw)
    assert SCHEMA_VERSION == "1.4.0"
    assert rec["schema_version"] == "1.3.0"
    assert "sheet" not in rec["provenance"]["dataset"]
    assert b'"sheet"' not in raw
    assert list(_schema_validator().iter_errors(rec)) == []
    # the same 30 soils: the sheet fit differs only in the data's name, hash, sheet and
    # schema version (and the recipe that names them)
    sheet = json.loads((folder / "run" / "fits" / FIT).read_text("utf-8"))
    assert sheet["coefficients"] == pytest.approx(rec["coefficients"], rel=1e-12)
    ds_csv, ds_xlsx = rec["provenance"]["dataset"], sheet["provenance"]["dataset"]
    assert set(ds_xlsx) - set(ds_csv) == {"sheet"}
    # refit diff shows the sheet among the provenance rows
    res = _run("diff", str(folder / "csvrun" / "fits" / FIT),
               str(folder / "run" / "fits" / FIT), "--format", "json")
    assert res.exit_code == 0, res.output
    rows = {r["item"]: r for r in json.loads(res.output)["provenance"]}
    assert rows["dataset sheet"]["a"] is None and rows["dataset sheet"]["b"] == "Data"
    # a diff of two sheetless files has no sheet row
    res = _run("diff", str(folder / "csvrun" / "fits" / FIT),
               str(folder / "csvrun" / "fits" / FIT), "--format", "json")
    assert "dataset sheet" not in {r["item"] for r in json.loads(res.output)["provenance"]}


def test_report_names_the_sheet(book):
    folder, _ = book
    res = _run("report", "run", "--out", "report.html", "-q")
    assert res.exit_code == 0, res.output
    html = (folder / "report.html").read_text("utf-8")
    assert "<strong>book.xlsx</strong>, sheet <strong>Data</strong>" in html


def test_a_sheet_in_a_file_older_than_1_4_0_is_refused(book):
    from refit.coefficients import content_sha256, dumps, load
    from refit.errors import InvalidDataError

    folder, _ = book
    rec = json.loads((folder / "run" / "fits" / FIT).read_text("utf-8"))
    rec["schema_version"] = "1.3.0"
    rec.pop("sha256")
    rec["sha256"] = content_sha256(rec)
    (folder / "mixed-up.json").write_text(dumps(rec), encoding="utf-8")
    with pytest.raises(InvalidDataError, match=r"provenance.dataset.sheet is set, but "
                       r"\$.schema_version is '1.3.0'; the sheet member exists from schema "
                       r"1.4.0 on"):
        load(folder / "mixed-up.json")
