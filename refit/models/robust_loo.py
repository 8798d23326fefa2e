"""The n leave-one-out Huber M-estimates at once: vectorised IRLS, numpy only.

``refit.models.robust.fit_huber`` runs statsmodels' ``RLM`` (Huber's T, MAD scale
re-estimated at every step). Jackknife+ needs it refitted without each row: n calls cost
a few milliseconds each. Here the n problems iterate together, each one the same steps as
``RLM.fit(scale_est="mad", conv="dev")``: an OLS start; the scale
``median(|e|) / Phi^-1(3/4)`` over the kept rows; weights ``min(1, k / |e / scale|)``;
a weighted least-squares step; and the stop when the deviance ``sum rho(e / s_w)``
(``s_w`` the weighted residual variance, as statsmodels computes it) changes by at most
``tol``, or after ``max_iter`` steps. Problem k is the full design with row k's weight set
to 0 (exactly the fit without it); its median runs over the other n - 1 rows. The
weighted steps solve normal equations of the centred and unit-scaled columns (condition
number that of the scaled design, so no digits are lost that matter at the tolerance).

Agrees with ``fit_huber`` refits to about 1e-9 relative (tests/models/test_refitted_intervals.py).

References
----------
Huber, P. J. (1964). Robust estimation of a location parameter. Ann. Math. Stat. 35:73-101.
"""

from __future__ import annotations

import numpy as np

_GAUSSIAN_3_4 = 0.6744897501960817   # scipy.stats.norm.ppf(0.75), statsmodels' MAD constant


def _rho(z, k):
    a = np.abs(z)
    return np.where(a <= k, 0.5 * z * z, k * a - 0.5 * k * k)


def _solve(Z, y, W):
    """Weighted least squares of every problem (rows of W) on the scaled design Z."""
    G = np.einsum("ki,ij,il->kjl", W, Z, Z)
    r = (W * y[None, :]) @ Z
    return np.linalg.solve(G, r[..., None])[..., 0]


def _scaled(X):
    """``(Z, centre, scale, const)``: the design with its non-constant columns centred
    (when there is an intercept) and every column scaled to unit norm; ``X b = Z c``."""
    const = np.all(X == X[:1], axis=0)
    # centre the other columns only when the design has an intercept (a constant column)
    centre = np.where(const | ~const.any(), 0.0, X.mean(axis=0))
    scale = np.sqrt(((X - centre) ** 2).sum(axis=0))
    scale[scale == 0] = 1.0
    return (X - centre) / scale, centre, scale, const


def _unscale(c, X, centre, scale, const):
    b = c / scale
    if const.any():
        j0 = int(np.flatnonzero(const)[0])
        b[:, j0] -= (b * centre[None, :]).sum(axis=1) / X[0, j0]
    return b


def _irls(Z, y, keep, kept, k, max_iter, tol):
    """IRLS of the problems in the rows of ``keep`` (0/1 row weights); ``kept`` (m, r)
    the indices of each problem's rows (for its median). Returns (c, scale, steps)."""
    df = kept.shape[1] - Z.shape[1]
    c = _solve(Z, y, keep)
    E = y[None, :] - c @ Z.T
    s = np.median(np.abs(np.take_along_axis(E, kept, axis=1)), axis=1) / _GAUSSIAN_3_4
    dev = (_rho(E / ((keep * E * E).sum(axis=1) / df)[:, None], k) * keep).sum(axis=1)
    active = s != 0
    steps = np.ones(len(s), dtype=int)
    for _ in range(1, max_iter):
        idx = np.flatnonzero(active)
        if idx.size == 0:
            break
        u = np.abs(E[idx] / s[idx, None])
        W = keep[idx] * np.where(u <= k, 1.0, k / np.maximum(u, 1e-300))
        c[idx] = _solve(Z, y, W)
        Ea = y[None, :] - c[idx] @ Z.T
        E[idx] = Ea
        s[idx] = np.median(np.abs(np.take_along_axis(Ea, kept[idx], axis=1)),
                           axis=1) / _GAUSSIAN_3_4
        s_w = (W * Ea * Ea).sum(axis=1) / df
        new = (_rho(Ea / s_w[:, None], k) * keep[idx]).sum(axis=1)
        done = ~(np.abs(new - dev[idx]) > tol)
        dev[idx] = new
        steps[idx] += 1
        active[idx[done | (s[idx] == 0)]] = False
    return c, s, steps


def huber_irls(X, y, *, k: float = 1.345, max_iter: int = 100, tol: float = 1e-8):
    """One Huber fit by the steps of ``RLM.fit(scale_est="mad", conv="dev")``:
    ``(coefficients, final MAD scale, iterations)`` (iterations counted as statsmodels'
    ``fit_history['iteration']``)."""
    X, y = np.asarray(X, float), np.asarray(y, float)
    Z, centre, scale, const = _scaled(X)
    n = X.shape[0]
    c, s, steps = _irls(Z, y, np.ones((1, n)), np.arange(n)[None, :], k, max_iter, tol)
    return _unscale(c, X, centre, scale, const)[0], float(s[0]), int(steps[0])


def huber_loo(X, y, *, k: float = 1.345, max_iter: int = 100, tol: float = 1e-8):
    """(n, p) Huber coefficients of the n leave-one-out problems (see the module notes).

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Design (with its intercept column, if any).
    y : ndarray, shape (n,)
        Response [its unit].
    k, max_iter, tol
        As ``fit_huber`` / ``RLM.fit`` (tuning constant, iterations, deviance tolerance).
    """
    X, y = np.asarray(X, float), np.asarray(y, float)
    n = X.shape[0]
    Z, centre, scale, const = _scaled(X)
    others = np.arange(n - 1)[None, :]
    others = others + (others >= np.arange(n)[:, None])
    c, _, _ = _irls(Z, y, 1.0 - np.eye(n), others, k, max_iter, tol)
    return _unscale(c, X, centre, scale, const)
