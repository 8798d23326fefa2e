"""Straight lines with errors in both variables: York's method and Deming regression.

Both fit y = a + b x when x and y are measured with error, return
:class:`refit.models.lsq.EstimatorResult` with ``coefficients = [a, b]``, and need no ODR package
(scipy.odr was removed in SciPy 1.18).

References
----------
.. [1] York, D. (1966). Least-squares fitting of a straight line. Canadian Journal of
   Physics 44:1079-1086.
.. [2] York, D., Evensen, N. M., Lopez Martinez, M. & De Basabe Delgado, J. (2004).
   Unified equations for the slope, intercept, and standard errors of the best straight
   line. American Journal of Physics 72(3):367-375.
.. [3] Williamson, J. H. (1968). Least-squares fitting of a straight line. Canadian Journal
   of Physics 46:1845-1847.
.. [4] Deming, W. E. (1943). *Statistical Adjustment of Data*. Wiley.
.. [5] Boggs, P. T., Byrd, R. H. & Schnabel, R. B. (1987). A stable and efficient
   algorithm for nonlinear orthogonal distance regression. SIAM J. Sci. Stat. Comput.
   8:1052-1078 (the residual-variance scaling of ODRPACK's standard errors).
"""

from __future__ import annotations

import numpy as np

from refit.errors import InvalidDataError, UsageError
from refit.models.linalg import _line_xy
from refit.models.lsq import EstimatorResult

__all__ = ["fit_york", "fit_deming"]


def _per_point(value, n, name, who, *, positive=True):
    arr = np.broadcast_to(np.asarray(value, dtype=float), (n,)).copy() \
        if np.ndim(value) == 0 or np.shape(value) == (n,) else None
    if arr is None:
        raise InvalidDataError(f"{who}: {name} must be one number or {n} numbers (one per "
                               f"row); got shape {np.shape(value)}.")
    if not np.isfinite(arr).all():
        raise InvalidDataError(f"{who}: {name} holds missing or infinite values; give every "
                               f"row a finite {name}.")
    if positive and (arr <= 0).any():
        row = int(np.argmax(arr <= 0)) + 1
        raise InvalidDataError(f"{who}: {name} must be positive (a measurement standard "
                               f"deviation); row {row} has {arr[row - 1]!r}.")
    return arr


def fit_york(x, y, sx, sy, *, r=0.0, sigma="known", tol=1e-15,
             max_iter=200) -> EstimatorResult:
    """York's best straight line with errors in x and y (York et al. 2004 equations).

    Parameters
    ----------
    x, y : array_like, shape (n,)
        Measured values [units of x], [units of y].
    sx, sy : float or array_like, shape (n,)
        Standard deviations of the x and y measurement errors [units of x], [units of y].
    r : float or array_like, shape (n,)
        Correlation between the x and y errors of each point (-1 < r < 1).
    sigma : {'known', 'scaled'}
        'known' (default): standard errors assume the stated sx, sy are exact (York).
        'scaled': multiplied by sqrt(S/(n - 2)), the convention of ODRPACK and most
        programs ([5]_), appropriate when the error sizes are only known up to a factor.
    tol : float
        Convergence of the slope: relative change below ``tol``.
    max_iter : int
        Maximum iterations.

    Returns
    -------
    EstimatorResult
        ``coefficients`` [a, b], ``covariance`` 2x2 (see ``sigma``), ``fitted`` a + b x,
        ``residual_std_error`` sqrt(sum(y - a - b x)^2/(n - 2)) [units of y] (descriptive).
        ``details``: ``chi2`` (S), ``reduced_chi2`` S/(n - 2), ``p_value``
        P(chi2_(n-2) > S) (goodness of fit of the stated errors), ``x_adjusted``,
        ``y_adjusted`` (least-squares adjusted points), ``iterations``, ``sigma``.

    Notes
    -----
    With w(X_i) = 1/sx_i^2, w(Y_i) = 1/sy_i^2 and alpha_i = sqrt(w(X_i) w(Y_i)), iterate
    on b [2]_:

        W_i = w(X_i) w(Y_i) / (w(X_i) + b^2 w(Y_i) - 2 b r_i alpha_i)
        U_i = X_i - Xbar, V_i = Y_i - Ybar      (Xbar, Ybar: W-weighted means)
        beta_i = W_i [U_i/w(Y_i) + b V_i/w(X_i) - (b U_i + V_i) r_i/alpha_i]
        b <- sum W_i beta_i V_i / sum W_i beta_i U_i

    then a = Ybar - b Xbar, x_i = Xbar + beta_i, u_i = x_i - xbar,
    var(b) = 1/sum W_i u_i^2, var(a) = 1/sum W_i + xbar^2 var(b),
    cov(a, b) = -xbar var(b), S = sum W_i (Y_i - b X_i - a)^2 ~ chi2(n - 2).
    Equivalent to Williamson's [3]_ and York's [1]_ solutions and to orthogonal distance
    regression of a straight line.
    """
    who = "fit_york"
    if sigma not in ("known", "scaled"):
        raise UsageError(f"{who}: sigma must be 'known' or 'scaled'; got {sigma!r}.")
    x, y = _line_xy(x, y, who)
    n = len(x)
    if n < 3:
        raise InvalidDataError(f"{who}: {n} rows are too few; at least 3 are needed.")
    wx = 1.0 / _per_point(sx, n, "sx", who) ** 2
    wy = 1.0 / _per_point(sy, n, "sy", who) ** 2
    ri = _per_point(r, n, "r", who, positive=False)
    if (np.abs(ri) >= 1).any():
        raise InvalidDataError(f"{who}: error correlations r must lie strictly between -1 "
                               f"and 1.")
    a, b, cov, S, W, x_adj, iteration = _york_solve(x, y, wx, wy, ri, tol, max_iter)
    if sigma == "scaled":
        cov = cov * S / (n - 2)
    from scipy import stats

    e = y - (a + b * x)
    return EstimatorResult(
        coefficients=np.array([a, b]), covariance=cov,
        residual_std_error=float(np.sqrt(np.sum(e**2) / (n - 2))), df_resid=float(n - 2),
        fitted=a + b * x, residuals=e, weights=W,
        details={"method": "york", "sigma": sigma, "chi2": S, "reduced_chi2": S / (n - 2),
                 "p_value": float(stats.chi2.sf(S, n - 2)), "iterations": iteration,
                 "x_adjusted": x_adj, "y_adjusted": a + b * x_adj})


def _york_terms(b, x, y, wx, wy, ri, alpha):
    """W_i, the W-weighted means and beta_i of York et al. (2004) at slope b."""
    W = wx * wy / (wx + b**2 * wy - 2 * b * ri * alpha)
    xbar, ybar = np.sum(W * x) / W.sum(), np.sum(W * y) / W.sum()
    U, V = x - xbar, y - ybar
    beta = W * (U / wy + b * V / wx - (b * U + V) * ri / alpha)
    return W, xbar, ybar, U, V, beta


def _york_solve(x, y, wx, wy, ri, tol, max_iter):
    """Iterate York's slope to convergence; a, b, known-weight covariance, S and extras."""
    alpha = np.sqrt(wx * wy)
    b = np.polyfit(x, y, 1)[0]
    for iteration in range(1, max_iter + 1):
        W, xbar, ybar, U, V, beta = _york_terms(b, x, y, wx, wy, ri, alpha)
        b_new = np.sum(W * beta * V) / np.sum(W * beta * U)
        done = abs(b_new - b) <= tol * max(abs(b_new), 1e-300)
        b = b_new
        if done:
            break
    else:
        raise InvalidDataError(f"fit_york: the slope did not converge in {max_iter} "
                               f"iterations; check the stated errors sx, sy (are they in "
                               f"the units of x and y?).")
    W, xbar, ybar, U, V, beta = _york_terms(b, x, y, wx, wy, ri, alpha)
    a = ybar - b * xbar
    x_adj = xbar + beta
    x_adj_bar = np.sum(W * x_adj) / W.sum()
    var_b = 1.0 / np.sum(W * (x_adj - x_adj_bar) ** 2)
    var_a = 1.0 / W.sum() + x_adj_bar**2 * var_b
    cov = np.array([[var_a, -x_adj_bar * var_b], [-x_adj_bar * var_b, var_b]])
    S = float(np.sum(W * (y - b * x - a) ** 2))
    return a, b, cov, S, W, x_adj, iteration


def fit_deming(x, y, *, ratio=1.0) -> EstimatorResult:
    """Deming regression: straight line with a known ratio of error variances.

    Parameters
    ----------
    x, y : array_like, shape (n,)
        Measured values [units of x], [units of y].
    ratio : float
        lambda = var(error in y) / var(error in x) [units of y^2 / units of x^2].
        1 gives orthogonal regression when x and y share units.

    Returns
    -------
    EstimatorResult
        ``coefficients`` [a, b] from the closed form; ``covariance`` that of York's
        method with constant weights w_x = 1, w_y = 1/lambda, scaled by S/(n - 2) (the
        ODRPACK convention, since only the ratio of the error variances is known).

    Notes
    -----
    With the sample (co)variances s_xx, s_yy, s_xy [4]_:

        b = [s_yy - lambda s_xx + sqrt((s_yy - lambda s_xx)^2 + 4 lambda s_xy^2)] / (2 s_xy)
        a = ybar - b xbar

    lambda -> infinity gives OLS of y on x; lambda -> 0 the inverted regression of x on y.
    The closed form equals York's solution with constant weights.
    """
    who = "fit_deming"
    if not (np.ndim(ratio) == 0 and np.isfinite(ratio) and ratio > 0):
        raise UsageError(f"{who}: ratio must be one positive number (var of y errors over "
                         f"var of x errors); got {ratio!r}.")
    x, y = _line_xy(x, y, who)
    if len(x) < 3:
        raise InvalidDataError(f"{who}: {len(x)} rows are too few; at least 3 are needed.")
    c = np.cov(x, y)
    sxx, syy, sxy = c[0, 0], c[1, 1], c[0, 1]
    if abs(sxy) <= 1e-12 * np.sqrt(sxx * syy):
        raise InvalidDataError(f"{who}: x and y are uncorrelated, so the Deming slope is "
                               f"undefined; an errors-in-variables line needs a trend.")
    d = syy - ratio * sxx
    b = (d + np.sqrt(d**2 + 4 * ratio * sxy**2)) / (2 * sxy)
    a = y.mean() - b * x.mean()
    york = fit_york(x, y, 1.0, np.sqrt(ratio), sigma="scaled")
    e = y - (a + b * x)
    return EstimatorResult(
        coefficients=np.array([a, b]), covariance=york.covariance,
        residual_std_error=float(np.sqrt(np.sum(e**2) / (len(x) - 2))),
        df_resid=float(len(x) - 2), fitted=a + b * x, residuals=e, weights=None,
        details={"method": "deming", "ratio": float(ratio),
                 "york_slope": float(york.coefficients[1])})
