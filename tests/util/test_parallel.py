"""Parallel runs give the serial run's numbers bit for bit, and the blocked jackknife+/CV+
bands equal explicit leave-one-out refits.

References: statsmodels OLS (explicit refits), Barber et al. (2021), Ann. Stat. 49:486
(jackknife+ ranks floor(alpha (n+1)) and ceil((1-alpha)(n+1))). Data are invented, seeded.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from _harness import invented_soils, recipe_toml
from refit.validate.candidates import run_matrix, run_recipe
from refit.select.recipe import read_recipe

RECIPE = recipe_toml(
    data={"store": None, "table": "soils.csv"},
    candidates={"estimators": ["ols", "huber"], "directions": ["inverse", "forward"]},
    validation={"scheme": "group-kfold", "folds": 3, "repeats": 2, "groups": "source",
                "seed": 11},
    intervals={"level": 0.9,
               "methods": ["analytic", "split-conformal", "jackknife+", "bootstrap"]})


def soils(n=72, seed=3) -> pd.DataFrame:
    """Invented soils: MAP rises with Bk depth, each source with its own offset."""
    return invented_soils(n, seed, [-60, -20, 0, 30, 70, 10])


@pytest.fixture(scope="module")
def recipe(tmp_path_factory):
    folder = tmp_path_factory.mktemp("parallel")
    soils().to_csv(folder / "soils.csv", index=False)
    (folder / "recipe.toml").write_text(RECIPE, encoding="utf-8")
    return read_recipe(folder / "recipe.toml")


@pytest.fixture(scope="module")
def serial(recipe):
    return run_recipe(recipe, n_jobs=1)


def test_two_workers_give_the_serial_numbers_bit_for_bit(recipe, serial):
    par = run_recipe(recipe, n_jobs=2)
    a, b = serial.matrix, par.matrix
    assert [s.label for s in a.specs] == [s.label for s in b.specs]
    assert len(a.specs) >= 8  # resampling intervals (seeded) are among the candidates
    pd.testing.assert_frame_equal(a.leaderboard, b.leaderboard, check_exact=True)
    pd.testing.assert_frame_equal(a.predictions, b.predictions, check_exact=True)
    for label in a.fits:
        assert np.array_equal(a.fits[label].result.coefficients,
                              b.fits[label].result.coefficients)
    assert a.verdict == b.verdict


def test_all_cores_and_one_candidate_also_match(recipe, serial):
    sub = serial.subset.frame
    one = RECIPE.replace('forms = ["linear", "quadratic"]', 'forms = ["quadratic"]') \
        .replace('estimators = ["ols", "huber"]', 'estimators = ["ols"]') \
        .replace('directions = ["inverse", "forward"]', 'directions = ["inverse"]') \
        .replace('"analytic", "split-conformal", "jackknife+", "bootstrap"', '"jackknife+"')
    path = recipe.path.parent / "one.toml"
    path.write_text(one, encoding="utf-8")
    rec1 = read_recipe(path)
    a = run_matrix(sub, rec1, n_jobs=1)   # one candidate: its folds get the workers
    b = run_matrix(sub, rec1, n_jobs=-1)
    assert len(a.specs) == 1
    pd.testing.assert_frame_equal(a.predictions, b.predictions, check_exact=True)
    full = run_matrix(sub, recipe, n_jobs=-1)
    pd.testing.assert_frame_equal(full.leaderboard, serial.matrix.leaderboard,
                                  check_exact=True)


def test_parallel_run_reports_a_failing_candidate_like_the_serial_run(tmp_path):
    # Five soils from two sources: the cubic cannot be fitted on a training part of 3 rows.
    frame = soils(n=10).iloc[:5]
    frame.to_csv(tmp_path / "soils.csv", index=False)
    text = RECIPE.replace('forms = ["linear", "quadratic"]', 'forms = ["linear", "cubic"]') \
        .replace("folds = 3", "folds = 2").replace("repeats = 2", "repeats = 1")
    (tmp_path / "recipe.toml").write_text(text, encoding="utf-8")
    rec = read_recipe(tmp_path / "recipe.toml")
    a = run_matrix(frame, rec, n_jobs=1)
    b = run_matrix(frame, rec, n_jobs=2)
    failed_a = [s for s in a.skipped if s["reason"].startswith("failed")]
    assert failed_a, "the cubic on 5 rows should fail in some fold"
    assert a.skipped == b.skipped
    assert [s.label for s in a.specs] == [s.label for s in b.specs]


@pytest.mark.parametrize("n, m, level", [(40, 9, 0.9), (150, 700, 0.95), (21, 3, 0.8)])
def test_blocked_jackknife_plus_equals_explicit_refits(n, m, level):
    """refit.models.intervals.jackknife_plus (closed form, cache-sized blocks of new rows) equals
    jackknife+ from n explicit statsmodels leave-one-out refits, to 1e-9."""
    import statsmodels.api as sm

    from refit.models.intervals import jackknife_plus

    rng = np.random.default_rng(n)
    x = rng.uniform(5, 200, n)
    y = 150 + 5 * x - 0.01 * x * x + rng.normal(0, 60, n)
    X = np.column_stack([np.ones(n), x, x * x])
    v = np.linspace(0, 220, m)
    X0 = np.column_stack([np.ones(m), v, v * v])
    mu, r = np.empty((m, n)), np.empty(n)
    for i in range(n):
        keep = np.arange(n) != i
        res = sm.OLS(y[keep], X[keep]).fit()
        mu[:, i] = res.predict(X0)
        r[i] = abs(y[i] - res.predict(X[i:i + 1])[0])
    alpha = 1 - level
    k_lo, k_hi = math.floor(alpha * (n + 1)), math.ceil((1 - alpha) * (n + 1))
    lower = np.sort(mu - r, axis=1)[:, k_lo - 1] if k_lo >= 1 else np.full(m, -np.inf)
    upper = np.sort(mu + r, axis=1)[:, k_hi - 1] if k_hi <= n else np.full(m, np.inf)
    pi = jackknife_plus(X, y, X0, level=level)
    scale = np.abs(y).max()
    assert np.allclose(pi.lower, lower, rtol=0, atol=1e-9 * scale)
    assert np.allclose(pi.upper, upper, rtol=0, atol=1e-9 * scale)
