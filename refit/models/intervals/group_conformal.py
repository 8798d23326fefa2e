"""Group-level conformal intervals: jackknife+ and CV+ with whole sources left out.

A fossil soil comes from a source (survey, region) the calibration never saw. Soils of one
source are not exchangeable with soils of another, but sources are exchangeable with each
other, so the unit left out is a whole group. Each soil i of group g(i) (m_g soils) gets
the leave-group-out prediction mu_(-g(i)) and score R_i = |y_i - mu_(-g(i))(x_i)|; the
limits for a new row x0 are weighted quantiles (two-layer weighting: every group carries
the same total weight 1/(G + 1), shared equally by its soils; the new soil's group carries
the last 1/(G + 1), placed at -inf / +inf)::

    upper = smallest v with  sum_i w_i 1{mu_(-g(i))(x0) + R_i <= v} >= 1 - alpha
    lower = largest  v with  sum_i w_i 1{mu_(-g(i))(x0) - R_i >= v} >= 1 - alpha
    w_i   = 1 / ((G + 1) m_g(i))

With equal group sizes and one soil per group this is the jackknife+ of Barber et al.
(2021) (ranks ceil((1 - alpha)(n + 1)) and floor(alpha (n + 1))). The finite weights sum
to G / (G + 1): when that is below 1 - alpha (fewer than (1 - alpha) / alpha groups, 19
for 95 %) the limits are infinite and ``details['reason']`` says why; the interval is
never narrowed to a finite one.

For OLS the leave-group-out fits come from the full fit's QR, X = QR, by block deletion:
with e_S the residuals and Q_S the rows of Q of group S,
d_S = (I - Q_S Q_S')^-1 e_S are the group's leave-group-out residuals and
mu_(-S)(x0) = x0'b - (R^-T x0)' Q_S' d_S (Belsley, Kuh & Welsch 1980, ch. 2, from
memory). Each group costs one m_g x m_g solve; X'X is never formed.

References
----------
.. [1] Barber, R. F., Candes, E. J., Ramdas, A. & Tibshirani, R. J. (2021). Predictive
   inference with the jackknife+. Annals of Statistics 49(1):486-507.
.. [2] Dunn, R., Wasserman, L. & Ramdas, A. (2023). Distribution-free prediction sets for
   two-layer hierarchical models. Journal of the American Statistical Association
   118:2491-2502 (pages from memory).
"""

from __future__ import annotations

import math

import numpy as np

from refit.errors import InvalidDataError, UsageError
from refit.models.intervals.base import PredictionInterval, _alpha, _prepare
from refit.models.linalg import _qr, with_one_blas_thread

_SINGULAR = 1e-10      # pivot size (relative) below which leaving a group out is rank-deficient


def _groups(groups, n: int, who: str):
    g = np.asarray(groups, dtype=object).ravel()
    if g.shape[0] != n:
        raise InvalidDataError(f"{who}: groups must give one label per row ({n}); got "
                               f"{g.shape[0]}")
    bad = np.array([v is None or (isinstance(v, float) and math.isnan(v)) for v in g])
    if bad.any():
        raise InvalidDataError(f"{who}: {int(bad.sum())} row(s) have no group label (first "
                               f"at row {int(np.argmax(bad)) + 1}); fill or drop them")
    labels, codes = np.unique(g.astype(str), return_inverse=True)
    if labels.size < 2:
        raise InvalidDataError(f"{who}: leaving out whole groups needs at least 2 groups; "
                               f"got {labels.size}")
    return codes, labels.size


def group_weights(codes: np.ndarray, n_groups: int) -> np.ndarray:
    """Two-layer weights w_i = 1 / ((G + 1) m_g(i)) of the soils."""
    sizes = np.bincount(codes, minlength=n_groups)
    return 1.0 / ((n_groups + 1) * sizes[codes])


def too_few_groups(n_groups: int, alpha: float) -> str | None:
    """The reason the level cannot be reached with ``n_groups`` groups, or None."""
    if n_groups / (n_groups + 1) + 1e-12 >= 1.0 - alpha:
        return None
    need = math.ceil((1.0 - alpha) / alpha - 1e-9)
    return (f"{n_groups} groups are too few for a {100 * (1 - alpha):g}% group-level "
            f"interval: each source is one exchangeable unit and the level needs at least "
            f"{need}; the limits are infinite (use a lower level or more sources)")


def weighted_plus_limits(mu_out: np.ndarray, r: np.ndarray, w: np.ndarray, alpha: float):
    """Lower and upper limits (m,) from leave-group-out predictions (m, n), scores (n,)
    and weights (n,) summing to G / (G + 1) (see the module notes)."""
    m = mu_out.shape[0]
    lower, upper = np.full(m, -np.inf), np.full(m, np.inf)
    target = 1.0 - alpha - 1e-12
    if w.sum() < target:
        return lower, upper
    hi = mu_out + r
    order = np.argsort(hi, axis=1, kind="stable")
    cum = np.cumsum(w[order], axis=1)
    k = np.argmax(cum >= target, axis=1)
    upper = np.take_along_axis(hi, order[np.arange(m), k][:, None], axis=1)[:, 0]
    lo = -(mu_out - r)                     # largest v with weight of {lo_i >= v} >= 1 - alpha
    order = np.argsort(lo, axis=1, kind="stable")
    cum = np.cumsum(w[order], axis=1)
    k = np.argmax(cum >= target, axis=1)
    lower = -np.take_along_axis(lo, order[np.arange(m), k][:, None], axis=1)[:, 0]
    return lower, upper


def _ols_leave_group_out(X, y, x0, codes, n_groups, who):
    """Leave-group-out predictions at x0 (m, n) and scores (n,) of OLS, by block deletion
    from the full QR; the full fit's x0'b."""
    Q, R = _qr(X, who)
    b = np.linalg.solve(R, Q.T @ y)
    e = y - X @ b
    A = np.linalg.solve(R.T, x0.T).T           # rows R^-T x0
    est = x0 @ b
    mu = np.empty((x0.shape[0], X.shape[0]))
    r = np.empty(X.shape[0])
    for g in range(n_groups):
        rows = np.flatnonzero(codes == g)
        Qs = Q[rows]
        M = np.eye(rows.size) - Qs @ Qs.T
        if np.linalg.svd(M, compute_uv=False).min() <= _SINGULAR:
            raise InvalidDataError(f"{who}: leaving out group {g + 1} makes the design "
                                   "rank-deficient (that group alone spans a term); merge it "
                                   "with another group or use a simpler form")
        d = np.linalg.solve(M, e[rows])
        r[rows] = np.abs(d)
        mu[:, rows] = (est - A @ (Qs.T @ d))[:, None]
    return est, mu, r


def _refit_leave_group_out(X, y, x0, codes, fold_of_group, n_folds, fit, who):
    """Leave-fold-out predictions (m, n) and scores (n,) by refitting ``fit``."""
    mu = np.empty((x0.shape[0], X.shape[0]))
    r = np.empty(X.shape[0])
    fold = fold_of_group[codes]
    for k in range(n_folds):
        out = fold == k
        b = np.asarray(fit(X[~out], y[~out]), dtype=float)
        r[out] = np.abs(y[out] - X[out] @ b)
        mu[:, out] = (x0 @ b)[:, None]
    est = x0 @ np.asarray(fit(X, y), dtype=float)
    return est, mu, r


def _result(est, lower, upper, method, level, n_groups, alpha, extra):
    reason = too_few_groups(n_groups, alpha)
    return PredictionInterval(est, lower, upper, {
        "method": method, "level": float(level), "n_groups": int(n_groups),
        "unbounded": bool(np.isinf(lower).any() or np.isinf(upper).any()),
        "reason": reason, **extra})


@with_one_blas_thread
def group_jackknife_plus(X, y, groups, x0, *, level: float = 0.95, fit=None
                         ) -> PredictionInterval:
    """Jackknife+ with each whole group (source) left out in turn, two-layer weights.

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design matrix (intercept column included when the model has one).
    y : array_like, shape (n,)
        Response [units of y].
    groups : array_like, shape (n,)
        Group (source) label of each row.
    x0 : array_like, shape (m, p)
        Design rows of the new soils.
    level : float
        Nominal level 1 - alpha (the guarantee is 1 - 2 alpha for a new soil of a new
        group, as for jackknife+ [1]_).
    fit : callable, optional
        ``fit(X, y) -> coefficients``; default OLS, by block deletion from one QR.

    Returns
    -------
    PredictionInterval
        ``estimate`` from the fit on all rows; ``details``: ``n_groups``, ``unbounded``,
        ``reason`` (why the limits are infinite, else None), ``scores``.
    """
    who = "group_jackknife_plus"
    X, y, x0, _ = _prepare(X, y, x0, None, who)
    alpha = _alpha(level, who)
    codes, n_groups = _groups(groups, X.shape[0], who)
    if fit is None:
        est, mu, r = _ols_leave_group_out(X, y, x0, codes, n_groups, who)
    else:
        est, mu, r = _refit_leave_group_out(X, y, x0, codes, np.arange(n_groups), n_groups,
                                            fit, who)
    lower, upper = weighted_plus_limits(mu, r, group_weights(codes, n_groups), alpha)
    return _result(est, lower, upper, "group-jackknife+", level, n_groups, alpha,
                   {"scores": r})


@with_one_blas_thread
def group_cv_plus(X, y, groups, x0, *, level: float = 0.95, folds: int = 5, seed: int = 0,
                  fit=None) -> PredictionInterval:
    """CV+ with folds of whole groups (sources), two-layer weights.

    Parameters
    ----------
    X, y, groups, x0, level, fit
        As in :func:`group_jackknife_plus`.
    folds : int
        Number of folds K (2 <= K <= G); the groups are shuffled with ``seed`` and dealt
        into K folds of near-equal group counts.
    seed : int
        Seed of the group shuffle.

    Returns
    -------
    PredictionInterval
        As :func:`group_jackknife_plus`; ``details['fold_of_group']``.
    """
    who = "group_cv_plus"
    X, y, x0, _ = _prepare(X, y, x0, None, who)
    alpha = _alpha(level, who)
    codes, n_groups = _groups(groups, X.shape[0], who)
    if not isinstance(folds, (int, np.integer)) or not 2 <= folds <= n_groups:
        raise UsageError(f"{who}: folds must be an integer from 2 to the number of groups "
                         f"({n_groups}); got {folds!r}")
    perm = np.random.default_rng(seed).permutation(n_groups)
    fold_of_group = np.empty(n_groups, dtype=int)
    fold_of_group[perm] = np.arange(n_groups) % folds
    if fit is None:
        def fit(Xt, yt):
            Q, R = _qr(Xt, who)
            return np.linalg.solve(R, Q.T @ yt)
    est, mu, r = _refit_leave_group_out(X, y, x0, codes, fold_of_group, folds, fit, who)
    lower, upper = weighted_plus_limits(mu, r, group_weights(codes, n_groups), alpha)
    return _result(est, lower, upper, "group-cv+", level, n_groups, alpha,
                   {"scores": r, "fold_of_group": fold_of_group, "folds": int(folds),
                    "seed": seed})
