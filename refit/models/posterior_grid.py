"""Summaries of densities tabulated on an even grid: numpy only, many rows at once.

Each row of ``p`` (rows x grid points) is an unnormalised density on the even grid
``x_0 < ... < x_{G-1}`` (spacing h), read as piecewise linear between the points (the
trapezoid rule). Its distribution function at the grid points is
``F_i = h (S_i - (p_0 + p_i) / 2)`` with ``S_i = p_0 + ... + p_i``; inside a cell it is the
quadratic ``F(x_i + t h) = F_i + h (p_i t + (p_{i+1} - p_i) t^2 / 2)``, inverted exactly.
No cumulative sum over the whole grid is formed: the grid is cut into chunks of about
``sqrt(G)`` points, whose sums locate the chunk of a quantile; only that chunk is read.

The highest-density interval (HDI) of level L is the set ``{x : p(x) >= lam}`` holding
mass L (Hyndman 1996, The American Statistician 50:120, "highest density regions"; from
memory). For a unimodal row it is one interval ``[a, b]`` with ``p(a) = p(b)`` and
``F(b) - F(a) = L``, found by safeguarded Newton steps on ``u = F(a)`` from the
equal-tailed interval (:func:`hdi_unimodal`); otherwise the threshold is found by bisection
on lam with the exact trapezoid mass above it, and the HDI is a union of intervals
(:func:`hdi_pieces`).
"""

from __future__ import annotations

import math

import numpy as np

#: most safeguarded Newton steps of the unimodal HDI on u = F(a) in [0, 1 - level]; from
#: the equal-tailed interval 3 to 5 steps reach HDI_TOL; a step leaving the bracket is
#: replaced by false position in it (and a root within rounding of an end is that end)
HDI_STEPS = 60
#: the unimodal HDI stops when a step moves u = F(a) by less than this (a probability: at
#: a density of 0.06 / SD, as a normal's at its 95 % HDI ends, 2e-13 SD in climate)
HDI_TOL = 1e-14
#: bisection steps on the density threshold of a multimodal row
THRESHOLD_STEPS = 60


def chunk_starts(n_grid: int) -> np.ndarray:
    """First index of each chunk of about ``sqrt(n_grid)`` grid points."""
    w = max(2, math.ceil(math.sqrt(n_grid)))
    return np.arange(0, n_grid, w)


def running_sum(a: np.ndarray) -> np.ndarray:
    """``numpy.cumsum(a, axis=1)`` (the same additions in the same order) for a short
    second axis: one vector addition per column across all rows, where numpy's cumsum
    would loop row by row."""
    out = np.empty_like(a, dtype=float)
    if a.shape[1]:
        run = out[:, 0] = a[:, 0]
        for k in range(1, a.shape[1]):
            run = out[:, k] = run + a[:, k]
    return out


class GridRows:
    """Chunk sums of a block of rows, for quantiles and the distribution function.

    Parameters
    ----------
    p : ndarray, shape (B, G)
        Unnormalised densities (>= 0, each row with positive mass), C-contiguous.
    h : float
        Grid spacing [climate unit].
    starts : ndarray
        :func:`chunk_starts` of G.
    chunk_sums : ndarray, shape (B, len(starts)), optional
        ``numpy.add.reduceat(p, starts, axis=1)`` when the caller already formed it (while
        the rows were in cache).
    """

    def __init__(self, p: np.ndarray, h: float, starts: np.ndarray,
                 chunk_sums: np.ndarray | None = None):
        self.p, self.h, self.starts = p, h, starts
        B, G = p.shape
        self.width = int(starts[1] - starts[0]) if starts.size > 1 else G
        ends = np.append(starts[1:], G) - 1                     # last index of each chunk
        sums = np.add.reduceat(p, starts, axis=1) if chunk_sums is None else chunk_sums
        self.S_end = running_sum(sums)
        self.F_end = h * (self.S_end - 0.5 * (p[:, :1] + p[:, ends]))
        self.total = self.F_end[:, -1].copy()                   # normaliser Z
        self.rows = np.arange(B)
        self.flat = p.reshape(-1)
        self.offsets = self.rows * G
        self.steps = np.arange(self.width + 1)

    def quantile_index(self, target: np.ndarray, rows: np.ndarray | None = None):
        """Cell index i and fraction t in [0, 1] with ``F(x_i + t h) = target`` per row
        (``target`` in [0, Z], unnormalised), for all rows or the given row indices.

        The chunk holding the target, then that chunk's points with the last point of the
        chunk before (so every cell ending in the chunk is present); the running sum over
        the chunk is one vector addition per point across all rows (numpy's cumsum along
        a short row is slow), the additions of a sequential sum in its order."""
        G = self.p.shape[1]
        F_end = self.F_end if rows is None else self.F_end[rows]
        rows = self.rows if rows is None else rows
        n = np.arange(rows.size)
        c = np.minimum(np.count_nonzero(F_end < target[:, None], axis=1), F_end.shape[1] - 1)
        first = np.maximum(self.starts[c] - 1, 0)
        off = self.offsets[rows]
        # points by rows (the transpose): each step of the running sum then adds two
        # contiguous vectors
        idx = np.minimum((off + first)[None, :] + self.steps[:, None], (off + (G - 1))[None, :])
        vals = np.take(self.flat, idx)                           # (w + 1, n)
        s0 = np.where(c > 0, self.S_end[rows, np.maximum(c - 1, 0)], self.p[rows, 0])
        S = np.empty_like(vals)
        S[0] = s0
        run = np.add(s0, vals[1], out=S[1])
        for k in range(2, vals.shape[0]):
            run = np.add(run, vals[k], out=S[k])
        half = np.add(self.p[rows, 0], vals)                     # as F_end: h (S - (p_0 + p_i) / 2)
        half *= 0.5
        F = np.subtract(S, half, out=S)
        F *= self.h
        j = np.clip(np.count_nonzero(F <= target, axis=0) - 1, 0, self.width - 1)
        i = np.minimum(first + j, G - 1)
        pi, pj = vals[j, n], vals[j + 1, n]
        u = np.maximum(target - F[j, n], 0.0) / self.h
        # F_i + h (p_i t + d t^2 / 2) = target, stable root t = 2u / (p_i + sqrt(p_i^2 + 2 d u))
        disc = np.sqrt(np.maximum(pi * pi + 2.0 * (pj - pi) * u, 0.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.where(pi + disc > 0, 2.0 * u / (pi + disc), 0.0)
        last = i >= G - 1
        t = np.where(last, 0.0, np.clip(t, 0.0, 1.0))
        return i, t

    def quantile_near(self, target: np.ndarray, i: np.ndarray, t: np.ndarray,
                      known: np.ndarray, rows: np.ndarray):
        """:meth:`quantile_index` of ``target`` for ``rows`` whose distribution function
        is known to equal ``known`` at ``x_i + t h`` (a previous answer): where the target
        lies in that same cell, the cell's quadratic is solved from its two densities
        alone (no chunk is read); elsewhere :meth:`quantile_index`. Near a root the
        Newton steps of :func:`hdi_unimodal` move within a cell."""
        G = self.p.shape[1]
        h = self.h
        ic = np.minimum(i, G - 2)
        pi, pj = self.p[rows, ic], self.p[rows, ic + 1]
        d = pj - pi
        F_i = known - h * (pi * t + 0.5 * d * t * t)             # F at the cell's left end
        F_next = F_i + 0.5 * h * (pi + pj)
        same = (i < G - 1) & (target >= F_i) & (target <= F_next)
        out_i, out_t = np.array(i, copy=True), np.empty_like(t)
        u = np.maximum(target - F_i, 0.0) / h
        disc = np.sqrt(np.maximum(pi * pi + 2.0 * d * u, 0.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            tt = np.where(pi + disc > 0, 2.0 * u / (pi + disc), 0.0)
        out_t[same] = np.clip(tt[same], 0.0, 1.0)
        other = np.flatnonzero(~same)
        if other.size:
            out_i[other], out_t[other] = self.quantile_index(target[other], rows[other])
        return out_i, out_t

    def quantile(self, prob, x0: float):
        """x at cumulative probability ``prob`` (scalar or per row) [climate unit]."""
        target = np.broadcast_to(np.asarray(prob, float), self.total.shape) * self.total
        i, t = self.quantile_index(target)
        return x0 + (i + t) * self.h

    def density_at(self, i: np.ndarray, t: np.ndarray, rows: np.ndarray | None = None):
        """Linear interpolation of the (unnormalised) density at ``x_i + t h``, and its
        slope in the cell [density per climate unit]."""
        rows = self.rows if rows is None else rows
        G = self.p.shape[1]
        a = self.p[rows, i]
        b = self.p[rows, np.minimum(i + 1, G - 1)]
        return a + t * (b - a), (b - a) / self.h


def hdi_unimodal(rows: GridRows, level: float, x0: float, sel: np.ndarray,
                 lower: tuple, upper: tuple):
    """HDI ``[a, b]`` of the unimodal rows ``sel`` of ``rows``: ``u = F(a) / Z`` with
    ``gap(u) = p(Q(u)) - p(Q(u + level)) = 0`` (increasing in u for a unimodal density),
    by Newton steps from the equal-tailed interval, ``gap'(u) = Z (p'(a) / p(a) -
    p'(b) / p(b))``, kept inside a bracket of the root (a step leaving it is replaced by
    false position in the bracket), until the next step would move u by less than
    :data:`HDI_TOL`.

    A density falling from the left edge (``gap(0) >= 0``) gives ``u = 0``, one rising to
    the right edge (``gap(1 - level) <= 0``) ``u = 1 - level``.

    Parameters
    ----------
    rows : GridRows
    level : float
    x0 : float
        First grid point [climate unit].
    sel : ndarray of int
        Rows of ``rows`` to treat.
    lower, upper : (ndarray, ndarray)
        ``quantile_index`` (i, t) of the equal-tailed interval's ends for ``sel``.

    Returns
    -------
    a, b : ndarray
        HDI ends [climate unit].
    """
    Z = rows.total[sel]
    u0 = 0.5 * (1.0 - level)

    def gap(k, ia, ta, ib, tb):
        pa, sa = rows.density_at(ia, ta, sel[k])
        pb, sb = rows.density_at(ib, tb, sel[k])
        with np.errstate(invalid="ignore", divide="ignore"):
            slope = Z[k] * (sa / pa - sb / pb)
        return pa - pb, slope, (ia, ta, ib, tb)

    def at(un, k):
        """gap at ``un`` for rows k, starting from their current ends (ia, ta, ib, tb) at u[k]."""
        za, zb = un * Z[k], (un + level) * Z[k]
        ja, sa = rows.quantile_near(za, ia[k], ta[k], u[k] * Z[k], sel[k])
        jb, sb = rows.quantile_near(zb, ib[k], tb[k], (u[k] + level) * Z[k], sel[k])
        return gap(k, ja, sa, jb, sb)

    n = sel.size
    allk = np.arange(n)
    g, dg, pos = gap(allk, *lower, *upper)
    u = np.full(n, u0)
    # the root's side; the far end of that side tells whether the HDI touches an edge
    right = g < 0
    tgt = np.where(right, 1.0 - level, level) * Z
    i, t = rows.quantile_index(tgt, sel)
    p_q, _ = rows.density_at(i, t, sel)
    G = rows.p.shape[1]
    p_edge = np.where(right, rows.p[sel, G - 1], rows.p[sel, 0])
    g_far = np.where(right, p_q - p_edge, p_edge - p_q)      # gap(1 - level) or gap(0)
    edge = np.where(right, g_far <= 0, g_far >= 0)
    lo = np.where(right, u0, 0.0)
    hi = np.where(right, 1.0 - level, u0)
    g_lo = np.where(right, g, g_far)
    g_hi = np.where(right, g_far, g)
    done = edge | (g == 0)
    u = np.where(edge, np.where(right, 1.0 - level, 0.0), u)
    ia, ta, ib, tb = (np.array(v, copy=True) for v in pos)
    # an HDI at an edge: [x_0, Q(level)] or [Q(1 - level), x_{G-1}], Q from the check above
    le, re = edge & ~right, edge & right
    ia[le], ta[le], ib[le], tb[le] = 0, 0.0, i[le], t[le]
    ia[re], ta[re], ib[re], tb[re] = i[re], t[re], G - 1, 0.0
    with np.errstate(invalid="ignore", divide="ignore"):
        act = np.flatnonzero(~done & ~(np.abs(g / dg) <= HDI_TOL))
    for _ in range(HDI_STEPS):
        if act.size == 0:
            break
        with np.errstate(invalid="ignore", divide="ignore"):
            un = u[act] - g[act] / dg[act]
        l_, h_ = lo[act], hi[act]
        bad = ~(np.isfinite(un) & (un > l_) & (un < h_))
        end = np.zeros(act.size, dtype=bool)
        if bad.any():                  # false position inside the bracket ...
            gl, gh = g_lo[act], g_hi[act]
            with np.errstate(invalid="ignore", divide="ignore"):
                fp = l_ - gl * (h_ - l_) / (gh - gl)
            # ... or, where it rounds onto an end, the root is that end to rounding
            end = bad & ~(np.isfinite(fp) & (fp > l_) & (fp < h_))
            fp = np.where(end, np.where(np.abs(gl) <= np.abs(gh), l_, h_), fp)
            un = np.where(bad, fp, un)
        gn, dgn, (ja, sa, jb, sb) = at(un, act)
        below = gn < 0
        lo[act] = np.where(below, un, lo[act])
        hi[act] = np.where(below, hi[act], un)
        g_lo[act] = np.where(below, gn, g_lo[act])
        g_hi[act] = np.where(below, g_hi[act], gn)
        u[act], g[act], dg[act] = un, gn, dgn
        ia[act], ta[act], ib[act], tb[act] = ja, sa, jb, sb
        # stop where the next Newton step would move u by less than HDI_TOL (quadratic
        # convergence: u is then that close to the root), or the root is an end
        with np.errstate(invalid="ignore", divide="ignore"):
            more = ~(np.abs(gn / dgn) <= HDI_TOL)
        act = act[more & (gn != 0) & (hi[act] - lo[act] > HDI_TOL) & ~end]
    return x0 + (ia + ta) * rows.h, x0 + (ib + tb) * rows.h


def _mass_above(p: np.ndarray, lam: float, h: float) -> float:
    """Trapezoid mass of ``{x : p(x) >= lam}`` for one row of a piecewise-linear density."""
    a, b = p[:-1], p[1:]
    lo, hi = np.minimum(a, b), np.maximum(a, b)
    full = lo >= lam
    part = (hi > lam) & ~full
    mass = 0.5 * h * (a + b)[full].sum()
    # a cell crossing lam: the fraction f = (hi - lam) / (hi - lo) of it lies above, where
    # the density runs linearly from lam to hi: mass h f (lam + hi) / 2
    f = (hi[part] - lam) / (hi[part] - lo[part])
    return float(mass + (0.5 * h * f * (lam + hi[part])).sum())


def hdi_pieces(p: np.ndarray, grid: np.ndarray, level: float) -> list[tuple[float, float]]:
    """The HDI of one row as a union of intervals ``[(a1, b1), (a2, b2), ...]``: the
    threshold lam by bisection on the exact trapezoid mass above it, the ends where the
    linear density crosses lam."""
    h = float(grid[1] - grid[0])
    total = _mass_above(p, 0.0, h)
    lo, hi = 0.0, float(p.max())
    for _ in range(THRESHOLD_STEPS):
        mid = 0.5 * (lo + hi)
        if _mass_above(p, mid, h) >= level * total:
            lo = mid
        else:
            hi = mid
    lam = lo
    above = p >= lam
    pieces = []
    edges = np.flatnonzero(np.diff(np.concatenate([[False], above, [False]]).astype(np.int8)))
    for s, e in zip(edges[::2], edges[1::2] - 1):
        a = grid[s] if s == 0 else grid[s - 1] + h * (lam - p[s - 1]) / (p[s] - p[s - 1])
        b = grid[e] if e == len(p) - 1 else grid[e] + h * (p[e] - lam) / (p[e] - p[e + 1])
        pieces.append((float(a), float(b)))
    return pieces


def raw_peak_counts(p: np.ndarray) -> np.ndarray:
    """Number of local maxima per row (interior ``p_{i-1} < p_i >= p_{i+1}``, plus a
    strict maximum at either edge: a flat run at an edge, such as a tail at the floor,
    is none): a cheap screen; rows with more than one are examined by
    :func:`significant_modes`."""
    up = p[:, 1:] > p[:, :-1]
    turn = up[:, :-1] > up[:, 1:]                                  # rising, then not
    # counted as bytes in a 16-bit sum where the row is short enough (numpy's count
    # along an axis is several times slower)
    wide = np.uint16 if p.shape[1] < 65_535 else np.int64
    inner = np.add.reduce(turn.view(np.uint8), axis=1, dtype=wide).astype(np.int64)
    return inner + (p[:, 0] > p[:, 1]) + up[:, -1]


def significant_modes(p: np.ndarray, fraction: float, dip: float) -> list[int]:
    """Indices of the modes of one row that count: local maxima at least ``fraction`` of
    the highest, each separated from its neighbouring kept mode by a dip below ``dip``
    times the lower of the two (so rounding ripples on a plateau are no modes)."""
    G = p.size
    up = np.concatenate([[True], p[1:] > p[:-1]])
    down = np.concatenate([p[:-1] >= p[1:], [True]])
    peaks = np.flatnonzero(up & down & (p >= fraction * p.max()))
    kept: list[int] = []
    for k in peaks:
        if not kept:
            kept.append(int(k))
            continue
        j = kept[-1]
        low = p[j:k + 1].min()
        if low < dip * min(p[j], p[k]):
            kept.append(int(k))
        elif p[k] > p[j]:
            kept[-1] = int(k)
    return kept if G else []
