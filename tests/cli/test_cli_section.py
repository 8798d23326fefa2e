"""`refit section` end to end (click runner): exit codes first, then the files it wrote and
what the terminal says. Reference for the age check: numpy.interp."""

from __future__ import annotations

import numpy as np
import pandas as pd
from click.testing import CliRunner

from refit.cli import main

RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"
CIA_K = "refit/published/map_from_cia_k.sheldon2002.json"
DEMO = "calib_demo/fossils.csv"


def test_section_writes_figures_table_and_notes(tmp_path):
    out = tmp_path / "s"
    res = CliRunner().invoke(main, ["section", RETALLACK, CIA_K, "--fossils", DEMO,
                                    "--out", str(out), "--decompact",
                                    "--compaction-constants",
                                    "calib_demo/compaction_constants.json"])
    assert res.exit_code == 0, res.output
    assert "14 of 14 paleosols drawn in 2 figure(s), 2 fit(s), against level [m]" in res.output
    for name in ("section-murrenhal-bluff.png", "section-coldstave-gorge.png"):
        assert str(out / name) in res.output and (out / name).is_file()
    t = pd.read_csv(out / "section.csv")
    assert len(t) == 28 and "Note: Coldstave Gorge" in res.output
    assert "not-decompacted" not in res.output
    again = CliRunner().invoke(main, ["section", RETALLACK, "--fossils", DEMO,
                                      "--out", str(out)])
    assert again.exit_code == 2 and "--overwrite" in again.output


def test_section_by_age_model(tmp_path):
    out = tmp_path / "s"
    res = CliRunner().invoke(main, ["section", RETALLACK, "--fossils", DEMO, "--out",
                                    str(out), "--age-model", "calib_demo/age_model.csv"])
    assert res.exit_code == 0, res.output
    assert "against age_ma" in res.output
    assert "Warning:" in res.output and "--decompact" in res.output  # burial not handled
    t = pd.read_csv(out / "section.csv")
    model = pd.read_csv("calib_demo/age_model.csv")
    m = model[model["section"] == "Murrenhal Bluff"]
    g = t[t["section"] == "Murrenhal Bluff"]
    np.testing.assert_allclose(g["age"], np.interp(g["level_m"], m["level_m"], m["age_ma"]))


def test_bad_age_models_and_options_give_one_line_errors(tmp_path):
    runner = CliRunner()
    one = tmp_path / "one.csv"
    one.write_text("level_m,age_ma\n10,5.0\n")
    res = runner.invoke(main, ["section", RETALLACK, "--fossils", DEMO, "--out",
                               str(tmp_path / "a"), "--age-model", str(one)])
    assert res.exit_code == 1 and res.output.startswith("Error:")
    assert "at least two" in res.output and "Traceback" not in res.output
    back = tmp_path / "back.csv"
    back.write_text("level_m,age_ma\n0,8.0\n50,7.0\n100,7.5\n")
    res = runner.invoke(main, ["section", RETALLACK, "--fossils", DEMO, "--out",
                               str(tmp_path / "b"), "--age-model", str(back)])
    assert res.exit_code == 1 and "not monotonic" in res.output
    nocol = tmp_path / "nocol.csv"
    nocol.write_text("depth,age\n0,8\n")
    res = runner.invoke(main, ["section", RETALLACK, "--fossils", DEMO, "--out",
                               str(tmp_path / "c"), "--age-model", str(nocol)])
    assert res.exit_code == 1 and "level_m and one of age_ma" in res.output
    res = runner.invoke(main, ["section", RETALLACK, "--fossils", DEMO, "--out",
                               str(tmp_path / "d"), "--age-model", str(back),
                               "--age-column", "age_ma"])
    assert res.exit_code == 2 and "not both" in res.output
    assert not (tmp_path / "d").exists()
