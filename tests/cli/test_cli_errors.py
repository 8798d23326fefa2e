"""The command line's error contract under attack: exit codes, one `Error:` line, no
numpy warnings on stderr.

Exit codes are refit's contract (README, "Exit codes"; rasterio's CLI convention): 0
success, 1 invalid data or a failure, 2 usage error or unreadable input. Every case runs
in-process through click's CliRunner, which captures stdout and stderr together.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest

from _harness import LINEAR, cli, make_fits, recipe_toml
from refit.published import path as published_path

BK = published_path("map_from_bk_depth.retallack1994")


@pytest.mark.parametrize("args, words", [
    (["fit"], "Missing argument 'RECIPE'"),
    (["verify", "--tolerance", "x", "f.json"], "'--tolerance'"),
    (["nosuch"], "No such command 'nosuch'"),
    (["fit", "r.toml", "--format", "x"], "'x' is not one of 'text', 'json', 'csv'"),
    (["fit", "r.toml", "--colour"], "No such option '--colour'"),
    (["publish", "f.json"], "Missing option '--to'"),
    (["diff", "a.json"], "Missing argument 'FILE_B'"),
    (["diff", "a.json", "1.0.0", "--variant", "mixed"], "give --registry REGISTRY too"),
])
def test_a_usage_error_is_one_error_line_with_a_fix(args, words):
    code, out = cli(*args)
    assert code == 2
    lines = out.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("Error: ") and words in lines[0], out
    assert "--help" in lines[0] and "usage: " in lines[0]


def test_help_and_version_still_exit_0():
    code, out = cli("--version")
    assert code == 0 and "refit" in out
    code, out = cli("verify", "--help")
    assert code == 0 and out.startswith("Usage: ") and "verify [OPTIONS] TARGET" in out


@pytest.mark.parametrize("jobs", ["0", "5000", "-2"])
def test_jobs_outside_its_range_is_a_usage_error(jobs, tmp_path):
    recipe = tmp_path / "r.toml"
    recipe.write_text(recipe_toml())
    code, out = cli("fit", recipe, "--jobs", jobs)
    assert code == 2 and out.startswith("Error: Invalid value for '--jobs'"), out
    assert len(out.strip().splitlines()) == 1


def test_fit_exits_1_when_no_candidate_could_be_fitted(tmp_path):
    # every soil has the same Bk depth: no slope can be fitted by any candidate
    rows = ["profile_id,latitude,longitude,source,map_mm,bk_depth_cm,bk_thickness_cm"]
    rows += [f"P{i},{-40 + i / 100},{53 + i / 100},S{i % 3},{300 + (i * 37) % 90},50,20"
             for i in range(30)]
    (tmp_path / "soils.csv").write_text("\n".join(rows) + "\n")
    recipe = tmp_path / "r.toml"
    recipe.write_text(recipe_toml(data={"store": None, "table": "soils.csv"},
                                  validation={"scheme": "kfold", "folds": 5, "seed": 1}))
    code, out = cli("fit", recipe, "--out", tmp_path / "run")
    assert code == 1, out
    assert out.startswith("Error: ") and "no candidate could be fitted (2 tried)" in out
    assert "constant" in out and "Run written" not in out
    assert not (tmp_path / "run").exists()


@pytest.fixture(scope="module")
def fits(tmp_path_factory):
    return make_fits(tmp_path_factory.mktemp("warn"))


def test_no_numpy_warning_leaks_from_apply_compare_diff(fits, tmp_path):
    fossils = tmp_path / "fossils.csv"
    fossils.write_text("paleosol_id,bk_depth_cm\nA,1e200\nB,1e300\nC,-1e308\nD,40\n")
    runs = [("apply", BK, "--fossils", fossils, "--out", tmp_path / "a.csv"),
            ("apply", fits / LINEAR, "--fossils", fossils, "--out", tmp_path / "b.csv"),
            ("compare", BK, fits / LINEAR, "--at", "bk_depth_cm=1e300",
             "--out", tmp_path / "c"),
            ("diff", BK, fits / LINEAR, "--at", "1e300", "--at", "-1e308"),
            ("diff", fits / LINEAR, fits / LINEAR.replace("linear", "quadratic"),
             "--at", "1e200")]
    for args in runs:
        with warnings.catch_warnings():
            warnings.simplefilter("error")          # a warning would now be an exception
            with np.errstate(all="warn"):
                code, out = cli(*args)
        # apply exits 1 when a row is rejected by the fossil-table checks (0-1000 cm)
        # compare exits 2 when no paleosol has an estimate to draw
        expected = {"apply": 1, "compare": 2, "diff": 0}[args[0]]
        assert code == expected, (args, out[-400:])
        assert "Warning" not in out and "overflow" not in out and "unexpected" not in out


@pytest.mark.parametrize("verb", ["init", "compare", "section", "apply", "report", "fit"])
@pytest.mark.parametrize("where", ["under-a-file", "proc"])
def test_an_output_path_that_cannot_be_made_is_one_line_and_exit_2(fits, tmp_path, verb,
                                                                    where):
    # before: 'unexpected FileNotFoundError ... This is a refit bug' (found by trying
    # --out under /proc and under a file); exit 2 is the contract's "usage" code
    blocker = tmp_path / "a-file.txt"
    blocker.write_text("x")
    out = (blocker / "out") if where == "under-a-file" else "/proc/refit-cannot-be-here"
    fossils = tmp_path / "fossils.csv"
    fossils.write_text("paleosol_id,section,level_m,bk_depth_cm\nA,S1,1,40\nB,S1,2,60\n")
    run_dir = fits.parent
    recipe = run_dir.parent / "trial-recipe.toml"
    recipe.write_text(recipe_toml(data={"store": "store"}), "utf-8")
    args = {"init": ["init", run_dir.parent / "store", "--out", f"{out}.toml"],
            "compare": ["compare", fits / LINEAR, "--at", "bk_depth_cm=50", "--out", out],
            "section": ["section", fits / LINEAR, "--fossils", fossils, "--out", out],
            "apply": ["apply", fits / LINEAR, "--fossils", fossils, "--out", f"{out}.csv"],
            "report": ["report", run_dir, "--out", f"{out}.html"],
            "fit": ["fit", recipe, "--out", out]}[verb]
    code, text = cli(*args)
    lines = text.strip().splitlines()
    assert code == 2, text
    assert lines[-1].startswith("Error: ") and "refit bug" not in text, text
    assert "cannot be written" in lines[-1] or "check the paths" in lines[-1], text


def test_a_missing_registry_names_the_command_that_starts_one(tmp_path):
    # before: `refit diff ... --registry nope` advised "pass --init", an option diff lacks
    code, out = cli("diff", "map_from_bk_depth", "1.0.0", "--registry", tmp_path / "nope")
    assert code == 2 and "refit publish FIT --to PATH --init" in out, out
    assert "pass --init" not in out
