"""The fit matrix: valid combinations, AIC/BIC, the ranking rule, the run folder, and
reproducibility. Data are invented (seeded) soils with a regional offset per source."""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from _harness import invented_soils, recipe_toml
from refit.validate.candidates import (
    Spec,
    candidate_grid,
    coverage_tolerance,
    explain,
    impossible_reason,
    information_criteria,
    rank_candidates,
    run_matrix,
    run_recipe,
)
from refit.select.recipe import read_recipe
from refit.validate.runfolder import fit_filename, write_run


# ----------------------------------------------------------------------------- data
def soils(n=60, seed=7, n_sources=5) -> pd.DataFrame:
    """Invented soils: MAP rises with Bk depth, each source with its own offset."""
    return invented_soils(n, seed, [-60, -20, 0, 30, 70, 10, -40][:n_sources], forest_every=4)


def write_case(folder, *, scheme="group-kfold", repeats=1, n=60):
    soils(n).to_csv(folder / "soils.csv", index=False)
    grouped = scheme in ("group-kfold", "leave-one-group-out")
    path = folder / "recipe.toml"
    path.write_text(recipe_toml(
        data={"store": None, "table": "soils.csv"}, subset={"vegetation": "grassland"},
        candidates={"estimators": ["ols", "huber", "theil-sen"],
                    "directions": ["inverse", "forward"]},
        validation={"scheme": scheme, "folds": 3, "repeats": repeats,
                    "groups": "source" if grouped else None, "seed": 11},
        intervals={"level": 0.9, "methods": ["analytic", "split-conformal", "jackknife+"]}),
        encoding="utf-8")
    return path


# ----------------------------------------------------------------------------- the grid
@pytest.mark.parametrize("combo, fragment", [
    (("quadratic", "theil-sen", "inverse", "analytic", 1), "straight lines"),
    (("linear", "ols", "inverse", "quantile", 1), "quantile curves"),
    (("linear", "ols", "forward", "split-conformal", 1), "classical-calibration"),
    (("linear", "quantile", "inverse", "analytic", 1), "own interval from the quantile"),
    (("linear", "ols", "forward", "analytic", 2), "inverts one feature"),
    (("linear", "wls", "inverse", "analytic", 1), "weights column"),
])
def test_impossible_combinations_name_their_reason(combo, fragment):
    assert fragment in impossible_reason(*combo)


@pytest.mark.parametrize("combo", [
    ("linear", "theil-sen", "inverse", "analytic", 1),  # bootstrap covariance, approximate
    ("linear", "ols", "inverse", "jackknife+", 1), ("quadratic", "huber", "forward",
                                                   "analytic", 1),
    ("linear", "quantile", "inverse", "quantile", 2), ("exponential", "ols", "inverse",
                                                      "cv+", 1)])
def test_possible_combinations_pass(combo):
    assert impossible_reason(*combo) is None


@pytest.mark.parametrize("estimator", ["huber", "theil-sen", "quantile", "york"])
@pytest.mark.parametrize("method", ["bootstrap", "split-conformal", "jackknife+", "cv+"])
def test_robust_and_york_fits_get_every_resampling_interval(estimator, method):
    # each refit uses the estimator itself (refit.models.refitted), like OLS's
    assert impossible_reason("linear", estimator, "inverse", method, 1, sds=True) is None


def test_mixed_and_york_keep_their_limits():
    # a mixed fit's resampling interval and York's group-level ones stay refused, named
    why = impossible_reason("linear", "mixed", "inverse", "jackknife+", 1, groups="source")
    assert "refits the estimator on resampled rows" in why and "'mixed'" in why
    why = impossible_reason("linear", "york", "inverse", "group-cv+", 1, groups="source",
                            sds=True)
    assert "measurement SDs" in why


def test_grid_of_the_demo_recipe():
    # 2 forms x 3 estimators x 2 directions x 3 methods = 36 combinations; valid: OLS and
    # Huber inverse with all 3 methods (x2 forms = 12), mixed inverse analytic (2), OLS,
    # Huber and mixed forward analytic (6): 20.
    specs, skipped = candidate_grid(read_recipe("calib_demo/recipe.toml"))
    assert len(specs) == 20 and len(skipped) == 16
    assert {s.estimator for s in specs} == {"ols", "huber", "mixed"}
    assert all("theil-sen" not in s.label for s in specs)
    assert {s.n_params for s in specs if s.form == "quadratic"} == {3}


# ----------------------------------------------------------------------------- AIC / BIC
def test_information_criteria_match_statsmodels():
    # statsmodels OLSResults.aic/bic (reference library) on the same residuals
    sm = pytest.importorskip("statsmodels.api")
    d = soils(40)
    X = sm.add_constant(np.column_stack([d.bk_depth_cm, d.bk_depth_cm ** 2]))
    res = sm.OLS(d.map_mm.to_numpy(), X).fit()
    aic, bic = information_criteria(res.resid, 3)
    assert aic == pytest.approx(res.aic, rel=1e-12)
    assert bic == pytest.approx(res.bic, rel=1e-12)


# ----------------------------------------------------------------------------- ranking
def _board():
    return pd.DataFrame({
        "candidate": ["A", "B", "C", "D", "E"],
        "n_params": [2, 3, 2, 3, 2],
        "coverage": [0.80, 0.95, 0.93, 0.96, 0.95],
        "interval_score": [10.0, 20.0, 21.0, 30.0, 25.0],
        "mean_width": [5.0, 15.0, 16.0, 25.0, 19.0], "rmsep": [4.0, 5.0, 5.1, 6.0, 5.5]})


def test_ranking_rule_on_a_constructed_example():
    # n = 100 soils at 0.95: the least coverage not shown to fall short is 91/100 (the
    # one-sided exact binomial bound; scipy.stats.binomtest checks it in test_skill.py), so
    # the tolerance is 4 points. A has the best score but coverage 0.80: it falls short
    # and is ranked last. Among those that cover, B (20), C (21), E (25), D (30); C is simpler than B (2 < 3 coefficients)
    # and within 5 % of its score (21 <= 21): named as the simpler choice; E is simpler
    # but 25 % worse.
    board, tol = rank_candidates(_board(), 0.95, 100)
    assert 0.04 <= tol < 0.05   # 91 of 100 passes and 90 does not

    assert list(board.candidate) == ["B", "C", "E", "D", "A"]
    assert list(board["rank"]) == [1, 2, 3, 4, 5]
    assert list(board.coverage_ok) == [True, True, True, True, False]
    v = explain(board, 0.95, tol, "group-kfold")
    assert v["winner"] == "B" and v["simpler"] == "C"
    assert "lowest mean interval score (20)" in v["why"] and "5.0%" in v["simpler_why"]
    # with the response's unit, every number of the verdict carries it
    with_unit = explain(board, 0.95, tol, "group-kfold", unit="mm")["why"]
    assert "lowest mean interval score (20 mm)" in with_unit
    assert "mean width 15 mm, RMSEP 5 mm" in with_unit


def test_ties_go_to_fewer_coefficients_and_no_simpler_when_far():
    b = _board().assign(interval_score=[10.0, 20.0, 20.0, 30.0, 40.0])
    board, _ = rank_candidates(b.iloc[1:], 0.95, 100)
    assert list(board.candidate[:2]) == ["C", "B"]
    far = _board().assign(interval_score=[10.0, 20.0, 22.0, 30.0, 25.0])
    board, tol = rank_candidates(far, 0.95, 100)
    v = explain(board, 0.95, tol, "kfold")
    # C, the best with fewer coefficients, is 22 / 20 - 1 = 10 % worse
    assert v["simpler"] is None and "C, scores 10.0% worse" in v["simpler_why"]


def test_coverage_tolerance_is_one_sided_and_shrinks_with_n():
    # scipy.stats.binomtest (reference library): the least passing coverage k/n is the
    # smallest k whose exact one-sided test of "coverage >= 0.95" is not rejected at 5 %
    from scipy.stats import binomtest

    for n in (10, 100, 187, 1000):
        tol = coverage_tolerance(0.95, n)
        k = math.ceil((0.95 - tol) * n - 1e-9)   # the least whole count that passes
        assert binomtest(k, n, 0.95, alternative="less").pvalue >= 0.05
        assert binomtest(k - 1, n, 0.95, alternative="less").pvalue < 0.05
    assert coverage_tolerance(0.95, 10) > coverage_tolerance(0.95, 100) \
        > coverage_tolerance(0.95, 1000) > 0
    # a 90 % interval (twice the promised miss rate) on 187 soils does not pass
    board, _ = rank_candidates(_board().assign(coverage=[0.90] * 5), 0.95, 187)
    assert not board.coverage_ok.any()


def test_an_under_covering_interval_never_outranks_one_that_covers():
    b = pd.DataFrame({"candidate": ["narrow", "honest"], "n_params": [2, 3],
                      "coverage": [0.90, 0.95], "interval_score": [1.0, 100.0]})
    board, _ = rank_candidates(b, 0.95, 250)
    assert list(board.candidate) == ["honest", "narrow"]
    assert list(board.coverage_ok) == [True, False]


def test_no_calibrated_candidate_is_said_plainly():
    b = _board().assign(coverage=[0.5, 0.6, 0.7, 0.6, 0.5])
    board, tol = rank_candidates(b, 0.95, 100)
    v = explain(board, 0.95, tol, "kfold")
    assert board.candidate[0] == "A" and "unreliable" in v["why"]


# ----------------------------------------------------------------------------- a run
def test_run_matrix_columns_and_oof_rows(tmp_path):
    rec = read_recipe(write_case(tmp_path, scheme="kfold", repeats=2))
    run = run_recipe(rec)
    m = run.matrix
    n = len(run.subset.frame)
    assert n == 45  # 60 soils, every 4th under forest
    assert len(m.specs) == 20 and m.schemes["kfold"] is None
    cols = {"candidate", "form", "estimator", "direction", "interval_method", "rmsep", "mae",
            "bias", "coverage", "mean_width", "interval_score", "n", "r2_in_sample",
            "residual_se", "aic", "bic", "rank", "coverage_ok"}
    assert cols <= set(m.leaderboard.columns)
    per = m.predictions.groupby("candidate").size()
    assert (per == n * 2).all() and len(per) == 20   # k-fold: n rows x 2 repeats each
    assert set(m.leaderboard.n) == {n * 2}


def test_grouped_run_shows_random_kfold_beside(tmp_path):
    run = run_recipe(read_recipe(write_case(tmp_path)))
    board = run.matrix.leaderboard
    assert run.matrix.schemes["kfold"].name == "kfold"
    assert board.kfold_rmsep.notna().all()
    assert np.allclose(board.rmsep_ratio, board.rmsep / board.kfold_rmsep)
    assert set(run.matrix.predictions.scheme) == {"group-kfold", "kfold"}


def test_same_recipe_data_and_seed_give_identical_numbers(tmp_path):
    rec = read_recipe(write_case(tmp_path))
    a = run_recipe(rec).matrix
    b = run_recipe(rec).matrix
    pd.testing.assert_frame_equal(a.leaderboard, b.leaderboard, check_exact=True)
    pd.testing.assert_frame_equal(a.predictions, b.predictions, check_exact=True)


def test_run_folder_reopened(tmp_path):
    rec = read_recipe(write_case(tmp_path))
    run = run_recipe(rec)
    out = write_run(run, tmp_path / "run", argv=["refit", "fit", "recipe.toml"])
    board = pd.read_csv(out / "leaderboard.csv")
    assert list(board.candidate) == list(run.matrix.leaderboard.candidate)
    assert board.interval_score.is_monotonic_increasing or not board.coverage_ok.all()
    doc = json.loads((out / "leaderboard.json").read_text())
    assert doc["verdict"]["winner"] == board.candidate[0]
    assert len(doc["rows"]) == 20 and len(doc["skipped"]) == 16
    oof = pd.read_csv(out / "oof_predictions.csv")
    assert list(oof.columns[:11]) == ["candidate", "scheme", "row", "profile_id", "repeat",
                                      "fold", "observed", "estimate", "lower", "upper",
                                      "flags"]
    fits = sorted(p.name for p in (out / "fits").iterdir())
    assert fits == sorted(fit_filename(c) for c in board.candidate)
    rec1 = json.loads((out / "fits" / fit_filename("quadratic__ols__inverse__analytic"))
                      .read_text())
    for key in ("schema_version", "function_id", "version", "created", "response",
                "predictors", "direction", "form", "estimator", "terms", "coefficients",
                "covariance", "residual_std_error", "df_resid", "n", "r_squared", "interval",
                "cv", "domain", "provenance", "cautions", "sha256"):
        assert key in rec1, key
    assert rec1["version"] == "0.0.0-candidate"
    assert rec1["terms"] == ["intercept", "bk_depth_cm", "bk_depth_cm^2"]
    assert rec1["response"] == {"name": "map_mm", "unit": "mm"}
    assert rec1["predictors"][0]["unit"] == "cm"
    assert rec1["n"] == 45 and rec1["df_resid"] == 42
    assert rec1["provenance"]["dataset"]["sha256"] == run.data["sha256"]
    assert rec1["interval"]["t_quantile"] == pytest.approx(1.68195235747, rel=1e-10)  # t(0.95, 42): scipy.stats.t.ppf
    row = board.set_index("candidate").loc["quadratic__ols__inverse__analytic"]
    assert rec1["cv"]["interval_score"] == pytest.approx(row.interval_score, rel=1e-12)
    run_doc = json.loads((out / "run.json").read_text())
    assert run_doc["seed"] == 11 and run_doc["dataset"]["kind"] == "table"
    assert run_doc["command"] == ["refit", "fit", "recipe.toml"]


def test_conformal_record_rebuilds_the_full_fit_interval(tmp_path):
    # the record's centre coefficients and quantile give the interval refit itself gives
    run = run_recipe(read_recipe(write_case(tmp_path)))
    out = write_run(run, tmp_path / "run")
    rec = json.loads((out / "fits" / fit_filename("linear__ols__inverse__split-conformal"))
                     .read_text())
    f = run.matrix.fits["linear__ols__inverse__split-conformal"]
    p = f.predict([50.0, 100.0], level=0.9, interval="split-conformal", seed=11)
    b, q = np.array(rec["interval"]["centre_coefficients"]), rec["interval"]["quantile"]
    centre = b[0] + b[1] * np.array([50.0, 100.0])
    assert np.allclose(p["lower"], centre - q) and np.allclose(p["upper"], centre + q)


def test_spec_label():
    s = Spec("cubic", "polynomial", 3, "ols", "inverse", "jackknife+", 4)
    assert s.label == "cubic__ols__inverse__jackknife+" and s.interval == "jackknife+"
    assert fit_filename(s.label) == "cubic__ols__inverse__jackknife+.json"


def test_run_matrix_keeps_going_when_one_candidate_fails(tmp_path):
    # 6 rows in 3 folds leave 4 training rows: too few for a quadratic's split-conformal,
    # jackknife+ and Huber fits (5 needed: 3 coefficients + 2) and for a linear
    # split-conformal (3 training + 1 calibration row); those fail with the engine's reason
    # and the rest are ranked. Robust estimators' conformal intervals refit the estimator
    # on the training part (2 rows) or each leave-one-out set (3 rows): too few for Huber
    # (p + 2) and for a split Theil-Sen line.
    rec = read_recipe(write_case(tmp_path, scheme="kfold"))
    res = run_matrix(soils(60).iloc[:6], rec)
    failed = {s["candidate"]: s["reason"] for s in res.skipped
              if s["reason"].startswith("failed")}
    assert set(failed) == {"linear__ols__inverse__split-conformal",
                           "quadratic__ols__inverse__split-conformal",
                           "quadratic__ols__inverse__jackknife+",
                           "quadratic__huber__inverse__analytic",
                           "quadratic__huber__forward__analytic",
                           "linear__huber__inverse__split-conformal",
                           "linear__huber__inverse__jackknife+",
                           "linear__theil-sen__inverse__split-conformal",
                           "quadratic__huber__inverse__split-conformal",
                           "quadratic__huber__inverse__jackknife+"}
    assert "at least 5 rows are needed" in failed["quadratic__huber__inverse__analytic"]
    assert "at least 4 rows are needed" in failed["linear__huber__inverse__jackknife+"]
    assert len(res.specs) == 10 and len(res.leaderboard) == 10


@pytest.mark.parametrize("scheme, repeats", [("loo", 1), ("leave-one-group-out", 1),
                                             ("spatial-block", 2)])
def test_every_scheme_runs_with_random_kfold_beside(tmp_path, scheme, repeats):
    # every row is predicted once per repeat under each scheme (leave-one-out and
    # leave-one-group-out have one repeat by construction)
    rec = read_recipe(write_case(tmp_path, scheme=scheme, repeats=repeats))
    m = run_recipe(rec).matrix
    n = m.n
    per = m.predictions.groupby(["candidate", "scheme"]).size()
    assert per.xs(scheme, level="scheme").eq(n * repeats).all()
    assert per.xs("kfold", level="scheme").eq(n * repeats).all()
    assert m.schemes["kfold"].folds == 3 and len(m.leaderboard) == 20
    if scheme == "spatial-block":
        assert m.split_details["main"]["block_km"] > 0   # the block size is reported
