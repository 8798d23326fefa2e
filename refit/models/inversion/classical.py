"""Classical calibration: invert a fitted curve ``feature = f(climate)`` for a new feature value.

The forward direction fits the feature on climate (the way the soil responds to climate)
and reads climate off the curve. Point estimate: solve ``f(x) = y0`` (closed form for lines
and quadratics; polynomial roots for higher degrees). Interval: the set of ``x`` whose
prediction band for a new observation contains ``y0`` (Fieller for a line, Fieller 1954 /
Eisenhart 1939; the same set found numerically for polynomials, as in NIST/SEMATECH
e-Handbook section 4.5.2.1).

Search window (polynomials). The band is inverted only on the *monotonic branch* of the
curve that holds the estimate (between its turning points), and only inside the
calibration range widened by :data:`refit.models.domain.SEARCH_MARGIN` (half its width) on each side and cut
at the physical bounds of the climate variable (e.g. 0 mm for rain; from the schema range
of the column, :func:`refit.models.domain.schema_bounds`). Lines need no search; their Fieller
limits are cut at the physical bounds only.

Flags (a tuple of short strings per value):

- ``two-roots``: ``f(x) = y0`` has more than one solution inside the calibration range
  (the curve is not monotonic there); the root on the branch holding most calibration
  points is reported.
- ``open-below`` / ``open-above``: the band does not close inside the search window on
  that side (it runs on past the turning point or past the widened range); the limit
  reported is the window edge: read it as "at most" / "at least". Lines have no search
  window and never carry these flags.
- ``truncated-at-bound``: the interval reaches past a physical bound of the climate
  variable (e.g. below 0 mm of rain) and is cut there: the limit reported is the bound
  itself, exactly, and the limit before the cut is returned beside it
  (``lower_untruncated`` / ``upper_untruncated``, NaN on the sides not cut; -inf / +inf
  for a line whose set runs on without end). For a polynomial the limit before the cut is
  found by searching the window without the bound; if the band does not close there
  either, that limit is the window's edge and ``open-below`` / ``open-above`` is set too
  (it then describes the limit before the cut).
- ``unbounded``: a line's band never closes on at least one side (``g = t^2 V(b1) / b1^2
  >= 1``, i.e. the slope is not significant at the chosen level): the set is the whole
  line (limits -inf / +inf, or the bounds) or two rays; also a flat line (a constant
  feature), which gives no estimate.
- ``two-rays``: the set is two rays, ``x <= r1`` or ``x >= r2`` (:func:`fieller_set`);
  the limits are the ray that holds the estimate (its finite end kept, the infinite one
  cut at the physical bound and flagged ``truncated-at-bound``), and the other
  ray is kept beside it (``other_lower``, ``other_upper``).
- ``outside-calibration-range``: the measured *feature* lies outside the feature's
  calibration range (its ``valid_min``/``valid_max``), as in the inverse direction.
- ``beyond-turning-point``: ``y0`` lies beyond the curve's extreme value, so no climate on
  the branch gives it. The estimate is then the turning point's ``x`` (the point of the
  curve closest to ``y0``) when the prediction band there still holds ``y0`` (the value
  is consistent with the curve within its scatter; the interval is open on the turning-
  point side); otherwise NaN (the value contradicts the calibration at this level).
  Also set when the root lies past a turning point outside the data.
- ``beyond-search-window``: the root lies outside the search window (far extrapolation
  or a physically impossible value, e.g. negative rain): estimate NaN; the limits show the
  part of the band inside the window, if any (NaN if none). A line's search window is the
  physical bounds: the flag then says the estimate is not a value the climate can take,
  and the limits are the part of the Fieller set inside the bounds
  (:func:`bound_line_set`): the estimate's own interval or ray cut there, or, when that
  lies wholly outside (a weak slope's ray ``MAP <= -464 mm``), the other ray cut there,
  or NaN when no part of the set is inside. A lower limit above the upper is never
  reported.

The steps of the polynomial inversion (branch layout, roots, band function, grid and
bracketing) and the flag names live in :mod:`refit.models.inversion.band`; every public name is
re-exported here.
"""

from __future__ import annotations

import numpy as np

from refit.models.inversion.band import (  # noqa: F401  (re-exported: the public names live here too)
    FLAG_BEYOND_TP,
    FLAG_BEYOND_WINDOW,
    FLAG_OPEN_ABOVE,
    FLAG_OPEN_BELOW,
    FLAG_OUTSIDE,
    FLAG_TRUNCATED,
    FLAG_TWO_RAYS,
    FLAG_TWO_ROOTS,
    FLAG_UNBOUNDED,
    GRID_POINTS,
    INTERVAL_FLAGS,
    LINE_FLAG_ORDER,
    POLYNOMIAL_FLAG_ORDER,
    Branches,
    GridSearch,
    PolyBand,
    _all_roots,
    _band_grid,
    _choose,
    _crossings,
    _polynomial_flags,
    _real_roots,
    _refine,
    _rescale,
    _starting_points,
    branch_layout,
)
from refit._util.threads import on_threads
from refit.models.domain import search_window  # noqa: F401  (re-exported)


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
        ``x_hat = (y0 - b0) / b1`` and the limits [units of x]; when the set is two rays
        (:func:`fieller_set`), the ray that holds the estimate (one limit infinite).
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
    fs = fieller_set(y0, b0, b1, cov, sigma2_new, t)
    return fs["estimate"], fs["lower"], fs["upper"], bool(fs["weak"])


def fieller_set(y0, b0: float, b1: float, cov: np.ndarray, sigma2_new, t: float) -> dict:
    """The exact Fieller confidence set for ``x`` of each ``y0``, whatever its shape.

    With ``A = b1^2 - t^2 V11`` (see :func:`fieller_line`) the set
    ``A x^2 - 2 B x + C <= 0`` is

    - ``A > 0``: a finite interval;
    - ``A < 0`` and ``B^2 - A C > 0``: two rays, ``x <= r1`` or ``x >= r2``
      (``r1 = (B + sqrt(B^2 - AC)) / A < r2 = (B - sqrt(B^2 - AC)) / A``). The estimate
      lies on one of them (at ``x_hat`` the left side is 0); ``lower``/``upper`` give that
      ray (its finite end kept), ``other_lower``/``other_upper`` the other one;
    - ``A < 0`` and ``B^2 - A C <= 0``: the whole line;
    - ``A = 0``: one ray (or the whole line);
    - ``b1 = 0`` (e.g. a constant feature): no estimate, the whole line.

    Returns
    -------
    dict
        ``estimate``, ``lower``, ``upper``, ``other_lower``, ``other_upper`` (NaN unless
        two rays) [units of x]; masks ``unbounded`` (an infinite limit) and ``two_rays``;
        ``weak`` (bool, ``A <= 0``: the slope is not significant at this level).
    """
    y0 = np.asarray(y0, dtype=float)
    d = y0 - b0
    nan = np.full_like(d, np.nan)
    out = {"other_lower": nan.copy(), "other_upper": nan.copy(),
           "two_rays": np.zeros(d.shape, dtype=bool)}
    ok = np.isfinite(d)
    if b1 == 0 or not np.isfinite(b1):
        inf = np.full_like(d, np.inf)
        return out | {"estimate": nan, "lower": -inf, "upper": inf, "unbounded": ok,
                      "weak": True}
    est = d / b1
    a = b1 * b1 - t * t * cov[1, 1]
    b = b1 * d + t * t * cov[0, 1]
    c = d * d - t * t * (sigma2_new + cov[0, 0])
    disc = b * b - a * c
    if a > 0:
        root = np.sqrt(np.maximum(disc, 0.0))
        return out | {"estimate": est, "lower": (b - root) / a, "upper": (b + root) / a,
                      "unbounded": np.zeros(d.shape, dtype=bool), "weak": False}
    lo, hi = np.full_like(d, -np.inf), np.full_like(d, np.inf)
    with np.errstate(invalid="ignore", divide="ignore"):
        if a == 0:  # -2 B x + C <= 0: one ray
            edge = c / (2.0 * b)
            lo = np.where(b > 0, edge, lo)
            hi = np.where(b < 0, edge, hi)
        else:
            rays = ok & (disc > 0)
            root = np.sqrt(np.where(rays, disc, 0.0))
            r1, r2 = (b + root) / a, (b - root) / a
            on_low = est <= 0.5 * (r1 + r2)
            hi = np.where(rays & on_low, r1, hi)
            lo = np.where(rays & ~on_low, r2, lo)
            out["other_lower"] = np.where(rays & on_low, r2, np.where(rays, -np.inf, np.nan))
            out["other_upper"] = np.where(rays & ~on_low, r1, np.where(rays, np.inf, np.nan))
            out["two_rays"] = rays
    return out | {"estimate": est, "lower": lo, "upper": hi, "unbounded": ok, "weak": True}


def invert_polynomial(y0, poly: np.ndarray, cov: np.ndarray, sigma2_new: float,
                      t: float, domain: tuple[float, float], x_cal: np.ndarray | None = None,
                      *, window: tuple[float, float] | None = None):
    """Invert ``y = sum_j poly[j] x^j`` at each ``y0``: point estimate, band-inversion interval.

    Parameters
    ----------
    y0 : array_like
        New responses [units of y] (NaN gives NaN and no flags).
    poly : ndarray
        Polynomial coefficients in increasing powers of x (0 for absent terms).
    cov : ndarray, shape (k+1, k+1)
        Covariance of ``poly`` (the design row of ``x`` is ``(1, x, ..., x^k)``).
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
    Rows in blocks of :data:`ROW_BLOCK`, each in four steps: scale the curve and find its
    branches (:func:`branch_layout`); choose each row's root and its search interval
    (:func:`_starting_points`); find, on one grid of :data:`GRID_POINTS` nodes over the
    window (plus the turning points), the nearest node on each side of the estimate where
    ``y0`` lies outside the band ``(y0 - f(x))^2 <= t^2 (sigma2_new + g(x)' V g(x))``
    (:class:`GridSearch`); refine each crossing by a safeguarded Newton iteration on the
    band polynomial to machine precision (:func:`_crossings`, :func:`_refine`). A band
    excursion narrower than the grid spacing (window width / 256) can be missed.
    """
    est, lower, upper, masks = invert_polynomial_masks(
        y0, poly, cov, sigma2_new, t, domain, x_cal, window=window)
    return est, lower, upper, _flag_tuples(masks, list(POLYNOMIAL_FLAG_ORDER), len(est))


#: rows inverted together by :func:`invert_polynomial_masks` (bounds the memory of the
#: per-row work arrays; rows are independent, so the block size does not change numbers)
ROW_BLOCK = 32_768


def invert_polynomial_masks(y0, poly, cov, sigma2_new, t, domain, x_cal=None, *,
                            window=None):
    """As :func:`invert_polynomial`, with the flags as boolean masks (name -> (m,) array,
    in :data:`POLYNOMIAL_FLAG_ORDER`) instead of per-row tuples.

    Rows go in blocks of :data:`ROW_BLOCK`, spread over threads
    (numpy releases the interpreter lock in its array loops); rows are independent and
    each block writes only its own slice, so the numbers do not depend on the threads."""
    poly = np.asarray(poly, float)
    br = branch_layout(poly, domain, x_cal)
    y0 = np.atleast_1d(np.asarray(y0, dtype=float))
    m = len(y0)
    s2 = np.broadcast_to(np.asarray(sigma2_new, dtype=float), y0.shape)
    window_u = [(v - br.c) / br.h for v in (window or search_window(domain))]
    ok_all = np.isfinite(y0)
    shared = not ok_all.any() or np.ptp(s2[ok_all]) == 0  # one new-observation variance
    band = PolyBand(br, np.asarray(cov, float), t)
    search = GridSearch(band, window_u,
                        float(s2[np.argmax(ok_all)]) if shared and m else None, m)
    est, lower, upper = np.full(m, np.nan), np.full(m, np.nan), np.full(m, np.nan)
    masks = {nm: np.zeros(m, dtype=bool) for nm in POLYNOMIAL_FLAG_ORDER}

    def one_block(first):
        sl = slice(first, min(m, first + ROW_BLOCK))
        rows = band.rows(y0[sl], search_s2(s2[sl], shared))
        e, lo, hi, mk = _invert_block(br, search, rows, window_u)
        est[sl], lower[sl], upper[sl] = e, lo, hi
        for nm in POLYNOMIAL_FLAG_ORDER:
            masks[nm][sl] = mk[nm]

    on_threads(one_block, range(0, m, ROW_BLOCK))
    c, h = br.c, br.h
    return c + h * est, c + h * lower, c + h * upper, masks


def search_s2(s2, shared: bool):
    """The block's new-observation variance: one float when all rows share it."""
    return float(s2[0]) if shared and len(s2) else s2


def _invert_block(br: Branches, search: GridSearch, rows, window_u):
    """One block of rows of :func:`invert_polynomial_masks`, in scaled units [u]."""
    y0 = rows.y0
    m = len(y0)
    ok = np.isfinite(y0)
    sp = _starting_points(br, y0, ok, window_u)
    start = sp["start"]
    idx = np.flatnonzero(ok & np.isfinite(start))
    closes = np.zeros(m, dtype=bool)
    closes[idx] = rows.value(start[idx], idx) <= 0
    idx = np.flatnonzero(closes)
    s2 = None if rows.shared else rows.s2[idx]
    nodes = search.outside_nodes(y0[idx], s2, start[idx])
    lower, upper = np.full(m, np.nan), np.full(m, np.nan)
    open_lo, open_hi = np.zeros(m, dtype=bool), np.zeros(m, dtype=bool)
    lower[idx], upper[idx], open_lo[idx], open_hi[idx] = _crossings(
        rows, idx, search, nodes, start[idx], sp["lo"][idx], sp["hi"][idx])
    est, masks = _polynomial_flags(sp, ok, open_lo, open_hi, closes)
    return est, lower, upper, masks


def _flag_tuples(masks: dict, order: list[str], m: int) -> list[tuple[str, ...]]:
    """Per-row tuples of the flag names whose mask is set (in ``order``)."""
    from refit._util.flagcodes import bit_codes, present_codes

    codes = bit_codes([masks[nm] for nm in order], m)
    table = {code: tuple(nm for i, nm in enumerate(order) if code >> i & 1)
             for code in present_codes(codes).tolist()}
    return [table[code] for code in codes.tolist()]


def range_flags(estimate: np.ndarray, domain: tuple[float, float]) -> np.ndarray:
    """Boolean mask of estimates outside the calibration range (NaN counts as inside)."""
    e = np.asarray(estimate, dtype=float)
    with np.errstate(invalid="ignore"):
        return (e < domain[0]) | (e > domain[1])


def physical_bounds(fit) -> tuple[float, float]:
    """Bounds of the forward fit's climate variable: ``fit.extras['bounds']`` if set,
    else the schema range of the column (:func:`refit.models.domain.schema_bounds`)."""
    from refit.models.domain import schema_bounds

    given = fit.extras.get("bounds")
    return tuple(map(float, given)) if given is not None else schema_bounds(fit.x_names[0])


def _bound_line(est, lo, hi, unbounded, bounds):
    """Cut a line's Fieller limits at the physical bounds ('truncated-at-bound');
    an estimate beyond a bound is NaN ('beyond-search-window')."""
    est, lo, hi, masks, _ = _bound_line_masks(est, lo, hi, unbounded, bounds)
    return est, lo, hi, _flag_tuples(masks, list(LINE_FLAG_ORDER), len(est))


def _bound_line_masks(est, lo, hi, unbounded, bounds):
    """As :func:`_bound_line`, with the flags as masks (in :data:`LINE_FLAG_ORDER`) and
    the limits before the cut, ``(lower_untruncated, upper_untruncated)`` (NaN on a side
    not cut), as a fifth value.

    ``unbounded`` is a per-row mask (or one bool for every row with an estimate)."""
    b_lo, b_hi = bounds
    with np.errstate(invalid="ignore"):
        off = (est < b_lo) | (est > b_hi)
        cut_lo, cut_hi = lo < b_lo, hi > b_hi
    est = np.where(off, np.nan, est)
    untruncated = (np.where(cut_lo, lo, np.nan), np.where(cut_hi, hi, np.nan))
    lo, hi = np.where(cut_lo, b_lo, lo), np.where(cut_hi, b_hi, hi)
    if np.ndim(unbounded) == 0:
        unbounded = (np.isfinite(est) | off) if unbounded else np.zeros(len(est), bool)
    none = np.zeros(len(est), dtype=bool)
    masks = {FLAG_OUTSIDE: off, FLAG_UNBOUNDED: np.asarray(unbounded, dtype=bool),
             FLAG_BEYOND_WINDOW: off, FLAG_OPEN_BELOW: none, FLAG_OPEN_ABOVE: none,
             FLAG_TRUNCATED: cut_lo | cut_hi}
    return est, lo, hi, masks, untruncated


#: a polynomial limit this close to the window's edge, relative to the calibration range's
#: width, lies on it (the limits come back through scaled units, ``c + h u``, so an edge
#: at a bound returns within a few ulps of it, not always on it)
EDGE_RELATIVE = 1e-9


def invert_polynomial_bounded(y0, poly, cov, sigma2_new, t, domain, x_cal=None,
                              bounds=(-np.inf, np.inf)):
    """:func:`invert_polynomial_masks` in the window cut at the physical ``bounds``, with a
    limit that runs into a bound flagged ``truncated-at-bound`` rather than ``open-*``.

    A side whose band is still open where the window was cut by a bound (the limit
    would lie past it) is truncated: the limit is written as the bound exactly, and the
    rows are inverted again in the window without the bounds
    (:func:`refit.models.domain.search_window` of ``domain`` alone) for the limit
    before the cut. Only those rows are inverted twice.

    Returns
    -------
    estimate, lower, upper : ndarray
    masks : dict
        As :func:`invert_polynomial_masks` (with ``truncated-at-bound``).
    (lower_untruncated, upper_untruncated) : tuple of ndarray
        The limits before the cut; NaN on a side not cut.
    """
    window = search_window(domain, bounds)
    est, lo, hi, masks = invert_polynomial_masks(y0, poly, cov, sigma2_new, t, domain,
                                                 x_cal, window=window)
    free = search_window(domain)
    tol = EDGE_RELATIVE * (float(domain[1]) - float(domain[0]) or 1.0)
    cuts = []
    for side, edge, limit, flag in ((0, window[0], lo, FLAG_OPEN_BELOW),
                                    (1, window[1], hi, FLAG_OPEN_ABOVE)):
        at_bound = edge == float(bounds[side]) and edge != free[side]
        with np.errstate(invalid="ignore"):
            cuts.append(masks[flag] & (np.abs(limit - edge) <= tol) if at_bound
                        else np.zeros(len(est), dtype=bool))
    untruncated = (np.full(len(est), np.nan), np.full(len(est), np.nan))
    rows = np.flatnonzero(cuts[0] | cuts[1])
    if len(rows):
        s2 = np.broadcast_to(np.asarray(sigma2_new, float), np.shape(est))[rows]
        _, lo2, hi2, masks2 = invert_polynomial_masks(
            np.asarray(y0, float).reshape(-1)[rows], poly, cov, s2, t, domain, x_cal,
            window=free)
        for side, (limit, again, flag) in enumerate(((lo, lo2, FLAG_OPEN_BELOW),
                                                     (hi, hi2, FLAG_OPEN_ABOVE))):
            cut = cuts[side]
            untruncated[side][rows] = np.where(cut[rows], again, np.nan)
            masks[flag] = np.where(cut, False, masks[flag])
            masks[flag][rows] |= cut[rows] & masks2[flag]
            limit[cut] = float(bounds[side])
    masks[FLAG_TRUNCATED] = cuts[0] | cuts[1]
    return est, lo, hi, masks, untruncated


def bound_line_set(fs: dict, bounds):
    """A line's Fieller set (:func:`fieller_set`) cut at the physical ``bounds``: the part
    of the set inside them, never a lower limit above the upper one.

    The estimate's own part of the set (its interval or ray) is cut at the bounds
    (:func:`_bound_line_masks`); a two-ray set's other ray is cut too
    (:func:`bound_other_ray`). When the estimate lies outside the bounds (it is not a
    value the climate can take: NaN, flagged ``beyond-search-window``, a line's search
    window being the physical bounds) its part of the set may lie wholly outside them
    too (e.g. a ray ``MAP <= -464 mm``). Then nothing of it is reported: the limits are
    the other ray's part inside the bounds when a two-ray set has one (``two-rays``
    stays; ``other_lower``/``other_upper`` are then NaN, the other ray having become the
    interval; its cut ends flagged ``truncated-at-bound`` with the ends before the cut in
    ``lower_untruncated``/``upper_untruncated``), else NaN (no climate inside the
    bounds is consistent with the reading at this level).

    Parameters
    ----------
    fs : dict
        :func:`fieller_set`'s output [units of x].
    bounds : (float, float)
        Physical bounds of x [units of x].

    Returns
    -------
    estimate, lower, upper : ndarray
        [units of x]; ``lower <= upper`` wherever both are numbers.
    masks : dict
        Flag name -> mask, in :data:`LINE_FLAG_ORDER`.
    untruncated : ndarray, shape (2, m)
        ``lower_untruncated``, ``upper_untruncated`` (NaN on a side not cut).
    other : ndarray, shape (2, m)
        ``other_lower``, ``other_upper`` (NaN unless a second part of the set is left).
    """
    est, lo, hi, masks, untr = _bound_line_masks(fs["estimate"], fs["lower"], fs["upper"],
                                                 fs["unbounded"], bounds)
    masks[FLAG_TWO_RAYS] = np.asarray(fs["two_rays"], dtype=bool)
    untr = np.array(untr, dtype=float).reshape(2, -1)
    other = np.array(bound_other_ray(fs["other_lower"], fs["other_upper"], bounds),
                     dtype=float).reshape(2, -1)
    with np.errstate(invalid="ignore"):
        empty = lo > hi  # the estimate's part lies wholly outside the bounds
        raw = np.array([fs["other_lower"], fs["other_upper"]], dtype=float).reshape(2, -1)
        moved = empty & ~np.isnan(other[0])
        cut = np.array([moved & (raw[0] < bounds[0]), moved & (raw[1] > bounds[1])])
    lo, hi = np.where(empty, other[0], lo), np.where(empty, other[1], hi)
    untr[:, empty] = np.where(cut, raw, np.nan)[:, empty]
    masks[FLAG_TRUNCATED] = np.where(empty, cut[0] | cut[1], masks[FLAG_TRUNCATED])
    other[:, empty] = np.nan
    return est, lo, hi, masks, untr, other


def bound_other_ray(other_lo, other_hi, bounds):
    """The other ray of a two-ray Fieller set cut at the physical bounds; NaN where
    nothing of it is left inside them."""
    b_lo, b_hi = bounds
    lo, hi = np.maximum(other_lo, b_lo), np.minimum(other_hi, b_hi)
    with np.errstate(invalid="ignore"):
        empty = ~(lo <= hi)
    return np.where(empty, np.nan, lo), np.where(empty, np.nan, hi)
