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
b_(-S) = b - R^-1 Q_S' d_S its leave-group-out coefficients, so
mu_(-S)(x0) = x0' b_(-S) (Belsley, Kuh & Welsch 1980, ch. 2, from memory). Each group
costs one m_g x m_g solve; X'X is never formed. Other estimators refit on the kept rows
(``fit`` or ``fit_rows``). :func:`leave_group_out` returns the coefficient vectors, the
scores and the groups (:class:`LeaveGroupOut`): what a coefficient file stores to
rebuild the interval for any new row.

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
from dataclasses import dataclass

import numpy as np

from refit.errors import InvalidDataError, UsageError
from refit.models.intervals.base import PredictionInterval, _alpha, _prepare
from refit.models.linalg import _qr, with_one_blas_thread

#: The interval methods that leave out whole groups (they need the groups of the soils).
GROUP_INTERVALS = ("group-jackknife+", "group-cv+")
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


def _ols_leave_group_out(X, y, codes, n_groups, who):
    """Full-fit coefficients, leave-group-out coefficient vectors (G, p) and scores (n,)
    of OLS, by block deletion from the full QR (see the module notes)."""
    Q, R = _qr(X, who)
    b = np.linalg.solve(R, Q.T @ y)
    e = y - X @ b
    B = np.empty((n_groups, X.shape[1]))
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
        B[g] = b - np.linalg.solve(R, Qs.T @ d)   # b_(-S) = b - R^-1 Q_S' d_S
    return b, B, r


def _refit_leave_group_out(X, y, codes, fold_of_group, n_folds, fit, fit_rows, who):
    """Full-fit coefficients, leave-fold-out coefficient vectors (K, p) and scores (n,)
    by refitting: ``fit(X, y)`` on the kept rows, or ``fit_rows(kept row indices)``."""
    def refit(rows):
        if fit_rows is not None:
            return np.asarray(fit_rows(rows), dtype=float)
        return np.asarray(fit(X[rows], y[rows]), dtype=float)

    B = np.empty((n_folds, X.shape[1]))
    r = np.empty(X.shape[0])
    fold = fold_of_group[codes]
    for k in range(n_folds):
        out = fold == k
        B[k] = refit(np.flatnonzero(~out))
        r[out] = np.abs(y[out] - X[out] @ B[k])
    return refit(np.arange(X.shape[0])), B, r


def _ols_fit(who):
    def fit(Xt, yt):
        Q, R = _qr(Xt, who)
        return np.linalg.solve(R, Q.T @ yt)
    return fit


@dataclass
class LeaveGroupOut:
    """What a group-level jackknife+ / CV+ interval needs, for any new row.

    Attributes
    ----------
    centre : ndarray, shape (p,)
        Coefficients fitted on every row.
    unit_coefficients : ndarray, shape (K, p)
        Coefficients fitted without each left-out unit: a group (jackknife+, K = G) or a
        fold of groups (CV+).
    row_groups : ndarray of int, shape (n,)
        Group index (0..G-1) of each calibration soil.
    group_units : ndarray of int, shape (G,)
        Left-out unit of each group (the identity for jackknife+).
    scores : ndarray, shape (n,)
        ``|y_i - x_i' unit_coefficients[group_units[row_groups[i]]]|``.
    n_groups : int
    """

    centre: np.ndarray
    unit_coefficients: np.ndarray
    row_groups: np.ndarray
    group_units: np.ndarray
    scores: np.ndarray
    n_groups: int

    @property
    def row_coefficients(self) -> np.ndarray:
        """Leave-out coefficients of each soil's unit, shape (n, p)."""
        return self.unit_coefficients[self.group_units[self.row_groups]]

    def limits(self, x0: np.ndarray, alpha: float):
        """Lower and upper limits (m,) at design rows ``x0`` (m, p)."""
        mu = np.asarray(x0, float) @ self.row_coefficients.T
        return weighted_plus_limits(mu, self.scores,
                                    group_weights(self.row_groups, self.n_groups), alpha)


def leave_group_out(X, y, groups, *, folds: int | None = None, seed: int = 0, fit=None,
                    fit_rows=None, who: str = "group_jackknife_plus") -> LeaveGroupOut:
    """Leave-group-out (``folds=None``) or leave-fold-of-groups-out quantities.

    Parameters
    ----------
    X, y, groups
        As in :func:`group_jackknife_plus`.
    folds : int, optional
        None: each group is left out alone (jackknife+); K: the groups are shuffled with
        ``seed`` and dealt into K folds of near-equal group counts (CV+).
    fit : callable, optional
        ``fit(X, y) -> coefficients``; default OLS (block deletion from one QR for
        jackknife+, a QR per fold for CV+).
    fit_rows : callable, optional
        ``fit_rows(row indices) -> coefficients`` (takes precedence over ``fit``): for
        estimators that need more than X and y of the kept rows (weights, groups).
    """
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    codes, n_groups = _groups(groups, X.shape[0], who)
    if folds is None:
        units = np.arange(n_groups)
        if fit is None and fit_rows is None:
            b, B, r = _ols_leave_group_out(X, y, codes, n_groups, who)
        else:
            b, B, r = _refit_leave_group_out(X, y, codes, units, n_groups, fit, fit_rows, who)
        return LeaveGroupOut(b, B, codes, units, r, n_groups)
    if not isinstance(folds, (int, np.integer)) or not 2 <= folds <= n_groups:
        raise UsageError(f"{who}: folds must be an integer from 2 to the number of groups "
                         f"({n_groups}); got {folds!r}")
    perm = np.random.default_rng(seed).permutation(n_groups)
    units = np.empty(n_groups, dtype=int)
    units[perm] = np.arange(n_groups) % folds
    b, B, r = _refit_leave_group_out(X, y, codes, units, int(folds), fit or _ols_fit(who),
                                     fit_rows, who)
    return LeaveGroupOut(b, B, codes, units, r, n_groups)


def _result(est, lower, upper, method, level, n_groups, alpha, extra):
    reason = too_few_groups(n_groups, alpha)
    return PredictionInterval(est, lower, upper, {
        "method": method, "level": float(level), "n_groups": int(n_groups),
        "unbounded": bool(np.isinf(lower).any() or np.isinf(upper).any()),
        "reason": reason, **extra})


@with_one_blas_thread
def group_jackknife_plus(X, y, groups, x0, *, level: float = 0.95, fit=None,
                         fit_rows=None) -> PredictionInterval:
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
    fit_rows : callable, optional
        ``fit_rows(kept row indices) -> coefficients``, for estimators that need more
        than the kept rows' X and y (weights, groups); takes precedence over ``fit``.

    Returns
    -------
    PredictionInterval
        ``estimate`` from the fit on all rows; ``details``: ``n_groups``, ``unbounded``,
        ``reason`` (why the limits are infinite, else None), ``scores``,
        ``leave_group_out`` (:class:`LeaveGroupOut`: what a coefficient file stores).
    """
    who = "group_jackknife_plus"
    X, y, x0, _ = _prepare(X, y, x0, None, who)
    alpha = _alpha(level, who)
    lgo = leave_group_out(X, y, groups, fit=fit, fit_rows=fit_rows, who=who)
    lower, upper = lgo.limits(x0, alpha)
    return _result(x0 @ lgo.centre, lower, upper, "group-jackknife+", level, lgo.n_groups,
                   alpha, {"scores": lgo.scores, "leave_group_out": lgo})


@with_one_blas_thread
def group_cv_plus(X, y, groups, x0, *, level: float = 0.95, folds: int = 5, seed: int = 0,
                  fit=None, fit_rows=None) -> PredictionInterval:
    """CV+ with folds of whole groups (sources), two-layer weights.

    Parameters
    ----------
    X, y, groups, x0, level, fit, fit_rows
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
    lgo = leave_group_out(X, y, groups, folds=folds, seed=seed, fit=fit, fit_rows=fit_rows,
                          who=who)
    lower, upper = lgo.limits(x0, alpha)
    return _result(x0 @ lgo.centre, lower, upper, "group-cv+", level, lgo.n_groups, alpha,
                   {"scores": lgo.scores, "fold_of_group": lgo.group_units,
                    "folds": int(folds), "seed": seed, "leave_group_out": lgo})
