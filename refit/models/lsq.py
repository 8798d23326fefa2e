"""Least squares on centred and scaled terms, and the result every estimator returns.

(The solver arrives with the fitting engine; ``EstimatorResult`` is the shared contract.)
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from refit.models.linalg import one_blas_thread


@dataclass
class EstimatorResult:
    """What any estimator returns for one design matrix and response.

    Attributes
    ----------
    coefficients : ndarray, shape (p,)
        In the order of the design's columns (original, unscaled terms).
    covariance : ndarray, shape (p, p)
        Covariance of the coefficients; NaN-filled where the method gives none.
    residual_std_error : float
        Residual standard error sigma [units of the response].
    df_resid : float
        Residual degrees of freedom.
    fitted, residuals : ndarray, shape (n,)
        Fitted values and residuals on the fitting scale.
    weights : ndarray or None
        Final weights (e.g. Huber IRLS weights), if the method has them.
    details : dict
        Method-specific extras (scale, iterations, slope confidence limits, ...).
    """

    coefficients: np.ndarray
    covariance: np.ndarray
    residual_std_error: float
    df_resid: float
    fitted: np.ndarray
    residuals: np.ndarray
    weights: np.ndarray | None = None
    details: dict = field(default_factory=dict)


# --------------------------------------------------------------------------------------
# The solver
# --------------------------------------------------------------------------------------


@dataclass
class LSQFactor:
    """What is needed to evaluate ``x0' (X'WX)^-1 x0`` cheaply for many new rows ``x0``.

    The design was solved as ``Z = sqrt(W) (X[:, slopes] - centre) / scale`` with ``Z = QR``.
    With an intercept, ``(X'WX)^-1`` splits into ``1 / sum(w)`` for the centred intercept
    plus the slope block ``D^-1 R^-1 R^-T D^-1`` (centring makes the two orthogonal).

    Attributes
    ----------
    r, r_inv : ndarray, shape (q, q)
        Upper-triangular factor of the centred, scaled, weighted slope terms, and its
        inverse (q is small: the inverse of the triangular factor is cheap and exact
        enough; X'X itself is never formed).
    centre, scale : ndarray, shape (q,)
        Column means (weighted) and norms used for centring and scaling.
    sum_weights : float
        Sum of the weights (``n`` for OLS).
    intercept : bool
        Whether the first design column is the intercept (handled by centring).
    """

    r: np.ndarray
    r_inv: np.ndarray
    centre: np.ndarray
    scale: np.ndarray
    sum_weights: float
    intercept: bool

    def quad_form(self, x0: np.ndarray) -> np.ndarray:
        """Return ``x0_i' (X'WX)^-1 x0_i`` for each row of ``x0`` (original design terms).

        Parameters
        ----------
        x0 : ndarray, shape (m, p)
            New design rows, with the intercept column when the fit has one.

        Returns
        -------
        ndarray, shape (m,)
            Multiply by the residual variance to get the variance of the fitted mean.
        """
        x0 = np.atleast_2d(np.asarray(x0, dtype=float))
        slopes = x0[:, 1:] if self.intercept else x0
        # (z0 R^-1) row by row: R^-1 is q x q, so this is one small matrix product
        with one_blas_thread():
            v = ((slopes - self.centre) / self.scale) @ self.r_inv
        out = np.einsum("ij,ij->i", v, v)
        if self.intercept:
            out = out + 1.0 / self.sum_weights
        return out


def _column_names(p: int, names) -> list[str]:
    return list(names) if names is not None else [f"term{j}" for j in range(p)]


def _centre_scale(x: np.ndarray, w: np.ndarray | None, intercept: bool):
    """Centre (weighted mean, two passes for accuracy) and scale columns to unit norm."""
    x = np.asfortranarray(x)
    if intercept:
        if w is None:  # (add.reduce / n is what ndarray.mean computes, without its checks)
            n = x.shape[0]
            centre = np.add.reduce(x, axis=0) / n
            xc = x - centre
            corr = np.add.reduce(xc, axis=0) / n  # second pass: the first mean's rounding
        else:
            sw = w.sum()
            centre = (w @ x) / sw
            xc = x - centre
            corr = (w @ xc) / sw
        centre = centre + corr
        xc = xc - corr
    else:
        centre = np.zeros(x.shape[1])
        xc = x
    if w is not None:
        xc = xc * np.sqrt(w)[:, None]
    # the norm of each column, scaled by its largest entry first so the squares neither
    # overflow (x ~ 1e154) nor underflow (x ~ 1e-300): a column is zero only if it is
    big = np.max(np.abs(xc), axis=0) if xc.shape[0] else np.zeros(xc.shape[1])
    safe = np.where(big > 0, big, 1.0)
    unit = xc / safe
    scale = np.where(big > 0, safe * np.sqrt(np.einsum("ij,ij->j", unit, unit)), 0.0)
    return xc, centre, scale


def _rank_message(sv: np.ndarray, vt: np.ndarray, names: list[str], intercept: bool) -> str:
    slope_names = names[1:] if intercept else names
    v = vt[-1]
    involved = [slope_names[j] for j in np.flatnonzero(np.abs(v) > 0.1 * np.abs(v).max())]
    if intercept and len(involved) == 1:
        return (f"term '{involved[0]}' is constant, so it cannot be told apart from the "
                "intercept; drop it or choose rows where it varies")
    return ("the design is rank-deficient: terms " + ", ".join(repr(t) for t in involved)
            + " are (nearly) exact linear combinations of each other (condition number "
            f"{sv[0] / max(sv[-1], np.finfo(float).tiny):.3g}); drop one of them or use a "
            "lower-degree form")


def solve_lsq(x: np.ndarray, y: np.ndarray, *, weights: np.ndarray | None = None,
              intercept: bool = True, names=None, rank_tol: float | None = None,
              design_dd=None) -> EstimatorResult:
    """Least squares by QR on centred and scaled terms (never by inverting X'X).

    Parameters
    ----------
    x : ndarray, shape (n, p)
        Design matrix in the original terms. With ``intercept=True`` its first column
        must be the column of ones (it is not used: the intercept comes from centring).
    y : ndarray, shape (n,)
        Response [any unit].
    weights : ndarray, shape (n,), optional
        WLS weights, proportional to inverse variances: ``var(e_i) = sigma^2 / w_i``.
    intercept : bool
        True: centre the other columns and the response (weighted means), solve for the
        slopes, recover the intercept. False (through the origin): scale only.
    names : sequence of str, optional
        Term names, used in the rank-deficiency message.
    rank_tol : float, optional
        Smallest allowed ratio of the extreme singular values of the scaled design;
        default ``max(n, p) * 1e3 * eps``.
    design_dd : (ndarray, ndarray) or callable returning them, optional
        The design in double-double (high and low parts), e.g. exact powers of the data
        (:meth:`refit.models.forms.Form.design_dd`); default ``x`` as given (exact).
        Unweighted fits whose scaled design has a condition number above
        :data:`refit.models.refine.REFINE_ABOVE` are refined against it
        (:func:`refit.models.refine.refine_lsq`): coefficients, residuals and
        ``(X'X)^-1`` to the accuracy the stored data allow (``details['refined']`` = the
        steps taken).

    Returns
    -------
    EstimatorResult
        ``details`` holds ``condition_number`` (of the centred and scaled design),
        ``r_squared`` (centred with an intercept; uncentred ``1 - RSS / sum(w y^2)``
        without, the NIST StRD convention), ``rss``, ``tss``, ``factor``
        (:class:`LSQFactor`) and ``q`` (the orthonormal factor, for leverages).

    Raises
    ------
    InvalidDataError
        If the design is rank-deficient (names the terms involved).

    Notes
    -----
    With ``Z = sqrt(W)(X - xbar) D^-1 = QR``, the scaled slopes are ``R^-1 Q' sqrt(W)(y - ybar)``,
    the slopes ``D^-1`` times those, and the intercept ``ybar - xbar' b``. The covariance is
    ``s^2 D^-1 R^-1 R^-T D^-1`` for the slopes, ``s^2 / sum(w) + xbar' V xbar`` for the
    intercept. Centring and scaling remove most of the ill-conditioning of raw polynomial
    terms (Longley, Pontius). Reliability is judged by the log relative error (LRE) against
    the NIST StRD certified values (McCullough 1998, The American Statistician 52:358).
    """
    with one_blas_thread():
        return _solve(np.asarray(x, dtype=float), np.asarray(y, dtype=float), weights,
                      intercept, names, rank_tol, design_dd)


def _lapack_call(f, *args, **kwargs):
    """Call a LAPACK routine with a workspace query first (as ``scipy.linalg.qr`` does)."""
    work = f(*args, lwork=-1, **kwargs)[-2]
    out = f(*args, lwork=int(work[0].real), **kwargs)
    if out[-1] < 0:  # pragma: no cover - the arguments are built here
        raise ValueError(f"illegal value in argument {-out[-1]} of LAPACK {f.typecode}"
                         f"{f.__name__}")
    return out[:-2]


def _qr_economic(a: np.ndarray):
    """Thin QR of a tall float array: ``scipy.linalg.qr(a, mode="economic")`` through the
    same LAPACK calls (geqrf, then orgqr, workspace queried), without its argument
    handling, which costs more than the factorisation of a narrow design."""
    from scipy.linalg import lapack

    n_col = a.shape[1]
    qr, tau = _lapack_call(lapack.dgeqrf, a)
    r = np.triu(qr[:n_col, :])
    (q,) = _lapack_call(lapack.dorgqr, qr, tau, overwrite_a=1)
    return q, r


def _solve_upper(r: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Solve ``r x = b`` for upper-triangular ``r``: ``scipy.linalg.solve_triangular``'s
    LAPACK call (trtrs, on the transposed system when ``r`` is C-ordered), unwrapped."""
    from scipy.linalg import lapack

    if r.flags.f_contiguous:
        x, info = lapack.dtrtrs(r, b, lower=0, trans=0)
    else:
        x, info = lapack.dtrtrs(r.T, b, lower=1, trans=1)
    if info != 0:  # pragma: no cover - the rank check comes first
        raise np.linalg.LinAlgError(f"singular triangular factor (trtrs info {info})")
    return x


def _qr_slopes(z, scale, yz, names, intercept, rank_tol):
    """QR of the centred, scaled slope terms: slopes, their unscaled covariance, rank check."""
    from refit.errors import InvalidDataError

    n, q_dim = z.shape
    qmat, r = _qr_economic(z / scale)
    sv = np.linalg.svd(r, compute_uv=False)
    tol = rank_tol if rank_tol is not None else max(n, q_dim + 1) * 1e3 * np.finfo(float).eps
    if sv[-1] <= tol * sv[0]:
        _, sv_full, vt = np.linalg.svd(r)
        raise InvalidDataError(_rank_message(sv_full, vt, names, intercept))
    qty = qmat.T @ yz
    bz = _solve_upper(r, qty)
    resid_z = yz - qmat @ qty
    rinv = _solve_upper(r, np.eye(q_dim))
    cov_slopes = (rinv @ rinv.T) / scale[:, None] / scale[None, :]  # no overflow of s_i s_j
    return qmat, r, rinv, float(sv[0] / sv[-1]), resid_z, bz / scale, cov_slopes


def _refined(x, y, design_dd, qmat, r, centre, scale, intercept, cond):
    """(coefficients, residuals, (X'X)^-1, steps) by refinement, or None when not
    needed or the values cannot be split; refuses when refinement stalls."""
    from refit.errors import InvalidDataError
    from refit.models import refine as rf

    if cond <= rf.REFINE_ABOVE:
        return None
    if callable(design_dd):
        design_dd = design_dd()
    xh, xl = design_dd if design_dd is not None else (x, np.zeros_like(x))
    if not rf.splittable(xh, y):
        return None
    solver = rf.ScaledQR(qmat, r, centre, scale, x.shape[0], intercept)
    try:
        return rf.refine_lsq(np.asarray(xh, float), np.asarray(xl, float), y, solver)
    except ArithmeticError as exc:
        raise InvalidDataError(
            f"the design is too ill-conditioned to fit reliably (condition number "
            f"{cond:.3g} of the centred and scaled terms; {exc}): its coefficients cannot "
            "be guaranteed to 8 significant digits; use a lower degree or rescale the "
            "predictor") from None


def _solve(x, y, weights, intercept, names, rank_tol, design_dd=None) -> EstimatorResult:
    from refit.errors import InvalidDataError

    n, p = x.shape
    names = _column_names(p, names)
    w = None if weights is None else np.asarray(weights, dtype=float)
    slopes = x[:, 1:] if intercept else x
    z, centre, scale = _centre_scale(slopes, w, intercept)
    sw = float(n if w is None else w.sum())
    sqw = None if w is None else np.sqrt(w)
    if intercept:
        ybar = float(np.add.reduce(y) / n if w is None else (w @ y) / sw)
        yc = y - ybar
        ybar += float(np.add.reduce(yc) / n if w is None else (w @ yc) / sw)
        yc = y - ybar
    else:
        ybar, yc = 0.0, y
    yz = yc if sqw is None else yc * sqw
    q_dim = z.shape[1]
    if q_dim and np.any(scale == 0):
        j = int(np.flatnonzero(scale == 0)[0])
        nm = names[j + 1] if intercept else names[j]
        raise InvalidDataError(f"term '{nm}' is constant (zero after centring); a slope "
                               "cannot be estimated: drop it or choose rows where it varies")
    if q_dim:
        qmat, r, rinv, cond, resid_z, b_slopes, cov_slopes = _qr_slopes(
            z, scale, yz, names, intercept, rank_tol)
    else:  # intercept-only model
        qmat, r, rinv = np.zeros((n, 0)), np.zeros((0, 0)), np.zeros((0, 0))
        cond, resid_z = 1.0, yz
        b_slopes, cov_slopes = np.zeros(0), np.zeros((0, 0))
    df = n - p
    refined = None if (w is not None or not q_dim) else _refined(
        x, y, design_dd, qmat, r, centre, scale, intercept, cond)
    if refined is not None:
        resid_z = refined[1]
    rss = float(resid_z @ resid_z)
    s2 = rss / df if df > 0 else np.nan
    if intercept:
        b0 = ybar - centre @ b_slopes
        coef = np.concatenate([[b0], b_slopes])
        cov = np.empty((p, p))
        cov[1:, 1:] = cov_slopes
        cov[0, 1:] = cov[1:, 0] = -(centre @ cov_slopes)
        cov[0, 0] = 1.0 / sw + centre @ cov_slopes @ centre
        tss = float(yz @ yz)
    else:
        coef = b_slopes
        cov = cov_slopes
        tss = float(y @ y if w is None else w @ (y * y))
    if refined is not None:
        coef, cov = refined[0], refined[2]
    cov = cov * s2
    resid = resid_z if sqw is None else resid_z / sqw
    fitted = y - resid
    factor = LSQFactor(r=r, r_inv=rinv, centre=centre, scale=scale, sum_weights=sw,
                       intercept=intercept)
    details = {"condition_number": cond, "r_squared": 1.0 - rss / tss if tss > 0 else np.nan,
               "rss": rss, "tss": tss, "factor": factor, "q": qmat, "method": "qr"}
    if refined is not None:
        details["refined"] = int(refined[3])
    return EstimatorResult(coefficients=coef, covariance=cov,
                           residual_std_error=float(np.sqrt(s2)), df_resid=float(df),
                           fitted=fitted, residuals=resid, weights=None, details=details)


def leverages(result: EstimatorResult, weights: np.ndarray | None = None) -> np.ndarray:
    """Diagonal of the (weighted) hat matrix, ``h_ii = w_i x_i'(X'WX)^-1 x_i``.

    Parameters
    ----------
    result : EstimatorResult
        A result of :func:`solve_lsq` (uses its stored orthonormal factor).
    weights : ndarray, optional
        The WLS weights used in the fit.
    """
    q = result.details["q"]
    h = np.einsum("ij,ij->i", q, q)
    factor: LSQFactor = result.details["factor"]
    if factor.intercept:
        w = np.ones(q.shape[0]) if weights is None else np.asarray(weights, float)
        h = h + w / factor.sum_weights
    return h
