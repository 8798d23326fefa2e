"""`refit apply` and `refit compare` end to end (click runner): exit codes, files, values.

Reference: Caudill et al. (1996, J. Sed. Res. 66:58): Retallack (1994) at D = 100 cm gives
648 +- 141 mm.
"""

from __future__ import annotations

import pandas as pd
import pytest
from click.testing import CliRunner

from refit.cli.apply import apply
from refit.cli.compare import compare

RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"
CIA_K = "refit/published/map_from_cia_k.sheldon2002.json"
DEMO = "calib_demo/fossils.csv"


def test_apply_demo_writes_csv_and_prints_cautions(tmp_path):
    out = tmp_path / "est.csv"
    res = CliRunner().invoke(apply, [RETALLACK, CIA_K, "--fossils", DEMO, "--out", str(out),
                                     "--seed", "4"])
    # rows without oxides are not an error: their cia_k rows say why, the exit code is 0
    assert res.exit_code == 0, res.output
    assert "not a basis for engineering" in res.output
    got = pd.read_csv(out, keep_default_na=False, na_values=[""])
    assert len(got) == 28  # 14 demo paleosols x 2 equations
    bk = got[got["function_id"] == "map_from_bk_depth"]
    assert bk["propagation"].str.startswith("monte-carlo").all()  # demo has Bk depth SDs
    assert (bk["lower"] < bk["lower_without_propagation"]).all()
    noox = got[(got["function_id"] == "map_from_cia_k") & got["estimate"].isna()]
    assert (noox["problem"] == "no value for cia_k in this row").all() and len(noox) == 8
    # the demo's deep paleosol: 280 cm lies beyond the Retallack (1994) quadratic's vertex
    # at D = 6.388 / (2 x 0.01303) = 245.1 cm (derived from its coefficients)
    flags = dict(zip(bk["paleosol_id"], bk["flags"]))
    assert "beyond-turning-point" in flags["CG-P08"]
    assert "beyond-turning-point" not in flags["CG-P07"]
    # the demo gives burial depths but was not decompacted: flagged and said on the terminal
    assert bk["flags"].str.contains("not-decompacted").all()
    assert "Warning: 14 estimate(s) (map_from_bk_depth) used depths" in res.output


def test_apply_at_worked_value_and_refuses_overwrite(tmp_path):
    t = tmp_path / "f.csv"
    t.write_text("paleosol_id,bk_depth_cm\nP,100\n")
    out = tmp_path / "o.csv"
    runner = CliRunner()
    assert runner.invoke(apply, [RETALLACK, "--fossils", str(t), "--out", str(out)]).exit_code == 0
    r = pd.read_csv(out).iloc[0]
    assert r["estimate"] == pytest.approx(648.1, abs=0.05)
    assert (r["lower"], r["upper"]) == pytest.approx((507.1, 789.1), abs=0.05)
    res = runner.invoke(apply, [RETALLACK, "--fossils", str(t), "--out", str(out)])
    assert res.exit_code == 2 and "--overwrite" in res.output


def test_apply_bad_input_exit_codes(tmp_path):
    runner = CliRunner()
    t = tmp_path / "f.csv"
    t.write_text("paleosol_id,bk_depth_cm,burial_depth_km,soil_order\n"
                 "A,-5,1,Aridisols\nB,100,30,Aridisols\nC,80,1,Vertisols\nD,90,1,Aridisols\n")
    res = runner.invoke(apply, [RETALLACK, CIA_K, "--fossils", str(t), "--decompact",
                                "--out", str(tmp_path / "o.csv")])
    assert res.exit_code == 1 and "Traceback" not in res.output
    assert "lacks cia_k" in res.output
    got = pd.read_csv(tmp_path / "o.csv", keep_default_na=False).set_index("paleosol_id")
    assert "rejected by the checks" in got.loc["A", "problem"]
    assert "burial_depth_km" in got.loc["B", "problem"]
    assert "Vertisols" in got.loc["C", "problem"]
    assert got.loc["D", "problem"] == "" and float(got.loc["D", "estimate"]) > 0
    dec = pd.read_csv(str(tmp_path / "o.csv") + ".decompaction.csv").set_index("paleosol_id")
    assert dec.loc["D", "bk_depth_cm_measured"] == 90
    res = runner.invoke(apply, [str(tmp_path / "nope.json"), "--fossils", str(t)])
    assert res.exit_code == 2 and "no such coefficient file" in res.output
    res = runner.invoke(apply, [RETALLACK, "--fossils", str(t), "--level", "95"])
    assert res.exit_code == 2


def test_compare_writes_table_and_figure(tmp_path):
    res = CliRunner().invoke(compare, [RETALLACK, "--at", "bk_depth_cm=100",
                                       "--out", str(tmp_path / "c")])
    assert res.exit_code == 0, res.output
    table = pd.read_csv(tmp_path / "c" / "comparison.csv")
    assert table["estimate"][0] == pytest.approx(648.1, abs=0.05)
    assert (tmp_path / "c" / "comparison.png").read_bytes()[:4] == b"\x89PNG"
    assert "no cross-validation" in res.output and "Cautions" in res.output
    again = CliRunner().invoke(compare, [RETALLACK, "--at", "bk_depth_cm=100",
                                         "--out", str(tmp_path / "c")])
    assert again.exit_code == 2
