"""Polynomial inversion steps of classical calibration: numpy only.

The pieces :func:`refit.calibrate.invert_polynomial` is assembled from: the flag names and
their orders, the curve's monotonic branches in scaled units (:func:`branch_layout`), the
roots of ``f(x) = y0`` and the choice among them (:func:`_all_roots`, :func:`_choose`), the
band function and its grid (:func:`_band_function`, :func:`_band_grid`), the bracketing of
band crossings on that grid (:func:`_outside_nodes`, :func:`_crossings`) and their
refinement (:func:`_refine`). The search window and the meaning of each flag are described
in :mod:`refit.calibrate`, which re-exports every public name defined here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.polynomial import polynomial as P


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


#: order of the flags of :func:`refit.calibrate.invert_polynomial`
POLYNOMIAL_FLAG_ORDER = (FLAG_TWO_ROOTS, FLAG_OUTSIDE, FLAG_BEYOND_TP, FLAG_BEYOND_WINDOW,
                         FLAG_OPEN_BELOW, FLAG_OPEN_ABOVE)
#: order of the flags of a line's bounded Fieller interval
#: (:func:`refit.calibrate._bound_line`)
LINE_FLAG_ORDER = (FLAG_OUTSIDE, FLAG_UNBOUNDED, FLAG_BEYOND_WINDOW, FLAG_OPEN_BELOW,
                   FLAG_OPEN_ABOVE)


def _polynomial_flags(sp: dict, ok, open_lo, open_hi, closes) -> tuple:
    """Final estimate [u] and the flag masks of :func:`refit.calibrate.invert_polynomial`."""
    no_root, off = sp["no_root"], sp["off_window"]
    est = np.where(no_root & closes & ~off, sp["start"], sp["est"])
    est = np.where(off & ~no_root, np.nan, est)
    masks = {FLAG_OUTSIDE: sp["outside"] | (off & ~no_root),
             FLAG_TWO_ROOTS: sp["two"] & ok,
             FLAG_BEYOND_TP: sp["beyond"] | no_root,
             FLAG_BEYOND_WINDOW: off & ~no_root,
             FLAG_OPEN_BELOW: open_lo, FLAG_OPEN_ABOVE: open_hi}
    return est, masks
