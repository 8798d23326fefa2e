"""`refit section` end to end (click runner): exit codes first, then the files it wrote and
what the terminal says. Reference for the age check: numpy.interp."""

from __future__ import annotations

import numpy as np
import pandas as pd
from _harness import forward_files
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
        # what each figure holds (refit.report.section_layout.describe)
        assert f"{out / name}: 2 fits in 1 panel (MAP: 2)" in res.output
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


def test_section_posterior_numbers_are_applys(tmp_path):
    """`section --posterior --prior` draws and tabulates exactly the posterior numbers of
    `apply --posterior --prior` (the same machinery; reference: apply's CSV), beside the
    frequentist interval of the same forward file."""
    files = forward_files(tmp_path)
    prior = ["--posterior", "--prior", "normal:700:250"]
    runner = CliRunner()
    est = tmp_path / "est.csv"
    res = runner.invoke(main, ["apply", *files, "--fossils", DEMO, "--out", str(est),
                               *prior])
    assert res.exit_code == 0, res.output
    res = runner.invoke(main, ["section", *files, "--fossils", DEMO, "--out",
                               str(tmp_path / "s"), *prior])
    assert res.exit_code == 0, res.output
    a = pd.read_csv(est)
    s = pd.read_csv(tmp_path / "s" / "section.csv")
    post = s[s["interval_kind"] == "posterior"]
    assert len(post) == 2 * 14 + 14            # one per file and paleosol, and combined
    by = a.set_index(["paleosol_id", "function_id"])
    for r in post.itertuples(index=False):
        ref = by.loc[(r.paleosol_id, r.function_id)]
        if r.function_id == "posterior":       # all proxies together: apply's own row
            want = (ref["estimate"], ref["lower"], ref["upper"])
        else:                                   # one proxy: its file's posterior columns
            want = (ref["posterior_median"], ref["posterior_lower"], ref["posterior_upper"])
        assert (r.estimate, r.lower, r.upper) == want
    # the frequentist interval of each file stays beside its posterior
    freq = s[s["interval_kind"] != "posterior"]
    assert len(freq) == 28 and set(freq["function_id"]) == {"map_from_bk_depth_cm",
                                                             "map_from_bk_thickness_cm"}
    assert (freq["interval_kind"] == "prediction").sum() >= 27
    # the prior reached the posterior: the default prior gives other numbers
    res = runner.invoke(main, ["section", *files, "--fossils", DEMO, "--out",
                               str(tmp_path / "d"), "--posterior"])
    assert res.exit_code == 0, res.output
    d = pd.read_csv(tmp_path / "d" / "section.csv")
    d = d[d["interval_kind"] == "posterior"]
    assert not np.allclose(d["estimate"].to_numpy(), post["estimate"].to_numpy())
    for name in ("section-murrenhal-bluff.png", "section-coldstave-gorge.png"):
        assert (tmp_path / "s" / name).is_file()


def test_section_prior_without_posterior_is_a_usage_error(tmp_path):
    files = forward_files(tmp_path)
    res = CliRunner().invoke(main, ["section", *files, "--fossils", DEMO, "--out",
                                    str(tmp_path / "s"), "--prior", "uniform:100:1500"])
    assert res.exit_code == 2 and "add --posterior" in res.output
    res = CliRunner().invoke(main, ["section", *files, "--fossils", DEMO, "--out",
                                    str(tmp_path / "s"), "--posterior", "--prior", "flat"])
    assert res.exit_code == 2 and "uniform:LOW:HIGH or normal:MEAN:SD" in res.output
    assert not (tmp_path / "s").exists() and "Traceback" not in res.output
