"""Broken-stick fit: seeded synthetic hinge with a known breakpoint, a straight line, and
cross-checks with statsmodels OLS and scipy curve_fit."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from scipy import stats
from scipy.optimize import curve_fit

from refit.errors import InvalidDataError, UsageError
from refit.models.segmented import _profile_rss, _profile_rss_sums, fit_broken_stick

TRUE_BREAK = 60.0


def hinge(n=200, seed=0, sd=5.0):
    """Known process: y = 10 + 2 min(x, 60) + N(0, sd^2), x ~ U(0, 100): the response
    rises with slope 2 and flattens (slope 0) beyond the breakpoint 60."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 100, n)
    return x, 10 + 2 * np.minimum(x, TRUE_BREAK) + rng.normal(0, sd, n)


def model(x, b0, b1, b2, c):
    return b0 + b1 * x + b2 * np.maximum(x - c, 0.0)


def test_hinge_breakpoint_slopes_and_verdict():
    x, y = hinge()
    res = fit_broken_stick(x, y)
    # the known values lie within 3 standard errors (a 0.3% two-sided miss rate each)
    assert abs(res.breakpoint - TRUE_BREAK) < 3 * res.breakpoint_se
    assert abs(res.slope_left - 2.0) < 3 * res.slope_left_se
    assert abs(res.slope_right - 0.0) < 3 * res.slope_right_se
    lo, hi = res.breakpoint_interval
    assert lo < TRUE_BREAK < hi and hi - lo < 10
    assert res.clearly_better and "clearly better" in res.verdict
    assert res.f_pvalue < 1e-10 and res.delta_bic > 100


def test_straight_line_is_not_better():
    rng = np.random.default_rng(1)
    x = rng.uniform(0, 100, 200)
    y = 3 + 0.5 * x + rng.normal(0, 5, 200)
    res = fit_broken_stick(x, y)
    assert not res.clearly_better
    assert "not better" in res.verdict
    # with no bend the breakpoint is poorly determined: a wide interval, a large SE
    assert res.breakpoint_interval[1] - res.breakpoint_interval[0] > 40


def test_false_alarm_rate_on_straight_lines_is_small():
    # 200 seeded straight lines (n = 40): the nominal F test alone would fire more often
    # than 1% (Davies 1987); with the BIC condition the rate must stay at or below 2%
    # (binomial: 4 of 200 at a true rate of 0.5% has probability below 2%).
    rng = np.random.default_rng(2)
    alarms = 0
    for _ in range(200):
        x = rng.uniform(0, 10, 40)
        alarms += fit_broken_stick(x, 1 + x + rng.normal(0, 1, 40)).clearly_better
    assert alarms <= 4


def test_fit_at_the_breakpoint_equals_statsmodels_ols_and_bic():
    x, y = hinge(seed=3)
    res = fit_broken_stick(x, y)
    c = res.breakpoint
    X = np.column_stack([np.ones_like(x), x, np.maximum(x - c, 0)])
    seg = sm.OLS(y, X).fit()                      # statsmodels at the fixed breakpoint
    line = sm.OLS(y, X[:, :2]).fit()
    assert_allclose(res.coefficients[:3], seg.params, rtol=1e-9)
    assert_allclose(res.rss, seg.ssr, rtol=1e-10)
    assert_allclose(res.rss_line, line.ssr, rtol=1e-10)
    # statsmodels' BIC counts neither sigma nor c; ours counts both, so ours is lower by
    # ln(n) for the extra breakpoint parameter (sigma cancels)
    assert_allclose(res.delta_bic, line.bic - seg.bic - np.log(len(x)), rtol=1e-10)
    # F on (2, n - 4) df from the two residual sums of squares
    f = ((line.ssr - seg.ssr) / 2) / (seg.ssr / (len(x) - 4))
    assert_allclose(res.f_pvalue, stats.f.sf(f, 2, len(x) - 4), rtol=1e-8)


def test_profile_rss_equals_explicit_refits():
    x, y = hinge(n=60, seed=4)
    cs = np.array([20.0, 45.5, 60.0, 71.3])
    explicit = [sm.OLS(y, np.column_stack([np.ones_like(x), x, np.maximum(x - c, 0)]))
                .fit().ssr for c in cs]
    assert_allclose(_profile_rss(x, y, cs), explicit, rtol=1e-10)


def test_estimate_and_covariance_match_scipy_curve_fit():
    x, y = hinge(seed=5)
    res = fit_broken_stick(x, y)
    # scipy's Levenberg-Marquardt from a nearby start, numerical Jacobian; its pcov is
    # s^2 (J'J)^-1 like ours. rtol 1e-3 for the covariance: finite-difference Jacobian.
    start = res.coefficients + np.array([0.5, 0.05, -0.05, 1.0])
    popt, pcov = curve_fit(model, x, y, p0=start)
    assert_allclose(popt, res.coefficients, rtol=1e-6)
    assert_allclose(pcov, res.covariance, rtol=1e-3, atol=1e-8)


def test_profile_interval_ends_sit_on_the_f_cut():
    x, y = hinge(n=80, seed=6, sd=8.0)
    res = fit_broken_stick(x, y, level=0.9)
    n = len(x)
    cut = res.rss * (1 + stats.f.ppf(0.9, 1, n - 4) / (n - 4))
    assert_allclose(_profile_rss(x, y, list(res.breakpoint_interval)), cut, rtol=1e-8)


def test_segmented_bad_input():
    with pytest.raises(InvalidDataError, match="at least 7"):
        fit_broken_stick([1, 2, 3, 4, 5], [1, 2, 3, 3, 3])
    with pytest.raises(InvalidDataError, match="constant"):
        fit_broken_stick(np.ones(10), np.arange(10.0))
    with pytest.raises(InvalidDataError, match="no breakpoint"):
        fit_broken_stick([1, 1, 1, 1, 1, 1, 1, 2], np.arange(8.0))
    with pytest.raises(InvalidDataError, match="missing or infinite"):
        fit_broken_stick([1, 2, 3, 4, 5, 6, np.nan, 8], np.arange(8.0))
    with pytest.raises(UsageError, match="level"):
        fit_broken_stick(np.arange(10.0), np.arange(10.0), level=1.5)


def test_running_sum_profile_equals_explicit_refits():
    # statsmodels OLS refits at fixed breakpoints are the reference; the running-sum
    # profile (used for the whole grid) must match them, also next to the ends where
    # only 3 rows lie beyond the hinge and at breakpoints equal to data values.
    x, y = hinge(n=300, seed=8)
    xs = np.sort(x)
    cs = np.r_[xs[2], xs[3], 17.25, xs[150], TRUE_BREAK, 88.8, xs[-4], xs[-3]]
    explicit = [sm.OLS(y, np.column_stack([np.ones_like(x), x, np.maximum(x - c, 0)]))
                .fit().ssr for c in cs]
    assert_allclose(_profile_rss_sums(x, y, cs), explicit, rtol=1e-9)
    grid = np.unique(x)[3:-3]
    assert_allclose(_profile_rss_sums(x, y, grid), _profile_rss(x, y, grid), rtol=1e-9)


def test_hundred_thousand_rows_in_bounded_memory_and_seconds():
    # 10^5 rows with ~2,400 distinct x (0.1 steps, as a calibration table has): every
    # distinct value is a candidate breakpoint. Limits: peak traced memory < 500 MB and
    # a few seconds (the former n x candidates matrix needed ~6 GB and ~40 s).
    import time
    import tracemalloc

    x, y = hinge(n=100_000, seed=9, sd=10.0)
    x = np.round(x, 1)
    tracemalloc.start()
    t0 = time.perf_counter()
    try:
        res = fit_broken_stick(x, y)
        seconds = time.perf_counter() - t0
        peak = tracemalloc.get_traced_memory()[1]
    finally:
        tracemalloc.stop()
    assert peak < 500e6
    assert seconds < 15.0
    assert abs(res.breakpoint - TRUE_BREAK) < 3 * res.breakpoint_se
    assert res.clearly_better
