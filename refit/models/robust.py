"""Robust straight lines and linear models: Huber M-estimation and Theil-Sen.

Both return :class:`refit.models.lsq.EstimatorResult`. Huber works on any design matrix (it is
robust to outliers in the response, not to high-leverage points in the predictors);
Theil-Sen fits a straight line y = a + b x.

References
----------
.. [1] Huber, P. J. (1964). Robust estimation of a location parameter. Annals of
   Mathematical Statistics 35:73-101.
.. [2] Huber, P. J. (1981). *Robust Statistics*. Wiley (the small-sample factor kappa).
.. [3] Venables, W. N. & Ripley, B. D. (2002). *Modern Applied Statistics with S*, 4th ed.
   Springer, sect. 6.5 (``MASS::rlm`` and its ``summary`` standard errors).
.. [4] Theil, H. (1950). A rank-invariant method of linear and polynomial regression
   analysis. Proc. Kon. Ned. Akad. Wetensch. A 53.
.. [5] Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau.
   JASA 63:1379-1389.
.. [6] Wilcox, R. R. (2012). *Introduction to Robust Estimation and Hypothesis Testing*,
   3rd ed. Academic Press (approximating Theil-Sen by the median of a random sample of
   pairwise slopes; from memory).
.. [7] Bickel, P. J., Goetze, F. & van Zwet, W. R. (1997). Resampling fewer than n
   observations. Statistica Sinica 7:1-31 (the m-out-of-n bootstrap; from memory).
"""

from __future__ import annotations

import warnings

import numpy as np

from refit.errors import InvalidDataError, UsageError
from refit.models.linalg import _as_design, _chunks, _line_xy, _qr
from refit.models.lsq import EstimatorResult

__all__ = ["fit_huber", "fit_theil_sen"]

_COV_CHOICES = ("rlm", "H1", "H2", "H3")
_MAD_TO_SIGMA = 1.482602218505602   # 1 / Phi^-1(3/4): MAD of a normal sample -> sigma
#: above this many rows Theil-Sen no longer forms all n(n-1)/2 pairwise slopes (at 80,000
#: rows that would be ~3.2e9 slopes, tens of GiB): the slope is the median of a seeded
#: random sample of :data:`THEIL_SEN_SAMPLED_PAIRS` pairs.
THEIL_SEN_EXACT_MAX = 3000
THEIL_SEN_SAMPLED_PAIRS = 2_000_000
#: the bootstrap resamples all n rows up to this many rows; above, it resamples this many
#: (m-out-of-n) and rescales the covariance by m/n, so its cost (n_boot m(m-1)/2 slopes,
#: ~3 s for 500 resamples on one core) no longer grows with n.
THEIL_SEN_BOOT_ROWS = 500
_ZERO_SCALE = ("fit_huber: more than half of the rows lie exactly on a fitted line, so the "
               "robust scale (median absolute residual) is zero; use OLS, or check for "
               "duplicated or copied rows.")


def fit_huber(X, y, *, k=1.345, cov="rlm", max_iter=100) -> EstimatorResult:
    """Huber M-estimate of a linear model by IRLS with a MAD scale.

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design matrix (with its intercept column, if any).
    y : array_like, shape (n,)
        Response [units of y].
    k : float
        Tuning constant of Huber's psi in units of the scale; 1.345 gives 95% efficiency
        at the normal distribution.
    cov : {'rlm', 'H1', 'H2', 'H3'}
        Covariance of the coefficients. 'rlm' (default) as ``summary.rlm`` of R's MASS
        (method "XtX", [3]_); 'H1'-'H3' as statsmodels' RLM (Huber 1981 variants).
    max_iter : int
        Maximum IRLS iterations.

    Returns
    -------
    EstimatorResult
        ``residual_std_error`` is the final robust scale s [units of y]; ``weights`` the
        final IRLS weights min(1, k/|e_i/s|); ``details`` holds ``scale``, ``k``, ``cov``,
        ``iterations`` and ``converged``.

    Notes
    -----
    Minimises sum rho(e_i / s), rho(u) = u^2/2 for |u| <= k and k|u| - k^2/2 otherwise
    [1]_, by iteratively reweighted least squares (statsmodels ``RLM`` with ``HuberT``).
    The scale is re-estimated at every step as s = median(|e_i|)/0.6745, as in R
    ``MASS::rlm``. The 'rlm' covariance is (s^2 sum psi(u_i)^2 / (n - p)) (kappa/m)^2
    (X'X)^-1 with m = mean psi'(u_i) and kappa = 1 + p var(psi'(u_i)) / (n m^2) [2]_ [3]_.
    """
    if cov not in _COV_CHOICES:
        raise UsageError(f"fit_huber: cov must be one of {', '.join(_COV_CHOICES)}; "
                         f"got {cov!r}.")
    if not k > 0:
        raise UsageError(f"fit_huber: k must be positive (1.345 is usual); got {k!r}.")
    X, y = _as_design(X, y, min_extra=2, who="fit_huber")
    _, R = _qr(X, "fit_huber")
    from statsmodels.robust import norms
    from statsmodels.robust.robust_linear_model import RLM

    tiny = 1e-10 * max(np.abs(y).max(), 1e-300)
    ols_resid = y - X @ np.linalg.lstsq(X, y, rcond=None)[0]
    if np.median(np.abs(ols_resid)) <= tiny:
        raise InvalidDataError(_ZERO_SCALE)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        res = RLM(y, X, M=norms.HuberT(t=k)).fit(
            scale_est="mad", cov="H1" if cov == "rlm" else cov, maxiter=max_iter)
    b = np.asarray(res.params, dtype=float)
    scale = float(res.scale)
    if not scale > tiny:
        raise InvalidDataError(_ZERO_SCALE)
    e = y - X @ b
    if cov == "rlm":
        covariance = _rlm_covariance(e, scale, k, R)
    else:
        covariance = np.asarray(res.bcov_scaled, dtype=float)
    iterations = int(res.fit_history["iteration"])
    n, p = X.shape
    return EstimatorResult(
        coefficients=b, covariance=covariance, residual_std_error=scale,
        df_resid=float(n - p), fitted=X @ b, residuals=e,
        weights=np.minimum(1.0, k / np.maximum(np.abs(e / scale), 1e-300)),
        details={"method": "huber", "k": k, "scale": scale, "cov": cov,
                 "iterations": iterations, "converged": iterations < max_iter})


def _rlm_covariance(e, scale, k, R):
    """Covariance as R's ``summary.rlm`` (method 'XtX') for Huber's psi; R from X = QR."""
    n, p = e.shape[0], R.shape[0]
    u = e / scale
    psi = np.clip(u, -k, k)
    dpsi = (np.abs(u) <= k).astype(float)
    m = dpsi.mean()
    if m == 0.0:
        raise InvalidDataError("fit_huber: no residual lies within k scales of the fit, so "
                               "the covariance is undefined; check the data or raise k.")
    kappa = 1.0 + p * dpsi.var(ddof=1) / (n * m**2)
    stddev2 = scale**2 * np.sum(psi**2) / (n - p) * (kappa / m) ** 2
    Rinv = np.linalg.solve(R, np.eye(p))
    return stddev2 * (Rinv @ Rinv.T)


def fit_theil_sen(x, y, *, level=0.95, intercept="joint", n_boot=0,
                  seed=0) -> EstimatorResult:
    """Theil-Sen straight line y = a + b x: the median of pairwise slopes.

    Parameters
    ----------
    x : array_like, shape (n,)
        Predictor [units of x].
    y : array_like, shape (n,)
        Response [units of y].
    level : float
        Level of the slope confidence interval (from Kendall's tau, as scipy computes it).
    intercept : {'joint', 'separate'}
        'joint' (default): a = median(y_i - b x_i), so the residuals have median zero.
        'separate': a = median(y) - b median(x) (Conover; scipy's default).
    n_boot : int
        0 (default): no covariance (NaN-filled). Otherwise the covariance of (a, b) from
        this many case resamples (seeded), computed in batches; each resample has n rows
        up to :data:`THEIL_SEN_BOOT_ROWS` rows, and that many above (see Notes).
    seed : int
        Seed of the case resampling and, above :data:`THEIL_SEN_EXACT_MAX` rows, of the
        pair sample.

    Returns
    -------
    EstimatorResult
        ``coefficients`` = [a, b]; ``residual_std_error`` = 1.4826 median|e_i| (a
        normal-consistent robust sigma [units of y]); ``details['slope_interval']`` the
        (low, high) slope limits, ``details['intercepts']`` both intercept conventions,
        ``details['slope_method']`` ``exact`` or ``sampled-pairs`` (then also
        ``details['n_pairs']``); with ``n_boot`` above :data:`THEIL_SEN_BOOT_ROWS` rows,
        ``details['boot_rows']`` (the m of the m-out-of-n bootstrap).

    Notes
    -----
    b = median over pairs with x_i != x_j of (y_j - y_i)/(x_j - x_i) [4]_ [5]_, via
    ``scipy.stats.theilslopes``. Breakdown point about 29%.

    Large tables (n > :data:`THEIL_SEN_EXACT_MAX`): the n(n-1)/2 slopes no longer fit in
    memory, so b is the median of :data:`THEIL_SEN_SAMPLED_PAIRS` pairwise slopes drawn
    uniformly at random (seeded), a standard approximation of the Theil-Sen slope [6]_
    (its extra sampling error is of order 1/sqrt(pairs), well below the estimator's own
    error of order 1/sqrt(n) at these sizes). The slope interval takes Sen's ranks
    (eq. 2.6 of [5]_) as fractions of the sampled slopes.

    Bootstrap (``n_boot`` > 0): up to m = :data:`THEIL_SEN_BOOT_ROWS` (500) rows every
    resample draws n rows with replacement and the covariance is that of the resampled
    (a, b). Above 500 rows each resample draws m = 500 rows (m-out-of-n, [7]_), is fitted
    exactly, and the covariance is scaled by m/n, since the estimator's variance falls as
    1/n. The work is then n_boot m(m-1)/2 slopes at any n (a few seconds for 500
    resamples) instead of n_boot n(n-1)/2 (a minute or more at 2,000-3,000 rows). On a
    seeded 1,200-row line the standard errors stay within 30% of the full bootstrap's,
    which is of the order of the Monte Carlo noise of both (tests/models/test_robust.py).
    """
    if intercept not in ("joint", "separate"):
        raise UsageError(f"fit_theil_sen: intercept must be 'joint' or 'separate'; "
                         f"got {intercept!r}.")
    if not 0 < level < 1:
        raise UsageError(f"fit_theil_sen: level must lie between 0 and 1; got {level!r}.")
    x, y = _line_xy(x, y, "fit_theil_sen")
    n = len(x)
    if n > THEIL_SEN_EXACT_MAX:
        b, interval = _sampled_slope(x, y, level, seed)
        details = {"slope_method": "sampled-pairs", "n_pairs": THEIL_SEN_SAMPLED_PAIRS}
    else:
        from scipy import stats

        res = stats.theilslopes(y, x, level, method=intercept)
        b, interval = float(res.slope), (float(res.low_slope), float(res.high_slope))
        details = {"slope_method": "exact"}
    intercepts = {"joint": float(np.median(y - b * x)),
                  "separate": float(np.median(y) - b * np.median(x))}
    a = intercepts[intercept]
    e = y - (a + b * x)
    covariance = np.full((2, 2), np.nan)
    if n_boot:
        rows = THEIL_SEN_BOOT_ROWS if n > THEIL_SEN_BOOT_ROWS else None
        draws = _theil_sen_bootstrap(x, y, int(n_boot), seed, intercept, rows)
        covariance = np.cov(draws, rowvar=False) * ((rows or n) / n)
        if rows:
            details["boot_rows"] = rows
    return EstimatorResult(
        coefficients=np.array([a, b]), covariance=covariance,
        residual_std_error=float(_MAD_TO_SIGMA * np.median(np.abs(e))),
        df_resid=float(n - 2), fitted=a + b * x, residuals=e, weights=None,
        details={"method": "theil-sen", "intercept": intercept, "intercepts": intercepts,
                 "slope_interval": interval, "level": level, "n_boot": int(n_boot),
                 "seed": seed, **details})


def _sampled_slope(x, y, level, seed):
    """Median of a seeded random sample of pairwise slopes and Sen's interval on it."""
    from scipy import stats

    n = len(x)
    rng = np.random.default_rng(seed)
    i = rng.integers(0, n, THEIL_SEN_SAMPLED_PAIRS)
    j = rng.integers(0, n - 1, THEIL_SEN_SAMPLED_PAIRS)
    j += j >= i                                   # a uniform pair with i != j
    dx = x[j] - x[i]
    keep = dx != 0
    slopes = np.sort((y[j] - y[i])[keep] / dx[keep])
    z = float(stats.norm.ppf((1.0 - max(level, 1.0 - level)) / 2.0))
    ties = sum(float(k * (k - 1) * (2 * k + 5))
               for v in (x, y) for k in np.unique(v, return_counts=True)[1] if k > 1)
    sigma = np.sqrt((n * (n - 1.0) * (2 * n + 5) - ties) / 18.0)
    n_all = n * (n - 1) / 2.0 * keep.mean()       # estimated count of slopes with dx != 0
    frac = np.clip([(n_all + z * sigma) / (2 * n_all), (n_all - z * sigma) / (2 * n_all)],
                   0.0, 1.0)
    low, high = np.quantile(slopes, frac)
    return float(np.median(slopes)), (float(low), float(high))


def _theil_sen_bootstrap(x, y, n_boot, seed, intercept, rows=None):
    """(n_boot, 2) intercepts and slopes of case resamples of ``rows`` rows (default n;
    pairs with equal x skipped).

    The slopes of a resample are the original pairwise slopes, pair (i, j) repeated
    c_i c_j times (c = how often each row was drawn; a row paired with its own copy has
    dx = 0 and is skipped). So the original slopes are sorted once and each resample's
    median is a weighted median: the cumulative counts in slope order, searched at the
    middle rank(s). Same draws, same values, same numbers as forming every resampled
    pair and taking ``numpy.nanmedian``, at a fraction of the cost."""
    if n_boot < 100:
        raise UsageError(f"fit_theil_sen: n_boot must be 0 or at least 100; got {n_boot}.")
    n = len(x)
    m = rows or n
    if m < n:  # m-out-of-n: the m(m-1)/2 resampled pairs are fewer than the n(n-1)/2
        return _theil_sen_bootstrap_pairs(x, y, n_boot, seed, intercept, m)
    rng = np.random.default_rng(seed)
    i, j = np.triu_indices(n, 1)
    keep = x[i] != x[j]
    i, j = i[keep], j[keep]
    slopes = (y[j] - y[i]) / (x[j] - x[i])
    order = np.argsort(slopes, kind="stable")
    i, j, slopes = i[order], j[order], slopes[order]
    out = []
    for _, size in _chunks(n_boot, len(i)):
        idx = rng.integers(0, n, size=(size, m))
        counts = np.bincount((idx + n * np.arange(size)[:, None]).ravel(),
                             minlength=size * n).reshape(size, n).astype(np.int32)
        cum = np.cumsum(counts[:, i] * counts[:, j], axis=1, dtype=np.int32)
        total = cum[:, -1] if cum.shape[1] else np.zeros(size, dtype=np.int32)
        lo_r, hi_r = (total - 1) // 2, total // 2          # 0-based middle ranks
        pos_lo = (cum <= lo_r[:, None]).sum(axis=1)         # first position past the rank
        pos_hi = (cum <= hi_r[:, None]).sum(axis=1)
        ok = total > 0
        b = np.full(size, np.nan)
        last = max(len(slopes) - 1, 0)
        b[ok] = (slopes[np.minimum(pos_lo[ok], last)] + slopes[np.minimum(pos_hi[ok], last)]) / 2
        xb, yb = x[idx], y[idx]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)   # all-tied resample -> NaN
            if intercept == "joint":
                a = np.median(yb - b[:, None] * xb, axis=1)
            else:
                a = np.median(yb, axis=1) - b * np.median(xb, axis=1)
        out.append(np.column_stack([a, b]))
    draws = np.vstack(out)
    return draws[np.isfinite(draws).all(axis=1)]


def _theil_sen_bootstrap_pairs(x, y, n_boot, seed, intercept, m):
    """As :func:`_theil_sen_bootstrap`, forming every resampled pair (m-out-of-n)."""
    n = len(x)
    rng = np.random.default_rng(seed)
    i, j = np.triu_indices(m, 1)
    out = []
    for _, size in _chunks(n_boot, len(i)):
        idx = rng.integers(0, n, size=(size, m))
        xb, yb = x[idx], y[idx]
        dx = xb[:, j] - xb[:, i]
        with np.errstate(divide="ignore", invalid="ignore"):
            slopes = np.where(dx != 0, (yb[:, j] - yb[:, i]) / dx, np.nan)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)   # all-tied resample -> NaN
            b = np.nanmedian(slopes, axis=1)
        if intercept == "joint":
            a = np.median(yb - b[:, None] * xb, axis=1)
        else:
            a = np.median(yb, axis=1) - b * np.median(xb, axis=1)
        out.append(np.column_stack([a, b]))
    draws = np.vstack(out)
    return draws[np.isfinite(draws).all(axis=1)]
