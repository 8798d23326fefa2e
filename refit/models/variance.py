"""Residual spread that changes with the fitted value: a power-of-the-mean variance function.

Where the scatter of a calibration widens with the response (a funnel in the residual
plot; the report's Breusch–Pagan test says so), an interval of constant width is too
narrow where the data spread most and too wide elsewhere. The model here is

    y_i = x_i' b + e_i,    Var(e_i) = sigma^2 |mu_i|^(2 theta),    mu_i = x_i' b,

fitted by iterated weighted least squares: b by WLS with weights ``|mu_i|^(-2 theta)``
(refit's QR solver), theta by the least-squares slope of ``log|r_i|`` on ``log|mu_i|``
(the regression of log absolute residuals), until theta settles (Carroll & Ruppert 1988,
*Transformation and Weighting in Regression*, ch. 2–3; Davidian & Carroll 1987, JASA
82:1079; both from memory). A new observation at x0 then has variance
``sigma^2 |mu0|^(2 theta) + x0' C x0`` (C the WLS coefficient covariance), so the
interval widens where the data do. theta = 0 is ordinary least squares.

Pure functions on arrays; :func:`refit.fit` reaches it as ``estimator="wls-power"``.
"""

from __future__ import annotations

import numpy as np

from refit.errors import InvalidDataError

#: iterations of the reweighting at the most, and the change of theta that stops it
MAX_ITER, THETA_TOL = 100, 1e-7
#: theta is kept within these bounds (a variance rising faster than the fourth power of
#: the mean is not a calibration's spread but a broken fit)
THETA_BOUNDS = (-2.0, 2.0)


def power_weights(mu: np.ndarray, theta: float) -> np.ndarray:
    """WLS weights ``|mu|^(-2 theta)``: the inverse variances up to sigma^2, so sigma is the
    spread per unit of ``|mu|^theta``."""
    return np.abs(mu) ** (-2.0 * theta)


def log_residual_slope(mu: np.ndarray, r: np.ndarray) -> float:
    """Least-squares slope of ``log|r|`` on ``log|mu|``: the power theta of the spread."""
    keep = (np.abs(r) > 0) & (np.abs(mu) > 0)
    if keep.sum() < 3:
        return 0.0
    lx, ly = np.log(np.abs(mu[keep])), np.log(np.abs(r[keep]))
    lx = lx - lx.mean()
    ss = float(lx @ lx)
    return 0.0 if ss == 0 else float(lx @ (ly - ly.mean()) / ss)


def fit_power_variance(X: np.ndarray, y: np.ndarray, *, names=None):
    """Fit ``y = X b`` with ``Var(e) = sigma^2 |X b|^(2 theta)`` by iterated WLS.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Design matrix whose first column is the intercept's ones.
    y : ndarray, shape (n,)
        Response [its unit].
    names : sequence of str, optional
        Term names (for the solver's messages).

    Returns
    -------
    refit.models.lsq.EstimatorResult
        The final WLS fit (coefficients, covariance ``sigma^2 (X'WX)^-1`` from the QR
        factor, ``residual_std_error`` = sigma, the scale of ``sqrt(w) r``), with
        ``df_resid`` = n - p - 1 (theta is estimated too) and ``details``:
        ``variance_power`` (theta), ``variance_iterations``, ``variance_converged``,
        ``weights`` and ``fitted``.

    Raises
    ------
    InvalidDataError
        A fitted value at zero (the power of the mean is not defined there), or too few
        rows to estimate theta beside the coefficients.
    """
    from refit.models.lsq import solve_lsq

    X, y = np.asarray(X, float), np.asarray(y, float)
    n, p = X.shape
    if n < p + 3:
        raise InvalidDataError(f"a variance that changes with the mean needs at least "
                               f"{p + 3} rows (the coefficients, the power and a spread); "
                               f"got {n}: use estimator 'ols'")
    res = solve_lsq(X, y, names=names)
    theta, converged, it = 0.0, False, 0
    for it in range(1, MAX_ITER + 1):
        mu = X @ res.coefficients
        if np.any(np.abs(mu) < 1e-12 * max(1.0, float(np.max(np.abs(y))))):
            raise InvalidDataError("a fitted value is zero, where a variance proportional "
                                   "to a power of the mean is not defined: use estimator "
                                   "'ols' or 'wls' with weights of your own")
        new = float(np.clip(log_residual_slope(mu, y - mu), *THETA_BOUNDS))
        res = solve_lsq(X, y, weights=power_weights(mu, new), names=names)
        if abs(new - theta) < THETA_TOL:
            theta, converged = new, True
            break
        theta = new
    mu = X @ res.coefficients
    w = power_weights(mu, theta)
    df = n - p - 1
    sigma = float(np.sqrt(np.sum(w * (y - mu) ** 2) / df))
    scale = (sigma / res.residual_std_error) ** 2 if res.residual_std_error > 0 else 1.0
    res.covariance = np.asarray(res.covariance, float) * scale
    res.residual_std_error, res.df_resid = sigma, float(df)
    res.details.pop("factor", None)   # its quadratic form carries the old scale
    res.details.update(variance_power=theta, variance_iterations=it,
                       variance_converged=converged, weights=w, fitted=mu)
    return res


def power_variance_sd(sigma: float, theta: float, mu: np.ndarray, w0=1.0) -> np.ndarray:
    """SD of a new observation's error at fitted values ``mu``: ``sigma |mu|^theta / sqrt(w0)``
    [response unit]."""
    return sigma * np.abs(np.asarray(mu, float)) ** theta / np.sqrt(w0)
