"""Columns never dropped silently, mislabelled SD columns, vocabulary synonyms, and the
plausibility rules.

Values here are planted in small invented tables; thresholds are the documented ones of
refit.curate.plausibility (2 cm: common practice; 50 and 100 mm: from memory, UNEP 1992 for
hyperarid lands); the SD conversion uses NIST SP 811 (1 in = 2.54 cm exactly).
"""

from __future__ import annotations

from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

import refit
from refit.cli import main
from refit.curate.checks import check_file, check_frame
from refit.curate.columns import parse_column, unmapped_columns
from refit.curate.fossils import check_fossil_file, read_fossils
from refit.errors import InvalidDataError, UsageError

RETALLACK = Path(refit.__file__).parent / "published" / "map_from_bk_depth.retallack1994.json"


def _write(tmp_path, text, name="t.csv"):
    (tmp_path / name).write_text(text, encoding="utf-8")
    return tmp_path / name


@pytest.mark.parametrize("header", ["Bk depth SD (cm)", "bk_depth_sd_cm", "± Bk depth (cm)",
                                    "Bk depth error (cm)", "Bk depth 1σ (cm)"])
def test_sd_spellings_map_in_fossil_tables(header):
    assert parse_column(header, "fossil") == ("bk_depth_sd_cm",
                                              None if header == "bk_depth_sd_cm" else "cm")


def test_sd_in_inches_is_converted_by_its_factor(tmp_path):
    path = _write(tmp_path, "ID,Depth to Bk (in),Bk depth SD (in)\nP1,40,2\n")
    report = check_fossil_file(path)
    assert report.frame.loc[0, "paleosol_id"] == "P1"  # 'ID' maps to the id column
    assert report.frame.loc[0, "bk_depth_sd_cm"] == pytest.approx(2 * 2.54, abs=1e-12)


def test_unmapped_sd_column_stops_apply_unless_ignored(tmp_path):
    path = _write(tmp_path, "paleosol_id,bk_depth_cm,SD (cm)\nP1,80,10\n")
    report = check_fossil_file(path)
    assert list(report.errors["rule"]) == ["unmapped-sd-column"]
    assert "--ignore-columns 'SD (cm)'" in report.errors["message"].iloc[0]
    with pytest.raises(InvalidDataError, match="looks like a measurement SD"):
        read_fossils(path)
    res = CliRunner().invoke(main, ["apply", str(RETALLACK), "--fossils", str(path)])
    assert res.exit_code == 1 and "Error:" in res.output and "SD (cm)" in res.output
    res = CliRunner().invoke(main, ["apply", str(RETALLACK), "--fossils", str(path),
                                    "--ignore-columns", "SD (cm)"])
    assert res.exit_code == 0, res.output
    with pytest.raises(UsageError, match="does not have"):
        read_fossils(path, ignore_columns=["nope"])


def test_every_unmapped_column_is_listed_with_a_did_you_mean(tmp_path):
    path = _write(tmp_path, "profile_id,latitude,longitude,source,map_mm,Elevaton (m),"
                            "Munsell\nA,-40,52,S,400,300,10YR\n")
    report = check_file(path)
    got = report.warnings[report.warnings["rule"] == "unmapped-column"]
    assert list(got["column"]) == ["Elevaton (m)", "Munsell"]
    assert "did you mean elevation_m?" in got["message"].iloc[0]
    assert unmapped_columns(["ID", "sample"]) == []  # identifier synonyms map


def test_missing_profile_id_is_found_under_id(tmp_path):
    path = _write(tmp_path, "ID,latitude,longitude,source,map_mm\nA,-40,52,S,400\n")
    assert check_file(path).ok


def test_vocabulary_synonym_is_read_as_its_term_and_reported(tmp_path):
    rows = "\n".join(f"T{k},-40,52,S,400,till" for k in range(156))
    path = _write(tmp_path, "profile_id,latitude,longitude,source,map_mm,parent_material\n"
                  + rows + "\n")
    report = check_file(path)
    assert report.ok and set(report.frame["parent_material"]) == {"glacial till"}
    assert "parent_material 'till' -> 'glacial till' (synonym; 156 rows)" in report.notes
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.output.count("is read as 'glacial till'") == 1  # one block, said once


def frame(**cols):
    base = {"profile_id": ["a"], "latitude": [-40.0], "longitude": [52.0], "source": ["S"]}
    return pd.DataFrame({**base, **{k: [v] for k, v in cols.items()}})


@pytest.mark.parametrize("cols, severity, rule", [
    (dict(map_mm=400, bk_depth_cm=0.85, bk_thickness_cm=30), "error", "bk-too-shallow"),
    (dict(map_mm=80, bk_depth_cm=20, bk_thickness_cm=10), "warning",
     "bk-in-hyperarid-climate"),
    (dict(map_mm=5, bk_depth_cm=180, bk_thickness_cm=30), "error", "map-below-bk-minimum"),
    (dict(map_mm=400, bk_depth_cm=120, bk_thickness_cm=30, profile_depth_cm=100), "error",
     "horizon-below-profile"),
    (dict(map_mm=400, bk_depth_cm=60), "warning", "bk-depth-without-thickness"),
])
def test_plausibility_rules(cols, severity, rule):
    problems = check_frame(frame(**cols)).problems
    assert list(zip(problems["severity"], problems["rule"])) == [(severity, rule)]


def test_plausible_row_raises_nothing():
    assert check_frame(frame(map_mm=400, bk_depth_cm=60, bk_thickness_cm=30,
                             profile_depth_cm=150)).problems.empty
