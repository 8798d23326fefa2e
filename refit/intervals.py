"""Prediction intervals for a new observation: bootstrap and conformal.

Every function takes a design matrix ``X`` (n, p) with the intercept column included when
the model has one, the response ``y`` (n,) and the design rows ``x0`` (m, p) of the new
observations, and returns a :class:`PredictionInterval` whose ``estimate``, ``lower`` and
``upper`` arrays have shape (m,) and are in the units of ``y``. The model is linear least
squares (OLS, or WLS where ``weights`` is accepted); no statsmodels model is refitted in a
Python loop: resampled fits are solved in batches with array operations and the
leave-one-out fits of jackknife+ come from a closed form.

Every random step takes a ``seed`` and uses its own :class:`numpy.random.Generator`.

References
----------
.. [1] Davison, A. C. & Hinkley, D. V. (1997). *Bootstrap Methods and their Application*.
   Cambridge University Press. Sections 6.2-6.3 (residual and case resampling,
   modified residuals, prediction error resampling, Algorithm 6.4).
.. [2] Lei, J., G'Sell, M., Rinaldo, A., Tibshirani, R. J. & Wasserman, L. (2018).
   Distribution-free predictive inference for regression. JASA 113:1094-1111.
.. [3] Barber, R. F., Candes, E. J., Ramdas, A. & Tibshirani, R. J. (2021). Predictive
   inference with the jackknife+. Annals of Statistics 49(1):486-507.
.. [4] Allen, D. M. (1974). The relationship between variable selection and data
   augmentation and a method for prediction. Technometrics 16:125-127 (PRESS).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass, field

import numpy as np

from refit.errors import InvalidDataError, UsageError

__all__ = [
    "PredictionInterval",
    "bootstrap_pairs",
    "bootstrap_residual",
    "split_conformal",
    "jackknife_plus",
    "cv_plus",
    "loo_residuals",
]

_LEVERAGE_ONE = 1.0 - 1e-10    # h_ii above this: the row fixes its own fit, LOO undefined
_RANK_TOL = 1e-10             # relative size of a diagonal of R below which a design is singular
_CHUNK_ELEMENTS = 1_000_000   # resampled index elements handled per batch (memory bound)


@dataclass
class PredictionInterval:
    """Point estimates and interval limits for new observations.

    Unpacks as ``estimate, lower, upper = result``.

    Attributes
    ----------
    estimate, lower, upper : ndarray, shape (m,)
        In the units of the response. Limits may be ``-inf``/``+inf`` when the data are too
        few for the requested level (conformal methods; see ``details['unbounded']``).
    details : dict
        Method, level and method-specific extras.
    """

    estimate: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    details: dict = field(default_factory=dict)

    def __iter__(self):
        return iter((self.estimate, self.lower, self.upper))


# ----------------------------------------------------------------------------- validation
def _as_design(X, y, *, min_extra: int = 1, who: str = "fit") -> tuple[np.ndarray, np.ndarray]:
    """Return X (n, p) and y (n,) as finite float arrays, or raise InvalidDataError."""
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    if X.ndim != 2 or y.ndim != 1 or X.shape[0] != y.shape[0]:
        raise InvalidDataError(
            f"{who}: the design must be a table of n rows by p columns and the response a "
            f"column of the same n rows; got design shape {X.shape} and response shape "
            f"{y.shape}. Pass one response value per design row.")
    n, p = X.shape
    for name, arr in (("design", X), ("response", y)):
        bad = ~np.isfinite(arr)
        if bad.any():
            row = int(np.argwhere(bad)[0][0])
            raise InvalidDataError(
                f"{who}: the {name} holds {int(bad.sum())} missing or infinite value(s) "
                f"(first at row {row + 1}); drop or fill those rows before fitting.")
    if n < p + min_extra:
        raise InvalidDataError(
            f"{who}: {n} rows are too few for {p} coefficient(s); at least {p + min_extra} "
            f"rows are needed. Add calibration rows or use a simpler form.")
    return X, y


def _as_rows(x0, p: int, who: str) -> np.ndarray:
    """Return the new design rows as a finite (m, p) float array."""
    x0 = np.asarray(x0, dtype=float)
    if x0.ndim == 1:
        x0 = x0[None, :] if x0.shape[0] == p else x0[:, None]
    if x0.ndim != 2 or x0.shape[1] != p:
        raise InvalidDataError(
            f"{who}: the new design rows must have {p} column(s) like the fitting design; "
            f"got shape {np.shape(x0)}. Build them with the same terms as the fit.")
    if not np.isfinite(x0).all():
        raise InvalidDataError(
            f"{who}: the new design rows hold missing or infinite values; pass finite values.")
    return x0


def _as_weights(weights, n: int, who: str) -> np.ndarray | None:
    if weights is None:
        return None
    w = np.asarray(weights, dtype=float)
    if w.shape != (n,) or not np.isfinite(w).all() or (w <= 0).any():
        raise InvalidDataError(
            f"{who}: weights must be {n} finite positive numbers, one per row; got shape "
            f"{w.shape} with minimum {np.nanmin(w) if w.size else 'n/a'}. Drop rows with zero "
            f"or negative weight, or fix the weights column.")
    return w


def _alpha(level: float, who: str) -> float:
    if not (isinstance(level, (int, float)) and 0.0 < float(level) < 1.0):
        raise UsageError(f"{who}: level must be a number between 0 and 1 (e.g. 0.95); "
                         f"got {level!r}.")
    return 1.0 - float(level)


# ----------------------------------------------------------------------------- least squares
def _one_blas_thread(func):
    """Run ``func`` with one BLAS thread: its products are tall and thin (n x p, p small),
    where extra threads gain nothing and, on a busy machine, spin-wait for milliseconds."""
    @functools.wraps(func)
    def wrapper(*args, **kwargs):
        with _blas_controller().limit(limits=1, user_api="blas"):
            return func(*args, **kwargs)
    return wrapper


@functools.cache
def _blas_controller():
    from threadpoolctl import ThreadpoolController  # a scikit-learn dependency

    return ThreadpoolController()


def _qr(X: np.ndarray, who: str) -> tuple[np.ndarray, np.ndarray]:
    """Thin QR of X with a rank check; returns Q (n, p) and R (p, p) with X = Q R."""
    scale = np.abs(X).max(axis=0)
    scale[scale == 0] = 1.0
    Q, R = np.linalg.qr(X / scale)
    d = np.abs(np.diag(R))
    if d.min() <= _RANK_TOL * d.max():
        raise InvalidDataError(
            f"{who}: the design is rank deficient (a term is constant or a combination of "
            f"others, e.g. column {int(d.argmin()) + 1}); drop that term or add rows that "
            f"vary it.")
    return Q, R * scale


def _solve_r(R: np.ndarray, B: np.ndarray) -> np.ndarray:
    """Solve R Z = B for the small (p, p) factor R (LAPACK gesv; scipy's multi-threaded
    triangular solve can stall for milliseconds on tiny systems under load)."""
    return np.linalg.solve(R, B)


def _ols(X, y, who):
    """OLS by QR: coefficients, residuals, Q, R."""
    Q, R = _qr(X, who)
    b = _solve_r(R, Q.T @ y)
    return b, y - X @ b, Q, R


def _modified_residuals(e_w: np.ndarray, h: np.ndarray) -> np.ndarray:
    """Leverage-adjusted, centred residuals r_i = e_i / sqrt(1 - h_ii) - mean (D&H eq. 6.9)."""
    r = e_w / np.sqrt(np.clip(1.0 - h, 1e-12, None))
    return r - r.mean()


def _chunks(total: int, per_item: int):
    size = max(1, _CHUNK_ELEMENTS // max(per_item, 1))
    for start in range(0, total, size):
        yield start, min(size, total - start)


def _percentile_limits(y0, delta, alpha):
    """Limits y0 - q_{1-a/2}(delta), y0 - q_{a/2}(delta); delta = predicted - new value."""
    lo_q, hi_q = np.quantile(delta, [alpha / 2, 1 - alpha / 2], axis=0)
    return y0 - hi_q, y0 - lo_q


def _check_n_boot(n_boot, who):
    if not isinstance(n_boot, (int, np.integer)) or n_boot < 100:
        raise UsageError(f"{who}: n_boot must be an integer of at least 100 (999 or more for "
                         f"95% limits); got {n_boot!r}.")
    return int(n_boot)


# ----------------------------------------------------------------------------- bootstrap
def _prepare(X, y, x0, weights, who, min_extra=2, weight0=1.0):
    X, y = _as_design(X, y, min_extra=min_extra, who=who)
    x0 = _as_rows(x0, X.shape[1], who)
    w = _as_weights(weights, X.shape[0], who)
    sw = np.ones(X.shape[0]) if w is None else np.sqrt(w)
    if not (np.ndim(weight0) == 0 and np.isfinite(weight0) and weight0 > 0):
        raise InvalidDataError(f"{who}: weight0 (weight of the new observation) must be one "
                               f"positive number; got {weight0!r}.")
    return X, y, x0, sw


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
    dtype = np.int32 if n * min(n_boot, _CHUNK_ELEMENTS // n + 1) < 2**31 - 1 else np.int64
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
        ok = ev[:, 0] > _RANK_TOL * ev[:, -1]
        dropped += int(size - ok.sum())
        g = np.linalg.solve(G[ok], M[ok, k:, None])[..., 0]
        coefs.append(_solve_r(R, g.T).T)
    return np.vstack(coefs), dropped


@_one_blas_thread
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
    X, y, x0, sw = _prepare(X, y, x0, weights, who, weight0=weight0)
    alpha = _alpha(level, who)
    n_boot = _check_n_boot(n_boot, who)
    Xw, yw = X * sw[:, None], y * sw
    b, ew, Q, R = _ols(Xw, yw, who)
    pool = _modified_residuals(ew, (Q**2).sum(axis=1))
    rng = np.random.default_rng(seed)
    coefs, dropped = _pairs_coefficients(Q, R, yw, n_boot, rng)
    if dropped > n_boot // 2:
        raise InvalidDataError(
            f"{who}: {dropped} of {n_boot} resamples had a singular design (too few distinct "
            f"rows, n = {X.shape[0]}); use bootstrap_residual or add calibration rows.")
    y0 = x0 @ b
    noise = rng.choice(pool, size=(coefs.shape[0], x0.shape[0])) / math.sqrt(weight0)
    delta = coefs @ x0.T - (y0 + noise)
    lower, upper = _percentile_limits(y0, delta, alpha)
    return PredictionInterval(y0, lower, upper, {
        "method": "bootstrap-pairs", "level": float(level), "n_boot": n_boot, "seed": seed,
        "dropped": dropped, "coefficients": coefs})


@_one_blas_thread
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
    X, y, x0, sw = _prepare(X, y, x0, weights, who, weight0=weight0)
    alpha = _alpha(level, who)
    n_boot = _check_n_boot(n_boot, who)
    Xw, yw = X * sw[:, None], y * sw
    b, ew, Q, R = _ols(Xw, yw, who)
    n = X.shape[0]
    pool = _modified_residuals(ew, (Q**2).sum(axis=1))
    rng = np.random.default_rng(seed)
    coefs = []
    for _, size in _chunks(n_boot, n):
        eps = pool[rng.integers(0, n, size=(size, n))]
        coefs.append(b + _solve_r(R, Q.T @ eps.T).T)
    coefs = np.vstack(coefs)
    y0 = x0 @ b
    noise = rng.choice(pool, size=(n_boot, x0.shape[0])) / math.sqrt(weight0)
    delta = coefs @ x0.T - (y0 + noise)
    lower, upper = _percentile_limits(y0, delta, alpha)
    return PredictionInterval(y0, lower, upper, {
        "method": "bootstrap-residual", "level": float(level), "n_boot": n_boot,
        "seed": seed, "coefficients": coefs})


# ----------------------------------------------------------------------------- conformal
def _rank_lower(alpha: float, n: int) -> int:
    """floor(alpha (n + 1)): 1-based rank of the lower jackknife+ quantile (0 = -inf)."""
    return int(math.floor(alpha * (n + 1) + 1e-9))


def _rank_upper(alpha: float, n: int) -> int:
    """ceil((1 - alpha)(n + 1)): 1-based rank of the upper quantile (> n means +inf)."""
    return int(math.ceil((1.0 - alpha) * (n + 1) - 1e-9))


def _kth_smallest(values: np.ndarray, k: int, axis: int = -1) -> np.ndarray:
    """k-th smallest (1-based) along ``axis``; -inf for k < 1, +inf for k > size."""
    size = values.shape[axis]
    shape = np.delete(np.array(values.shape), axis % values.ndim)
    if k < 1:
        return np.full(shape, -np.inf)
    if k > size:
        return np.full(shape, np.inf)
    return np.take(np.partition(values, k - 1, axis=axis), k - 1, axis=axis)


@_one_blas_thread
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
    _, e, Q, _ = _ols(X, y, "loo_residuals")
    return e / _one_minus_h(Q, "loo_residuals")


def _one_minus_h(Q, who):
    h = (Q**2).sum(axis=1)
    if (h > _LEVERAGE_ONE).any():
        row = int(np.argmax(h)) + 1
        raise InvalidDataError(
            f"{who}: row {row} has leverage 1 (it alone determines the fit there), so its "
            f"leave-one-out fit does not exist; add rows near it or drop the term it fixes.")
    return 1.0 - h


def _plus_limits(mu_loo: np.ndarray, r: np.ndarray, alpha: float):
    """Jackknife+/CV+ limits from LOO predictions (m, n) and LOO residual sizes (n,)."""
    n = r.shape[0]
    lower = _kth_smallest(mu_loo - r, _rank_lower(alpha, n), axis=1)
    upper = _kth_smallest(mu_loo + r, _rank_upper(alpha, n), axis=1)
    return lower, upper


@_one_blas_thread
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
    b, _, _, _ = _ols(X[train], y[train], who)
    scores = np.abs(y[cal] - X[cal] @ b)
    k = _rank_upper(alpha, n_cal)
    q = float(_kth_smallest(scores[None, :], k, axis=1)[0])
    est = x0 @ b
    return PredictionInterval(est, est - q, est + q, {
        "method": "split-conformal", "level": float(level), "seed": seed,
        "n_train": int(n - n_cal), "n_calib": n_cal, "quantile": q, "calib_rows": cal,
        "unbounded": bool(np.isinf(q))})


@_one_blas_thread
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
    b, e, Q, R = _ols(X, y, who)
    loo = e / _one_minus_h(Q, who)
    A = np.linalg.solve(R.T, x0.T).T          # rows R^-T x0, shape (m, p)
    est = x0 @ b
    lower, upper = np.empty_like(est), np.empty_like(est)
    n = X.shape[0]
    for start, size in _chunks(x0.shape[0], n):
        sl = slice(start, start + size)
        mu = est[sl, None] - (A[sl] @ Q.T) * loo[None, :]
        lower[sl], upper[sl] = _plus_limits(mu, np.abs(loo), alpha)
    return PredictionInterval(est, lower, upper, {
        "method": "jackknife+", "level": float(level), "loo_residuals": loo,
        "unbounded": bool(np.isinf(lower).any() or np.isinf(upper).any())})


@_one_blas_thread
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
        bk, _, _, _ = _ols(X[train], y[train], f"{who} (fold {k + 1})")
        fold[test] = k
        r[test] = np.abs(y[test] - X[test] @ bk)
        pred0[:, k] = x0 @ bk
    b, _, _, _ = _ols(X, y, who)
    est = x0 @ b
    lower, upper = np.empty_like(est), np.empty_like(est)
    for start, size in _chunks(x0.shape[0], n):
        sl = slice(start, start + size)
        lower[sl], upper[sl] = _plus_limits(pred0[sl][:, fold], r, alpha)
    return PredictionInterval(est, lower, upper, {
        "method": "cv+", "level": float(level), "folds": int(folds), "seed": seed,
        "fold": fold, "unbounded": bool(np.isinf(lower).any() or np.isinf(upper).any())})
