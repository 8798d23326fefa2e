"""`refit fit` through click's test runner: exit code first, then the files written.

Data are invented: seeded soils for the table cases, the demo store (calib_demo/) copied
into a temporary folder for the store cases."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from _harness import invented_soils
from refit.cli.fit import fit

DEMO = Path(__file__).resolve().parents[2] / "calib_demo"


def soils(n=48, seed=3, n_sources=4) -> pd.DataFrame:
    """Invented soils: MAP rises with Bk depth; each source has its own offset."""
    return invented_soils(n, seed, [25 * s for s in range(n_sources)])


TABLE_RECIPE = """\
[data]
table = "soils.csv"

[subset]
age_ka = {{ min = {min_age} }}

[function]
id = "map_from_bk_depth"
response = "map_mm"
predictors = ["{predictor}"]

[candidates]
forms = ["linear", "quadratic"]
estimators = ["ols", "huber"]
directions = ["inverse", "forward"]

[validation]
scheme = "{scheme}"
folds = {folds}
{groups}
seed = 5

[intervals]
level = 0.9
methods = ["analytic", "jackknife+"]
"""


def table_case(folder: Path, *, min_age=0, predictor="bk_depth_cm", scheme="group-kfold",
               folds=3, groups="source", data=None) -> Path:
    (data if data is not None else soils()).to_csv(folder / "soils.csv", index=False)
    text = TABLE_RECIPE.format(min_age=min_age, predictor=predictor, scheme=scheme,
                               folds=folds, groups=f'groups = "{groups}"' if groups else "")
    path = folder / "recipe.toml"
    path.write_text(text, encoding="utf-8")
    return path


def invoke(*args):
    return CliRunner().invoke(fit, [str(a) for a in args])


def no_traceback(result):
    assert "Traceback" not in result.output
    assert result.exception is None or isinstance(result.exception, SystemExit)


# ----------------------------------------------------------------------------- success
def test_table_recipe_writes_the_run_folder(tmp_path):
    recipe = table_case(tmp_path)
    out = tmp_path / "run"
    r = invoke(recipe, "--out", out)  # -q would print nothing but errors
    assert r.exit_code == 0, r.output
    # 2 forms x 2 estimators x 2 directions x 2 methods = 16; valid: OLS and Huber inverse
    # x 2 methods x 2 forms (8; Huber's resampling interval refits Huber), OLS/Huber
    # forward analytic (4) = 12
    board = pd.read_csv(out / "leaderboard.csv")
    assert len(board) == 12 and list(board["rank"]) == list(range(1, 13))
    assert len(list((out / "fits").glob("*.json"))) == 12
    oof = pd.read_csv(out / "oof_predictions.csv")
    assert set(oof.scheme) == {"group-kfold", "kfold"}
    assert (oof.groupby(["candidate", "scheme"]).size() == 48).all()
    run = json.loads((out / "run.json").read_text())
    sha = run["dataset"]["sha256"]
    assert sha == __import__("hashlib").sha256((tmp_path / "soils.csv").read_bytes()).hexdigest()
    # the printed run: data hash, leaderboard, verdict, caution
    assert sha in r.stdout and "Leaderboard: map_from_bk_depth" in r.stdout
    assert f"{board.candidate[0]} has the lowest mean interval score" in r.stdout
    # the scores, widths and errors carry the response's unit (schemas/: map_mm is in mm)
    assert "(group-kfold; RMSEP, bias, width and score in mm)" in " ".join(r.stdout.split())
    top = board.iloc[0]
    assert f"lowest mean interval score ({top.interval_score:.4g} mm)" in \
        " ".join(r.stdout.split())
    assert "not for engineering, hazard or regulatory decisions" in r.stdout
    assert f"Run written to {out}" in r.stdout


def test_same_recipe_twice_gives_identical_leaderboards(tmp_path):
    recipe = table_case(tmp_path)
    a, b = invoke(recipe, "--out", tmp_path / "a", "-q"), invoke(recipe, "--out",
                                                                  tmp_path / "b", "-q")
    assert a.exit_code == 0 and b.exit_code == 0
    assert (tmp_path / "a" / "leaderboard.csv").read_bytes() == \
        (tmp_path / "b" / "leaderboard.csv").read_bytes()
    assert (tmp_path / "a" / "oof_predictions.csv").read_bytes() == \
        (tmp_path / "b" / "oof_predictions.csv").read_bytes()


def test_two_jobs_give_the_serial_numbers(tmp_path):
    recipe = table_case(tmp_path)
    a = invoke(recipe, "--out", tmp_path / "a", "-q")
    b = invoke(recipe, "--out", tmp_path / "b", "-q", "--jobs", "2")
    assert a.exit_code == 0 and b.exit_code == 0, b.output
    assert (tmp_path / "a" / "leaderboard.csv").read_bytes() == \
        (tmp_path / "b" / "leaderboard.csv").read_bytes()


def test_existing_run_folder_needs_overwrite(tmp_path):
    recipe = table_case(tmp_path)
    out = tmp_path / "run"
    out.mkdir()
    (out / "keep.txt").write_text("mine")
    r = invoke(recipe, "--out", out, "-q")
    assert r.exit_code == 2 and "--overwrite" in r.output
    assert (out / "keep.txt").read_text() == "mine"
    r = invoke(recipe, "--out", out, "-q", "--overwrite")
    assert r.exit_code == 0
    assert not (out / "keep.txt").exists() and (out / "leaderboard.csv").is_file()
    assert not [p for p in tmp_path.iterdir() if p.name.startswith(".tmp-")]


@pytest.fixture
def demo(tmp_path, demo_store):
    """The demo store and recipe copied into a temporary folder."""
    shutil.copy(DEMO / "recipe.toml", tmp_path / "recipe.toml")
    return tmp_path


def test_demo_recipe_on_the_store(demo):
    # The demo recipe as shipped (grouped 5-fold by source), with 2 repeats instead of 5 to
    # keep the test short.
    recipe = demo / "recipe.toml"
    recipe.write_text(recipe.read_text().replace("repeats = 5", "repeats = 2"))
    r = invoke(recipe, "--out", demo / "run")
    assert r.exit_code == 0, r.output
    manifest = json.loads((demo / "store" / "manifest.json").read_text())
    assert f"dataset version {manifest['version']}" in r.stdout
    assert manifest["records_sha256"] in r.stdout
    assert "age_ka >= 5: 126 kept" in r.stdout and "113 kept" in r.stdout
    assert "group-kfold 5 folds x 2 repeat(s) by source, seed 20261201 (8 groups)" in r.stdout
    board = pd.read_csv(demo / "run" / "leaderboard.csv")
    assert len(board) >= 12
    rec = json.loads(next((demo / "run" / "fits").glob("*.json")).read_text())
    assert rec["provenance"]["dataset"]["version"] == manifest["version"]
    assert rec["provenance"]["dataset"]["sha256"] == manifest["records_sha256"]


# ----------------------------------------------------------------------------- bad input
def test_more_folds_than_groups(demo):
    # the demo subset has 8 sources; 9 grouped folds cannot be made
    recipe = demo / "recipe.toml"
    recipe.write_text(recipe.read_text().replace("folds = 5", "folds = 9"))
    r = invoke(recipe, "--out", demo / "run", "-q")
    assert r.exit_code == 1
    no_traceback(r)
    line = next(i for i, text in enumerate(recipe.read_text().splitlines(), 1)
                 if text.startswith("scheme"))   # the message names the scheme line
    assert f"recipe.toml, line {line}" in r.output
    assert "9 folds needs at least 9 groups" in r.output
    assert "holds 8" in r.output and not (demo / "run").exists()


def test_invalid_toml(tmp_path):
    recipe = table_case(tmp_path)
    recipe.write_text(recipe.read_text().replace('scheme = "group-kfold"',
                                                 "scheme = group-kfold"))
    r = invoke(recipe, "-q")
    assert r.exit_code == 2
    no_traceback(r)
    assert "not valid TOML" in r.output and "line 18, column 10" in r.output


def test_unknown_key(tmp_path):
    recipe = table_case(tmp_path)
    recipe.write_text(recipe.read_text().replace("seed = 5", "seeds = 5"))
    r = invoke(recipe, "-q")
    assert r.exit_code == 2
    no_traceback(r)
    assert "line 21: unknown key 'seeds' in [validation]" in r.output


def test_predictor_missing_from_the_table(tmp_path):
    r = invoke(table_case(tmp_path, predictor="by_depth_cm"), "-q")
    assert r.exit_code == 1
    no_traceback(r)
    assert "line 10: [function] predictors names column 'by_depth_cm'" in r.output


def test_subset_too_small(tmp_path):
    # age >= 48 ka keeps 2 of the 48 invented soils; the quadratic needs 3 + 2 = 5 rows
    data = soils()
    keep = int((data.age_ka >= 48).sum())
    r = invoke(table_case(tmp_path, min_age=48, data=data), "-q")
    assert r.exit_code == 1
    no_traceback(r)
    assert f"the subset keeps {keep} row(s)" in r.output and "needs at least 5" in r.output
    assert f"age_ka >= 48 -> {keep}" in r.output


def test_single_group_column(tmp_path):
    data = soils().assign(source="SRC-A")
    r = invoke(table_case(tmp_path, data=data), "-q")
    assert r.exit_code == 1
    no_traceback(r)
    assert "single group" in r.output and "line 18" in r.output


def test_missing_recipe_and_missing_store(tmp_path):
    r = invoke(tmp_path / "none.toml", "-q")
    assert r.exit_code == 2 and "recipe file not found" in r.output
    (tmp_path / "r.toml").write_text('[data]\nstore = "nowhere"\n[function]\nid = "f"\n'
                                     'response = "map_mm"\npredictors = "bk_depth_cm"\n')
    r = invoke(tmp_path / "r.toml", "-q")
    assert r.exit_code == 2
    no_traceback(r)
    assert "line 2" in r.output and "not a refit store" in r.output


def test_table_that_fails_its_check(tmp_path):
    data = soils()
    data.loc[3, "latitude"] = 123.0   # beyond +-90 degrees
    r = invoke(table_case(tmp_path, data=data), "-q")
    assert r.exit_code == 1
    no_traceback(r)
    assert "has 1 error(s) in 1 row(s)" in r.output and "refit check" in r.output


def test_store_given_on_the_command_line_may_lie_outside_the_recipe_folder(demo, tmp_path):
    # a recipe may not name data outside its folder, but the user may (issue: paths in
    # recipes cannot escape their folder unless passed on the command line)
    recipes = tmp_path / "recipes"
    recipes.mkdir()
    text = (demo / "recipe.toml").read_text().replace('store = "store"',
                                                      'store = "../store"')
    text = text.replace("repeats = 5", "repeats = 1")
    (recipes / "r.toml").write_text(text)
    refused = invoke(recipes / "r.toml", "--out", tmp_path / "run0", "-q")
    assert refused.exit_code == 2 and "outside" in refused.output
    r = invoke(recipes / "r.toml", "--store", demo / "store", "--out", tmp_path / "run", "-q")
    assert r.exit_code == 0, r.output
    run = json.loads((tmp_path / "run" / "run.json").read_text())
    manifest = json.loads((demo / "store" / "manifest.json").read_text())
    assert run["dataset"]["sha256"] == manifest["records_sha256"]


def test_candidate_files_carry_no_machine_path(demo):
    # coefficient files are published and shared: the data are named by name, version
    # and hash, never by this machine's folder
    recipe = demo / "recipe.toml"
    recipe.write_text(recipe.read_text().replace("repeats = 5", "repeats = 1"))
    r = invoke(recipe, "--out", demo / "run", "-q")
    assert r.exit_code == 0, r.output
    for f in (demo / "run" / "fits").glob("*.json"):
        text = f.read_text()
        assert str(demo) not in text and str(demo.resolve()) not in text
        assert set(json.loads(text)["provenance"]["dataset"]) >= {"name", "version", "sha256"}


# ----------------------------------------------------------------------------- new sources
def test_grouped_defaults_and_unbounded_intervals_are_printed(tmp_path):
    # groups named, no scheme, estimators or methods: the documented defaults; 8 sources,
    # 4 training sources per fold of group 2-fold at level 0.9: group-level conformal
    # limits infinite (4 / 5 < 0.9), said with the reason
    soils(64, n_sources=8).to_csv(tmp_path / "soils.csv", index=False)
    path = tmp_path / "recipe.toml"
    path.write_text('[data]\ntable = "soils.csv"\n\n[function]\nid = "map_from_bk_depth"\n'
                    'response = "map_mm"\npredictors = ["bk_depth_cm"]\n\n[validation]\n'
                    'groups = "source"\nfolds = 2\n\n[intervals]\nlevel = 0.9\n',
                    encoding="utf-8")
    out = tmp_path / "run"
    r = invoke(path, "--out", out)
    assert r.exit_code == 0, r.output
    assert "Default: scheme defaults to 'group-kfold'" in r.stdout
    assert "Default: estimators default to 'ols' and 'mixed'" in r.stdout
    # both group-level methods are unbounded for one reason: one line names both
    unbounded = [line for line in r.stdout.splitlines() if line.startswith("Unbounded:")]
    assert len(unbounded) == 1
    assert "linear__ols__inverse__group-cv+" in unbounded[0]
    assert "linear__ols__inverse__group-jackknife+" in unbounded[0]
    assert " are unbounded (infinite width" in unbounded[0]
    assert r.stdout.count("4 groups are too few for a 90% group-level interval") == 1
    board = pd.read_csv(out / "leaderboard.csv")
    assert {"linear__mixed__inverse__analytic", "linear__ols__inverse__group-cv+"} <= set(
        board["candidate"])
    kept = json.loads((out / "leaderboard.json").read_text())
    assert len(kept["defaults_applied"]) == 3 and len(kept["verdict"]["unbounded"]) == 2
    rec = json.loads((out / "fits" / "linear__ols__inverse__group-cv+.json").read_text())
    assert rec["interval"]["method"] in ("group-cv+", "none")


def test_random_kfold_warning_is_printed_and_kept(tmp_path):
    recipe = table_case(tmp_path, scheme="kfold", groups=None)
    out = tmp_path / "run"
    r = invoke(recipe, "--out", out)
    assert r.exit_code == 0, r.output
    run = json.loads((out / "run.json").read_text())
    ratio = run["source_check"]["rmsep_ratio"]
    assert "Warning: the data have a 'source' column (4 sources)" in r.stdout
    assert f"{ratio:.2f}x random k-fold's" in " ".join(r.stdout.split())
    assert json.loads((out / "leaderboard.json").read_text())["warnings"] == run["warnings"]


def test_bad_weights_are_one_error_line(tmp_path):
    data = soils()
    data["w"] = 1.0
    data.loc[5, "w"] = -2.0
    recipe = table_case(tmp_path, data=data)
    text = recipe.read_text().replace('predictors = ["bk_depth_cm"]',
                                      'predictors = ["bk_depth_cm"]\nweights = "w"')
    recipe.write_text(text.replace('"ols", "huber"', '"ols", "wls"'), encoding="utf-8")
    r = invoke(recipe, "--out", tmp_path / "run", "--quiet")
    no_traceback(r)
    assert r.exit_code == 1 and r.output.startswith("Error:")
    assert "[function] weights = 'w' has a value <= 0 in 1 row(s) of the subset (P005)" in r.output
