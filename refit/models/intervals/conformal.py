"""Conformal prediction intervals for a new observation: split, jackknife+ and CV+.

Internal; the public names are re-exported by :mod:`refit.models.intervals` (see its docstring for
the shared conventions and the references). The leave-one-out fits of jackknife+ come
from a closed form.
"""

from __future__ import annotations


import numpy as np

from refit.models.linalg import _as_design, ols_solve, with_one_blas_thread
from refit._util.order import kth_in_place_finite as _kth_in_place
from refit._util.order import kth_smallest as _kth_smallest
from refit._util.order import rank_lower as _rank_lower
from refit._util.order import rank_upper as _rank_upper
from refit.models.intervals.base import PredictionInterval, _alpha, _prepare
from refit.errors import InvalidDataError, UsageError

_LEVERAGE_ONE = 1.0 - 1e-10    # h_ii above this: the row fixes its own fit, LOO undefined


@with_one_blas_thread
def loo_residuals(X, y) -> np.ndarray:
    """Leave-one-out residuals of an OLS fit, in closed form.

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design matrix.
    y : array_like, shape (n,)
        Response [units of y].

    Returns
    -------
    ndarray, shape (n,)
        e_(i) = y_i - yhat_(-i)(x_i) = e_i / (1 - h_ii) [units of y]. PRESS is the sum of
        their squares [1]_.

    Notes
    -----
    h_ii are the leverages (diagonal of the hat matrix, row sums of Q^2 from X = QR); the
    identity follows from the Sherman-Morrison formula. A row with h_ii = 1 (it alone fixes
    a coefficient) has no leave-one-out fit and raises InvalidDataError.

    References
    ----------
    .. [1] Allen, D. M. (1974). Technometrics 16:125-127.
    """
    X, y = _as_design(X, y, min_extra=2, who="loo_residuals")
    _, e, Q, _ = ols_solve(X, y, "loo_residuals")
    return e / one_minus_leverage(Q, "loo_residuals")


def one_minus_leverage(Q, who):
    h = (Q**2).sum(axis=1)
    if (h > _LEVERAGE_ONE).any():
        row = int(np.argmax(h)) + 1
        raise InvalidDataError(
            f"{who}: row {row} has leverage 1 (it alone determines the fit there), so its "
            f"leave-one-out fit does not exist; add rows near it or drop the term it fixes.")
    return 1.0 - h


#: (new rows x n) elements per block of the jackknife+/CV+ band: 256 KB of float64, so the
#: block and its temporaries stay in cache and in the allocator's reused memory. Blocks of
#: 10^6 elements (8 MB, fresh pages each) were 4x slower on a 2-core machine; the rows are
#: independent, so the block size does not change a bit of the result.
PLUS_BLOCK_ELEMENTS = 32_768


def _plus_limits(mu_loo: np.ndarray, r: np.ndarray, alpha: float, ranks=None):
    """Jackknife+/CV+ limits from LOO predictions (m, n) and LOO residual sizes (n,);
    ``ranks`` = (k_lo, k_hi) overrides the ranks of the n columns."""
    n = r.shape[0]
    k_lo, k_hi = ranks if ranks is not None else (_rank_lower(alpha, n), _rank_upper(alpha, n))
    lower = _kth_in_place(mu_loo - r, k_lo)
    upper = _kth_in_place(np.add(mu_loo, r, out=mu_loo), k_hi)  # scratch
    return lower, upper


def _plus_band(est: np.ndarray, mu_rows, r: np.ndarray, alpha: float):
    """Jackknife+/CV+ limits for every new row, in cache-sized blocks: ``mu_rows(sl)`` gives
    the (rows of sl, n) leave-out predictions, ``r`` the (n,) leave-out residual sizes."""
    lower, upper = np.empty_like(est), np.empty_like(est)
    rows = max(1, PLUS_BLOCK_ELEMENTS // max(r.shape[0], 1))
    for start in range(0, est.shape[0], rows):
        sl = slice(start, start + rows)
        lower[sl], upper[sl] = _plus_limits(mu_rows(sl), r, alpha)
    return lower, upper


def _loo_predictions(est: np.ndarray, A: np.ndarray, Q: np.ndarray, loo: np.ndarray):
    """mu_(-i)(x0) = x0'b - (A q_i) e_i/(1 - h_ii) for a block of new rows, (rows, n): the
    same operations in the same order as ``est[:, None] - (A @ Q.T) * loo``, in one buffer."""
    M = A @ Q.T
    M *= loo
    return np.subtract(est[:, None], M, out=M)


#: Relative slack of the candidate bounds of :func:`_jackknife_candidates`: far above the
#: rounding of the band values (a few ulp of their size), far below their spread.
_CANDIDATE_SLACK = 1e-9


def _jackknife_candidates(A, Q, h, loo, k_lo, k_hi, est):
    """Indices of the rows that can set a jackknife+ limit of any new row, or None.

    With g_ji = (a_j'q_i) e_i/(1 - h_ii), the band values are est_j - g_ji -/+ R_i, and by
    Cauchy-Schwarz |g_ji| <= C s_i with C = max_j |a_j|, s_i = R_i sqrt(h_ii). So every
    R_i -/+ g_ji lies in [L_i, U_i] = [R_i - C s_i, R_i + C s_i]: if tau is the k-th largest
    L_i, at least k values per new row reach tau, and a row with U_i < tau (minus a slack
    for rounding) lies beyond the k-th value of every new row. Dropping such rows leaves
    both order statistics unchanged. None when the ranks are out of range or the cut
    keeps more than half of the rows (then the full matrix is as cheap).
    """
    n = loo.shape[0]
    ks = [k for k in (k_lo, n - k_hi + 1) if 1 <= k <= n]
    if not ks:
        return None
    r = np.abs(loo)
    spread = np.sqrt(np.einsum("ij,ij->i", A, A).max()) * r * np.sqrt(h)
    low = r - spread
    tau = np.partition(low, n - max(ks))[n - max(ks)]   # the max(ks)-th largest L_i
    slack = _CANDIDATE_SLACK * (np.abs(est).max() + r.max() + spread.max())
    keep = np.flatnonzero(r + spread >= tau - slack)
    return keep if 2 * keep.size <= n else None


def _jackknife_band(est, A, Q, h, loo, alpha):
    """Jackknife+ limits: the band over the candidate rows only (same values, same order
    statistics as over all rows; see :func:`_jackknife_candidates`), else over all rows in
    cache-sized blocks."""
    n = loo.shape[0]
    if not est.size:  # no new rows (e.g. every value missing)
        return np.empty(0), np.empty(0)
    k_lo, k_hi = _rank_lower(alpha, n), _rank_upper(alpha, n)
    keep = _jackknife_candidates(A, Q, h, loo, k_lo, k_hi, est)
    if keep is None:
        return _plus_band(est, lambda sl: _loo_predictions(est[sl], A[sl], Q, loo),
                          np.abs(loo), alpha)
    Qk, lk = Q[keep], loo[keep]
    dropped = n - keep.size            # all below the upper limit's rank
    return _plus_limits(_loo_predictions(est, A, Qk, lk), np.abs(lk), alpha,
                        ranks=(k_lo, k_hi - dropped))


def _unbounded(lower: np.ndarray, upper: np.ndarray) -> bool:
    return bool(np.isinf(lower).any() or np.isinf(upper).any())


@with_one_blas_thread
def split_conformal(X, y, x0, *, level=0.95, seed=0, calib_fraction=0.5) -> PredictionInterval:
    """Split-conformal prediction interval with an OLS fit.

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design matrix.
    y : array_like, shape (n,)
        Response [units of y].
    x0 : array_like, shape (m, p)
        Design rows of the new observations.
    level : float
        Coverage 1 - alpha.
    seed : int
        Seed of the random split.
    calib_fraction : float
        Share of rows held out for calibration (the rest fit the model).

    Returns
    -------
    PredictionInterval
        ``estimate`` = prediction of the model fitted on the training part (the centre of
        the interval); limits ``estimate -/+ q``. ``details['unbounded']`` is True when the
        calibration part is too small for the level (q = inf).

    Notes
    -----
    Scores R_i = |y_i - muhat(x_i)| on the n2 calibration rows; q is the
    ceil((1 - alpha)(n2 + 1))-th smallest score, +inf if that rank exceeds n2 [1]_.
    Marginal coverage >= 1 - alpha for exchangeable rows, and <= 1 - alpha + 1/(n2 + 1)
    when scores are distinct.

    References
    ----------
    .. [1] Lei, G'Sell, Rinaldo, Tibshirani & Wasserman (2018), JASA 113:1094-1111.
    """
    who = "split_conformal"
    X, y, x0, _ = _prepare(X, y, x0, None, who)
    alpha = _alpha(level, who)
    n, p = X.shape
    if not 0.0 < calib_fraction < 1.0:
        raise UsageError(f"{who}: calib_fraction must lie between 0 and 1; got "
                         f"{calib_fraction!r}.")
    n_cal = int(round(calib_fraction * n))
    if n_cal < 1 or n - n_cal < p + 1:
        raise InvalidDataError(
            f"{who}: {n} rows cannot be split into a training part of at least {p + 1} rows "
            f"and a calibration part of at least 1 row; add rows or change calib_fraction.")
    perm = np.random.default_rng(seed).permutation(n)
    cal, train = perm[:n_cal], perm[n_cal:]
    b, _, _, _ = ols_solve(X[train], y[train], who)
    scores = np.abs(y[cal] - X[cal] @ b)
    k = _rank_upper(alpha, n_cal)
    q = float(_kth_smallest(scores[None, :], k, axis=1)[0])
    est = x0 @ b
    return PredictionInterval(est, est - q, est + q, {
        "method": "split-conformal", "level": float(level), "seed": seed,
        "n_train": int(n - n_cal), "n_calib": n_cal, "quantile": q, "calib_rows": cal,
        "unbounded": bool(np.isinf(q))})


@with_one_blas_thread
def jackknife_plus(X, y, x0, *, level=0.95) -> PredictionInterval:
    """Jackknife+ prediction interval for OLS, with closed-form leave-one-out fits.

    Parameters
    ----------
    X : array_like, shape (n, p)
        Design matrix.
    y : array_like, shape (n,)
        Response [units of y].
    x0 : array_like, shape (m, p)
        Design rows of the new observations.
    level : float
        Nominal level 1 - alpha.

    Returns
    -------
    PredictionInterval
        ``estimate`` = x0'b of the full fit; limits as below (may be infinite when
        n < 1/alpha - 1, see ``details['unbounded']``).

    Notes
    -----
    With X = QR, e the residuals and h_ii the leverages, the leave-one-out predictions are
    mu_(-i)(x0) = x0'b - (x0'(X'X)^-1 x_i) e_i/(1 - h_ii) (Sherman-Morrison), where
    x0'(X'X)^-1 x_i = (R^-T x0)' q_i. LOO residuals R_i = |e_i|/(1 - h_ii). Limits [1]_:
    lower = the floor(alpha(n+1))-th smallest of mu_(-i)(x0) - R_i, upper = the
    ceil((1-alpha)(n+1))-th smallest of mu_(-i)(x0) + R_i. Coverage >= 1 - 2 alpha for
    exchangeable rows, usually close to 1 - alpha. Cost O(m n p), no refit.

    References
    ----------
    .. [1] Barber, Candes, Ramdas & Tibshirani (2021), Annals of Statistics 49:486-507.
    """
    who = "jackknife_plus"
    X, y, x0, _ = _prepare(X, y, x0, None, who)
    alpha = _alpha(level, who)
    b, e, Q, R = ols_solve(X, y, who)
    one_minus_h = one_minus_leverage(Q, who)
    loo = e / one_minus_h
    A = np.linalg.solve(R.T, x0.T).T          # rows R^-T x0, shape (m, p)
    est = x0 @ b
    lower, upper = _jackknife_band(est, A, Q, 1.0 - one_minus_h, loo, alpha)
    return PredictionInterval(est, lower, upper, {
        "method": "jackknife+", "level": float(level), "loo_residuals": loo,
        "unbounded": _unbounded(lower, upper)})


@with_one_blas_thread
def jackknife_plus_fitted(x0, est, result, *, level=0.95) -> PredictionInterval:
    """Jackknife+ interval of an unweighted :func:`refit.models.lsq.solve_lsq` fit, from the
    fit's own factorisation (no second QR).

    Parameters
    ----------
    x0 : ndarray, shape (m, p)
        Finite design rows of the new observations (terms as in the fit).
    est : ndarray, shape (m,)
        ``x0 @ result.coefficients`` [units of y].
    result : refit.models.lsq.EstimatorResult
        The OLS result of ``solve_lsq`` (its ``details`` hold ``q`` and ``factor``).
    level : float
        Nominal level 1 - alpha.

    Returns
    -------
    PredictionInterval
        As :func:`jackknife_plus` on the same design; the numbers agree with it to
        rounding (the leave-one-out terms come from another factorisation of the same
        design).

    Notes
    -----
    ``solve_lsq`` factors the centred, scaled slopes, ``Z = (X_s - c) D^-1 = Q R``. With
    ``a_j = ((x0_j,s - c) / D) R^-1`` the cross term is ``x0_j'(X'X)^-1 x_i = 1/n +
    a_j'q_i``, so appending the constant ``1/sqrt(n)`` to ``a_j`` and ``q_i`` gives the
    orthonormal basis :func:`jackknife_plus` takes from the QR of X (and ``h_ii = |q_i|^2``).
    """
    who = "jackknife_plus"
    alpha = _alpha(level, who)
    factor, q = result.details["factor"], result.details["q"]
    n, p = q.shape[0], x0.shape[1]
    if n < p + 2:
        raise InvalidDataError(
            f"{who}: {n} rows are too few for {p} coefficient(s); at least {p + 2} "
            f"rows are needed. Add calibration rows or use a simpler form.")
    A = (((x0[:, 1:] if factor.intercept else x0) - factor.centre) / factor.scale) \
        @ factor.r_inv
    if factor.intercept:
        c = 1.0 / np.sqrt(factor.sum_weights)
        A = np.column_stack([A, np.full(A.shape[0], c)])
        q = np.column_stack([q, np.full(n, c)])
    one_minus_h = one_minus_leverage(q, who)
    loo = result.residuals / one_minus_h
    lower, upper = _jackknife_band(est, A, q, 1.0 - one_minus_h, loo, alpha)
    return PredictionInterval(est, lower, upper, {
        "method": "jackknife+", "level": float(level), "loo_residuals": loo,
        "unbounded": _unbounded(lower, upper)})


@with_one_blas_thread
def cv_plus(X, y, x0, *, level=0.95, folds=10, seed=0) -> PredictionInterval:
    """CV+ prediction interval for OLS with K folds.

    Parameters
    ----------
    X, y, x0, level
        As in :func:`jackknife_plus`.
    folds : int
        Number of folds K (2 <= K <= n); folds from ``sklearn.model_selection.KFold`` with
        ``shuffle=True, random_state=seed``.
    seed : int
        Seed of the fold assignment.

    Returns
    -------
    PredictionInterval
        ``estimate`` = x0'b of the full fit; ``details['fold']`` the fold of each row.

    Notes
    -----
    As jackknife+ with mu_(-i) replaced by the model fitted without the fold k(i) holding
    row i and R_i = |y_i - mu_(-k(i))(x_i)| [1]_. Guarantee: coverage >= 1 - 2 alpha minus
    a small term in K and n (see [1]_).

    References
    ----------
    .. [1] Barber, Candes, Ramdas & Tibshirani (2021), Annals of Statistics 49:486-507.
    """
    from sklearn.model_selection import KFold

    who = "cv_plus"
    X, y, x0, _ = _prepare(X, y, x0, None, who)
    alpha = _alpha(level, who)
    n, p = X.shape
    if not isinstance(folds, (int, np.integer)) or not 2 <= folds <= n:
        raise UsageError(f"{who}: folds must be an integer from 2 to n = {n}; got {folds!r}.")
    fold = np.empty(n, dtype=int)
    pred0 = np.empty((x0.shape[0], folds))
    r = np.empty(n)
    for k, (train, test) in enumerate(KFold(folds, shuffle=True, random_state=seed).split(X)):
        if train.size < p + 1:
            raise InvalidDataError(f"{who}: a training part of {train.size} rows is too "
                                   f"small for {p} coefficients; use more folds or rows.")
        bk, _, _, _ = ols_solve(X[train], y[train], f"{who} (fold {k + 1})")
        fold[test] = k
        r[test] = np.abs(y[test] - X[test] @ bk)
        pred0[:, k] = x0 @ bk
    b, _, _, _ = ols_solve(X, y, who)
    est = x0 @ b
    lower, upper = _plus_band(est, lambda sl: pred0[sl][:, fold], r, alpha)
    return PredictionInterval(est, lower, upper, {
        "method": "cv+", "level": float(level), "folds": int(folds), "seed": seed,
        "fold": fold, "unbounded": _unbounded(lower, upper)})
