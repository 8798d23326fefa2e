"""Quantile regression curves vs statsmodels QuantReg, an exact LP solve and Koenker's
share-below property."""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose
from scipy.optimize import linprog
from statsmodels.regression.quantile_regression import QuantReg

from refit.errors import InvalidDataError, UsageError
from refit.models.quantile import fit_quantile, fit_quantiles, quantile_band


def hetero_line(n, seed):
    """Seeded synthetic line with spread growing in x: y = 1 + 0.5 x + (0.5 + 0.2 x) e."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 10, n)
    y = 1 + 0.5 * x + rng.normal(0, 1, n) * (0.5 + 0.2 * x)
    return np.column_stack([np.ones(n), x]), y


def exact_lp_quantile(X, y, q):
    """Koenker-Bassett linear programme solved by scipy's HiGHS (exact vertex solution)."""
    n, p = X.shape
    c = np.r_[np.zeros(p), q * np.ones(n), (1 - q) * np.ones(n)]
    A = np.hstack([X, np.eye(n), -np.eye(n)])
    res = linprog(c, A_eq=A, b_eq=y, bounds=[(None, None)] * p + [(0, None)] * (2 * n),
                  method="highs")
    return res.x[:p]


@pytest.mark.parametrize("q", [0.025, 0.5, 0.975])
def test_quantile_curves_match_statsmodels_and_the_exact_lp(q):
    X, y = hetero_line(200, 0)
    coefs = fit_quantiles(X, y, (q,))
    direct = QuantReg(y, X).fit(q=q, max_iter=5000)       # statsmodels called directly
    assert_allclose(coefs[q], direct.params, rtol=1e-12)
    # statsmodels' IRLS stops at p_tol = 1e-6, so it matches the LP vertex to ~1e-5
    assert_allclose(coefs[q], exact_lp_quantile(X, y, q), rtol=1e-4, atol=1e-4)
    res = fit_quantile(X, y, q)
    assert_allclose(np.sqrt(np.diag(res.covariance)), direct.bse, rtol=1e-12)
    assert res.details["converged"]


@pytest.mark.parametrize("q", [0.025, 0.1, 0.5, 0.9, 0.975])
def test_share_of_points_below_the_q_curve(q):
    # Koenker (2005), Theorem 2.2: with an intercept, N_below <= n q <= N_below + N_on.
    # Residuals within 1e-4 of zero count as "on" the curve (IRLS leaves ~1e-5 there).
    X, y = hetero_line(400, 1)
    res = fit_quantile(X, y, q)
    e = res.residuals
    below, on = np.sum(e < -1e-4), np.sum(np.abs(e) <= 1e-4)
    n = len(y)
    assert below <= n * q <= below + on
    assert abs(res.details["share_below"] - q) <= X.shape[1] / n


def test_median_of_an_intercept_only_model_is_the_sample_median():
    y = np.random.default_rng(2).exponential(3.0, 51)
    res = fit_quantile(np.ones((51, 1)), y, 0.5)
    assert_allclose(res.coefficients[0], np.median(y), rtol=1e-5)   # numpy median


def test_quantile_band_covers_fresh_data_at_its_level():
    X, y = hetero_line(4000, 3)
    Xn, yn = hetero_line(4000, 4)
    est, lower, upper = quantile_band(X, y, Xn, level=0.9)
    cover = np.mean((lower <= yn) & (yn <= upper))
    # 4000 fresh points: binomial SE 0.0047 at 0.9; the estimated curves add about as much
    # again; 0.02 (about 3 combined SE) still rejects a band built for another level.
    assert abs(cover - 0.9) <= 0.02
    assert np.mean(yn < est) == pytest.approx(0.5, abs=0.03)


def test_quantile_band_rearranges_crossing_curves():
    # spread shrinking with x: extrapolated far to the right the 5% and 95% lines cross
    rng = np.random.default_rng(5)
    x = rng.uniform(0, 8, 300)
    y = x + rng.normal(0, 1, 300) * (9 - x)
    X = np.column_stack([np.ones(300), x])
    res = quantile_band(X, y, np.array([[1.0, 4.0], [1.0, 30.0]]), level=0.9)
    assert not res.details["crossing"][0] and res.details["crossing"][1]
    assert (res.lower <= res.estimate).all() and (res.estimate <= res.upper).all()


def test_quantile_bad_input():
    X, y = hetero_line(30, 6)
    with pytest.raises(UsageError, match="strictly between 0 and 1"):
        fit_quantiles(X, y, (0.0, 0.5))
    with pytest.raises(UsageError, match="strictly between 0 and 1"):
        fit_quantile(X, y, 97.5)
    with pytest.raises(InvalidDataError, match="rank deficient"):
        fit_quantile(np.column_stack([X, X[:, 1]]), y, 0.5)
    with pytest.raises(InvalidDataError, match="at least"):
        fit_quantile(X[:2], y[:2], 0.5)
    with pytest.warns(UserWarning, match="unreliable"):
        quantile_band(X, y, X[:1], level=0.95)
