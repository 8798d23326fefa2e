"""Linear quantile regression: lower, middle and upper quantile curves fitted directly.

References
----------
.. [1] Koenker, R. & Bassett, G. (1978). Regression quantiles. Econometrica 46:33-50.
.. [2] Koenker, R. (2005). *Quantile Regression*. Cambridge University Press
   (Theorem 2.2: the share of points below a fitted q-curve; sect. 3.4: covariance).
.. [3] Chernozhukov, V., Fernandez-Val, I. & Galichon, A. (2010). Quantile and probability
   curves without crossing. Econometrica 78:1093-1125 (rearrangement).
"""

from __future__ import annotations

import warnings

import numpy as np

from refit.errors import UsageError
from refit.models.linalg import _as_design, _qr
from refit.models.intervals.base import PredictionInterval, _alpha, _as_rows
from refit.models.lsq import EstimatorResult

__all__ = ["fit_quantile", "fit_quantiles", "quantile_band"]


def _check_q(q, who):
    if not (np.ndim(q) == 0 and np.isfinite(q) and 0.0 < float(q) < 1.0):
        raise UsageError(f"{who}: quantiles must lie strictly between 0 and 1 "
                         f"(e.g. 0.025, 0.5, 0.975); got {q!r}.")
    return float(q)


def fit_quantile(X, y, q, *, max_iter=5000) -> EstimatorResult:
    """Fit the linear q-th conditional quantile of y (statsmodels ``QuantReg``).

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design matrix (with its intercept column, if any).
    y : array_like, shape (n,)
        Response [units of y].
    q : float
        Quantile, 0 < q < 1.
    max_iter : int
        Maximum iterations of statsmodels' iteratively reweighted least squares.

    Returns
    -------
    EstimatorResult
        ``covariance`` the Hendricks-Koenker sandwich of statsmodels (Epanechnikov kernel,
        Hall-Sheather bandwidth; NaN-filled if it cannot be formed), ``residual_std_error``
        NaN (a quantile fit has no residual variance; see ``details['check_loss']``),
        ``details``: ``q``, ``share_below`` (share of rows with y below the curve),
        ``check_loss`` (mean of rho_q(e) [units of y]), ``converged``.

    Notes
    -----
    Minimises sum rho_q(y_i - x_i'b) with rho_q(u) = u (q - 1{u < 0}) [1]_. At an exact
    solution with an intercept, N_below <= n q <= N_below + N_on (Koenker 2005, Thm 2.2);
    statsmodels' IRLS solution is close to the linear-programming one (about 1e-5
    relative), so points "on" the curve carry tiny residuals.
    """
    who = "fit_quantile"
    q = _check_q(q, who)
    X, y = _as_design(X, y, min_extra=1, who=who)
    _qr(X, who)   # rank check with a clear message
    from statsmodels.regression.quantile_regression import QuantReg
    from statsmodels.tools.sm_exceptions import IterationLimitWarning

    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = QuantReg(y, X).fit(q=q, max_iter=max_iter)
        try:
            covariance = np.asarray(res.cov_params(), dtype=float)
        except (ValueError, ZeroDivisionError, np.linalg.LinAlgError):
            covariance = np.full((X.shape[1],) * 2, np.nan)
    if not np.isfinite(covariance).all():
        covariance = np.full((X.shape[1],) * 2, np.nan)
    b = np.asarray(res.params, dtype=float)
    e = y - X @ b
    converged = not any(issubclass(w.category, IterationLimitWarning) for w in caught)
    return EstimatorResult(
        coefficients=b, covariance=covariance, residual_std_error=float("nan"),
        df_resid=float(X.shape[0] - X.shape[1]), fitted=X @ b, residuals=e, weights=None,
        details={"method": "quantile", "q": q, "share_below": float(np.mean(e < 0)),
                 "check_loss": float(np.mean(e * (q - (e < 0)))),
                 "converged": converged})


def fit_quantiles(X, y, quantiles=(0.025, 0.5, 0.975), *, max_iter=5000) -> dict:
    """Coefficients of several quantile curves.

    Parameters
    ----------
    X, y
        As in :func:`fit_quantile`.
    quantiles : sequence of float
        Quantiles, each 0 < q < 1.
    max_iter : int
        As in :func:`fit_quantile`.

    Returns
    -------
    dict
        q -> coefficient array of shape (p,), in the order of the design's columns.
    """
    qs = [_check_q(q, "fit_quantiles") for q in np.atleast_1d(quantiles)]
    if not qs:
        raise UsageError("fit_quantiles: give at least one quantile, e.g. (0.025, 0.975).")
    return {q: fit_quantile(X, y, q, max_iter=max_iter).coefficients for q in qs}


def quantile_band(X, y, x0, *, level=0.95, max_iter=5000) -> PredictionInterval:
    """Interval for a new observation from the alpha/2 and 1 - alpha/2 quantile curves.

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design matrix.
    y : array_like, shape (n,)
        Response [units of y].
    x0 : array_like, shape (m, p)
        Design rows of the new observations.
    level : float
        Nominal coverage 1 - alpha.
    max_iter : int
        As in :func:`fit_quantile`.

    Returns
    -------
    PredictionInterval
        ``estimate`` the median curve, ``lower``/``upper`` the alpha/2 and 1 - alpha/2
        curves at x0, rearranged (sorted) where curves cross [3]_;
        ``details['crossing']`` marks the rows where they did.

    Notes
    -----
    The band has no finite-sample guarantee: extreme quantiles rest on a handful of
    points (n alpha/2 of them lie below the lower curve), so it needs large n.
    """
    who = "quantile_band"
    alpha = _alpha(level, who)
    X, y = _as_design(X, y, min_extra=1, who=who)
    x0 = _as_rows(x0, X.shape[1], who)
    qs = (alpha / 2, 0.5, 1 - alpha / 2)
    coefs = fit_quantiles(X, y, qs, max_iter=max_iter)
    raw = np.column_stack([x0 @ coefs[q] for q in qs])
    crossing = ~((raw[:, 0] <= raw[:, 1]) & (raw[:, 1] <= raw[:, 2]))
    band = np.sort(raw, axis=1)
    if X.shape[0] * alpha / 2 < 1:
        warnings.warn(f"{who}: with n = {X.shape[0]} fewer than one point is expected "
                      f"outside each {level:.0%} quantile curve; the band is unreliable.",
                      stacklevel=2)
    return PredictionInterval(band[:, 1], band[:, 0], band[:, 2], {
        "method": "quantile", "level": float(level), "quantiles": qs,
        "coefficients": coefs, "crossing": crossing})
