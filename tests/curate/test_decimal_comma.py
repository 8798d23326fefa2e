"""Tables written with a decimal comma (``12,5``): read_table, `refit check`, `refit admit`.

Oracle: ``pandas.read_csv(sep=";", decimal=",")`` (reference library) reads the same bytes;
where refit refuses mixed evidence, the expected message is written out in full.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from refit.cli import main
from refit.errors import InvalidDataError
from refit.curate.store import open_store
from refit.curate.tables import infer_types, read_table

HEADER = ["profile_id", "latitude", "longitude", "source", "map_mm", "bk_depth_cm",
          "bk_thickness_cm", "notes"]
ROWS = [["P-1", "35,5", "-105,25", "SRC-A", "350,5", "40", "20", "moist 2,5 m pit"],
        ["P-2", "36,1", "-104,9", "SRC-A", "420", "55,5", "30", ""],
        ["P-3", "-40,125", ",5", "SRC-B", "1200", "12", "7,25", "12,5"]]


def write(path, rows, header=HEADER, delim=";", before=()):
    lines = [*before, delim.join(header), *(delim.join(r) for r in rows)]
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.mark.parametrize("delim", [";", "\t", "|"])
def test_decimal_commas_read_as_pandas_reads_them(tmp_path, delim):
    path = write(tmp_path / "t.csv", ROWS, delim=delim)
    t = read_table(path)
    # reference: pandas.read_csv(decimal=",") on the same bytes
    ref = pd.read_csv(path, sep=delim, decimal=",")
    for col in ("latitude", "longitude", "map_mm", "bk_depth_cm", "bk_thickness_cm"):
        np.testing.assert_array_equal(t.frame[col].to_numpy(dtype=float),
                                      ref[col].to_numpy(dtype=float))
    assert t.frame["latitude"].tolist() == [35.5, 36.1, -40.125]
    assert t.frame["longitude"].tolist() == [-105.25, -104.9, 0.5]
    # free text and identifiers keep their commas
    assert t.frame["notes"].tolist()[:1] == ["moist 2,5 m pit"] or delim == ";"
    assert t.frame["notes"].tolist()[2] == "12,5"
    assert t.decimal_comma == ("latitude", "longitude", "map_mm", "bk_depth_cm",
                               "bk_thickness_cm")
    note = next(n for n in t.notes if n.startswith("decimal comma"))
    assert note == ("decimal comma: 9 number(s) written with a comma as decimal separator "
                    "(e.g. '35,5' read as 35.5) in 5 column(s) ('latitude', 'longitude', "
                    "'map_mm', 'bk_depth_cm', 'bk_thickness_cm'); no number used a "
                    "decimal point")


def test_careful_path_and_text_mode(tmp_path):
    # a title row and a blank line inside send the file past the one-call fast path
    rows = [ROWS[0], [""] * 0, ROWS[1], ROWS[2]]
    lines = ["Campaign 2025", "\t".join(HEADER)] + ["\t".join(r) for r in rows]
    path = tmp_path / "t.tsv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    typed = read_table(path)
    # reference: pandas.read_csv(decimal=",") with the title row skipped
    ref = pd.read_csv(path, sep="\t", decimal=",", skiprows=1)
    np.testing.assert_array_equal(typed.frame["map_mm"].to_numpy(dtype=float),
                                  ref["map_mm"].to_numpy(dtype=float))
    assert typed.source_rows.tolist() == [3, 5, 6]
    text = read_table(path, as_text=True)
    assert text.frame["latitude"].tolist() == ["35,5", "36,1", "-40,125"]  # as in the file
    assert text.decimal_comma == typed.decimal_comma
    assert any(n.startswith("decimal comma: 9 number(s)") for n in text.notes)


def test_comma_delimited_files_are_never_read_with_a_decimal_comma(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text('profile_id,map_mm\nP-1,"12,5"\nP-2,300\n', encoding="utf-8")
    t = read_table(path)
    assert t.frame["map_mm"].tolist() == ["12,5", "300"]
    assert t.decimal_comma == () and not any("decimal comma" in n for n in t.notes)


def test_integers_alone_say_nothing(tmp_path):
    rows = [["P-1", "35", "-105", "SRC-A", "350", "40", "20", "x"]]
    t = read_table(write(tmp_path / "t.csv", rows))
    assert t.frame["map_mm"].tolist() == [350] and t.decimal_comma == ()
    assert not any("decimal comma" in n for n in t.notes)


def test_identifiers_and_dates_are_neither_evidence_nor_changed(tmp_path):
    header = ["profile_id", "Sample ID", "map_mm", "sampled"]
    rows = [["12,5", "3.2", "350,5", "31.05.2024"], ["P-2", "4.1", "420", "01.06.2024"]]
    t = read_table(write(tmp_path / "t.csv", rows, header=header))
    assert t.frame["map_mm"].tolist() == [350.5, 420.0]
    assert t.frame["profile_id"].tolist() == ["12,5", "P-2"]
    assert t.frame["Sample ID"].tolist() == [3.2, 4.1]  # typed, but not taken as evidence
    assert t.frame["sampled"].tolist() == ["31.05.2024", "01.06.2024"]


@pytest.mark.parametrize("point_cell, shown", [("36.1", "'36.1'"), ("1.234,5", "'1.234,5'")])
@pytest.mark.parametrize("as_text", [False, True])
def test_mixed_separators_are_refused_with_where_and_how(tmp_path, point_cell, shown,
                                                         as_text):
    rows = [list(r) for r in ROWS]
    rows[1][1] = point_cell
    path = write(tmp_path / "mixed.csv", rows)
    with pytest.raises(InvalidDataError) as err:
        read_table(path, as_text=as_text)
    assert str(err.value) == (
        f"{path}: numbers are written with two decimal separators, so refit cannot tell "
        "which one is meant: 8 cell(s) use a decimal comma (e.g. row 2, column 'latitude': "
        f"'35,5') and 1 cell(s) a decimal point or grouped digits (e.g. row 3, column "
        f"'latitude': {shown}). Export the table again with one decimal separator for "
        "every number (e.g. set the spreadsheet's decimal separator to '.' and save as "
        "CSV), or correct the odd cells by hand, and write numbers without thousands "
        "separators")
    assert err.value.exit_code == 1


@pytest.mark.parametrize("as_text", [False, True])
def test_points_hidden_in_a_column_read_as_numbers_still_count(tmp_path, as_text):
    # pandas reads '350.0' and '420.0' as the floats 350 and 420, which no longer show
    # their point; the file still mixes separators
    rows = [list(r) for r in ROWS]
    rows[0][4], rows[1][4], rows[2][4] = "350.0", "420.0", ""
    path = write(tmp_path / "t.csv", rows)
    assert pd.read_csv(path, sep=";")["map_mm"].tolist()[:2] == [350.0, 420.0]
    with pytest.raises(InvalidDataError, match=r"e\.g\. row 2, column 'map_mm': '350\.0'"):
        read_table(path, as_text=as_text)


def test_text_among_decimal_commas_is_the_only_cell_reported(tmp_path):
    rows = [list(r) for r in ROWS]
    rows[1][4] = "dry"
    path = write(tmp_path / "t.csv", rows)
    res = invoke("check", path, "--format", "json")
    assert res.exit_code == 1, res.output
    bad = [(p["row"], p["column"], p["value"]) for p in json.loads(res.output)["problems"]
           if p["rule"] == "not-a-number"]
    assert bad == [(3, "map_mm", "dry")]
    assert read_table(path).frame["map_mm"].tolist() == ["350.5", "dry", "1200"]


def test_infer_types_equals_the_cell_by_cell_way():
    # the vectorised typing against the per-cell loop it replaced (same rules, written naively)
    missing = ("", "NA", "NaN", "nan", "null")

    def naive(frame):
        out = {}
        for name in frame.columns:
            col = frame[name].astype(object).map(lambda v: v.strip() if isinstance(v, str)
                                                 else v)
            col = col.where(~col.isin(missing) & col.notna(), None)
            try:
                out[name] = pd.to_numeric(col)
            except (ValueError, TypeError):
                out[name] = col.astype("str").where(col.notna(), np.nan)
        return pd.DataFrame(out, index=frame.index)

    cells = ["", "nan", "NA", "inf", "-inf", "1e999", "-0", "12,5", "1.2.3", " 7 ", "0x1F",
             "NULL", "-40.5", "1e-320", "５", "300", ".5", "5.", "9" * 25, "grassland"]
    for a in cells:
        for b in cells:
            frame = pd.DataFrame({"x": [a, b, "1"], "y": [b, "", a]}, dtype=object)
            pd.testing.assert_frame_equal(infer_types(frame), naive(frame))


# ------------------------------------------------------------------ through the command line

def invoke(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def test_refit_check_reads_decimal_commas_and_says_so(tmp_path):
    path = write(tmp_path / "soils.csv", ROWS)
    res = invoke("check", path)
    assert res.exit_code == 0, res.output
    assert "decimal comma: 9 number(s) written with a comma" in res.output
    assert "not-a-number" not in res.output
    doc = json.loads(invoke("check", path, "--format", "json").output)
    assert any(n.startswith("decimal comma") for n in doc["notes"]) and doc["ok"]


def test_refit_check_refuses_mixed_separators(tmp_path):
    rows = [list(r) for r in ROWS]
    rows[2][4] = "1200.75"
    path = write(tmp_path / "soils.csv", rows)
    res = invoke("check", path)
    assert res.exit_code == 1, res.output
    assert res.output.startswith(f"Error: {path}: numbers are written with two decimal")
    assert "row 4, column 'map_mm': '1200.75'" in res.output
    assert "Traceback" not in res.output


def test_refit_admit_stores_points_and_quarantines_the_file_text(tmp_path):
    rows = [list(r) for r in ROWS]
    rows[2][1] = "-95,5"  # latitude out of range: rejected, quarantined as written
    path = write(tmp_path / "soils.csv", rows)
    store = tmp_path / "store"
    res = invoke("admit", path, "--into", store)
    assert res.exit_code == 0, res.output
    assert "Rows read 3 = accepted 2 + rejected 1 + suspect 0." in res.output
    assert "decimal comma: 9 number(s)" in res.output
    records = open_store(store).records
    assert records["latitude"].tolist() == [35.5, 36.1]
    assert records["map_mm"].tolist() == [350.5, 420.0]
    assert (store / "records.csv").read_text(encoding="utf-8").splitlines()[1].startswith(
        "P-1,35.5,-105.25,SRC-A,350.5,")
    quarantine = next((store / "quarantine").glob("0001-soils.csv"))
    got = pd.read_csv(quarantine, dtype=str, keep_default_na=False)
    assert got.iloc[0][HEADER].tolist() == rows[2]  # the file's own text, commas and all
    assert got["_source_row"].tolist() == ["4"]
    assert "range (column 'latitude')" in got["_reasons"].iloc[0]


def test_refit_admit_refuses_mixed_separators_and_writes_nothing(tmp_path):
    rows = [list(r) for r in ROWS]
    rows[0][5] = "40.5"
    path = write(tmp_path / "soils.csv", rows)
    store = tmp_path / "store"
    res = invoke("admit", path, "--into", store)
    assert res.exit_code == 1, res.output
    assert f"Error: {path} cannot be admitted; nothing was written: {path}: numbers are " \
           "written with two decimal separators" in res.output
    assert "row 2, column 'bk_depth_cm': '40.5'" in res.output
    assert not store.exists()
