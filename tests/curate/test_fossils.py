"""Fossil tables: the Frictionless descriptor, the checks and `refit check --kind fossil`."""

from __future__ import annotations

import json
from pathlib import Path

from click.testing import CliRunner

import refit
from refit._util.resources import schemas_dir
from refit.curate.checks import check_file
from refit.cli.check import check
from refit.curate.fossils import check_fossil_file, feature_columns, sd_column

HEADER = ("paleosol_id,section,level_m,bk_depth_cm,bk_depth_sd_cm,bk_thickness_cm,"
          "burial_depth_km,soil_order,vegetation,parent_material,cao_wt,cao_sd_wt\n")
GOOD = HEADER + ("P1,Sec A,12.2,124,12,64,2.4,Mollisols,grassland,loess,1.4,0.1\n"
                 "P2,Sec A,34.4,88,,62,2.3,Aridisols,grassland,loess,,\n")


def _write(tmp_path, text, name="f.csv"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def test_descriptor_is_valid_frictionless_and_matches_the_calibration_glossary():
    # reference: the frictionless package validates the descriptor (Table Schema spec)
    import frictionless

    path = schemas_dir() / "fossil.table.json"
    assert frictionless.validate(str(path), type="schema").valid
    fossil = {f["name"]: f for f in json.loads(path.read_text())["fields"]}
    cal = {f["name"]: f for f in
           json.loads((schemas_dir() / "calibration.table.json").read_text())["fields"]}
    for name in feature_columns() + ["soil_order", "vegetation", "age_ka"]:
        # same names, units and ranges as the calibration table
        assert fossil[name].get("unit") == cal[name].get("unit"), name
        assert fossil[name].get("constraints") == cal[name].get("constraints"), name
        if name in feature_columns():
            assert fossil[sd_column(name)]["constraints"] == {"minimum": 0}
    assert sd_column("bk_depth_cm") == "bk_depth_sd_cm"
    assert sd_column("cao_wt") == "cao_sd_wt"
    assert fossil["burial_depth_km"]["unit"] == "km"


def test_good_table_is_valid(tmp_path):
    rep = check_file(_write(tmp_path, GOOD), kind="fossil")
    assert rep.ok, rep.errors
    assert rep.frame["bk_depth_cm"].tolist() == [124.0, 88.0]
    # P1 is a Mollisol without built-in compaction constants: a warning, not an error
    warn = rep.warnings
    assert warn["rule"].tolist() == ["compaction-constants"]
    assert warn["profile_id"].tolist() == ["P1"] and warn["row"].tolist() == [2]


def test_bad_values_name_row_column_and_value(tmp_path):
    text = HEADER + (
        "P1,Sec A,1,-5,2,64,2.4,Aridisols,grassland,loess,1.4,0.1\n"    # negative depth
        "P2,Sec A,2,88,,62,15,Aridisols,grassland,loess,,\n"            # burial 15 km
        "P3,Sec A,3,70,,50,1.0,Mollisol-ish,grassland,loess,,\n"        # unknown order
        "P4,Sec A,4,,3,50,1.0,Aridisols,grassland,loess,,\n"            # sd without value
        "P5,Sec A,5,60,,40,1.0,Aridisols,grassland,loess,,\n")          # fine
    rep = check_fossil_file(_write(tmp_path, text))
    err = rep.errors.set_index("profile_id")
    assert err.loc["P1", "rule"] == "range" and err.loc["P1", "column"] == "bk_depth_cm"
    assert err.loc["P1", "value"] == "-5" and err.loc["P1", "row"] == 2
    assert err.loc["P2", "rule"] == "range" and err.loc["P2", "column"] == "burial_depth_km"
    assert err.loc["P3", "rule"] == "vocabulary" and err.loc["P3", "column"] == "soil_order"
    assert "P5" not in err.index and "P4" not in err.index
    warn = rep.warnings
    assert warn[warn["rule"] == "sd-without-value"]["profile_id"].tolist() == ["P4"]
    assert sorted(rep.frame.loc[rep.bad_rows(), "paleosol_id"]) == ["P1", "P2", "P3"]


def test_missing_id_column_and_partial_constants(tmp_path):
    rep = check_fossil_file(_write(tmp_path, "section,bk_depth_cm\nA,10\n"))
    assert rep.table_errors()["rule"].tolist() == ["required-column"]
    text = ("paleosol_id,bk_depth_cm,bk_thickness_cm,burial_depth_km,initial_solidity\n"
            "P1,50,20,1,0.6\n")
    rep = check_fossil_file(_write(tmp_path, text, "g.csv"))
    assert rep.errors["rule"].tolist() == ["partial-constants"]


def test_cli_check_kind_fossil_exit_codes(tmp_path):
    runner = CliRunner()
    res = runner.invoke(check, [str(_write(tmp_path, GOOD)), "--kind", "fossil"])
    assert res.exit_code == 0, res.output
    assert "VALID" in res.output
    bad = _write(tmp_path, HEADER + "P1,A,1,-5,,64,2.4,Aridisols,grassland,loess,,\n", "b.csv")
    res = runner.invoke(check, [str(bad), "--kind", "fossil", "--format", "json"])
    assert res.exit_code == 1
    doc = json.loads(res.output)
    assert [p["rule"] for p in doc["problems"] if p["severity"] == "error"] == ["range"]
    res = runner.invoke(check, [str(tmp_path / "none.csv"), "--kind", "fossil"])
    assert res.exit_code == 2 and "Traceback" not in res.output


def test_refit_apply_names_the_file_and_its_repeated_column(tmp_path):
    # a header written twice: pandas.read_csv calls the second 'bk_depth_cm.1' (checked
    # against pandas itself); `refit apply` must name the file and the names as written
    import pandas as pd

    from refit.cli import main

    coefficients = Path(refit.__file__).parent / "published" / \
        "map_from_bk_depth.retallack1994.json"
    fossils = _write(tmp_path, "paleosol_id,bk_depth_cm,bk_depth_cm\nP1,100,120\n",
                     "twice.csv")
    assert list(pd.read_csv(fossils).columns) == ["paleosol_id", "bk_depth_cm",
                                                   "bk_depth_cm.1"]
    res = CliRunner().invoke(main, ["apply", str(coefficients), "--fossils", str(fossils),
                                    "--out", str(tmp_path / "est.csv")])
    assert res.exit_code == 1, res.output
    assert f"{fossils}: columns 2 and 3 are both named 'bk_depth_cm'" in res.output
    assert "bk_depth_cm.1" not in res.output and "Traceback" not in res.output
    assert not (tmp_path / "est.csv").exists()
