"""Classical calibration: invert a fitted curve ``feature = f(climate)`` for a new feature value.

The forward direction fits the feature on climate (the way the soil responds to climate)
and reads climate off the curve. Point estimate: solve ``f(x) = y0`` (closed form for a
line; polynomial roots, polished by a bracketing root finder, for higher degrees).
Interval: the set of ``x`` whose prediction band for a new observation contains ``y0``
(Fieller for a line, Fieller 1954 / Eisenhart 1939; the same set found numerically for
polynomials, as in NIST/SEMATECH e-Handbook section 4.5.2.1).

Flags (a tuple of short strings per value):

- ``two-roots``: ``f(x) = y0`` has more than one solution inside the calibration range
  (the curve is not monotonic there); the root on the branch holding most calibration
  points is reported.
- ``unbounded``: the band never closes (for a line ``g = t^2 V(b1) / b1^2 >= 1``, i.e. the
  slope is not significant at the chosen level); the limits are -inf / +inf.
- ``outside-calibration-range``: the estimate lies outside the climate range of the data.
- ``beyond-turning-point``: ``y0`` lies beyond the curve's extreme value (no real root;
  the equation saturates and cannot be inverted: estimate NaN), or the root lies past a
  turning point outside the data.
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial import polynomial as P

FLAG_TWO_ROOTS = "two-roots"
FLAG_UNBOUNDED = "unbounded"
FLAG_OUTSIDE = "outside-calibration-range"
FLAG_BEYOND_TP = "beyond-turning-point"


def fieller_line(y0, b0: float, b1: float, cov: np.ndarray, sigma2_new: float, t: float):
    """Fieller interval for ``x`` from a fitted line ``y = b0 + b1 x`` and a new ``y0``.

    Parameters
    ----------
    y0 : array_like
        New responses [units of y].
    b0, b1 : float
        Intercept [y] and slope [y per x].
    cov : ndarray, shape (2, 2)
        Covariance of (b0, b1).
    sigma2_new : float
        Variance of the new observation, ``s^2 / w0`` (``s^2 / m`` for a mean of m) [y^2].
    t : float
        Student t quantile ``t(1 - alpha/2; df)``.

    Returns
    -------
    estimate, lower, upper : ndarray
        ``x_hat = (y0 - b0) / b1`` and the limits [units of x]; +-inf when unbounded.
    unbounded : bool
        True when ``g = t^2 V11 / b1^2 >= 1``.

    Notes
    -----
    The set ``{x : (y0 - b0 - b1 x)^2 <= t^2 (sigma2_new + V00 + 2 x V01 + x^2 V11)}`` is
    ``A x^2 - 2 B x + C <= 0`` with ``A = b1^2 - t^2 V11``, ``B = b1 (y0 - b0) + t^2 V01``,
    ``C = (y0 - b0)^2 - t^2 (sigma2_new + V00)``. With OLS this equals the textbook form
    ``xbar + (x_hat - xbar)/(1 - g) +- t s/(|b1|(1 - g)) sqrt((x_hat - xbar)^2/Sxx +
    (1 - g)(1/m + 1/n))`` (Eisenhart 1939, Ann. Math. Stat. 10:162; from memory).
    """
    y0 = np.asarray(y0, dtype=float)
    d = y0 - b0
    est = d / b1
    a = b1 * b1 - t * t * cov[1, 1]
    if a <= 0:
        inf = np.full_like(est, np.inf)
        return est, -inf, inf, True
    b = b1 * d + t * t * cov[0, 1]
    c = d * d - t * t * (sigma2_new + cov[0, 0])
    root = np.sqrt(np.maximum(b * b - a * c, 0.0))
    return est, (b - root) / a, (b + root) / a, False


def _rescale(poly: np.ndarray, c: float, h: float) -> np.ndarray:
    """Coefficients of ``p(c + h u)`` in increasing powers of ``u``."""
    from numpy.polynomial import Polynomial

    out = Polynomial(poly)(Polynomial([c, h])).coef
    return np.pad(out, (0, max(0, len(poly) - len(out))))


def _real_roots(poly_u: np.ndarray) -> np.ndarray:
    poly_u = np.trim_zeros(poly_u, "b")
    if len(poly_u) < 2:
        return np.zeros(0)
    r = P.polyroots(poly_u)
    keep = np.abs(r.imag) <= 1e-7 * np.maximum(1.0, np.abs(r.real))
    return np.sort(r.real[keep])


def _polish(fun, u: float, span: float) -> float:
    """Refine a root of ``fun`` near ``u`` with brentq when a sign change brackets it."""
    from scipy.optimize import brentq

    for h in (1e-9, 1e-7, 1e-5, 1e-3):
        a, b = u - h * span, u + h * span
        fa, fb = fun(a), fun(b)
        if fa == 0:
            return a
        if fb == 0:
            return b
        if np.sign(fa) != np.sign(fb):
            return brentq(fun, a, b, xtol=1e-15 * max(1.0, abs(u)), rtol=1e-15, maxiter=200)
    return u


def _edge(fun, u0: float, direction: int, limit: float) -> float:
    """Nearest point from ``u0`` (where ``fun < 0``) in ``direction`` where ``fun`` crosses 0."""
    from scipy.optimize import brentq

    step, inner = 1e-8, u0
    while step <= limit:
        outer = u0 + direction * step
        if fun(outer) > 0:
            a, b = sorted((inner, outer))
            return brentq(fun, a, b, xtol=1e-14 * max(1.0, abs(u0)), rtol=1e-15, maxiter=200)
        inner, step = outer, step * 2.0
    return direction * np.inf


def _choose_root(roots: np.ndarray, poly_u: np.ndarray, u_cal: np.ndarray | None):
    """Pick the root to report and its flags (roots in scaled units, domain = [-1, 1])."""
    flags = []
    inside = roots[np.abs(roots) <= 1.0]
    turning = _real_roots(P.polyder(poly_u))
    if len(inside) == 1:
        return inside[0], flags
    if len(inside) > 1:
        flags.append(FLAG_TWO_ROOTS)
        if u_cal is None or len(turning) == 0:
            return inside[np.argmin(np.abs(inside))], flags
        # the branch between turning points that holds most calibration points
        edges = np.concatenate([[-np.inf], turning, [np.inf]])
        counts = np.histogram(u_cal, bins=edges)[0]
        main = int(np.argmax(counts))
        on_main = inside[(inside >= edges[main]) & (inside <= edges[main + 1])]
        pick = on_main if len(on_main) else inside
        return pick[np.argmin(np.abs(pick))], flags
    flags.append(FLAG_OUTSIDE)
    best = roots[np.argmin(np.abs(roots) - 1.0)]
    if np.any((turning > 1.0) & (turning < best)) or np.any((turning < -1.0) & (turning > best)):
        flags.append(FLAG_BEYOND_TP)
    return best, flags


def invert_polynomial(y0, poly: np.ndarray, design, cov: np.ndarray, sigma2_new: float,
                      t: float, domain: tuple[float, float], x_cal: np.ndarray | None = None):
    """Invert ``y = sum_j poly[j] x^j`` at each ``y0``: point estimate, band-inversion interval.

    Parameters
    ----------
    y0 : array_like
        New responses [units of y] (NaN gives NaN and no flags).
    poly : ndarray
        Polynomial coefficients in increasing powers of x (0 for absent terms).
    design : callable
        ``design(x) -> (m, p)`` design rows matching ``cov``.
    cov : ndarray, shape (p, p)
        Coefficient covariance.
    sigma2_new : float or ndarray
        Variance of each new observation [y^2].
    t : float
        Student t quantile.
    domain : (float, float)
        Calibration range of x (used for scaling, root choice and flags).
    x_cal : ndarray, optional
        Calibration x values (to find the main branch when there are two roots).

    Returns
    -------
    estimate, lower, upper : ndarray
    flags : list of tuple of str
    """
    lo_d, hi_d = map(float, domain)
    c, h = 0.5 * (lo_d + hi_d), 0.5 * (hi_d - lo_d)
    poly_u = _rescale(np.asarray(poly, float), c, h)
    u_cal = None if x_cal is None else (np.asarray(x_cal, float) - c) / h
    y0 = np.atleast_1d(np.asarray(y0, dtype=float))
    out = np.full((3, len(y0)), np.nan)
    flags: list[tuple[str, ...]] = []
    s2 = np.broadcast_to(np.asarray(sigma2_new, dtype=float), y0.shape)
    k = len(np.trim_zeros(np.asarray(poly, float), "b")) - 1
    lead_var = cov[-1, -1] if k >= 1 else 0.0
    bounded = k >= 1 and poly[k] ** 2 > t * t * lead_var
    for i, yi in enumerate(y0):
        if not np.isfinite(yi):
            flags.append(())
            continue

        def band(u, yi=yi, s2i=s2[i]):
            x = c + h * np.atleast_1d(u)
            g = design(x)
            fx = P.polyval(x, poly)
            q = np.einsum("ij,jk,ik->i", g, cov, g)
            return float(((yi - fx) ** 2 - t * t * (s2i + q))[0])

        pu = poly_u.copy()
        pu[0] -= yi
        roots = np.array([_polish(lambda u: P.polyval(u, pu), r, 1.0 + abs(r))
                          for r in _real_roots(pu)])
        if len(roots) == 0:
            flags.append((FLAG_BEYOND_TP,))
            continue
        u_hat, f = _choose_root(roots, pu, u_cal)
        limit = 1e12 if bounded else 1e8
        lo_u, hi_u = _edge(band, u_hat, -1, limit), _edge(band, u_hat, 1, limit)
        if not np.isfinite(lo_u) or not np.isfinite(hi_u):
            f.append(FLAG_UNBOUNDED)
        out[:, i] = c + h * np.array([u_hat, lo_u, hi_u])
        flags.append(tuple(f))
    return out[0], out[1], out[2], flags


def range_flags(estimate: np.ndarray, domain: tuple[float, float]) -> np.ndarray:
    """Boolean mask of estimates outside the calibration range (NaN counts as inside)."""
    e = np.asarray(estimate, dtype=float)
    with np.errstate(invalid="ignore"):
        return (e < domain[0]) | (e > domain[1])


# ----------------------------------------------------------------------------- applying a fit
FLAG_MISSING = "missing-value"
FLAG_INVALID = "invalid-value"
FLAG_CROSS = "quantiles-cross"


def _shape_values(arr: np.ndarray, names: list[str]) -> np.ndarray:
    from .errors import UsageError

    k = len(names)
    if arr.ndim <= 1:
        arr = arr.reshape(-1, 1) if k == 1 else arr.reshape(1, -1)
    if arr.ndim != 2 or arr.shape[1] != k:
        raise UsageError(f"values must have {k} column(s) ({names}); got shape {arr.shape}")
    return arr


def _values_matrix(values, names: list[str]):
    """Fossil feature values as an (m, k) float array plus the index for the output."""
    import pandas as pd

    from .errors import InvalidDataError, UsageError

    index = values.index if isinstance(values, (pd.Series, pd.DataFrame)) else None
    if isinstance(values, (pd.DataFrame, dict)):
        missing = [n for n in names if n not in values]
        if missing:
            raise UsageError(f"values lack column(s) {missing}; the fit needs {names} "
                             f"(got {list(values.keys())})")
        cols = [values[n] for n in names]
    else:
        try:  # fast path: already numeric
            arr = _shape_values(np.asarray(values, dtype=float), names)
            cols = None
        except (TypeError, ValueError):
            raw = _shape_values(np.asarray(values, dtype=object), names)
            cols = [raw[:, j] for j in range(raw.shape[1])]
    if cols is not None:
        series = [pd.Series(np.atleast_1d(np.asarray(c, dtype=object))) for c in cols]
        arr = np.column_stack([pd.to_numeric(c, errors="coerce")
                               .to_numpy(dtype=float, na_value=np.nan) for c in series])
        bad = np.isnan(arr) & np.column_stack([c.notna().to_numpy() for c in series])
        if bad.any():
            r, c = np.argwhere(bad)[0]
            raise InvalidDataError(f"value {series[c].iat[r]!r} for {names[c]!r} (position "
                                   f"{r}) is not a number; correct it or leave it empty")
    if np.isinf(arr).any():
        r, c = np.argwhere(np.isinf(arr))[0]
        raise InvalidDataError(f"value for {names[c]!r} at position {r} is infinite; "
                               "use a finite number or leave it empty")
    return arr, index


def _t(level: float, df: float) -> float:
    from scipy import stats

    return float(stats.t.ppf(0.5 + level / 2.0, df))


def _flag_strings(masks: dict[str, np.ndarray], m: int):
    """';'-joined flag names per row from boolean masks, as a pandas Categorical
    (vectorised through bit codes: fast for many rows)."""
    import pandas as pd

    names = list(masks)
    codes = np.zeros(m, dtype=np.int64)
    for i, nm in enumerate(names):
        codes |= masks[nm].astype(np.int64) << i
    present = np.flatnonzero(np.bincount(codes, minlength=1))
    lookup = np.zeros(1 << len(names), dtype=np.int64)
    lookup[present] = np.arange(len(present))
    text = [";".join(nm for i, nm in enumerate(names) if code >> i & 1) for code in present]
    return pd.Categorical.from_codes(lookup[codes], categories=text)


def _analytic_band(fit, X0, eta, w0, level):
    from .errors import UsageError

    res = fit.result
    if not np.all(np.isfinite(res.covariance)):
        raise UsageError(f"estimator {fit.estimator!r} gives no coefficient covariance, so "
                         "there is no analytic interval; use interval='bootstrap-pairs' or a "
                         "conformal interval with an OLS fit, or interval='none'")
    s2 = res.residual_std_error ** 2
    factor = res.details.get("factor")
    if factor is not None:
        q = factor.quad_form(X0) * s2
    else:
        q = np.einsum("ij,jk,ik->i", X0, res.covariance, X0)
    half = _t(level, res.df_resid) * np.sqrt(s2 / w0 + q)
    return eta - half, eta + half


def _resampled_band(fit, X0, ok, w0, level, interval, opts):
    from . import intervals as iv
    from .errors import UsageError

    if fit.estimator not in ("ols", "wls"):
        raise UsageError(f"interval {interval!r} refits by least squares, so it goes with "
                         f"estimator 'ols' or 'wls', not {fit.estimator!r}")
    if fit.weights is not None and interval not in ("bootstrap-pairs", "bootstrap-residual"):
        raise UsageError(f"interval {interval!r} does not take weights; use "
                         "'bootstrap-pairs' or 'bootstrap-residual' with a WLS fit")
    X = fit.form.design(fit.x)
    y, x0 = fit.y_model, X0[ok]
    if interval.startswith("bootstrap"):
        fun = iv.bootstrap_pairs if interval == "bootstrap-pairs" else iv.bootstrap_residual
        w0v = np.broadcast_to(w0, ok.shape)[ok]
        out = np.full((3, len(ok)), np.nan)
        idx = np.flatnonzero(ok)
        for wv in np.unique(w0v):  # the resampling functions take one new-row weight
            sel = w0v == wv
            pi = fun(X, y, x0[sel], n_boot=opts["n_boot"], level=level, seed=opts["seed"],
                     weights=fit.weights, weight0=float(wv))
            out[:, idx[sel]] = np.vstack([pi.estimate, pi.lower, pi.upper])
        return out
    elif interval == "split-conformal":
        pi = iv.split_conformal(X, y, x0, level=level, seed=opts["seed"],
                                calib_fraction=opts["calib_fraction"])
    elif interval == "jackknife+":
        pi = iv.jackknife_plus(X, y, x0, level=level)
    else:
        pi = iv.cv_plus(X, y, x0, level=level, folds=opts["folds"], seed=opts["seed"])
    out = np.full((3, len(ok)), np.nan)
    out[:, ok] = np.vstack([pi.estimate, pi.lower, pi.upper])
    return out


def _quantile_band(fit, X0, level):
    from .errors import UsageError

    if fit.estimator != "quantile":
        raise UsageError("interval 'quantile' comes from quantile curves: fit with "
                         "estimator='quantile'")
    qlo, qhi = fit.extras["quantiles"]
    if abs((qhi - qlo) - level) > 1e-9:
        raise UsageError(f"the quantile curves were fitted at {qlo} and {qhi}, a "
                         f"{qhi - qlo:g} interval; ask for level={qhi - qlo:g} or refit "
                         "with other quantiles")
    coefs = fit.extras["quantile_coefficients"]
    return X0 @ coefs[float(qlo)], X0 @ coefs[float(qhi)]


def _predict_inverse(fit, v, level, interval, w0, opts):
    from .domain import beyond_turning_mask, extrapolation_mask

    m = v.shape[0]
    ok = ~np.isnan(v).any(axis=1)
    X0 = fit.form.design(v)
    eta = X0 @ fit.result.coefficients
    lo = hi = np.full(m, np.nan)
    masks = {FLAG_MISSING: ~ok}
    if interval == "analytic":
        lo, hi = _analytic_band(fit, X0, eta, w0, level)
    elif interval == "quantile":
        lo, hi = _quantile_band(fit, X0, level)
        masks[FLAG_CROSS] = lo > hi
    elif interval != "none":
        eta, lo, hi = _resampled_band(fit, X0, ok, w0, level, interval, opts)
        masks[FLAG_UNBOUNDED] = ok & ~(np.isfinite(lo) & np.isfinite(hi))
    out = np.full(m, False)
    for j, name in enumerate(fit.x_names):
        out |= extrapolation_mask(v[:, j], *fit.ranges[name])
    masks[FLAG_OUTSIDE] = out
    if fit.form.degree == 2 and v.shape[1] == 1:
        masks[FLAG_BEYOND_TP] = beyond_turning_mask(v[:, 0], fit._core_domain())
    if fit.form.log_response:
        smear = fit.smearing if interval in ("analytic", "none") else 1.0
        eta, lo, hi = np.exp(eta) * smear, np.exp(lo), np.exp(hi)
    return eta, lo, hi, _flag_strings(masks, m)


def _predict_forward(fit, v, level, interval, w0):
    from .errors import UsageError

    if interval not in ("analytic", "none"):
        raise UsageError(f"interval {interval!r} is not available for direction 'forward'; "
                         "the classical-calibration interval is 'analytic' (band inversion)")
    y0 = v[:, 0].copy()
    missing = np.isnan(y0)
    invalid = np.zeros_like(missing)
    if fit.form.log_response:
        invalid = ~missing & ~(y0 > 0)
        y0[invalid] = np.nan
        y0 = np.log(y0)
    res = fit.result
    deg, origin = fit.form.degree, fit.form.through_origin
    poly = np.concatenate([[0.0] if origin else [], res.coefficients])
    cov = res.covariance if interval == "analytic" else np.zeros_like(res.covariance)
    if not np.all(np.isfinite(cov)):
        raise UsageError(f"estimator {fit.estimator!r} gives no coefficient covariance, so "
                         "the calibration interval cannot be formed; use interval='none' for "
                         "the estimate alone, or estimator 'ols'")
    if origin:
        cov = np.pad(cov, ((1, 0), (1, 0)))
    s2new = res.residual_std_error ** 2 / w0 if interval == "analytic" else 0.0
    t = _t(level, res.df_resid)
    dom = fit.ranges[fit.x_names[0]]
    if deg == 1:
        est, lo, hi, unb = fieller_line(y0, poly[0], poly[1], cov, s2new, t)
        flags = [(FLAG_UNBOUNDED,) if unb and np.isfinite(e) else () for e in est]
    else:
        def design(x):
            return np.vander(x, deg + 1, increasing=True)

        est, lo, hi, flags = invert_polynomial(y0, poly, design, cov, s2new, t, dom,
                                               fit.x[:, 0])
    if interval == "none":
        lo, hi = np.full_like(est, np.nan), np.full_like(est, np.nan)
    outside = range_flags(est, dom)
    text = []
    for i, f in enumerate(flags):
        f = list(f)
        if outside[i] and FLAG_OUTSIDE not in f:
            f.insert(0, FLAG_OUTSIDE)
        if missing[i]:
            f.append(FLAG_MISSING)
        if invalid[i]:
            f.append(FLAG_INVALID)
        text.append(";".join(f))
    return est, lo, hi, np.asarray(text, dtype=object)


def predict_fit(fit, values, level: float, interval: str, *, weights=None, seed: int = 0,
                n_boot: int = 1000, folds: int = 10, calib_fraction: float = 0.5):
    """Apply a :class:`refit.fitting.Fit` to fossil feature values (see ``Fit.predict``)."""
    import pandas as pd

    from .errors import InvalidDataError

    v, index = _values_matrix(values, fit.predictors)
    m = v.shape[0]
    w0 = np.ones(m) if weights is None else np.broadcast_to(
        np.asarray(weights, dtype=float), (m,))
    if not np.all(np.isfinite(w0) & (w0 > 0)):
        raise InvalidDataError("weights of new observations must be finite and > 0")
    opts = {"seed": seed, "n_boot": n_boot, "folds": folds, "calib_fraction": calib_fraction}
    if fit.direction == "forward":
        est, lo, hi, flags = _predict_forward(fit, v, level, interval, w0)
    else:
        est, lo, hi, flags = _predict_inverse(fit, v, level, interval, w0, opts)
    return pd.DataFrame({"estimate": est, "lower": lo, "upper": hi, "flags": flags},
                        index=index)
