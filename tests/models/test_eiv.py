"""Errors-in-variables lines: York (vs the Pearson-York benchmark) and Deming."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose

from refit.models.eiv import fit_deming, fit_york
from refit.errors import InvalidDataError, UsageError

# Pearson (1901) data with York's (1966) weights w = 1/sigma^2, as printed in the Kapteyn
# Package kmpfit tutorial (astro.rug.nl/software/kapteyn/kmpfittutorial.html) and in
# scipy's former ODR tests.
PX = np.array([0.0, 0.9, 1.8, 2.6, 3.3, 4.4, 5.2, 6.1, 6.5, 7.4])
PY = np.array([5.9, 5.4, 4.4, 4.6, 3.5, 3.7, 2.8, 2.8, 2.4, 1.5])
WX = np.array([1000, 1000, 500, 800, 200, 80, 60, 20, 1.8, 1])
WY = np.array([1, 1.8, 4, 8, 20, 20, 70, 70, 100, 500])


def test_york_reproduces_williamson_solution_of_pearson_york_data():
    res = fit_york(PX, PY, 1 / np.sqrt(WX), 1 / np.sqrt(WY))
    # Williamson's values in the kmpfit tutorial table "Literature results":
    # a = 5.47991022403, b = -0.48053340745 (Reed: ...22723, ...40810). rtol 1e-9: the
    # published solutions agree among themselves to about 1e-9.
    assert_allclose(res.coefficients, [5.47991022403, -0.48053340745], rtol=1e-9)
    # sigma_b = 0.057985, sigma_a = 0.294971 (known-weight errors; a public unit test of a
    # York routine checks them with atol 1e-6, the digits printed)
    se = np.sqrt(np.diag(res.covariance))
    assert_allclose(se, [0.294971, 0.057985], atol=1e-6)
    # S = 11.86635 with 8 degrees of freedom (COMPUTED, reference notes sect. 1.5)
    assert_allclose(res.details["chi2"], 11.86635, rtol=1e-6)
    assert res.df_resid == 8


def test_york_scaled_errors_match_odrpack_on_rounded_sigmas():
    # scipy's former ODR test (scipy/odr/tests/test_odr.py::test_pearson, at the parent of
    # the removal commit): sx, sy = 1/sqrt(w) rounded; beta and sd_beta. ODRPACK scales the
    # covariance by the residual variance, our sigma='scaled'. rtol 2e-5: ODRPACK stops on
    # a relative sum-of-squares change of about 1.5e-8, so its parameters are good to ~1e-6.
    sx = [.03, .03, .04, .035, .07, .11, .13, .22, .74, 1.]
    sy = [1., .74, .5, .35, .22, .22, .12, .12, .1, .04]
    res = fit_york(PX, PY, sx, sy, sigma="scaled")
    assert_allclose(res.coefficients, [5.4767400299231674, -0.4796082367610305], rtol=2e-5)
    assert_allclose(np.sqrt(np.diag(res.covariance)),
                    [0.3590121690702467, 0.0706291186037444], rtol=2e-5)
    # reversed roles (x <-> y), same test: beta = [11.4192022410781231, -2.0850374506165474]
    rev = fit_york(PY, PX, sy, sx, sigma="scaled")
    assert_allclose(rev.coefficients, [11.4192022410781231, -2.0850374506165474], rtol=2e-5)
    # and the same line: b' = 1/b
    assert_allclose(rev.coefficients[1], 1 / res.coefficients[1], rtol=1e-10)


def test_deming_closed_form_equals_york_with_constant_weights():
    # lambda = var(e_y)/var(e_x) = 2 on the Pearson x, y: b = -0.542938957816,
    # a = 5.774026819 (COMPUTED in the reference notes, sect. 1.5); York with constant
    # weights w_x = 1, w_y = 1/2 gives the same slope to 1e-15.
    dem = fit_deming(PX, PY, ratio=2.0)
    assert_allclose(dem.coefficients, [5.774026819, -0.542938957816], rtol=1e-9)
    york = fit_york(PX, PY, 1.0, np.sqrt(2.0))
    assert_allclose(york.coefficients, dem.coefficients, rtol=1e-12)
    assert_allclose(dem.covariance, fit_york(PX, PY, 1.0, np.sqrt(2.0), sigma="scaled")
                    .covariance, rtol=1e-12)


def test_deming_limits_are_the_two_ordinary_regressions():
    # lambda -> infinity: OLS of y on x; lambda -> 0: x on y, inverted (statsmodels OLS)
    yx = sm.OLS(PY, sm.add_constant(PX)).fit().params
    xy = sm.OLS(PX, sm.add_constant(PY)).fit().params
    assert_allclose(fit_deming(PX, PY, ratio=1e9).coefficients[1], yx[1], rtol=1e-6)
    assert_allclose(fit_deming(PX, PY, ratio=1e-9).coefficients[1], 1 / xy[1], rtol=1e-6)
    # and the orthogonal slope lies between them
    b1 = fit_deming(PX, PY, ratio=1.0).coefficients[1]
    assert 1 / xy[1] < b1 < yx[1]


def test_york_with_tiny_x_errors_is_weighted_least_squares():
    # sx -> 0: the York line is the WLS line of y on x with weights 1/sy^2 (statsmodels WLS)
    res = fit_york(PX, PY, 1e-9, 1 / np.sqrt(WY))
    wls = sm.WLS(PY, sm.add_constant(PX), weights=WY).fit()
    assert_allclose(res.coefficients, wls.params, rtol=1e-9)
    # known-weight covariance = WLS covariance without the residual-variance factor
    assert_allclose(res.covariance, wls.normalized_cov_params, rtol=1e-6)


def test_york_error_correlation_changes_the_line():
    base = fit_york(PX, PY, 1 / np.sqrt(WX), 1 / np.sqrt(WY))
    corr = fit_york(PX, PY, 1 / np.sqrt(WX), 1 / np.sqrt(WY), r=0.5)
    assert abs(corr.coefficients[1] - base.coefficients[1]) > 1e-3


def test_eiv_bad_input():
    with pytest.raises(InvalidDataError, match="sx must be positive"):
        fit_york(PX, PY, np.r_[0.0, np.ones(9)], 1.0)
    with pytest.raises(InvalidDataError, match="one number or 10 numbers"):
        fit_york(PX, PY, [1.0, 2.0], 1.0)
    with pytest.raises(InvalidDataError, match="strictly between"):
        fit_york(PX, PY, 1.0, 1.0, r=1.0)
    with pytest.raises(InvalidDataError, match="constant"):
        fit_york(np.ones(5), PY[:5], 1.0, 1.0)
    with pytest.raises(UsageError, match="'known' or 'scaled'"):
        fit_york(PX, PY, 1.0, 1.0, sigma="odr")
    with pytest.raises(UsageError, match="ratio"):
        fit_deming(PX, PY, ratio=-1)
    with pytest.raises(InvalidDataError, match="uncorrelated"):
        fit_deming([1, 2, 3, 4, 5], [1, 2, 0, 2, 1])
