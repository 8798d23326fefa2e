"""Prediction intervals: bootstrap (pairs, residual) and conformal (split, jackknife+, CV+).

Outside references: statsmodels (OLS/WLS fits, leave-one-out refits, PRESS residuals,
HC0 and classical standard errors, get_prediction intervals), scikit-learn KFold, the
finite-sample rules of Lei et al. (2018, JASA 113:1094) and Barber et al. (2021, Ann. Stat.
49:486), and Monte Carlo coverage on seeded data from a known generating process, judged
with binomial tolerances (scipy.stats.binom).
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from hypothesis import given
from hypothesis import strategies as st
from numpy.testing import assert_allclose
from scipy import stats
from sklearn.model_selection import KFold
from statsmodels.stats.outliers_influence import OLSInfluence

from refit.errors import InvalidDataError, UsageError
from refit.models.intervals.bootstrap import _pairs_coefficients
from refit.models.intervals import (
    bootstrap_pairs, bootstrap_residual, cv_plus, jackknife_plus, loo_residuals,
    split_conformal,
)


def quadratic_problem(n, seed, *, hetero=False):
    """Seeded synthetic quadratic y = 40 + 3 x - 0.02 x^2 + noise (x in [0, 100])."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 100, n)
    sd = 0.05 * (5 + x) if hetero else 4.0
    y = 40 + 3 * x - 0.02 * x**2 + rng.normal(0, 1, n) * sd
    return np.column_stack([np.ones(n), x, x**2]), y


def explicit_loo_predictions(X, y, x0):
    """mu_(-i)(x0) and |y_i - mu_(-i)(x_i)| by n explicit statsmodels OLS refits."""
    n = len(y)
    mu = np.empty((len(x0), n))
    r = np.empty(n)
    for i in range(n):
        keep = np.arange(n) != i
        fit = sm.OLS(y[keep], X[keep]).fit()
        mu[:, i] = fit.predict(x0)
        r[i] = abs(y[i] - fit.predict(X[i:i + 1])[0])
    return mu, r


# ----------------------------------------------------------------------------- closed forms
def test_loo_residuals_equal_statsmodels_press_and_refits():
    X, y = quadratic_problem(60, 1)
    loo = loo_residuals(X, y)
    # statsmodels OLSInfluence.resid_press: e_i / (1 - h_ii)
    assert_allclose(loo, OLSInfluence(sm.OLS(y, X).fit()).resid_press, rtol=0, atol=1e-9)
    _, r = explicit_loo_predictions(X, y, X[:1])
    assert_allclose(np.abs(loo), r, rtol=0, atol=1e-9)


@given(st.integers(min_value=6, max_value=40), st.integers(min_value=1, max_value=4),
       st.integers(min_value=0, max_value=2**32 - 1))
def test_loo_residuals_closed_form_on_random_designs(n, p, seed):
    # e_i/(1 - h_ii) equals the residual of an explicit numpy lstsq refit without row i
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.normal(size=(n, p - 1)) * rng.uniform(0.1, 1e3)])
    y = X @ rng.normal(size=p) + rng.normal(size=n)
    expected = [y[i] - X[i] @ np.linalg.lstsq(np.delete(X, i, 0), np.delete(y, i),
                                              rcond=None)[0] for i in range(n)]
    loo = loo_residuals(X, y)
    assert_allclose(loo, expected, rtol=1e-7, atol=1e-9 * np.abs(y).max())


def test_jackknife_plus_equals_explicit_leave_one_out_refits():
    # n = 199 and alpha = 0.05 make the ranks exact integers, a check of the rounding:
    # floor(0.05 * 200) = 10 and ceil(0.95 * 200) = 190 (Barber et al. 2021, sect. 2).
    X, y = quadratic_problem(199, 2)
    x0 = np.column_stack([np.ones(7), np.linspace(-10, 110, 7), np.linspace(-10, 110, 7)**2])
    res = jackknife_plus(X, y, x0, level=0.95)
    mu, r = explicit_loo_predictions(X, y, x0)
    lower = np.sort(mu - r, axis=1)[:, 10 - 1]
    upper = np.sort(mu + r, axis=1)[:, 190 - 1]
    assert_allclose(res.lower, lower, rtol=0, atol=1e-9)
    assert_allclose(res.upper, upper, rtol=0, atol=1e-9)
    assert_allclose(res.estimate, sm.OLS(y, X).fit().predict(x0), rtol=1e-12)
    assert not res.details["unbounded"]


@pytest.mark.parametrize("through_origin", [False, True])
def test_fit_predict_jackknife_plus_from_the_fits_own_qr_equals_explicit_refits(
        through_origin):
    # Fit.predict(interval="jackknife+") reuses the factorisation of the fit (centred,
    # scaled terms) instead of a second QR of X: the limits must still equal n explicit
    # statsmodels leave-one-out refits (ranks as above, n = 199, alpha = 0.05), and the
    # row whose value is missing stays empty.
    from refit.models.fitting import fit

    X, y = quadratic_problem(199, 5)
    f = fit({"x": X[:, 1], "y": y}, "y", ["x"], form="quadratic",
            through_origin=through_origin)
    v = np.array([np.nan, -10.0, 20.0, 55.5, 110.0])
    x0 = np.column_stack([np.ones(5), v, v**2])
    if through_origin:
        X, x0 = X[:, 1:], x0[:, 1:]
    p = f.predict(v, interval="jackknife+", level=0.95)
    mu, r = explicit_loo_predictions(X, y, x0[1:])
    assert_allclose(p["lower"][1:], np.sort(mu - r, axis=1)[:, 10 - 1], rtol=0, atol=1e-9)
    assert_allclose(p["upper"][1:], np.sort(mu + r, axis=1)[:, 190 - 1], rtol=0, atol=1e-9)
    assert_allclose(p["estimate"][1:], sm.OLS(y, X).fit().predict(x0[1:]), rtol=1e-12)
    assert np.isnan(p.loc[0, ["estimate", "lower", "upper"]].to_numpy(float)).all()
    assert p["flags"][0] == "missing-value"


def test_fit_predict_jackknife_plus_of_only_missing_values_is_empty_not_an_error():
    # every value missing: no new row to band (the candidate cut must not take the
    # maximum of nothing)
    from refit.models.fitting import fit

    X, y = quadratic_problem(40, 6)
    f = fit({"x": X[:, 1], "y": y}, "y", ["x"], form="quadratic")
    p = f.predict([np.nan, np.nan], interval="jackknife+")
    assert np.isnan(p[["estimate", "lower", "upper"]].to_numpy(float)).all()
    assert list(p["flags"]) == ["missing-value", "missing-value"]


@given(st.integers(min_value=1, max_value=12), st.integers(min_value=1, max_value=30),
       st.booleans(), st.integers(min_value=0, max_value=2**32 - 1))
def test_edge_rank_order_statistics_equal_a_full_sort(rows, size, ties, seed):
    # The band's k-th smallest per row (repeated arg-extremes near either end, partition
    # elsewhere) must equal column k-1 of numpy.sort, ties included, for every k; out
    # of range k gives -inf / +inf (the conformal convention of Barber et al. 2021).
    from refit._util.order import kth_in_place_finite

    rng = np.random.default_rng(seed)
    v = (rng.integers(0, 4, size=(rows, size)).astype(float) if ties
         else rng.normal(size=(rows, size)))
    ordered = np.sort(v, axis=1)
    for k in range(1, size + 1):
        assert np.array_equal(kth_in_place_finite(v.copy(), k), ordered[:, k - 1])
    assert np.isneginf(kth_in_place_finite(v.copy(), 0)).all()
    assert np.isposinf(kth_in_place_finite(v.copy(), size + 1)).all()


def test_jackknife_plus_is_unbounded_when_too_few_rows_for_the_level():
    # n = 18, alpha = 0.05: floor(0.05 * 19) = 0 -> lower = -inf, ceil(0.95 * 19) = 19 > 18.
    X, y = quadratic_problem(18, 3)
    res = jackknife_plus(X, y, X[:2], level=0.95)
    assert np.isneginf(res.lower).all() and np.isposinf(res.upper).all()
    assert res.details["unbounded"]


def test_cv_plus_equals_explicit_kfold_refits():
    X, y = quadratic_problem(57, 4)
    x0 = X[:5] + np.array([0, 1.5, 0])
    x0[:, 2] = x0[:, 1] ** 2
    res = cv_plus(X, y, x0, level=0.9, folds=5, seed=11)
    n = len(y)
    mu, r = np.empty((len(x0), n)), np.empty(n)
    for train, test in KFold(5, shuffle=True, random_state=11).split(X):
        fit = sm.OLS(y[train], X[train]).fit()
        mu[:, test] = fit.predict(x0)[:, None]
        r[test] = np.abs(y[test] - fit.predict(X[test]))
    # n = 57, alpha = 0.1: floor(0.1 * 58) = 5, ceil(0.9 * 58) = ceil(52.2) = 53
    assert_allclose(res.lower, np.sort(mu - r, axis=1)[:, 5 - 1], atol=1e-9)
    assert_allclose(res.upper, np.sort(mu + r, axis=1)[:, 53 - 1], atol=1e-9)


def test_split_conformal_quantile_rule():
    X, y = quadratic_problem(40, 5)
    res = split_conformal(X, y, X[:3], level=0.9, seed=8, calib_fraction=0.5)
    cal = res.details["calib_rows"]
    train = np.setdiff1d(np.arange(40), cal)
    fit = sm.OLS(y[train], X[train]).fit()
    scores = np.sort(np.abs(y[cal] - fit.predict(X[cal])))
    # n2 = 20, alpha = 0.1: the ceil(0.9 * 21) = 19th smallest score (Lei et al. 2018)
    q = scores[19 - 1]
    assert_allclose(res.estimate, fit.predict(X[:3]), rtol=1e-12)
    assert_allclose(res.upper - res.estimate, q, rtol=1e-12)
    assert_allclose(res.estimate - res.lower, q, rtol=1e-12)


def test_split_conformal_reports_unbounded_when_calibration_part_too_small():
    # n2 = 10, alpha = 0.05: ceil(0.95 * 11) = 11 > 10 -> q = +inf
    X, y = quadratic_problem(20, 6)
    res = split_conformal(X, y, X[:1], level=0.95, calib_fraction=0.5)
    assert res.details["unbounded"] and np.isposinf(res.upper[0])


# ----------------------------------------------------------------------------- bootstrap
def test_batched_pairs_coefficients_equal_explicit_least_squares():
    X, y = quadratic_problem(30, 7)
    Q, R = np.linalg.qr(X)
    coefs, dropped = _pairs_coefficients(Q, R, y, 100, np.random.default_rng(5))
    # same stream of indices, drawn the way the batch draws them (one batch here)
    idx = np.random.default_rng(5).integers(0, 30, size=(100, 30), dtype=np.int32)
    expected = np.array([np.linalg.lstsq(X[i], y[i], rcond=None)[0] for i in idx])
    assert dropped == 0
    assert_allclose(coefs, expected, rtol=1e-9, atol=1e-12)


def test_pairs_bootstrap_spread_matches_statsmodels_hc0_under_heteroscedasticity():
    X, y = quadratic_problem(400, 8, hetero=True)
    pairs = bootstrap_pairs(X, y, X[:1], n_boot=4000, seed=1)
    resid = bootstrap_residual(X, y, X[:1], n_boot=4000, seed=1)
    hc0 = sm.OLS(y, X).fit(cov_type="HC0").bse        # statsmodels sandwich SE
    classical = sm.OLS(y, X).fit().bse                 # statsmodels s^2 (X'X)^-1 SE
    # Monte Carlo SE of a bootstrap SD with B = 4000 is about 1/sqrt(2B) = 1.1%; 6% allows
    # that plus the O(1/n) gap between the bootstrap and the asymptotic formulas.
    assert_allclose(pairs.details["coefficients"].std(axis=0), hc0, rtol=0.06)
    assert_allclose(resid.details["coefficients"].std(axis=0), classical, rtol=0.06)
    # the two references differ here by far more than the tolerance (intercept: about 40%),
    # so the test tells case resampling from residual resampling
    assert np.abs(hc0[0] / classical[0] - 1) > 0.3


def test_bootstrap_prediction_limits_match_statsmodels_analytic_interval():
    X, y = quadratic_problem(3000, 9)
    x0 = X[:6]
    frame = sm.OLS(y, X).fit().get_prediction(x0).summary_frame(alpha=0.05)
    s = np.sqrt(sm.OLS(y, X).fit().scale)
    B = 4000
    # Monte Carlo SE of a 2.5% sample quantile of B draws of N(0, s^2) noise:
    # sqrt(p (1 - p) / B) / density at the quantile (asymptotic order-statistic variance);
    # 4 SE, about 0.17 here against a half-width of about 7.8.
    tol = 4 * np.sqrt(0.025 * 0.975 / B) / (stats.norm.pdf(1.96) / s)
    for method in (bootstrap_pairs, bootstrap_residual):
        est, lower, upper = method(X, y, x0, n_boot=B, seed=3)
        assert_allclose(est, frame["mean"], rtol=1e-12)
        # normal errors, n = 3000: bootstrap limits = t-based limits up to Monte Carlo error
        assert_allclose(lower, frame["obs_ci_lower"], rtol=0, atol=tol)
        assert_allclose(upper, frame["obs_ci_upper"], rtol=0, atol=tol)


def test_weighted_residual_bootstrap_matches_statsmodels_wls():
    X, _ = quadratic_problem(500, 10)
    rng = np.random.default_rng(10)
    w = rng.uniform(0.2, 5, 500)
    y = X @ [40, 3, -0.02] + rng.normal(0, 1, 500) * 4 / np.sqrt(w)
    res = bootstrap_residual(X, y, X[:3], n_boot=4000, seed=2, weights=w)
    wls = sm.WLS(y, X, weights=w).fit()
    assert_allclose(res.estimate, wls.predict(X[:3]), rtol=1e-12)
    assert_allclose(res.details["coefficients"].std(axis=0), wls.bse, rtol=0.06)
    # case resampling of (x, y, w) triples: spread near statsmodels' WLS sandwich (HC0)
    pairs = bootstrap_pairs(X, y, X[:3], n_boot=4000, seed=2, weights=w)
    hc0 = sm.WLS(y, X, weights=w).fit(cov_type="HC0").bse
    assert_allclose(pairs.details["coefficients"].std(axis=0), hc0, rtol=0.06)
    frame = wls.get_prediction(X[:3], weights=1.0).summary_frame(alpha=0.05)
    half = (frame["obs_ci_upper"] - frame["obs_ci_lower"]).to_numpy() / 2
    assert_allclose(res.upper - res.lower, 2 * half, rtol=0.08)


def test_pairs_bootstrap_drops_singular_resamples():
    # quadratic on 5 rows: a resample with fewer than 3 distinct rows is singular;
    # P = (5 + C(5,2)(2^5 - 2)) / 5^5 = 305/3125, about 10% of resamples
    X, y = quadratic_problem(5, 15)
    res = bootstrap_pairs(X, y, X[:1], n_boot=2000, seed=0)
    assert 0.07 < res.details["dropped"] / 2000 < 0.13
    assert res.details["coefficients"].shape == (2000 - res.details["dropped"], 3)


def test_bootstrap_is_reproducible_with_a_seed():
    X, y = quadratic_problem(80, 11)
    a = bootstrap_pairs(X, y, X[:2], n_boot=200, seed=4)
    b = bootstrap_pairs(X, y, X[:2], n_boot=200, seed=4)
    c = bootstrap_pairs(X, y, X[:2], n_boot=200, seed=5)
    assert_allclose(a.lower, b.lower, rtol=0, atol=0)
    assert not np.allclose(a.lower, c.lower)


# ----------------------------------------------------------------------------- coverage
def coverage(method, repeats, n, data_seed, **kw):
    """Share of fresh observations inside the interval, and the mean width.

    Generating process (known): x ~ U(0, 10), y = 2 + 0.5 x + e, e ~ Student t(5)
    (heavy tails, so nothing here relies on normal errors). One new point per repeat, so
    the hits are independent Bernoulli trials.
    """
    rng = np.random.default_rng(data_seed)
    hits, widths = 0, []
    for _ in range(repeats):
        x = rng.uniform(0, 10, n + 1)
        y = 2 + 0.5 * x + rng.standard_t(5, n + 1)
        X = np.column_stack([np.ones(n + 1), x])
        est, lower, upper = method(X[:n], y[:n], X[n:], **kw)
        hits += lower[0] <= y[n] <= upper[0]
        widths.append(upper[0] - lower[0])
    return hits / repeats, float(np.mean(widths))


ORACLE_WIDTH = 2 * stats.t.ppf(0.975, 5)   # width of the true central 95% noise interval


# max_width: bound on mean width / oracle width. The estimation error of a 2-parameter
# line at n >= 50 adds a few per cent; split conformal with n2 = 25 uses the 25th of 25
# calibration scores (ceil(0.95 * 26) = 25), i.e. their maximum, hence its looser bound.
@pytest.mark.parametrize("method, kw, repeats, n, max_width", [
    (jackknife_plus, {}, 2000, 50, 1.3),
    (cv_plus, {"folds": 10, "seed": 0}, 1000, 50, 1.3),
    (split_conformal, {"seed": 0}, 2000, 50, 1.6),
    (bootstrap_residual, {"n_boot": 499, "seed": 0}, 500, 100, 1.3),
    (bootstrap_pairs, {"n_boot": 499, "seed": 0}, 500, 100, 1.3),
])
def test_empirical_coverage_of_95_percent_intervals(method, kw, repeats, n, max_width):
    cov, width = coverage(method, repeats, n, data_seed=2024, level=0.95, **kw)
    # Monte Carlo tolerance: with `repeats` independent trials at true coverage 0.95, the
    # observed share falls below binom.ppf(0.001, repeats, 0.95)/repeats with probability
    # 0.1% (about 0.95 - 3.1 SE; SE = 0.0049 for 2000 repeats, 0.0097 for 500).
    assert cov >= stats.binom.ppf(0.001, repeats, 0.95) / repeats
    # and the intervals are not trivially wide
    assert width <= max_width * ORACLE_WIDTH


def test_split_conformal_coverage_upper_bound():
    # Lei et al. (2018): coverage <= 1 - alpha + 1/(n2 + 1) for continuous scores; n2 = 25
    cov, _ = coverage(split_conformal, 2000, 50, data_seed=7, level=0.95)
    assert cov <= stats.binom.ppf(0.999, 2000, 0.95 + 1 / 26) / 2000


# ----------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("func", [bootstrap_pairs, bootstrap_residual, split_conformal,
                                  jackknife_plus, cv_plus])
def test_bad_input_gives_clear_errors(func):
    X, y = quadratic_problem(30, 12)
    y_nan = y.copy()
    y_nan[4] = np.nan
    with pytest.raises(InvalidDataError, match="row 5"):
        func(X, y_nan, X[:1])
    with pytest.raises(InvalidDataError, match="rank deficient"):
        func(np.column_stack([X, 2 * X[:, 1]]), y, np.ones((1, 4)))
    with pytest.raises(InvalidDataError, match="at least"):
        func(X[:3], y[:3], X[:1])
    with pytest.raises(InvalidDataError, match="3 column"):
        func(X, y, np.ones((1, 2)))
    with pytest.raises(UsageError, match="level"):
        func(X, y, X[:1], level=95)


def test_bad_weights_are_refused():
    X, y = quadratic_problem(30, 13)
    w = np.ones(30)
    w[3] = 0.0
    with pytest.raises(InvalidDataError, match="positive"):
        bootstrap_residual(X, y, X[:1], weights=w)


def test_leverage_one_row_is_refused_for_leave_one_out():
    # a dummy column that is 1 on a single row gives that row leverage 1
    X, y = quadratic_problem(20, 14)
    X = np.column_stack([X, np.eye(20)[0]])
    with pytest.raises(InvalidDataError, match="leverage 1"):
        loo_residuals(X, y)
