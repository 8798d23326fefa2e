"""Bootstrap prediction intervals for a new observation: case and residual resampling.

Internal; the public names are re-exported by :mod:`refit.models.intervals` (see its docstring for
the shared conventions and the references). Resampled fits are solved in batches with
array operations.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from refit.models.linalg import (
    CHUNK_ELEMENTS, RANK_TOL, _chunks, ols_solve, _solve_r, with_one_blas_thread,
)
from refit.models.intervals.base import PredictionInterval, _alpha, _prepare
from refit.errors import InvalidDataError, UsageError


def _modified_residuals(e_w: np.ndarray, h: np.ndarray) -> np.ndarray:
    """Leverage-adjusted, centred residuals r_i = e_i / sqrt(1 - h_ii) - mean (D&H eq. 6.9)."""
    r = e_w / np.sqrt(np.clip(1.0 - h, 1e-12, None))
    return r - r.mean()



def _percentile_limits(y0, delta, alpha):
    """Limits y0 - q_{1-a/2}(delta), y0 - q_{a/2}(delta); delta = predicted - new value."""
    lo_q, hi_q = np.quantile(delta, [alpha / 2, 1 - alpha / 2], axis=0)
    return y0 - hi_q, y0 - lo_q


def _check_n_boot(n_boot, who):
    if not isinstance(n_boot, (int, np.integer)) or n_boot < 100:
        raise UsageError(f"{who}: n_boot must be an integer of at least 100 (999 or more for "
                         f"95% limits); got {n_boot!r}.")
    return int(n_boot)


@dataclass
class _WeightedFit:
    """The checked arguments and the full-data (weighted) OLS fit both bootstraps start from."""

    x0: np.ndarray
    alpha: float
    n_boot: int
    weight0: float
    b: np.ndarray
    Q: np.ndarray
    R: np.ndarray
    yw: np.ndarray
    pool: np.ndarray    # centred modified residuals (D&H eq. 6.9)

    @property
    def n(self) -> int:
        return self.Q.shape[0]

    def limits(self, coefs: np.ndarray, rng):
        """Estimate x0 b and percentile limits from resampled coefficients (B, p): the
        prediction error delta* = x0'b* - (x0'b + eps*/sqrt(weight0)) (D&H Algorithm 6.4)."""
        y0 = self.x0 @ self.b
        noise = rng.choice(self.pool, size=(coefs.shape[0], self.x0.shape[0])) / math.sqrt(
            self.weight0)
        delta = coefs @ self.x0.T - (y0 + noise)
        lower, upper = _percentile_limits(y0, delta, self.alpha)
        return y0, lower, upper


def weighted_bootstrap_fit(X, y, x0, weights, weight0, level, n_boot, who) -> _WeightedFit:
    X, y, x0, sw = _prepare(X, y, x0, weights, who, weight0=weight0)
    alpha = _alpha(level, who)
    n_boot = _check_n_boot(n_boot, who)
    Xw, yw = X * sw[:, None], y * sw
    b, ew, Q, R = ols_solve(Xw, yw, who)
    pool = _modified_residuals(ew, (Q**2).sum(axis=1))
    return _WeightedFit(x0, alpha, n_boot, weight0, b, Q, R, yw, pool)


def _pairs_coefficients(Q, R, yw, n_boot, rng):
    """Coefficients of ``n_boot`` case-resampled least-squares fits, in batches.

    A resample with counts c_i (how often row i was drawn) has the normal equations
    (Xw' C Xw) b = Xw' C yw. Written in the orthonormal basis Q of the full design
    (Xw = Q R, b = R^-1 g) they read (Q' C Q) g = Q' C yw, whose matrix is close to the
    identity, so forming it loses no accuracy (cond(Q'CQ) ~ 1, unlike cond(X'X)). The
    products Q' C Q for a whole batch come from one matrix product C @ [Q_j Q_k, Q yw].
    Resamples whose design is singular are dropped (their count is returned).
    """
    n, p = Q.shape
    iu = np.triu_indices(p)
    k = len(iu[0])
    P = np.column_stack([Q[:, iu[0]] * Q[:, iu[1]], Q * yw[:, None]])
    dtype = np.int32 if n * min(n_boot, CHUNK_ELEMENTS // n + 1) < 2**31 - 1 else np.int64
    coefs, dropped = [], 0
    for _, size in _chunks(n_boot, n):
        idx = rng.integers(0, n, size=(size, n), dtype=dtype)
        idx += (n * np.arange(size, dtype=dtype))[:, None]
        counts = np.bincount(idx.ravel(), minlength=size * n).reshape(size, n)
        M = counts @ P
        G = np.empty((size, p, p))
        G[:, iu[0], iu[1]] = M[:, :k]
        G[:, iu[1], iu[0]] = M[:, :k]
        ev = np.linalg.eigvalsh(G)
        ok = ev[:, 0] > RANK_TOL * ev[:, -1]
        dropped += int(size - ok.sum())
        g = np.linalg.solve(G[ok], M[ok, k:, None])[..., 0]
        coefs.append(_solve_r(R, g.T).T)
    return np.vstack(coefs), dropped


@with_one_blas_thread
def bootstrap_pairs(X, y, x0, *, n_boot=1000, level=0.95, seed=0, weights=None,
                    weight0=1.0) -> PredictionInterval:
    """Prediction interval for a new observation by case (pairs) resampling.

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design matrix of the calibration rows (with its intercept column, if any).
    y : array_like, shape (n,)
        Response [units of y].
    x0 : array_like, shape (m, p)
        Design rows of the new observations.
    n_boot : int
        Number of resamples (at least 100; 999 or more for 95% limits).
    level : float
        Coverage of the interval, e.g. 0.95.
    seed : int
        Seed of the random generator; same seed, same numbers.
    weights : array_like, shape (n,), optional
        WLS weights w_i, var(y_i) = sigma^2 / w_i. Resampled together with their rows.
    weight0 : float
        Weight of the new observation (1 = variance sigma^2).

    Returns
    -------
    PredictionInterval
        ``estimate`` = x0 b (full-data fit); limits from the bootstrap distribution of the
        prediction error. ``details['coefficients']`` holds the (B, p) resampled
        coefficients; ``details['dropped']`` the count of singular resamples left out.

    Notes
    -----
    For each resample b* of rows (with their weights), the prediction error is
    delta* = x0'b* - (x0'b + eps*/sqrt(weight0)), eps* drawn from the centred modified
    residuals r_i = sqrt(w_i) e_i / sqrt(1 - h_ii) of the full fit ([1]_ eq. 6.9 and
    Algorithm 6.4). Limits: x0'b - q(1 - a/2) and x0'b - q(a/2) of delta*, with
    ``numpy.quantile`` (linear interpolation). Case resampling keeps the coefficient part
    valid under heteroscedasticity or a misspecified mean; the new-observation noise still
    assumes one error variance (scaled by the weights). Cost: one batched matrix product per
    ~10^6 resampled rows; no per-resample refit.

    References
    ----------
    .. [1] Davison & Hinkley (1997), Bootstrap Methods and their Application, sect. 6.2-6.3.
    """
    who = "bootstrap_pairs"
    fit = weighted_bootstrap_fit(X, y, x0, weights, weight0, level, n_boot, who)
    n_boot = fit.n_boot
    rng = np.random.default_rng(seed)
    coefs, dropped = _pairs_coefficients(fit.Q, fit.R, fit.yw, n_boot, rng)
    if dropped > n_boot // 2:
        raise InvalidDataError(
            f"{who}: {dropped} of {n_boot} resamples had a singular design (too few distinct "
            f"rows, n = {fit.n}); use bootstrap_residual or add calibration rows.")
    y0, lower, upper = fit.limits(coefs, rng)
    return PredictionInterval(y0, lower, upper, {
        "method": "bootstrap-pairs", "level": float(level), "n_boot": n_boot, "seed": seed,
        "dropped": dropped, "coefficients": coefs})


@with_one_blas_thread
def bootstrap_residual(X, y, x0, *, n_boot=1000, level=0.95, seed=0, weights=None,
                       weight0=1.0) -> PredictionInterval:
    """Prediction interval for a new observation by residual resampling.

    Parameters
    ----------
    X, y, x0, n_boot, level, seed, weights, weight0
        As in :func:`bootstrap_pairs`.

    Returns
    -------
    PredictionInterval
        ``estimate`` = x0 b; ``details['coefficients']`` the (B, p) resampled coefficients.

    Notes
    -----
    The design is fixed. Responses are rebuilt as y* = X b + eps*/sqrt(w), eps* drawn
    with replacement from the centred modified residuals r_i = sqrt(w_i) e_i/sqrt(1 - h_ii),
    so b* = b + R^-1 Q' eps* with the QR factors of the weighted design computed once
    (a batched matrix product, no refit). The prediction error and limits are as in
    :func:`bootstrap_pairs` ([1]_ Algorithm 6.4). Assumes exchangeable errors (one variance
    after weighting) and a correct mean function.

    References
    ----------
    .. [1] Davison & Hinkley (1997), Bootstrap Methods and their Application, sect. 6.2-6.3.
    """
    who = "bootstrap_residual"
    fit = weighted_bootstrap_fit(X, y, x0, weights, weight0, level, n_boot, who)
    n_boot, n, pool = fit.n_boot, fit.n, fit.pool
    rng = np.random.default_rng(seed)
    coefs = []
    for _, size in _chunks(n_boot, n):
        eps = pool[rng.integers(0, n, size=(size, n))]
        coefs.append(fit.b + _solve_r(fit.R, fit.Q.T @ eps.T).T)
    coefs = np.vstack(coefs)
    y0, lower, upper = fit.limits(coefs, rng)
    return PredictionInterval(y0, lower, upper, {
        "method": "bootstrap-residual", "level": float(level), "n_boot": n_boot,
        "seed": seed, "coefficients": coefs})

