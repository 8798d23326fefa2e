"""Resampling intervals of robust, quantile and York fits, refitted with their own estimator.

Outside references:

* ``scipy.stats.theilslopes`` refitted on every leave-one-out set (brute force): refit's
  fast leave-one-out Theil-Sen slopes equal them exactly (Theil 1950; Sen 1968);
* brute-force implementations, written here, of split conformal (Lei et al. 2018, JASA
  113:1094), jackknife+ and CV+ (Barber et al. 2021, Ann. Stat. 49:486): the ranks
  ``ceil((1 - a)(n + 1))`` and ``floor(a (n + 1))`` of the reference notes 2(d), each
  refit made with an outside library where one exists (statsmodels RLM with Huber's T and
  the MAD scale for Huber; scipy theilslopes; statsmodels QuantReg at q = 0.5) and with
  refit's York line (checked on Pearson's data in test_eiv.py) otherwise.

Data: seeded simulations (a line with Student-t(3) errors).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from refit.coefficients import fit_record, load, write_record
from refit.models.fitting import fit
from refit.models.theil_sen_loo import loo_lines, loo_slopes

PROV = {"dataset": {"kind": "store", "name": "test", "version": 1, "sha256": "0" * 64},
        "subset": {"filters": []}, "recipe": None, "recipe_sha256": None}


def line(n=40, seed=4, ties=False):
    rng = np.random.default_rng(seed)
    x = rng.uniform(5, 290, n)
    if ties:
        x = np.round(x, -1)  # measured to 10 cm: repeated x, skipped pairs
    y = 200 + 2 * x + 40 * rng.standard_t(3, n)
    return x, y


# ----------------------------------------------------------------------------- Theil-Sen LOO
@pytest.mark.parametrize("n, ties", [(9, False), (10, True), (41, False), (60, True)])
def test_fast_theil_sen_loo_equals_scipy_refits_exactly(n, ties):
    x, y = line(n, seed=n, ties=ties)
    fast = loo_slopes(x, y)
    brute = np.array([stats.theilslopes(np.delete(y, k), np.delete(x, k)).slope
                      for k in range(n)])
    assert np.array_equal(fast, brute)  # bit for bit


def test_fast_theil_sen_loo_intercepts_follow_the_stated_rules():
    # 'separate' is scipy's own intercept (median(y) - b median(x)); 'joint' is
    # median(y - b x) over the kept points, computed here from scipy's slope
    x, y = line(25, seed=7, ties=True)
    sep, joint = loo_lines(x, y, "separate"), loo_lines(x, y, "joint")
    for k in range(len(x)):
        xs, ys = np.delete(x, k), np.delete(y, k)
        r = stats.theilslopes(ys, xs, method="separate")
        assert sep[k, 0] == r.intercept and sep[k, 1] == r.slope
        assert joint[k, 0] == np.median(ys - r.slope * xs)


@pytest.mark.parametrize("degree", [1, 2])
def test_vectorised_huber_loo_equals_one_refit_per_row(degree):
    # refit.models.robust_loo.huber_loo runs the steps of statsmodels RLM (Huber's T,
    # MAD scale, deviance stop) for all leave-one-out problems at once; each row equals a
    # statsmodels RLM refit without that row (tolerance: the stop at a deviance change of
    # 1e-8 and the WLS solver's rounding)
    import statsmodels.api as sm

    from refit.models.robust_loo import huber_loo

    x, y = line(35, seed=12)
    X = np.column_stack([x ** d for d in range(degree + 1)])
    B = huber_loo(X, y)
    for k in range(len(x)):
        ref = sm.RLM(np.delete(y, k), np.delete(X, k, axis=0),
                     M=sm.robust.norms.HuberT(t=1.345)).fit(scale_est="mad").params
        np.testing.assert_allclose(B[k], ref, rtol=1e-9)


def test_theil_sen_bootstrap_by_weighted_medians_equals_the_pairs():
    # the weighted-median form of refit's Theil-Sen bootstrap (pair (i, j) repeated
    # c_i c_j times) gives the nanmedian of every resampled pair's slope, computed here
    # directly with the same seeded draws
    from refit.models.robust import _theil_sen_bootstrap

    x, y = line(30, seed=5, ties=True)
    got = _theil_sen_bootstrap(x, y, 120, 7, "joint")
    rng = np.random.default_rng(7)
    idx = rng.integers(0, len(x), size=(120, len(x)))
    i, j = np.triu_indices(len(x), 1)
    xb, yb = x[idx], y[idx]
    dx = xb[:, j] - xb[:, i]
    with np.errstate(divide="ignore", invalid="ignore"):
        b = np.nanmedian(np.where(dx != 0, (yb[:, j] - yb[:, i]) / dx, np.nan), axis=1)
    a = np.median(yb - b[:, None] * xb, axis=1)
    np.testing.assert_array_equal(got, np.column_stack([a, b]))


def test_loo_without_distinct_pairs_is_nan():
    # three points with two equal x: leaving out the odd one leaves no usable pair
    assert np.isnan(loo_slopes(np.array([1.0, 1.0, 2.0]), np.array([1.0, 2.0, 3.0]))[2])


# ----------------------------------------------------------------------------- brute force
def _refit_outside(estimator, x, y, xs, ys):
    """The estimator's line on (x, y) by an outside library (York: refit's own)."""
    import statsmodels.api as sm

    X = sm.add_constant(x, has_constant="add")
    if estimator == "huber":
        return sm.RLM(y, X, M=sm.robust.norms.HuberT(t=1.345)).fit(scale_est="mad").params
    if estimator == "theil-sen":
        r = stats.theilslopes(y, x)
        return np.array([np.median(y - r.slope * x), r.slope])  # refit's 'joint' intercept
    if estimator == "quantile":
        return sm.QuantReg(y, X).fit(q=0.5).params
    from refit.models.eiv import fit_york

    return fit_york(x, y, xs, ys).coefficients


def _brute(estimator, method, x, y, x0, level=0.9, seed=3, folds=10):
    n = len(x)
    xs, ys = np.full(n, 3.0), np.full(n, 30.0)
    alpha = 1 - level
    X0 = np.column_stack([np.ones_like(x0), x0])
    if method == "split-conformal":
        n_cal = int(round(0.5 * n))
        perm = np.random.default_rng(seed).permutation(n)
        cal, tr = perm[:n_cal], np.sort(perm[n_cal:])
        b = _refit_outside(estimator, x[tr], y[tr], xs[tr], ys[tr])
        scores = np.sort(np.abs(y[cal] - b[0] - b[1] * x[cal]))
        q = scores[int(np.ceil((1 - alpha) * (n_cal + 1))) - 1]
        return X0 @ b - q, X0 @ b + q
    if method == "jackknife+":
        parts = [np.delete(np.arange(n), i) for i in range(n)]
        units = [[i] for i in range(n)]
    else:
        from sklearn.model_selection import KFold

        split = list(KFold(folds, shuffle=True, random_state=seed).split(x))
        parts, units = [tr for tr, _ in split], [te for _, te in split]
    mu, r = [], []
    for tr, te in zip(parts, units):
        b = _refit_outside(estimator, x[tr], y[tr], xs[tr], ys[tr])
        for i in te:
            mu.append(X0 @ b)
            r.append(abs(y[i] - b[0] - b[1] * x[i]))
    mu, r = np.array(mu), np.array(r)[:, None]
    lo = np.sort(mu - r, axis=0)[int(np.floor(alpha * (n + 1))) - 1]
    hi = np.sort(mu + r, axis=0)[int(np.ceil((1 - alpha) * (n + 1))) - 1]
    return lo, hi


TOL = {"huber": 1e-6, "theil-sen": 1e-12, "quantile": 1e-6, "york": 1e-12}


@pytest.mark.parametrize("method", ["split-conformal", "jackknife+", "cv+"])
@pytest.mark.parametrize("estimator", ["huber", "theil-sen", "quantile", "york"])
def test_conformal_intervals_of_each_estimator_equal_brute_force(estimator, method,
                                                                 tmp_path):
    # tolerance: Huber's IRLS and QuantReg's iterations converge to ~1e-8 relative;
    # Theil-Sen and York are closed forms (same arithmetic)
    x, y = line(40)
    t = pd.DataFrame({"bk_depth_cm": x, "map_mm": y, "xs": 3.0, "ys": 30.0})
    kw = {"x_sd": "xs", "y_sd": "ys"} if estimator == "york" else {}
    f = fit(t, "map_mm", "bk_depth_cm", estimator=estimator, **kw)
    x0 = np.array([20.0, 150.0, 280.0])
    p = f.predict(x0, level=0.9, interval=method, seed=3)
    lo, hi = _brute(estimator, method, x, y, x0)
    scale = np.abs(y).max()
    np.testing.assert_allclose(p.lower, lo, rtol=0, atol=TOL[estimator] * scale)
    np.testing.assert_allclose(p.upper, hi, rtol=0, atol=TOL[estimator] * scale)
    # the coefficient file rebuilds the same limits with numpy alone
    rec = fit_record(f, function_id="map_from_bk_depth", provenance=PROV, cv=None,
                     interval_method=method, level=0.9, seed=3)
    assert rec["interval"]["refits"] == f"refits with estimator {estimator!r}"
    q = load(write_record(rec, tmp_path / "f.json")).predict(x0)
    np.testing.assert_allclose(q.lower, p.lower, rtol=1e-9)
    np.testing.assert_allclose(q.upper, p.upper, rtol=1e-9)


@pytest.mark.parametrize("estimator", ["huber", "theil-sen"])
@pytest.mark.parametrize("method", ["bootstrap-pairs", "bootstrap-residual"])
def test_bootstraps_of_robust_fits_cover_like_their_level(estimator, method):
    # seeded simulation: 95% bootstrap intervals of a robust line on t(3) errors cover
    # between 88% and 99% of 400 new observations drawn from the same line (binomial SD
    # of the coverage ~1.1 points; the band is wide for Monte Carlo and method error)
    x, y = line(80, seed=9)
    f = fit(pd.DataFrame({"bk_depth_cm": x, "map_mm": y}), "map_mm", "bk_depth_cm",
            estimator=estimator)
    rng = np.random.default_rng(10)
    xn = rng.uniform(5, 290, 400)
    yn = 200 + 2 * xn + 40 * rng.standard_t(3, 400)
    p = f.predict(xn, interval=method, n_boot=400, seed=1)
    cover = np.mean((p.lower <= yn) & (yn <= p.upper))
    assert 0.88 <= cover <= 0.99
    assert np.all(p.lower < p.estimate) and np.all(p.estimate < p.upper)


def test_mixed_fits_still_refuse_resampling_intervals():
    from refit.errors import UsageError

    x, y = line(40)
    g = np.repeat(np.arange(8), 5)
    f = fit(pd.DataFrame({"bk_depth_cm": x, "map_mm": y, "source": g}), "map_mm",
            "bk_depth_cm", estimator="mixed", groups="source")
    with pytest.raises(UsageError, match="refits the estimator on resampled rows"):
        f.predict([100.0], interval="jackknife+")
