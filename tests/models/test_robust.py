"""Robust fits: Huber M-estimation (vs R MASS::rlm) and Theil-Sen (vs Sen 1968 / scipy)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from numpy.testing import assert_allclose
from scipy import stats
from statsmodels.robust import norms

from refit.errors import InvalidDataError, UsageError
from refit.models.robust import fit_huber, fit_theil_sen

# Stack loss data (Brownlee 1965), as R `datasets::stackloss` (n = 21). Typed from memory;
# they reproduce the stored R fits below to 5 digits, which confirms them.
AIR = [80, 80, 75, 62, 62, 62, 62, 62, 58, 58, 58, 58, 58, 58, 50, 50, 50, 50, 50, 56, 70]
WATER = [27, 27, 25, 24, 22, 23, 24, 24, 23, 18, 18, 17, 18, 19, 18, 18, 19, 19, 20, 20, 20]
ACID = [89, 88, 90, 87, 87, 87, 93, 93, 87, 80, 89, 88, 82, 93, 89, 86, 72, 79, 80, 82, 91]
LOSS = [42, 37, 37, 28, 18, 18, 19, 20, 15, 14, 14, 13, 11, 12, 8, 7, 8, 8, 9, 15, 15]
X_STACK = np.column_stack([AIR, WATER, ACID, np.ones(21)]).astype(float)
Y_STACK = np.array(LOSS, dtype=float)

# R MASS::rlm(stack.loss ~ ., psi = psi.huber, k = 1.345) with MAD scale, as stored in
# statsmodels' test results (statsmodels/robust/tests/results/results_rlm.py, class Huber;
# made with statsmodels/datasets/stackloss/R_stackloss.s). Order: Air, Water, Acid, const.
R_PARAMS = [0.82937387, 0.92610818, -0.12784916, -41.02653105]
R_BSE = [0.11118035, 0.3034081, 0.12885259, 9.8073472]
R_SCALE = 2.4407137948148447
R_WEIGHTS = [1, 1, 0.7858871, 0.50494094, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1, 1,
             0.36814106]


def test_huber_matches_r_mass_rlm_on_stack_loss():
    res = fit_huber(X_STACK, Y_STACK)
    # rtol 1e-3: R's rlm stops when the relative change of the residuals falls below
    # acc = 1e-4, statsmodels when the deviance changes by < 1e-8, so the two agree to
    # about 1e-4 relative (observed: 5e-5), not to all printed digits.
    assert_allclose(res.coefficients, R_PARAMS, rtol=1e-3)
    assert_allclose(np.sqrt(np.diag(res.covariance)), R_BSE, rtol=1e-3)
    assert_allclose(res.residual_std_error, R_SCALE, rtol=1e-3)
    assert_allclose(res.weights, R_WEIGHTS, atol=1e-3)
    assert res.details["converged"]
    assert res.df_resid == 17
    assert_allclose(res.fitted + res.residuals, Y_STACK, rtol=1e-12)


def test_huber_h1_covariance_is_statsmodels_own():
    # statsmodels RLM called directly (general-purpose reference library)
    direct = sm.RLM(Y_STACK, X_STACK, M=norms.HuberT(t=1.345)).fit(cov="H2")
    res = fit_huber(X_STACK, Y_STACK, cov="H2")
    assert_allclose(res.covariance, direct.bcov_scaled, rtol=1e-10)
    assert_allclose(res.coefficients, direct.params, rtol=1e-10)


def test_huber_with_a_huge_k_is_ordinary_least_squares():
    # psi(u) = u when k exceeds every |u|: the M-estimate is the OLS fit (statsmodels OLS;
    # classic values intercept -39.9197, Air 0.71564, Water 1.29529, Acid -0.15212)
    res = fit_huber(X_STACK, Y_STACK, k=1e6)
    ols = sm.OLS(Y_STACK, X_STACK).fit()
    assert_allclose(res.coefficients, ols.params, rtol=1e-8)
    assert_allclose(res.coefficients, [0.71564, 1.29529, -0.15212, -39.9197], rtol=1e-4)
    assert (res.weights == 1).all()


def test_huber_bad_input():
    with pytest.raises(UsageError, match="cov must be one of"):
        fit_huber(X_STACK, Y_STACK, cov="sandwich")
    y = Y_STACK.copy()
    y[2] = np.inf
    with pytest.raises(InvalidDataError, match="row 3"):
        fit_huber(X_STACK, y)
    with pytest.raises(InvalidDataError, match="rank deficient"):
        fit_huber(np.column_stack([X_STACK, X_STACK[:, 0] * 2]), Y_STACK)
    x = np.arange(10.0)
    with pytest.raises(InvalidDataError, match="exactly on"):
        fit_huber(np.column_stack([np.ones(10), x]), 2 * x + 1)


# Sen (1968) example, as used in scipy's own tests (scipy/stats/tests/test_mstats_basic.py
# and test_stats.py, theilslopes): slope 4.0, intercept 4.0 ('separate'), 6.0 ('joint');
# slope limits 26/7 and 4.375 (COMPUTED with scipy 1.17.1; 93% and 95% give the same
# limits because only 21 pairwise slopes exist).
SEN_X = [1, 2, 3, 4, 10, 12, 18]
SEN_Y = [9, 15, 19, 20, 45, 55, 78]


@pytest.mark.parametrize("level", [0.93, 0.95])
def test_theil_sen_reproduces_sen_1968_example(level):
    joint = fit_theil_sen(SEN_X, SEN_Y, level=level)
    separate = fit_theil_sen(SEN_X, SEN_Y, level=level, intercept="separate")
    assert_allclose(joint.coefficients, [6.0, 4.0], rtol=1e-12)
    assert_allclose(separate.coefficients, [4.0, 4.0], rtol=1e-12)
    assert_allclose(joint.details["slope_interval"], [26 / 7, 4.375], rtol=1e-12)
    assert joint.details["intercepts"] == {"joint": 6.0, "separate": 4.0}
    assert np.isnan(joint.covariance).all()
    # 'joint' makes the median residual zero
    assert np.median(joint.residuals) == 0.0


def test_theil_sen_ignores_a_fifth_of_gross_outliers():
    # COMPUTED property: with 2 of 10 points corrupted, 28 of the 45 pairwise slopes are
    # exact (5), more than half, so the median slope is exactly 5 (breakdown ~29%).
    x = np.arange(0.0, 20.0, 2.0)
    y = 5 * x - 3
    y[[2, 7]] = 1000.0
    res = fit_theil_sen(x, y)
    assert res.coefficients[1] == 5.0
    assert res.coefficients[0] == -3.0
    assert abs(sm.OLS(y, sm.add_constant(x)).fit().params[1] - 5) > 0.5   # OLS is pulled (4.24)


def test_theil_sen_bootstrap_covariance_equals_explicit_resamples():
    rng = np.random.default_rng(3)
    x = rng.uniform(0, 10, 25)
    y = 1 + 2 * x + rng.standard_t(3, 25)
    res = fit_theil_sen(x, y, n_boot=200, seed=9, intercept="separate")
    # the same stream of indices, drawn in one batch; each resample fitted by scipy itself
    idx = np.random.default_rng(9).integers(0, 25, size=(200, 25))
    draws = []
    for i in idx:
        r = stats.theilslopes(y[i], x[i], method="separate")
        draws.append([r.intercept, r.slope])
    assert_allclose(res.covariance, np.cov(np.array(draws), rowvar=False), rtol=1e-10)
    assert (np.diag(res.covariance) > 0).all()


def test_theil_sen_bad_input():
    with pytest.raises(InvalidDataError, match="constant"):
        fit_theil_sen([3, 3, 3, 3], [1, 2, 3, 4])
    with pytest.raises(InvalidDataError, match="missing or infinite"):
        fit_theil_sen([1, 2, np.nan, 4], [1, 2, 3, 4])
    with pytest.raises(UsageError, match="'joint' or 'separate'"):
        fit_theil_sen(SEN_X, SEN_Y, intercept="mean")
    with pytest.raises(InvalidDataError, match="straight line"):
        fit_theil_sen(np.ones((7, 2)), SEN_Y)


# ----------------------------------------------------------------------------- large tables
# Above THEIL_SEN_EXACT_MAX rows the slope is the median of a seeded random sample of
# pairwise slopes (a standard approximation; Wilcox 2012, from memory); above
# THEIL_SEN_BOOT_ROWS rows the bootstrap resamples that many rows (m-out-of-n, covariance
# scaled by m/n).
def _contaminated_line(n, seed):
    rng = np.random.default_rng(seed)
    x = rng.uniform(0, 100, n)
    y = 3 + 2 * x + rng.normal(0, 5, n)
    bad = rng.random(n) < 0.1
    y[bad] += rng.uniform(100, 500, bad.sum())      # a tenth of gross outliers, one side
    return x, y


def test_theil_sen_sampled_pairs_match_exact_on_the_same_rows(monkeypatch):
    # reference: scipy.stats.theilslopes (all 4.5e6 pairs) on the same 3,000 rows. With
    # 2e6 of them sampled the median moves by well under 5% of Sen's interval width
    # (sampling error of a median ~ 1/sqrt(pairs); observed ~1%).
    import refit.models.robust as rb

    x, y = _contaminated_line(3000, 41)
    monkeypatch.setattr(rb, "THEIL_SEN_EXACT_MAX", 1000)
    got = fit_theil_sen(x, y)
    ref = stats.theilslopes(y, x, 0.95)
    width = ref.high_slope - ref.low_slope
    assert got.details["slope_method"] == "sampled-pairs"
    assert abs(got.coefficients[1] - ref.slope) < 0.05 * width
    # x spans 0-100, so a slope shift d moves the joint intercept by at most ~100 d
    assert abs(got.coefficients[0] - np.median(y - ref.slope * x)) < 100 * 0.05 * width
    low, high = got.details["slope_interval"]
    assert abs(low - ref.low_slope) < 0.1 * width
    assert abs(high - ref.high_slope) < 0.1 * width


def test_theil_sen_20000_rows_fast_bounded_and_close_to_exact_subset():
    # reference: the exact scipy.stats.theilslopes slope of a seeded 3,000-row subset (where
    # all pairs are affordable) and its 95% Sen interval: the full-table estimate, with
    # ~6.7x more rows, must fall inside that interval (it is far tighter than it).
    import time
    import tracemalloc

    x, y = _contaminated_line(20_000, 42)
    tracemalloc.start()
    t0 = time.perf_counter()
    got = fit_theil_sen(x, y, n_boot=500, seed=3)
    seconds = time.perf_counter() - t0
    peak = tracemalloc.get_traced_memory()[1]
    tracemalloc.stop()
    sub = np.random.default_rng(7).choice(20_000, 3000, replace=False)
    ref = stats.theilslopes(y[sub], x[sub], 0.95)
    assert got.details["slope_method"] == "sampled-pairs"
    assert ref.low_slope < got.coefficients[1] < ref.high_slope
    assert abs(got.coefficients[1] - 2.0) < 0.01          # true slope 2 (invented line)
    assert peak < 400 * 2**20                               # exact pairs would need ~1.6 GB
    assert seconds < 60                                     # seconds, not minutes
    se = np.sqrt(np.diag(got.covariance))
    assert np.all(np.isfinite(se)) and got.details["boot_rows"] == 500
    # the slope SE is of the size of Sen's interval on the full table: 95% half-width / 1.96
    half = 0.5 * (got.details["slope_interval"][1] - got.details["slope_interval"][0])
    assert 0.5 < se[1] / (half / 1.96) < 2.0


def test_theil_sen_m_out_of_n_covariance_matches_full_bootstrap(monkeypatch):
    # reference: the exact case bootstrap of all n rows (checked against scipy resample by
    # resample above); the default m-out-of-n covariance (m = 500 of 1,200 rows, scaled by
    # m/n) agrees within 30% on each SE (both are Monte Carlo estimates, 200 and 500
    # resamples: ~5-10% noise each on a SE).
    import refit.models.robust as rb

    x, y = _contaminated_line(1200, 43)
    part = fit_theil_sen(x, y, n_boot=500, seed=1)
    assert part.details["boot_rows"] == 500
    monkeypatch.setattr(rb, "THEIL_SEN_BOOT_ROWS", 5000)      # every resample has all n rows
    exact = fit_theil_sen(x, y, n_boot=200, seed=1)
    assert "boot_rows" not in exact.details
    assert_allclose(np.sqrt(np.diag(part.covariance)), np.sqrt(np.diag(exact.covariance)),
                    rtol=0.3)


def test_theil_sen_bootstrap_takes_seconds_at_any_size():
    # the default interval (500 resamples, as refit.models.fitting.THEIL_SEN_BOOT) at 2,500 rows:
    # all-row resamples took a minute or more there; m-out-of-n keeps it to a few seconds
    import time

    x, y = _contaminated_line(2500, 44)
    t0 = time.perf_counter()
    got = fit_theil_sen(x, y, n_boot=500, seed=5)
    seconds = time.perf_counter() - t0
    assert seconds < 10, seconds
    assert got.details["boot_rows"] == 500 and got.details["slope_method"] == "exact"
    assert np.all(np.isfinite(got.covariance)) and (np.diag(got.covariance) > 0).all()


def test_theil_sen_bootstrap_uses_all_rows_up_to_500():
    # reference: scipy.stats.theilslopes on each resample of all 500 rows, the same stream
    # of indices as the batch (as the 25-row test above): at the threshold nothing changes
    x, y = _contaminated_line(500, 45)
    res = fit_theil_sen(x, y, n_boot=100, seed=2, intercept="separate")
    assert "boot_rows" not in res.details
    idx = np.random.default_rng(2).integers(0, 500, size=(100, 500))
    draws = [[r.intercept, r.slope] for r in
             (stats.theilslopes(y[i], x[i], method="separate") for i in idx)]
    assert_allclose(res.covariance, np.cov(np.array(draws), rowvar=False), rtol=1e-10)
