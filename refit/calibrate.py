"""Classical calibration: invert a fitted curve ``feature = f(climate)`` for a new feature value.

The forward direction fits the feature on climate (the way the soil responds to climate)
and reads climate off the curve. Point estimate: solve ``f(x) = y0`` (closed form for lines
and quadratics; polynomial roots for higher degrees). Interval: the set of ``x`` whose
prediction band for a new observation contains ``y0`` (Fieller for a line, Fieller 1954 /
Eisenhart 1939; the same set found numerically for polynomials, as in NIST/SEMATECH
e-Handbook section 4.5.2.1).

Search window (polynomials). The band is inverted only on the *monotonic branch* of the
curve that holds the estimate (between its turning points), and only inside the
calibration range widened by :data:`refit.domain.SEARCH_MARGIN` (half its width) on each side and cut
at the physical bounds of the climate variable (e.g. 0 mm for rain; from the schema range
of the column, :func:`refit.domain.schema_bounds`). Lines need no search; their Fieller
limits are cut at the physical bounds only.

Flags (a tuple of short strings per value):

- ``two-roots``: ``f(x) = y0`` has more than one solution inside the calibration range
  (the curve is not monotonic there); the root on the branch holding most calibration
  points is reported.
- ``open-below`` / ``open-above``: the band does not close inside the search window on
  that side (it runs on past the turning point, past the widened range or past a physical
  bound); the limit reported is the window edge: read it as "at most" / "at least".
- ``unbounded``: a line's band never closes (``g = t^2 V(b1) / b1^2 >= 1``, i.e. the slope
  is not significant at the chosen level); the limits are -inf / +inf (or the bounds).
- ``outside-calibration-range``: the estimate lies outside the climate range of the data.
- ``beyond-turning-point``: ``y0`` lies beyond the curve's extreme value, so no climate on
  the branch gives it. The estimate is then the turning point's ``x`` (the point of the
  curve closest to ``y0``) when the prediction band there still holds ``y0`` (the value
  is consistent with the curve within its scatter; the interval is open on the turning-
  point side); otherwise NaN (the value contradicts the calibration at this level).
  Also set when the root lies past a turning point outside the data.
- ``beyond-search-window``: the root lies outside the search window (far extrapolation
  or a physically impossible value, e.g. negative rain): estimate NaN; the limits show the
  part of the band inside the window, if any.
"""

from __future__ import annotations

import numpy as np
from numpy.polynomial import polynomial as P

from .domain import search_window

FLAG_TWO_ROOTS = "two-roots"
FLAG_UNBOUNDED = "unbounded"
FLAG_OUTSIDE = "outside-calibration-range"
FLAG_BEYOND_TP = "beyond-turning-point"
FLAG_OPEN_BELOW = "open-below"
FLAG_OPEN_ABOVE = "open-above"
FLAG_BEYOND_WINDOW = "beyond-search-window"
_INTERVAL_FLAGS = (FLAG_UNBOUNDED, "open-below", "open-above")

#: grid nodes over the search window on which the band's sign changes are located
GRID_POINTS = 257
_MAX_STEPS = 100


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


def _all_roots(pu: np.ndarray, y0: np.ndarray) -> np.ndarray:
    """Real roots of ``pu(u) = y0`` for every row, shape (m, degree), NaN-padded.

    Closed form for degree 1 and 2 (the cancellation-free quadratic formula); numpy's
    companion-matrix roots per row for higher degrees."""
    k = len(pu) - 1
    c0 = pu[0] - y0
    if k == 1:
        return (-c0 / pu[1])[:, None]
    if k == 2:
        a, b = pu[2], pu[1]
        disc = b * b - 4.0 * a * c0
        sq = np.sqrt(np.where(disc >= 0, disc, np.nan))
        q = -0.5 * (b + np.copysign(sq, b))
        with np.errstate(divide="ignore", invalid="ignore"):
            r1, r2 = q / a, np.where(q != 0, c0 / q, q / a)
        return np.sort(np.column_stack([r1, r2]), axis=1)
    out = np.full((len(y0), k), np.nan)
    for i, c in enumerate(c0):
        if np.isfinite(c):
            r = _real_roots(np.concatenate([[c], pu[1:]]))
            out[i, :len(r)] = r
    return out


def _choose(roots: np.ndarray, turning: np.ndarray, main: int | None):
    """Root to report per row (NaN if none) and masks two-roots / outside / beyond-TP.

    One root inside the calibration range ([-1, 1] in scaled units): that one. Several:
    the one on the branch holding most calibration points (``main``, index between the
    sorted turning points), nearest the centre. None: the real root nearest the centre."""
    with np.errstate(invalid="ignore"):
        inside = np.abs(roots) <= 1.0
    n_in = inside.sum(axis=1)
    cand = inside.copy()
    if main is not None:
        on_main = inside & (np.searchsorted(turning, np.nan_to_num(roots)) == main)
        use = (n_in > 1) & on_main.any(axis=1)
        cand[use] = on_main[use]
    none = n_in == 0
    cand[none] = np.isfinite(roots[none])
    score = np.where(cand, np.abs(roots), np.inf)
    j = np.argmin(score, axis=1)
    est = np.where(np.isfinite(score.min(axis=1)), roots[np.arange(len(roots)), j], np.nan)
    outside = none & np.isfinite(est)
    beyond = np.zeros(len(est), dtype=bool)
    for tp in turning:  # a turning point between the data and the reported root
        beyond |= outside & (((tp > 1.0) & (tp < est)) | ((tp < -1.0) & (tp > est)))
    return est, n_in > 1, outside, beyond


def _extremum_start(pu, y0, turning, counts):
    """For rows without a real root: the turning point closest to y0 in value and the
    index of the adjacent branch holding more calibration points."""
    if len(turning) == 0:
        return np.full(len(y0), np.nan), np.zeros(len(y0), dtype=int)
    gap = np.abs(y0[:, None] - P.polyval(turning, pu)[None, :])
    j = np.argmin(gap, axis=1)
    branch = np.where(counts[j + 1] > counts[j], j + 1, j)
    return turning[j], branch


def _refine(band, a, b, rows):
    """Sign change of ``band`` between ``a`` (band <= 0) and ``b`` (band > 0), per row:
    vectorised Illinois false position (Dowell & Jarratt 1971, BIT 11:168; from memory),
    with bisection when a step leaves the bracket. A row stops when |b - a| <= 1e-14
    max(1, |a|) (the tolerance brentq had here) or |band(a)| <= 1e-14 (``band`` is scaled
    to [-1, 1], so this is rounding level)."""
    a, b = a.astype(float), b.astype(float)
    fa, fb = band(a, rows), band(b, rows)
    side = np.zeros(len(a))
    act = np.arange(len(a))
    for _ in range(_MAX_STEPS):
        aa, bb, fa_, fb_ = a[act], b[act], fa[act], fb[act]
        busy = (np.abs(bb - aa) > 1e-14 * np.maximum(1.0, np.abs(aa))) & (np.abs(fa_) > 1e-14)
        act = act[busy]
        if not len(act):
            break
        aa, bb, fa_, fb_, sd = aa[busy], bb[busy], fa_[busy], fb_[busy], side[act]
        with np.errstate(divide="ignore", invalid="ignore"):
            c = (aa * fb_ - bb * fa_) / (fb_ - fa_)
        c = np.where((c > np.minimum(aa, bb)) & (c < np.maximum(aa, bb)), c, 0.5 * (aa + bb))
        fc = band(c, rows[act])
        pos = fc > 0
        # Illinois: halve the kept end's value when the same end is kept twice
        fa_ = np.where(pos & (sd < 0), 0.5 * fa_, fa_)
        fb_ = np.where(~pos & (sd > 0), 0.5 * fb_, fb_)
        a[act], fa[act] = np.where(pos, aa, c), np.where(pos, fa_, fc)
        b[act], fb[act] = np.where(pos, c, bb), np.where(pos, fc, fb_)
        side[act] = np.where(pos, -1.0, 1.0)
    return np.where(np.abs(fa) <= np.abs(fb), a, b)


def _crossings(band, grid, pos, start, lo, hi):
    """Nearest band crossing on each side of ``start`` within [lo, hi], all rows at once.

    ``pos`` (G, m) is band > 0 on the shared ``grid`` (which holds ``lo`` and ``hi``).
    For each row the first positive node above ``start`` and the last below it bracket
    the crossings, refined by :func:`_refine`. Returns (lower, upper, open_below,
    open_above); a side with no positive node is open and its limit is the window edge."""
    n_grid, m = pos.shape
    ar = np.arange(n_grid, dtype=np.int32)[:, None]
    above = np.searchsorted(grid, start, "right")       # first node > start
    below = np.searchsorted(grid, start, "left") - 1    # last node < start
    j_up = np.min(np.where(pos & (ar >= above), ar, n_grid), axis=0)
    j_dn = np.max(np.where(pos & (ar <= below), ar, -1), axis=0)
    j_up = np.where((j_up < n_grid) & (grid[np.minimum(j_up, n_grid - 1)] <= hi), j_up, -1)
    j_dn = np.where((j_dn >= 0) & (grid[np.maximum(j_dn, 0)] >= lo), j_dn, -1)
    out = []
    for j, edge, step, pick in ((j_dn, lo, 1, np.minimum), (j_up, hi, -1, np.maximum)):
        limit = edge.astype(float).copy()
        found = np.flatnonzero(j >= 0)
        if len(found):
            inner = pick(grid[np.clip(j[found] + step, 0, n_grid - 1)], start[found])
            limit[found] = _refine(band, inner, grid[j[found]], found)
        out += [limit, j < 0]
    lower, open_lo, upper, open_hi = out
    return lower, upper, open_lo, open_hi


def invert_polynomial(y0, poly: np.ndarray, design, cov: np.ndarray, sigma2_new: float,
                      t: float, domain: tuple[float, float], x_cal: np.ndarray | None = None,
                      *, window: tuple[float, float] | None = None):
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
    window : (float, float), optional
        Search window [units of x]; default :func:`search_window` of ``domain`` (no
        physical bounds).

    Returns
    -------
    estimate, lower, upper : ndarray
    flags : list of tuple of str
        See the module notes for the search window and the flags.

    Notes
    -----
    All rows at once: the roots in closed form (degree <= 2), the band
    ``(y0 - f(x))^2 - t^2 (sigma2_new + g(x)' V g(x))`` evaluated on one grid of
    :data:`GRID_POINTS` nodes over the window (plus the turning points) for every row, the
    nearest sign change on each side of the estimate located there, then refined by a
    vectorised bisection to machine precision. A band excursion narrower than the grid
    spacing (window width / 256) can be missed.
    """
    lo_d, hi_d = map(float, domain)
    c, h = 0.5 * (lo_d + hi_d), 0.5 * (hi_d - lo_d)
    poly = np.asarray(poly, float)
    k = len(np.trim_zeros(poly, "b")) - 1
    pu = np.trim_zeros(_rescale(poly, c, h), "b")
    y0 = np.atleast_1d(np.asarray(y0, dtype=float))
    m = len(y0)
    s2 = np.broadcast_to(np.asarray(sigma2_new, dtype=float), y0.shape)
    w_lo, w_hi = [(v - c) / h for v in (window or search_window(domain))]
    turning = _real_roots(P.polyder(pu)) if k >= 2 else np.zeros(0)
    edges = np.concatenate([[-np.inf], turning, [np.inf]])
    counts = (np.histogram((np.asarray(x_cal, float) - c) / h, bins=edges)[0]
              if x_cal is not None else np.zeros(len(edges) - 1))
    main = int(np.argmax(counts)) if x_cal is not None and len(turning) else None
    ok = np.isfinite(y0)
    roots = _all_roots(pu, np.where(ok, y0, np.nan)) if k >= 1 else np.full((m, 1), np.nan)
    est, two, outside, beyond = _choose(roots, turning, main)
    branch = np.searchsorted(turning, np.nan_to_num(est))
    no_root = ok & np.isnan(est)
    tp_start, tp_branch = _extremum_start(pu, y0[no_root], turning, counts)
    start = est.copy()
    start[no_root], branch[no_root] = tp_start, tp_branch
    lo = np.maximum(edges[branch], w_lo)
    hi = np.minimum(edges[branch + 1], w_hi)
    with np.errstate(invalid="ignore"):
        off_window = np.isfinite(start) & ((start < lo) | (start > hi))
    start = np.clip(start, lo, hi)

    def band(u, rows):
        x = c + h * u
        g = design(x)
        q = np.einsum("ij,jk,ik->i", g, cov, g)
        r2, v2 = (y0[rows] - P.polyval(x, poly)) ** 2, t * t * (s2[rows] + q)
        with np.errstate(divide="ignore", invalid="ignore"):
            return (r2 - v2) / (r2 + v2)  # the band's sign, scaled to [-1, 1]

    usable = ok & np.isfinite(start)
    idx = np.flatnonzero(usable)
    closes = np.zeros(m, dtype=bool)
    closes[idx] = band(start[idx], idx) <= 0
    idx = np.flatnonzero(closes)
    grid = np.unique(np.concatenate([np.linspace(w_lo, w_hi, GRID_POINTS),
                                     turning[(turning > w_lo) & (turning < w_hi)]]))
    xg = c + h * grid
    gg = design(xg)
    qg = np.einsum("ij,jk,ik->i", gg, cov, gg)
    fg = P.polyval(xg, poly)
    if np.ptp(s2[idx]) == 0 if len(idx) else True:  # one new-observation variance: cheaper
        r = t * np.sqrt((s2[idx[0]] if len(idx) else 0.0) + qg)
        pos = np.abs(y0[None, idx] - fg[:, None]) > r[:, None]
    else:
        pos = (y0[None, idx] - fg[:, None]) ** 2 > t * t * (s2[None, idx] + qg[:, None])
    lower, upper = np.full(m, np.nan), np.full(m, np.nan)
    open_lo, open_hi = np.zeros(m, dtype=bool), np.zeros(m, dtype=bool)
    lower[idx], upper[idx], open_lo[idx], open_hi[idx] = _crossings(
        lambda u, r: band(u, idx[r]), grid, pos, start[idx], lo[idx], hi[idx])
    est = np.where(no_root & closes & ~off_window, start, est)
    est = np.where(off_window & ~no_root, np.nan, est)
    est_x = c + h * est
    masks = {FLAG_OUTSIDE: outside | (off_window & ~no_root),
             FLAG_TWO_ROOTS: two & ok,
             FLAG_BEYOND_TP: beyond | no_root,
             FLAG_BEYOND_WINDOW: off_window & ~no_root,
             FLAG_OPEN_BELOW: open_lo, FLAG_OPEN_ABOVE: open_hi}
    order = [FLAG_TWO_ROOTS, FLAG_OUTSIDE, FLAG_BEYOND_TP, FLAG_BEYOND_WINDOW,
             FLAG_OPEN_BELOW, FLAG_OPEN_ABOVE]
    flags = _flag_tuples(masks, order, m)
    return est_x, c + h * lower, c + h * upper, flags


def _flag_tuples(masks: dict, order: list[str], m: int) -> list[tuple[str, ...]]:
    """Per-row tuples of the flag names whose mask is set (in ``order``)."""
    codes = np.zeros(m, dtype=np.int64)
    for i, nm in enumerate(order):
        codes |= masks[nm].astype(np.int64) << i
    table = {code: tuple(nm for i, nm in enumerate(order) if code >> i & 1)
             for code in np.unique(codes).tolist()}
    return [table[code] for code in codes.tolist()]


def range_flags(estimate: np.ndarray, domain: tuple[float, float]) -> np.ndarray:
    """Boolean mask of estimates outside the calibration range (NaN counts as inside)."""
    e = np.asarray(estimate, dtype=float)
    with np.errstate(invalid="ignore"):
        return (e < domain[0]) | (e > domain[1])


# ----------------------------------------------------------------------------- applying a fit
FLAG_MISSING = "missing-value"
FLAG_INVALID = "invalid-value"
FLAG_CROSS = "quantiles-cross"
FLAG_APPROX = "approximate-interval"


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
    s2 = res.details.get("prediction_sd", res.residual_std_error) ** 2
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
    if interval == "analytic" and fit.result.details.get("approximate_interval"):
        masks[FLAG_APPROX] = ok
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
    cov_ok = bool(np.all(np.isfinite(res.covariance)))
    if interval == "analytic" and not cov_ok:
        raise UsageError(f"estimator {fit.estimator!r} gives no coefficient covariance, so "
                         "the calibration interval cannot be formed; use interval='none' for "
                         "the estimate alone, or estimator 'ols'")
    # the band also decides whether a value beyond the turning point is consistent with
    # the curve, so it is used for interval='none' too (limits then blanked)
    cov = res.covariance if cov_ok else np.zeros_like(res.covariance)
    if origin:
        cov = np.pad(cov, ((1, 0), (1, 0)))
    s2new = res.details.get("prediction_sd", res.residual_std_error) ** 2 / w0 if cov_ok \
        else 0.0
    t = _t(level, res.df_resid)
    dom = fit.ranges[fit.x_names[0]]
    bounds = physical_bounds(fit)
    if deg == 1:
        est, lo, hi, unb = fieller_line(y0, poly[0], poly[1], cov, s2new, t)
        est, lo, hi, flags = _bound_line(est, lo, hi, unb, bounds)
    else:
        def design(x):
            return np.vander(x, deg + 1, increasing=True)

        est, lo, hi, flags = invert_polynomial(y0, poly, design, cov, s2new, t, dom,
                                               fit.x[:, 0], window=search_window(dom, bounds))
    if interval == "none":
        lo, hi = np.full_like(est, np.nan), np.full_like(est, np.nan)
        flags = [tuple(f for f in fl if f not in _INTERVAL_FLAGS) for fl in flags]
    outside = range_flags(est, dom)
    approx = interval == "analytic" and bool(res.details.get("approximate_interval"))
    text = []
    for i, f in enumerate(flags):
        f = list(f)
        if outside[i] and FLAG_OUTSIDE not in f:
            f.insert(0, FLAG_OUTSIDE)
        if missing[i]:
            f.append(FLAG_MISSING)
        if invalid[i]:
            f.append(FLAG_INVALID)
        elif approx and not missing[i]:
            f.append(FLAG_APPROX)
        text.append(";".join(f))
    return est, lo, hi, np.asarray(text, dtype=object)


def physical_bounds(fit) -> tuple[float, float]:
    """Bounds of the forward fit's climate variable: ``fit.extras['bounds']`` if set,
    else the schema range of the column (:func:`refit.domain.schema_bounds`)."""
    from .domain import schema_bounds

    given = fit.extras.get("bounds")
    return tuple(map(float, given)) if given is not None else schema_bounds(fit.x_names[0])


def _bound_line(est, lo, hi, unbounded: bool, bounds):
    """Cut a line's Fieller limits at the physical bounds ('open-below'/'open-above');
    an estimate beyond a bound is NaN ('beyond-search-window')."""
    b_lo, b_hi = bounds
    with np.errstate(invalid="ignore"):
        off = (est < b_lo) | (est > b_hi)
        cut_lo, cut_hi = lo < b_lo, hi > b_hi
    est = np.where(off, np.nan, est)
    lo, hi = np.where(cut_lo, b_lo, lo), np.where(cut_hi, b_hi, hi)
    masks = {FLAG_OUTSIDE: off, FLAG_UNBOUNDED: np.isfinite(est) | off if unbounded
             else np.zeros(len(est), dtype=bool), FLAG_BEYOND_WINDOW: off,
             FLAG_OPEN_BELOW: cut_lo, FLAG_OPEN_ABOVE: cut_hi}
    return est, lo, hi, _flag_tuples(masks, list(masks), len(est))


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
