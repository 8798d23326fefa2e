"""Resampling and conformal intervals for any estimator, by refitting with that estimator.

The OLS versions (:mod:`refit.models.intervals.conformal`, ``bootstrap``) solve their
refits in closed form or in batches; these take the estimator's own fit as a function and
apply the same method definitions, so Huber, Theil-Sen, quantile (median) and York lines
get every interval OLS gets:

- split conformal (Lei et al. 2018): fit on the training part, scores on the calibration
  part, ``x0' b_train +- q``;
- jackknife+ (Barber et al. 2021): the n leave-one-out fits (Theil-Sen: exact and fast,
  :mod:`refit.models.theil_sen_loo`), ranks ``floor(a (n + 1))`` and
  ``ceil((1 - a)(n + 1))`` of ``mu_-i(x0) -/+ |y_i - mu_-i(x_i)|``;
- CV+ (same paper): the K fold fits (``sklearn.model_selection.KFold``, shuffled with the
  seed, as the OLS version), the same ranks;
- bootstrap pairs / residual (Davison & Hinkley 1997, Algorithm 6.4): refits on case
  resamples, or on ``fitted + resampled residuals``; the new-observation noise drawn from
  the centred, leverage-adjusted residuals of the full fit.

Every function takes ``fit_rows(rows, y=None) -> coefficients``: the estimator refitted on
the given rows (of ``y`` when another response is passed). Every random step is seeded.
"""

from __future__ import annotations

import math

import numpy as np

from refit._util.order import kth_smallest, rank_lower, rank_upper
from refit.models.intervals.base import PredictionInterval


def _plus_limits(mu: np.ndarray, r: np.ndarray, alpha: float):
    """Jackknife+/CV+ limits from ``mu`` (m, n) and ``r`` (n,)."""
    n = r.shape[0]
    lower = kth_smallest(mu - r[None, :], rank_lower(alpha, n), axis=1)
    upper = kth_smallest(mu + r[None, :], rank_upper(alpha, n), axis=1)
    return lower, upper


def split_conformal(X, y, x0, fit_rows, *, level=0.95, seed=0, calib_fraction=0.5):
    """Split-conformal interval of the estimator behind ``fit_rows``."""
    n = X.shape[0]
    n_cal = int(round(calib_fraction * n))
    perm = np.random.default_rng(seed).permutation(n)
    cal, train = perm[:n_cal], perm[n_cal:]
    b = fit_rows(np.sort(train))
    scores = np.abs(y[cal] - X[cal] @ b)
    q = float(kth_smallest(scores[None, :], rank_upper(1.0 - level, n_cal), axis=1)[0])
    est = x0 @ b
    return PredictionInterval(est, est - q, est + q, {
        "method": "split-conformal", "level": float(level), "seed": seed, "quantile": q,
        "centre_coefficients": b, "calibration_scores": np.sort(scores),
        "n_train": int(n - n_cal), "n_calib": n_cal, "unbounded": bool(np.isinf(q))})


def jackknife_plus(X, y, x0, b, loo_coefficients, *, level=0.95):
    """Jackknife+ from the full fit ``b`` and the (n, p) leave-one-out coefficients."""
    B = np.asarray(loo_coefficients, float)
    r = np.abs(y - np.einsum("ij,ij->i", X, B))
    lower, upper = _plus_limits(x0 @ B.T, r, 1.0 - level)
    return PredictionInterval(x0 @ b, lower, upper, {
        "method": "jackknife+", "level": float(level), "loo_coefficients": B,
        "loo_abs_residuals": r})


def loo_coefficients(n: int, fit_rows) -> np.ndarray:
    """(n, p) coefficients of the n leave-one-out refits."""
    every = np.arange(n)
    return np.array([fit_rows(np.delete(every, i)) for i in range(n)])


def cv_plus(X, y, x0, b, fit_rows, *, level=0.95, folds=10, seed=0):
    """CV+ with K shuffled folds (the folds of the OLS version for the same seed)."""
    from sklearn.model_selection import KFold

    n = X.shape[0]
    fold = np.empty(n, dtype=int)
    r = np.empty(n)
    coefs = []
    for k, (train, test) in enumerate(KFold(folds, shuffle=True, random_state=seed).split(X)):
        bk = fit_rows(train)
        fold[test], r[test] = k, np.abs(y[test] - X[test] @ bk)
        coefs.append(bk)
    B = np.array(coefs)
    lower, upper = _plus_limits((x0 @ B.T)[:, fold], r, 1.0 - level)
    return PredictionInterval(x0 @ b, lower, upper, {
        "method": "cv+", "level": float(level), "folds": int(folds), "seed": seed,
        "fold_coefficients": B, "row_folds": fold, "row_abs_residuals": r})


def _noise_pool(X, residuals):
    """Centred, leverage-adjusted residuals e_i / sqrt(1 - h_ii) - mean (D&H eq. 6.9;
    the leverages of the design's hat matrix)."""
    q, _ = np.linalg.qr(X)
    h = np.einsum("ij,ij->i", q, q)
    r = residuals / np.sqrt(np.clip(1.0 - h, 1e-12, None))
    return r - r.mean()


def _bootstrap_limits(x0, b, coefs, pool, alpha, rng, weight0=1.0):
    y0 = x0 @ b
    noise = rng.choice(pool, size=(coefs.shape[0], x0.shape[0])) / math.sqrt(weight0)
    delta = coefs @ x0.T - (y0 + noise)
    lo_q, hi_q = np.quantile(delta, [alpha / 2, 1 - alpha / 2], axis=0)
    return y0, y0 - hi_q, y0 - lo_q


def bootstrap(X, y, x0, b, fit_rows, *, kind="pairs", n_boot=1000, level=0.95, seed=0,
              weight0=1.0, draws=None):
    """Bootstrap prediction interval refitting the estimator on each resample.

    ``kind`` ``pairs`` (cases) or ``residual`` (``fitted + resampled residuals``);
    ``draws`` (n_boot, p), optional: the case-resampled coefficients when the estimator
    draws them itself (Theil-Sen's batched bootstrap)."""
    n = X.shape[0]
    rng = np.random.default_rng(seed)
    fitted = X @ b
    pool = _noise_pool(X, y - fitted)
    if draws is not None:
        coefs = np.asarray(draws, float)
    elif kind == "pairs":
        coefs = np.array([fit_rows(np.sort(rng.integers(0, n, n))) for _ in range(n_boot)])
    else:
        every = np.arange(n)
        coefs = np.array([fit_rows(every, fitted + rng.choice(pool, n))
                          for _ in range(n_boot)])
    coefs = coefs[np.isfinite(coefs).all(axis=1)]
    est, lower, upper = _bootstrap_limits(x0, b, coefs, pool, 1.0 - level, rng, weight0)
    return PredictionInterval(est, lower, upper, {
        "method": f"bootstrap-{kind}", "level": float(level), "n_boot": int(n_boot),
        "seed": seed, "coefficients": coefs, "residual_pool": np.sort(pool)})
