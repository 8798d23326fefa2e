"""Leave-one-out of an OLS transfer function in closed form (no refits).

Used by :func:`refit.validate.crossval.cross_validate` for leave-one-out with an OLS fit of a
form linear in the response and an analytic (or no) interval; equal to explicit refits to
rounding, at the cost of one fit (PRESS; Allen 1974, Technometrics 16:125-127).
"""

from __future__ import annotations

import numpy as np

from refit.errors import InvalidDataError, RefitError


def loo_ols(x, y, form, level: float = 0.95, interval: str = "analytic"):
    """Leave-one-out predictions of an OLS transfer function, without refitting.

    Parameters
    ----------
    x : ndarray, shape (n, k)
        Predictor values [their units].
    y : ndarray, shape (n,)
        Response [its unit].
    form : refit.models.forms.Form
        A form linear in y (not exponential).
    level : float
        Level of the analytic prediction interval.
    interval : str
        ``analytic`` or ``none``.

    Returns
    -------
    estimate, lower, upper : ndarray, shape (n,)
        ``yhat_(-i) = y_i - e_i / (1 - h_ii)``; limits ``yhat_(-i) -+ t(n - p - 1)
        s_(-i) / sqrt(1 - h_ii)`` [units of y]: the analytic interval of the fit without
        row i, evaluated at row i.
    flags : ndarray of str
        As ``Fit.predict``: ``outside-calibration-range`` when row i lies outside the range
        of the other rows, ``beyond-turning-point`` (single-predictor quadratics) when it
        lies past the turning point of the fit without it, on the far side from most data.

    Notes
    -----
    With the leverages h_ii and residuals e_i of the full fit, Sherman-Morrison gives the
    left-out residual e_i/(1 - h_ii) (PRESS, [2]_), the deleted variance
    s_(-i)^2 = ((n - p) s^2 - e_i^2/(1 - h_ii)) / (n - p - 1), the variance factor
    x_i'(X_(-i)'X_(-i))^-1 x_i = h_ii/(1 - h_ii) and the coefficients
    b_(-i) = b - (X'X)^-1 x_i e_i/(1 - h_ii). Cost O(n p^2): one QR.
    """
    est, lower, upper, masks = _loo_ols_masks(x, y, form, level, interval)
    return est, lower, upper, _flag_text(masks)


def _loo_ols_masks(x, y, form, level, interval):
    """:func:`loo_ols` with the flags as named boolean masks (row by row)."""
    from scipy.special import stdtrit

    from refit.models.lsq import leverages, solve_lsq

    x = np.asarray(x, dtype=float).reshape(len(y), -1)
    X = form.design(x)
    res = solve_lsq(X, y, intercept=form.intercept, names=form.terms)
    h = leverages(res)
    if (h > 1.0 - 1e-10).any():
        raise InvalidDataError(f"row {int(np.argmax(h)) + 1} alone determines the fit "
                               "(leverage 1): its leave-one-out fit does not exist; add rows "
                               "near it or use a simpler form")
    e, df = res.residuals, res.df_resid
    loo = e / (1.0 - h)
    est = y - loo
    if interval == "none":
        lower = upper = np.full_like(est, np.nan)
    else:
        s2_del = (df * res.residual_std_error ** 2 - e * loo) / (df - 1.0)
        # stdtrit is what scipy.stats.t.ppf evaluates, without its argument handling
        half = float(stdtrit(df - 1.0, 0.5 + level / 2.0)) * np.sqrt(s2_del / (1.0 - h))
        lower, upper = est - half, est + half
    masks = {"outside-calibration-range": _outside_others(x)}
    if form.degree == 2 and x.shape[1] == 1:
        masks["beyond-turning-point"] = _beyond_turning_loo(x[:, 0], X, res, loo, form)
    return est, lower, upper, masks


def _flag_text(masks: dict) -> np.ndarray:
    """';'-joined names of the true masks per row (through bit codes: no per-row loop)."""
    names = list(masks)
    codes = sum(np.asarray(m, dtype=np.int64) << i for i, m in enumerate(masks.values()))
    table = np.array([";".join(nm for i, nm in enumerate(names) if c >> i & 1)
                      for c in range(1 << len(names))], dtype=object)
    return table[codes]


def _outside_others(x: np.ndarray) -> np.ndarray:
    """True where a row holds the unique minimum or maximum of a column (so it lies
    outside the range of the other rows)."""
    out = np.zeros(x.shape[0], dtype=bool)
    for col in x.T:
        for extreme in (col.min(), col.max()):
            at = col == extreme
            if at.sum() == 1:
                out |= at
    return out


def _beyond_turning_loo(x, X, res, loo, form) -> np.ndarray:
    """Leave-one-out version of refit.models.domain.beyond_turning_mask for a quadratic."""
    s2 = res.residual_std_error ** 2
    if not s2 > 0:
        return np.zeros(len(x), dtype=bool)
    xtx_inv = res.covariance / s2
    b = res.coefficients[None, :] - (X @ xtx_inv) * loo[:, None]   # b_(-i), one row each
    if not form.intercept:
        b = np.column_stack([np.zeros(len(x)), b])
    b1, b2 = b[:, 1], b[:, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        tp = -b1 / (2.0 * b2)
    ok = (b2 != 0) & np.isfinite(b2) & np.isfinite(tp)
    xs = np.sort(x)
    above = len(x) - np.searchsorted(xs, tp, side="right") - (x > tp)
    below = np.searchsorted(xs, tp, side="left") - (x < tp)
    side = np.where(above > below, 1, -1)
    return ok & ((x - tp) * side < 0)



def loo_part(arrays, usable, c, level):
    """Closed-form leave-one-out of the usable rows: estimate, lower, upper and the flags
    as a Categorical (categories sorted, as ``pandas.Categorical`` of the texts)."""
    from refit.models.predict import flag_categorical
    from refit.models.forms import make_form

    form = make_form(c.form, list(c.predictors), degree=c.degree)
    x = np.column_stack([arrays[p][usable] for p in c.predictors])
    y = arrays[c.response][usable]
    if len(y) < form.min_rows + 1:
        raise InvalidDataError(f"{c.label}, leave-one-out: each fit leaves out one of "
                               f"{len(y)} rows; form {form.name!r} has {form.n_params} "
                               f"coefficient(s) and needs at least {form.min_rows + 1} rows "
                               "with values")
    try:
        est, lo, hi, masks = _loo_ols_masks(x, y, form, level, c.interval)
    except RefitError as err:
        raise type(err)(f"{c.label}, leave-one-out: {err}") from err
    return est, lo, hi, flag_categorical(masks, len(y), sort=True)
