"""Recipes for soils from a new source: the mixed estimator and group-level conformal
intervals through run_recipe, the defaults of a grouped recipe, the random k-fold warning,
and weight / measurement-SD columns.

Data are invented (seeded): 10 sources with their own MAP offsets (tests/_harness.py
``invented_soils``). Outside references computed in the tests: statsmodels ``MixedLM``
(REML) and ``WLS``, numpy least squares for the OLS refits of each fold."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from _harness import invented_soils, recipe_toml
from refit.errors import InvalidDataError
from refit.select.recipe import read_recipe
from refit.validate.candidates import run_recipe
from refit.validate.runfolder import write_run

OFFSETS = [-150, -100, -60, -30, 0, 20, 50, 80, 110, 150]   # mm, one per source (invented)


def grouped_table(folder, n=200, seed=14):
    df = invented_soils(n, seed, OFFSETS)
    rng = np.random.default_rng(seed + 1)
    df["w"] = rng.uniform(0.5, 2.0, n).round(3)
    df["bk_sd"] = rng.uniform(2, 6, n).round(2)
    df["map_sd"] = rng.uniform(20, 40, n).round(1)
    df.to_csv(folder / "soils.csv", index=False)
    return df


def write_recipe(folder, name="recipe.toml", **sections):
    sections.setdefault("data", {"store": None, "table": "soils.csv"})
    path = folder / name
    path.write_text(recipe_toml(**sections), encoding="utf-8")
    return path


@pytest.fixture(scope="module")
def grouped_run(tmp_path_factory):
    """A recipe that names groups and nothing else: every default applies."""
    folder = tmp_path_factory.mktemp("grouped")
    df = grouped_table(folder)
    path = write_recipe(folder, candidates={"forms": ["linear"], "estimators": None},
                        validation={"groups": "source", "folds": 5, "seed": 3},
                        intervals={"level": 0.8, "methods": None})
    return df, run_recipe(read_recipe(path))


# ----------------------------------------------------------------------------- defaults
def test_a_grouped_recipe_gets_the_documented_defaults(grouped_run):
    _, run = grouped_run
    r = run.recipe
    assert r.scheme == "group-kfold"
    assert r.estimators == ("ols", "mixed")
    assert r.methods == ("analytic", "group-jackknife+", "group-cv+")
    assert len(r.defaults) == 3 and "group-kfold" in r.defaults[0]
    labels = set(run.matrix.leaderboard["candidate"])
    # the mixed line's own analytic interval is its new-source interval: it gets no
    # group-level conformal interval on top (skipped, with the reason)
    assert labels == {"linear__ols__inverse__analytic", "linear__mixed__inverse__analytic",
                      "linear__ols__inverse__group-jackknife+", "linear__ols__inverse__group-cv+"}
    assert run.source_check is None  # it names groups: no warning


def test_ungrouped_defaults_are_unchanged(tmp_path):
    grouped_table(tmp_path)
    r = read_recipe(write_recipe(tmp_path, candidates={"estimators": None},
                                 intervals={"methods": None}))
    assert (r.scheme, r.estimators, r.methods, r.defaults) == ("kfold", ("ols",),
                                                               ("analytic",), ())


# ----------------------------------------------------------------------------- held-out sources
def test_out_of_fold_coverage_is_of_held_out_sources(grouped_run):
    df, run = grouped_run
    m = run.matrix
    for label in ("linear__mixed__inverse__analytic", "linear__ols__inverse__group-jackknife+",
                  "linear__ols__inverse__group-cv+"):
        p = m.cv[label]["main"].predictions
        src = df["source"].to_numpy()[p["row"].to_numpy()]
        # every source is tested in exactly one fold: whole sources held out
        per_source = pd.Series(p["fold"].to_numpy()).groupby(src).nunique()
        assert (per_source == 1).all() and len(per_source) == 10
        inside = ((p["lower"] <= p["observed"]) & (p["observed"] <= p["upper"])).mean()
        row = m.leaderboard.set_index("candidate").loc[label]
        assert row["coverage"] == pytest.approx(inside, abs=1e-12)
        assert np.isfinite(p[["lower", "upper"]].to_numpy()).all()  # 0.8 with 8 sources


def test_each_mixed_fold_is_fitted_on_its_training_sources(grouped_run):
    # statsmodels MixedLM (REML, random intercept by source) on the training soils of
    # fold 1: its fixed effects give the fold's out-of-fold estimates
    import statsmodels.api as sm

    df, run = grouped_run
    p = run.matrix.cv["linear__mixed__inverse__analytic"]["main"].predictions
    test_rows = p.loc[p["fold"] == 0, "row"].to_numpy()
    train = df.drop(index=test_rows)
    res = sm.MixedLM(train["map_mm"], sm.add_constant(train["bk_depth_cm"]),
                     groups=train["source"]).fit(reml=True)
    expected = res.fe_params.iloc[0] + res.fe_params.iloc[1] * df["bk_depth_cm"].to_numpy()[
        test_rows]
    got = p.loc[p["fold"] == 0, "estimate"].to_numpy()
    assert got == pytest.approx(expected, rel=1e-5)


def test_the_mixed_fit_of_the_whole_subset_matches_statsmodels(grouped_run):
    import statsmodels.api as sm

    df, run = grouped_run
    f = run.matrix.fits["linear__mixed__inverse__analytic"]
    res = sm.MixedLM(df["map_mm"], sm.add_constant(df["bk_depth_cm"]),
                     groups=df["source"]).fit(reml=True)
    assert f.result.coefficients == pytest.approx(res.fe_params.to_numpy(), rel=1e-5)


# ----------------------------------------------------------------------------- unbounded
def test_too_few_sources_give_unbounded_intervals_ranked_last_with_the_reason(tmp_path):
    grouped_table(tmp_path)
    path = write_recipe(tmp_path, candidates={"forms": ["linear"], "estimators": ["ols"]},
                        validation={"groups": "source", "folds": 5, "seed": 3},
                        intervals={"level": 0.95, "methods": ["analytic", "group-cv+"]})
    run = run_recipe(read_recipe(path))
    board = run.matrix.leaderboard.set_index("candidate")
    g = board.loc["linear__ols__inverse__group-cv+"]
    # 8 training sources: the weights of the finite scores sum to 8/9 < 0.95, so the limits
    # are infinite (two-layer conformal, refit.models.intervals.group_conformal notes)
    assert g["coverage"] == 1.0 and np.isinf(g["mean_width"]) and np.isinf(g["interval_score"])
    assert "8 groups are too few for a 95% group-level interval" in g["unbounded_reason"]
    assert g["coverage_ok"] and g["rank"] == board["rank"][board["coverage_ok"]].max()
    notes = run.matrix.verdict["unbounded"]
    assert len(notes) == 1 and "too few" in notes[0] and "group-cv+" in notes[0]


# ----------------------------------------------------------------------------- source warning
def test_random_kfold_warning_with_the_measured_ratio(tmp_path):
    from refit.validate.splitters import Scheme, make_splits

    df = grouped_table(tmp_path)
    path = write_recipe(tmp_path, candidates={"forms": ["linear"], "estimators": ["ols"]},
                        validation={"folds": 4, "repeats": 2, "seed": 9})
    run = run_recipe(read_recipe(path))
    chk = run.source_check
    assert chk is not None and chk["n_sources"] == 10

    def rmsep(scheme):  # numpy least squares on each training fold, pooled squared errors
        x, y = df["bk_depth_cm"].to_numpy(), df["map_mm"].to_numpy()
        err = []
        for s in make_splits(df, scheme):
            X = np.column_stack([np.ones(len(s.train_idx)), x[s.train_idx]])
            b = np.linalg.lstsq(X, y[s.train_idx], rcond=None)[0]
            err.append(y[s.test_idx] - (b[0] + b[1] * x[s.test_idx]))
        return float(np.sqrt(np.mean(np.concatenate(err) ** 2)))

    grouped = rmsep(Scheme("group-kfold", folds=4, repeats=2, groups="source", seed=9))
    random = rmsep(Scheme("kfold", folds=4, repeats=2, seed=9))
    assert chk["group_kfold"]["rmsep"] == pytest.approx(grouped, rel=1e-9)
    assert chk["random_kfold"]["rmsep"] == pytest.approx(random, rel=1e-9)
    assert chk["rmsep_ratio"] == pytest.approx(grouped / random, rel=1e-9)
    assert chk["rmsep_ratio"] > 1.0  # offsets per source: random k-fold flatters
    assert f"{grouped / random:.2f}x" in chk["message"] and "flatters" in chk["message"]
    out = write_run(run, tmp_path / "run")
    kept = json.loads((out / "run.json").read_text("utf-8"))
    assert kept["warnings"] == [chk["message"]]
    assert kept["source_check"]["rmsep_ratio"] == pytest.approx(grouped / random, rel=1e-9)


# ----------------------------------------------------------------------------- weights, SDs
def test_weights_and_measurement_sds_reach_wls_and_york(tmp_path):
    # statsmodels WLS with the same weights on the same rows: the reference coefficients
    import statsmodels.api as sm

    df = grouped_table(tmp_path)
    path = write_recipe(tmp_path, candidates={"forms": ["linear"],
                                              "estimators": ["ols", "wls", "york"]},
                        function={"weights": "w", "x_sd": "bk_sd", "y_sd": "map_sd"},
                        validation={"folds": 4, "seed": 2})
    run = run_recipe(read_recipe(path))
    assert not [s for s in run.matrix.skipped if "wls" in s["candidate"]
                or "york" in s["candidate"]]
    wls = run.matrix.fits["linear__wls__inverse__analytic"]
    ref = sm.WLS(df["map_mm"], sm.add_constant(df["bk_depth_cm"]), weights=df["w"]).fit()
    assert wls.coefficients.to_numpy() == pytest.approx(ref.params.to_numpy(), rel=1e-10)
    assert wls.weights == pytest.approx(df["w"].to_numpy())
    york = run.matrix.fits["linear__york__inverse__analytic"]
    assert york.estimator == "york" and "linear__york__inverse__analytic" in set(
        run.matrix.leaderboard["candidate"])


@pytest.mark.parametrize("value, what", [(np.nan, "no number"), (0.0, "a value <= 0"),
                                         (-1.0, "a value <= 0")])
def test_bad_weights_name_the_rows(tmp_path, value, what):
    df = grouped_table(tmp_path)
    df.loc[[3, 7], "w"] = value
    df.to_csv(tmp_path / "soils.csv", index=False)
    path = write_recipe(tmp_path, candidates={"estimators": ["wls"]},
                        function={"weights": "w"})
    with pytest.raises(InvalidDataError) as e:
        run_recipe(read_recipe(path))
    msg = str(e.value)
    assert "[function] weights = 'w'" in msg and what in msg and "P003, P007" in msg
