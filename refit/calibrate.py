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

from dataclasses import dataclass

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
#: flags that describe the interval (dropped when no interval is asked for)
INTERVAL_FLAGS = (FLAG_UNBOUNDED, FLAG_OPEN_BELOW, FLAG_OPEN_ABOVE)

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


def _crossings(band, grid, nodes, start, lo, hi):
    """Nearest band crossing on each side of ``start`` within [lo, hi], all rows at once.

    ``nodes = (j_dn, j_up)``: for each row the last grid node below ``start`` and the first
    above it where the row lies outside the band (-1 / ``len(grid)`` when none, from
    :func:`_outside_nodes`); they bracket the crossings, refined by :func:`_refine`.
    Returns (lower, upper, open_below, open_above); a side with no outside node inside
    [lo, hi] is open and its limit is the window edge."""
    n_grid = len(grid)
    j_dn, j_up = nodes
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


@dataclass
class Branches:
    """The curve in scaled units ``u = (x - c) / h`` (calibration range -> [-1, 1]) and its
    monotonic branches.

    Attributes
    ----------
    c, h : float
        Centre and half-width of the calibration range [units of x].
    pu : ndarray
        Polynomial coefficients in increasing powers of ``u`` (trailing zeros trimmed).
    degree : int
        Degree of the curve in x.
    turning : ndarray
        Sorted real turning points [u] (none for a line).
    edges : ndarray
        Branch edges: ``-inf``, the turning points, ``+inf`` [u].
    counts : ndarray
        Calibration points on each branch (zeros without ``x_cal``).
    main : int or None
        The branch holding most calibration points (None without ``x_cal`` or turning
        points).
    """

    c: float
    h: float
    pu: np.ndarray
    degree: int
    turning: np.ndarray
    edges: np.ndarray
    counts: np.ndarray
    main: int | None


def branch_layout(poly, domain, x_cal=None) -> Branches:
    """Scale the curve to the calibration range and split it at its turning points."""
    lo_d, hi_d = map(float, domain)
    c, h = 0.5 * (lo_d + hi_d), 0.5 * (hi_d - lo_d)
    poly = np.asarray(poly, float)
    k = len(np.trim_zeros(poly, "b")) - 1
    pu = np.trim_zeros(_rescale(poly, c, h), "b")
    turning = _real_roots(P.polyder(pu)) if k >= 2 else np.zeros(0)
    edges = np.concatenate([[-np.inf], turning, [np.inf]])
    counts = (np.histogram((np.asarray(x_cal, float) - c) / h, bins=edges)[0]
              if x_cal is not None else np.zeros(len(edges) - 1))
    main = int(np.argmax(counts)) if x_cal is not None and len(turning) else None
    return Branches(c, h, pu, k, turning, edges, counts, main)


def _starting_points(br: Branches, y0, ok, window_u):
    """Point estimate per row [u] and the branch interval it is searched on.

    Returns a dict: ``est`` (the chosen root, NaN if none), ``two``/``outside``/``beyond``
    (masks from :func:`_choose`), ``no_root`` (rows whose value lies beyond the curve's
    extreme: started at the nearest turning point), ``start`` (clipped into its search
    interval), ``lo``/``hi`` (the search interval: the branch cut by the window) and
    ``off_window`` (the start lay outside it)."""
    m = len(y0)
    roots = (_all_roots(br.pu, np.where(ok, y0, np.nan)) if br.degree >= 1
             else np.full((m, 1), np.nan))
    est, two, outside, beyond = _choose(roots, br.turning, br.main)
    branch = np.searchsorted(br.turning, np.nan_to_num(est))
    no_root = ok & np.isnan(est)
    tp_start, tp_branch = _extremum_start(br.pu, y0[no_root], br.turning, br.counts)
    start = est.copy()
    start[no_root], branch[no_root] = tp_start, tp_branch
    lo = np.maximum(br.edges[branch], window_u[0])
    hi = np.minimum(br.edges[branch + 1], window_u[1])
    with np.errstate(invalid="ignore"):
        off_window = np.isfinite(start) & ((start < lo) | (start > hi))
    return {"est": est, "two": two, "outside": outside, "beyond": beyond,
            "no_root": no_root, "start": np.clip(start, lo, hi), "lo": lo, "hi": hi,
            "off_window": off_window}


def _band_function(br: Branches, y0, poly, design, cov, s2, t):
    """``band(u, rows)``: the sign of ``(y0 - f(x))^2 - t^2 (s2 + g(x)' V g(x))`` scaled
    to [-1, 1] (<= 0: inside the prediction band)."""
    def band(u, rows):
        x = br.c + br.h * u
        g = design(x)
        q = np.einsum("ij,jk,ik->i", g, cov, g)
        r2, v2 = (y0[rows] - P.polyval(x, poly)) ** 2, t * t * (s2[rows] + q)
        with np.errstate(divide="ignore", invalid="ignore"):
            return (r2 - v2) / (r2 + v2)

    return band


def _band_grid(br: Branches, window_u) -> np.ndarray:
    """The shared grid [u] over the window, plus the turning points inside it."""
    w_lo, w_hi = window_u
    turning = br.turning
    return np.unique(np.concatenate([np.linspace(w_lo, w_hi, GRID_POINTS),
                                     turning[(turning > w_lo) & (turning < w_hi)]]))


def _outside_nodes(br: Branches, grid, idx, start, y0, poly, design, cov, s2, t,
                   shared: bool):
    """For rows ``idx``: the last grid node below ``start`` and the first above it where
    ``y0`` lies outside the band (-1 / ``len(grid)`` when none).

    With one new-observation variance for all rows (``shared``) the nodes come from exact
    per-node thresholds (:class:`refit._bandgrid.BandNodes`: the same comparisons as the
    (grid x rows) matrix, without building it); otherwise from that matrix."""
    above = np.searchsorted(grid, start, "right")       # first node > start
    below = np.searchsorted(grid, start, "left") - 1    # last node < start
    xg = br.c + br.h * grid
    gg = design(xg)
    qg = np.einsum("ij,jk,ik->i", gg, cov, gg)
    fg = P.polyval(xg, poly)
    y = y0[idx]
    if shared:
        r = t * np.sqrt((s2[idx[0]] if len(idx) else 0.0) + qg)
        if np.all(np.isfinite(fg) & np.isfinite(r)):
            from ._bandgrid import BandNodes

            nodes = BandNodes(fg, r)
            return nodes.last_outside(below, y), nodes.first_outside(above, y)
        pos = np.abs(y[None, :] - fg[:, None]) > r[:, None]
    else:
        pos = (y[None, :] - fg[:, None]) ** 2 > t * t * (s2[None, idx] + qg[:, None])
    n_grid = len(grid)
    ar = np.arange(n_grid, dtype=np.int32)[:, None]
    j_up = np.min(np.where(pos & (ar >= above), ar, n_grid), axis=0)
    j_dn = np.max(np.where(pos & (ar <= below), ar, -1), axis=0)
    return j_dn, j_up


#: order of the flags of :func:`invert_polynomial`
POLYNOMIAL_FLAG_ORDER = (FLAG_TWO_ROOTS, FLAG_OUTSIDE, FLAG_BEYOND_TP, FLAG_BEYOND_WINDOW,
                         FLAG_OPEN_BELOW, FLAG_OPEN_ABOVE)
#: order of the flags of a line's bounded Fieller interval (:func:`_bound_line`)
LINE_FLAG_ORDER = (FLAG_OUTSIDE, FLAG_UNBOUNDED, FLAG_BEYOND_WINDOW, FLAG_OPEN_BELOW,
                   FLAG_OPEN_ABOVE)


def _polynomial_flags(sp: dict, ok, open_lo, open_hi, closes) -> tuple:
    """Final estimate [u] and the flag masks of :func:`invert_polynomial`."""
    no_root, off = sp["no_root"], sp["off_window"]
    est = np.where(no_root & closes & ~off, sp["start"], sp["est"])
    est = np.where(off & ~no_root, np.nan, est)
    masks = {FLAG_OUTSIDE: sp["outside"] | (off & ~no_root),
             FLAG_TWO_ROOTS: sp["two"] & ok,
             FLAG_BEYOND_TP: sp["beyond"] | no_root,
             FLAG_BEYOND_WINDOW: off & ~no_root,
             FLAG_OPEN_BELOW: open_lo, FLAG_OPEN_ABOVE: open_hi}
    return est, masks


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
    Rows in blocks of :data:`ROW_BLOCK`, each in four steps: scale the curve and find its
    branches (:func:`branch_layout`); choose each row's root and its search interval
    (:func:`_starting_points`); find, on one grid of :data:`GRID_POINTS` nodes over the
    window (plus the turning points), the nearest node on each side of the estimate where
    ``y0`` lies outside the band ``(y0 - f(x))^2 <= t^2 (sigma2_new + g(x)' V g(x))``
    (:func:`_outside_nodes`); refine each crossing by a vectorised false position to
    machine precision (:func:`_crossings`). A band excursion narrower than the grid
    spacing (window width / 256) can be missed.
    """
    est, lower, upper, masks = invert_polynomial_masks(
        y0, poly, design, cov, sigma2_new, t, domain, x_cal, window=window)
    return est, lower, upper, _flag_tuples(masks, list(POLYNOMIAL_FLAG_ORDER), len(est))


#: rows inverted together by :func:`invert_polynomial_masks` (bounds the memory of the
#: per-row work arrays; rows are independent, so the block size does not change numbers)
ROW_BLOCK = 65_536


def invert_polynomial_masks(y0, poly, design, cov, sigma2_new, t, domain, x_cal=None, *,
                            window=None):
    """As :func:`invert_polynomial`, with the flags as boolean masks (name -> (m,) array,
    in :data:`POLYNOMIAL_FLAG_ORDER`) instead of per-row tuples; rows in blocks of
    :data:`ROW_BLOCK`."""
    poly = np.asarray(poly, float)
    br = branch_layout(poly, domain, x_cal)
    y0 = np.atleast_1d(np.asarray(y0, dtype=float))
    m = len(y0)
    s2 = np.broadcast_to(np.asarray(sigma2_new, dtype=float), y0.shape)
    window_u = [(v - br.c) / br.h for v in (window or search_window(domain))]
    grid = _band_grid(br, window_u)
    ok_all = np.isfinite(y0)
    shared = not ok_all.any() or np.ptp(s2[ok_all]) == 0  # one new-observation variance
    est, lower, upper = np.full(m, np.nan), np.full(m, np.nan), np.full(m, np.nan)
    masks = {nm: np.zeros(m, dtype=bool) for nm in POLYNOMIAL_FLAG_ORDER}
    for first in range(0, m, ROW_BLOCK):
        sl = slice(first, min(m, first + ROW_BLOCK))
        e, lo, hi, mk = _invert_block(br, grid, y0[sl], poly, design, cov, s2[sl], t,
                                      window_u, shared)
        est[sl], lower[sl], upper[sl] = e, lo, hi
        for nm in POLYNOMIAL_FLAG_ORDER:
            masks[nm][sl] = mk[nm]
    c, h = br.c, br.h
    return c + h * est, c + h * lower, c + h * upper, masks


def _invert_block(br: Branches, grid, y0, poly, design, cov, s2, t, window_u, shared):
    """One block of rows of :func:`invert_polynomial_masks`, in scaled units [u]."""
    m = len(y0)
    ok = np.isfinite(y0)
    sp = _starting_points(br, y0, ok, window_u)
    band = _band_function(br, y0, poly, design, cov, s2, t)
    start = sp["start"]
    idx = np.flatnonzero(ok & np.isfinite(start))
    closes = np.zeros(m, dtype=bool)
    closes[idx] = band(start[idx], idx) <= 0
    idx = np.flatnonzero(closes)
    nodes = _outside_nodes(br, grid, idx, start[idx], y0, poly, design, cov, s2, t, shared)
    lower, upper = np.full(m, np.nan), np.full(m, np.nan)
    open_lo, open_hi = np.zeros(m, dtype=bool), np.zeros(m, dtype=bool)
    lower[idx], upper[idx], open_lo[idx], open_hi[idx] = _crossings(
        lambda u, r: band(u, idx[r]), grid, nodes, start[idx], sp["lo"][idx], sp["hi"][idx])
    est, masks = _polynomial_flags(sp, ok, open_lo, open_hi, closes)
    return est, lower, upper, masks


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


def physical_bounds(fit) -> tuple[float, float]:
    """Bounds of the forward fit's climate variable: ``fit.extras['bounds']`` if set,
    else the schema range of the column (:func:`refit.domain.schema_bounds`)."""
    from .domain import schema_bounds

    given = fit.extras.get("bounds")
    return tuple(map(float, given)) if given is not None else schema_bounds(fit.x_names[0])


def _bound_line(est, lo, hi, unbounded: bool, bounds):
    """Cut a line's Fieller limits at the physical bounds ('open-below'/'open-above');
    an estimate beyond a bound is NaN ('beyond-search-window')."""
    est, lo, hi, masks = _bound_line_masks(est, lo, hi, unbounded, bounds)
    return est, lo, hi, _flag_tuples(masks, list(LINE_FLAG_ORDER), len(est))


def _bound_line_masks(est, lo, hi, unbounded: bool, bounds):
    """As :func:`_bound_line`, with the flags as masks (in :data:`LINE_FLAG_ORDER`)."""
    b_lo, b_hi = bounds
    with np.errstate(invalid="ignore"):
        off = (est < b_lo) | (est > b_hi)
        cut_lo, cut_hi = lo < b_lo, hi > b_hi
    est = np.where(off, np.nan, est)
    lo, hi = np.where(cut_lo, b_lo, lo), np.where(cut_hi, b_hi, hi)
    masks = {FLAG_OUTSIDE: off, FLAG_UNBOUNDED: np.isfinite(est) | off if unbounded
             else np.zeros(len(est), dtype=bool), FLAG_BEYOND_WINDOW: off,
             FLAG_OPEN_BELOW: cut_lo, FLAG_OPEN_ABOVE: cut_hi}
    return est, lo, hi, masks


def __getattr__(name):
    # predict_fit moved to refit._predict; kept reachable here
    if name == "predict_fit":
        from ._predict import predict_fit

        return predict_fit
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
