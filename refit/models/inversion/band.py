"""Polynomial inversion steps of classical calibration: numpy only.

The pieces :func:`refit.models.inversion.classical.invert_polynomial` is assembled from: the flag names and
their orders, the curve's monotonic branches in scaled units (:func:`branch_layout`), the
roots of ``f(x) = y0`` and the choice among them (:func:`_all_roots`, :func:`_choose`), the
band polynomial and its grid (:class:`PolyBand`, :func:`_band_grid`), the bracketing of
band crossings on that grid (:class:`GridSearch`, :func:`_crossings`) and their
refinement (:func:`_refine`). The search window and the meaning of each flag are described
in :mod:`refit.models.inversion.classical`, which re-exports every public name defined here.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.polynomial import polynomial as P

from refit._util.flagcodes import FLAG_TRUNCATED  # noqa: F401  (re-exported)

FLAG_TWO_ROOTS = "two-roots"
FLAG_UNBOUNDED = "unbounded"
FLAG_OUTSIDE = "outside-calibration-range"
FLAG_BEYOND_TP = "beyond-turning-point"
FLAG_OPEN_BELOW = "open-below"
FLAG_OPEN_ABOVE = "open-above"
FLAG_BEYOND_WINDOW = "beyond-search-window"
FLAG_TWO_RAYS = "two-rays"
#: flags that describe the interval (dropped when no interval is asked for)
INTERVAL_FLAGS = (FLAG_UNBOUNDED, FLAG_TWO_RAYS, FLAG_OPEN_BELOW, FLAG_OPEN_ABOVE,
                  FLAG_TRUNCATED)

#: grid nodes over the search window on which the band's sign changes are located
GRID_POINTS = 257
#: rows from which the node search builds exact per-node thresholds instead of comparing
#: every row with every node
THRESHOLD_ROWS = 2_048
_MAX_STEPS = 100


def _power_basis(k1: int, c: float, h: float) -> np.ndarray:
    """``m`` with ``x^j = sum_i m[j, i] u^i`` for ``x = c + h u``, ``j, i < k1``:
    ``m[j, i] = C(j, i) c^(j-i) h^i`` (binomial expansion)."""
    from math import comb

    m = np.zeros((k1, k1))
    for j in range(k1):
        for i in range(j + 1):
            m[j, i] = comb(j, i) * c ** (j - i) * h ** i
    return m


def _rescale(poly: np.ndarray, c: float, h: float) -> np.ndarray:
    """Coefficients of ``p(c + h u)`` in increasing powers of ``u`` (same length)."""
    poly = np.asarray(poly, float)
    return poly @ _power_basis(len(poly), c, h)


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
        return np.column_stack([np.fmin(r1, r2), np.where(np.isnan(r1), r1, np.fmax(r1, r2))])
    out = np.full((len(y0), k), np.nan)
    for i, c in enumerate(c0):
        if np.isfinite(c):
            r = _real_roots(np.concatenate([[c], pu[1:]]))
            out[i, :len(r)] = r
    return out


def _branch_of(turning: np.ndarray, u: np.ndarray) -> np.ndarray:
    """Index of the monotonic branch holding ``u`` (the number of turning points below
    it, as ``searchsorted(turning, u)``; NaN counts as 0)."""
    u = np.nan_to_num(u)
    out = np.zeros(u.shape, dtype=np.intp)
    for tp in turning:
        out += tp < u
    return out


def _choose(roots: np.ndarray, turning: np.ndarray, main: int | None):
    """Root to report per row (NaN if none) and masks two-roots / outside / beyond-TP.

    One root inside the calibration range ([-1, 1] in scaled units): that one. Several:
    the one on the branch holding most calibration points (``main``, index between the
    sorted turning points), nearest the centre. None: the real root nearest the centre.
    Ties go to the first column (the smaller root)."""
    cols = [roots[:, i] for i in range(roots.shape[1])]
    with np.errstate(invalid="ignore"):
        inside = [np.abs(r) <= 1.0 for r in cols]
    n_in = np.sum(inside, axis=0) if len(cols) > 1 else inside[0].astype(int)
    cand = list(inside)
    if main is not None:
        on_main = [i & (_branch_of(turning, r) == main) for i, r in zip(inside, cols)]
        use = (n_in > 1) & np.logical_or.reduce(on_main)
        cand = [np.where(use, o, c) for o, c in zip(on_main, cand)]
    none = n_in == 0
    cand = [np.where(none, np.isfinite(r), c) for r, c in zip(cols, cand)]
    est, best = np.full(len(roots), np.nan), np.full(len(roots), np.inf)
    for r, c in zip(cols, cand):
        score = np.where(c, np.abs(r), np.inf)
        better = score < best
        est, best = np.where(better, r, est), np.where(better, score, best)
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


def _refine(band, a, b, rows, x0):
    """Sign change of the band between ``a`` (band <= 0) and ``b`` (band > 0), per row,
    from the first iterate ``x0`` (inside the bracket).

    Safeguarded Newton on the band polynomial (:class:`PolyBand`), all rows at once; a
    step that leaves the current bracket is replaced by bisection (as in ``rtsafe``,
    Press et al. 2007, Numerical Recipes 3rd ed., section 9.4; from memory). The bracket
    shrinks with every evaluation, so a tangent crossing still converges. A row stops when
    the step or the bracket is below 1e-14 max(1, |u|), the band is exactly zero, or two
    Newton steps in a row show quadratic convergence that leaves an error below that
    bound: with ``e_(k+1) ~ K e_k^2`` and ``K ~ |step_k| / step_(k-1)^2``, the error after
    step k is about ``|step_k|^3 / step_(k-1)^2`` (the usual a-posteriori estimate; on
    60 seeded line, quadratic and cubic fits the limits stayed within 1e-13 of the range
    of those iterated to the 1e-14 step). Each row's steps depend on that row alone."""
    a, b, x = a.astype(float), b.astype(float), np.asarray(x0, float).copy()
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    prev = np.full(len(x), np.nan)    # the previous Newton step (NaN: none, or bisection)
    out = np.full(len(x), np.nan)
    pos = np.arange(len(x))  # where the working rows go in ``out``
    for _ in range(_MAX_STEPS):
        f, d = band.value_slope(x, rows)
        inside = f <= 0
        np.copyto(a, x, where=inside)
        np.copyto(b, x, where=~inside)
        np.minimum(a, b, out=lo)
        np.maximum(a, b, out=hi)
        with np.errstate(divide="ignore", invalid="ignore", over="ignore"):
            step = f / d
            size = np.abs(step)
            tol = 1e-14 * np.maximum(1.0, np.abs(x))
            fast = (size <= 1e-6 * np.maximum(1.0, np.abs(x))) & \
                (size * size * size <= tol * prev * prev)
        done = (f == 0) | (size <= tol) | (hi - lo <= tol) | fast
        xn = x - step
        np.copyto(xn, x, where=f == 0)
        newton = ((xn >= lo) & (xn <= hi)) | done
        np.copyto(xn, 0.5 * (lo + hi), where=~newton)
        prev = np.where(newton, size, np.nan)
        if done.all():
            out[pos] = xn
            break
        if done.any():
            out[pos[done]] = xn[done]
            keep = ~done
            x, a, b, lo, hi, rows, pos, prev = (
                v[keep] for v in (xn, a, b, lo, hi, rows, pos, prev))
        else:
            x = xn
    return out


def _crossings(band, rows, search, nodes, start, lo, hi):
    """Nearest band crossing on each side of ``start`` within [lo, hi], for the rows
    ``rows`` of ``band`` (a :class:`PolyBand` bound to a block) at once.

    ``nodes = (j_dn, j_up)``: for each row the last grid node below ``start`` and the first
    above it where the row lies outside the band (-1 / ``len(grid)`` when none, from
    :meth:`GridSearch.outside_nodes`); they bracket the crossings, refined by
    :func:`_refine` from the false-position point between the outside node and its inner
    neighbour (band values at the nodes from the grid tables, :meth:`GridSearch.at_node`).
    Returns (lower, upper, open_below, open_above); a side with no outside node inside
    [lo, hi] is open and its limit is the window edge."""
    grid = search.grid
    n_grid = len(grid)
    j_dn, j_up = nodes
    j_up = np.where((j_up < n_grid) & (grid[np.minimum(j_up, n_grid - 1)] <= hi), j_up, -1)
    j_dn = np.where((j_dn >= 0) & (grid[np.maximum(j_dn, 0)] >= lo), j_dn, -1)
    out = []
    for j, edge, step, pick in ((j_dn, lo, 1, np.minimum), (j_up, hi, -1, np.maximum)):
        limit = edge.astype(float).copy()
        found = np.flatnonzero(j >= 0)
        if len(found):
            r = rows[found]
            j_out = j[found]
            j_in = np.clip(j_out + step, 0, n_grid - 1)
            inner, outer = pick(grid[j_in], start[found]), grid[j_out]
            f_in, f_out = search.at_node(j_in, band, r), search.at_node(j_out, band, r)
            with np.errstate(divide="ignore", invalid="ignore"):
                x0 = (grid[j_in] * f_out - outer * f_in) / (f_out - f_in)
            b_lo, b_hi = np.minimum(inner, outer), np.maximum(inner, outer)
            x0 = np.where((x0 > b_lo) & (x0 < b_hi), x0, 0.5 * (inner + outer))
            limit[found] = _refine(band, inner, outer, r, x0)
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
    branch = _branch_of(br.turning, est)
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


class PolyBand:
    """The prediction band of a polynomial curve as a polynomial in scaled units.

    ``B(u) = (y0 - P(u))^2 - t^2 (s2 + Q(u))`` with ``P`` the curve and ``Q(u) = g(x)' V
    g(x)`` the variance of the fitted value, ``g(x) = (1, x, ..., x^k)``, both written in
    increasing powers of ``u = (x - c) / h`` (``V`` carried to that basis once, so each
    evaluation is two short Horner sums). ``B <= 0``: ``y0`` lies inside the band.
    :meth:`rows` binds the new values of a block of rows.

    Parameters
    ----------
    br : Branches
        The curve's scaling (``c``, ``h``) and its coefficients in ``u`` (``pu``).
    cov : ndarray, shape (k+1, k+1)
        Covariance of the coefficients in increasing powers of x.
    t : float
        Student t quantile.
    """

    def __init__(self, br: Branches, cov, t):
        k1 = cov.shape[0]
        m = _power_basis(k1, br.c, br.h)    # the powers of x in the basis of u
        vu = m.T @ np.asarray(cov, float) @ m
        i, j = np.indices((k1, k1))
        qu = np.zeros(2 * k1 - 1)
        np.add.at(qu, (i + j).ravel(), vu.ravel())
        self.br, self.pu, self.qu, self.t, self.t2 = br, br.pu, qu, t, t * t

    @staticmethod
    def _horner(coef, u, slope: bool):
        """Value (and slope) of the polynomial ``coef`` (increasing powers) at ``u``."""
        if len(coef) == 1:
            return np.full_like(u, coef[0]), np.zeros_like(u) if slope else None
        v = coef[-1] * u
        v += coef[-2]
        d = coef[-1] if slope else None   # a float until the first step below
        for cf in coef[-3::-1]:
            if slope:
                d = d * u
                d += v
            v *= u
            v += cf
        if slope and np.ndim(d) == 0:
            d = np.full_like(u, d)
        return v, d

    def on_grid(self, grid):
        """Curve value ``P`` [y] and fitted-value variance ``Q`` [y^2] at grid nodes [u]."""
        return self._horner(self.pu, grid, False)[0], self._horner(self.qu, grid, False)[0]

    def rows(self, y0, s2) -> "_BandRows":
        """The band for new values ``y0`` [y] with new-observation variance ``s2`` [y^2]
        (a float shared by all rows, or one per row)."""
        return _BandRows(self, y0, s2)


class _BandRows:
    """:class:`PolyBand` bound to a block of new values; ``rows`` index into them."""

    def __init__(self, band: PolyBand, y0, s2):
        self.band, self.y0 = band, y0
        self.shared = np.ndim(s2) == 0
        self.s2 = float(s2) if self.shared else s2

    def _parts(self, u, rows, slope: bool):
        bd = self.band
        p, dp = bd._horner(bd.pu, u, slope)
        q, dq = bd._horner(bd.qu, u, slope)
        q += self.s2 if self.shared else self.s2[rows]
        q *= bd.t2
        r = self.y0[rows] - p
        b = r * r
        b -= q
        if not slope:
            return b, None
        r *= dp
        r *= -2.0
        dq *= bd.t2
        r -= dq
        return b, r

    def value(self, u, rows):
        """``B(u)`` for rows ``rows``."""
        return self._parts(u, rows, False)[0]

    def value_slope(self, u, rows):
        """``B(u)`` and ``dB/du`` for rows ``rows``."""
        return self._parts(u, rows, True)


def _band_grid(br: Branches, window_u) -> np.ndarray:
    """The shared grid [u] over the window, plus the turning points inside it."""
    w_lo, w_hi = window_u
    turning = br.turning
    return np.unique(np.concatenate([np.linspace(w_lo, w_hi, GRID_POINTS),
                                     turning[(turning > w_lo) & (turning < w_hi)]]))


class GridSearch:
    """The band on the shared grid, prepared once for all rows of a call.

    ``s2_shared``: the one new-observation variance of every row, or None when rows
    differ. With one variance and at least :data:`THRESHOLD_ROWS` rows the nearest
    outside nodes come from exact per-node thresholds (:class:`refit.models.inversion.bandgrid.BandNodes`:
    the same comparisons as the (grid x rows) matrix, without building it); otherwise from
    that matrix (cheaper than building the thresholds for a few rows). Both give the same
    nodes, so the choice never changes a number."""

    def __init__(self, band: PolyBand, window_u, s2_shared, n_rows: int):
        grid = _band_grid(band.br, window_u)
        self.grid, self.band = grid, band
        # the evenly spaced nodes (np.linspace: first and last exact) and the turning
        # points added between them
        self.even = np.linspace(window_u[0], window_u[1], GRID_POINTS)
        self.extra = np.setdiff1d(grid, self.even)
        self.fg, self.qg = band.on_grid(grid)
        self.nodes = None
        self.shared = s2_shared is not None
        if self.shared:
            self.r = band.t * np.sqrt(s2_shared + self.qg)
            if n_rows >= THRESHOLD_ROWS and np.all(np.isfinite(self.fg) & np.isfinite(self.r)):
                from refit.models.inversion.bandgrid import BandNodes

                self.nodes = BandNodes(self.fg, self.r)

    def at_node(self, j, band, rows):
        """The band ``B`` at grid nodes ``j`` for the rows ``rows`` of ``band`` (a
        :class:`PolyBand` bound to a block), from the grid tables."""
        r = band.y0[rows] - self.fg[j]
        s2 = band.s2 if band.shared else band.s2[rows]
        return r * r - self.band.t2 * (s2 + self.qg[j])

    def count_up_to(self, u):
        """Number of grid nodes ``<= u`` for finite ``u`` (``searchsorted(grid, u,
        "right")``), by arithmetic on the evenly spaced part of the grid and one exact
        correction either way (the rounded quotient is off by at most one node)."""
        even, extra = self.even, self.extra
        n = len(even)
        step = (even[-1] - even[0]) / (n - 1)
        k = np.floor((u - even[0]) / step).astype(np.intp)
        np.clip(k, -1, n - 1, out=k)
        k += (k + 1 < n) & (even[np.minimum(k + 1, n - 1)] <= u)
        k -= (k >= 0) & (even[np.maximum(k, 0)] > u)
        k += 1
        for e in extra:
            k += e <= u
        return k

    def outside_nodes(self, y, s2, start):
        """For new values ``y`` (variances ``s2``, per row) and start points [u]: the last
        grid node below ``start`` and the first above it where ``y`` lies outside the band
        (-1 / ``len(grid)`` when none)."""
        grid = self.grid
        above = self.count_up_to(start)                     # first node > start
        below = above - 1 - (grid[np.maximum(above - 1, 0)] == start)  # last node < start
        if self.nodes is not None:
            return self.nodes.last_outside(below, y), self.nodes.first_outside(above, y)
        fg = self.fg[:, None]
        if self.shared:
            pos = np.abs(y[None, :] - fg) > self.r[:, None]
        else:
            pos = (y[None, :] - fg) ** 2 > self.band.t2 * (s2[None, :] + self.qg[:, None])
        n_grid = len(grid)
        ar = np.arange(n_grid, dtype=np.int32)[:, None]
        j_up = np.min(np.where(pos & (ar >= above), ar, n_grid), axis=0)
        j_dn = np.max(np.where(pos & (ar <= below), ar, -1), axis=0)
        return j_dn, j_up


#: order of the flags of :func:`refit.models.inversion.classical.invert_polynomial`
POLYNOMIAL_FLAG_ORDER = (FLAG_TWO_ROOTS, FLAG_OUTSIDE, FLAG_BEYOND_TP, FLAG_BEYOND_WINDOW,
                         FLAG_OPEN_BELOW, FLAG_OPEN_ABOVE, FLAG_TRUNCATED)
#: order of the flags of a line's bounded Fieller interval
#: (:func:`refit.models.inversion.classical._bound_line`)
LINE_FLAG_ORDER = (FLAG_OUTSIDE, FLAG_UNBOUNDED, FLAG_TWO_RAYS, FLAG_BEYOND_WINDOW,
                   FLAG_OPEN_BELOW, FLAG_OPEN_ABOVE, FLAG_TRUNCATED)


def _polynomial_flags(sp: dict, ok, open_lo, open_hi, closes) -> tuple:
    """Final estimate [u] and the flag masks of :func:`refit.models.inversion.classical.invert_polynomial`."""
    no_root, off = sp["no_root"], sp["off_window"]
    est = np.where(no_root & closes & ~off, sp["start"], sp["est"])
    est = np.where(off & ~no_root, np.nan, est)
    masks = {FLAG_OUTSIDE: sp["outside"] | (off & ~no_root),
             FLAG_TWO_ROOTS: sp["two"] & ok,
             FLAG_BEYOND_TP: sp["beyond"] | no_root,
             FLAG_BEYOND_WINDOW: off & ~no_root,
             FLAG_OPEN_BELOW: open_lo, FLAG_OPEN_ABOVE: open_hi,
             FLAG_TRUNCATED: np.zeros(len(est), dtype=bool)}  # set with the bounds
    return est, masks
