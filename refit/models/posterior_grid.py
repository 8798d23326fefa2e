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
``F(b) - F(a) = L``, found by the Illinois method on ``u = F(a)`` (:func:`hdi_unimodal`); otherwise
the threshold is found by bisection on lam with the exact trapezoid mass above it, and the
HDI is a union of intervals (:func:`hdi_pieces`).
"""

from __future__ import annotations

import math

import numpy as np

#: Illinois (regula falsi) steps of the unimodal HDI on u = F(a) in [0, 1 - level]
#: (superlinear; 12 steps reach the grid's own precision)
HDI_STEPS = 12
#: bisection steps on the density threshold of a multimodal row
THRESHOLD_STEPS = 60


def chunk_starts(n_grid: int) -> np.ndarray:
    """First index of each chunk of about ``sqrt(n_grid)`` grid points."""
    w = max(2, math.ceil(math.sqrt(n_grid)))
    return np.arange(0, n_grid, w)


class GridRows:
    """Chunk sums of a block of rows, for quantiles and the distribution function.

    Parameters
    ----------
    p : ndarray, shape (B, G)
        Unnormalised densities (>= 0, each row with positive mass).
    h : float
        Grid spacing [climate unit].
    starts : ndarray
        :func:`chunk_starts` of G.
    """

    def __init__(self, p: np.ndarray, h: float, starts: np.ndarray):
        self.p, self.h, self.starts = p, h, starts
        B, G = p.shape
        self.width = int(starts[1] - starts[0]) if starts.size > 1 else G
        ends = np.append(starts[1:], G) - 1                     # last index of each chunk
        self.S_end = np.cumsum(np.add.reduceat(p, starts, axis=1), axis=1)
        self.F_end = h * (self.S_end - 0.5 * (p[:, :1] + p[:, ends]))
        self.total = self.F_end[:, -1].copy()                   # normaliser Z
        self.rows = np.arange(B)
        self.flat = p.reshape(-1)                               # p is C-contiguous
        self.offsets = self.rows * G

    def _chunk_values(self, c: np.ndarray):
        """(indices (B, w+1), values, S at the first index) of chunk ``c`` per row, with the
        last point of the chunk before (so every cell ending in chunk c is present)."""
        G = self.p.shape[1]
        first = np.maximum(self.starts[c] - 1, 0)
        idx = np.minimum(first[:, None] + np.arange(self.width + 1), G - 1)
        vals = np.take(self.flat, idx + self.offsets[:, None])
        s0 = np.where(c > 0, self.S_end[self.rows, np.maximum(c - 1, 0)], self.p[:, 0])
        return idx, vals, s0

    def quantile_index(self, target: np.ndarray):
        """Cell index i and fraction t in [0, 1] with ``F(x_i + t h) = target`` per row
        (``target`` in [0, Z], unnormalised)."""
        G = self.p.shape[1]
        c = np.minimum((self.F_end < target[:, None]).sum(axis=1), self.F_end.shape[1] - 1)
        idx, vals, s0 = self._chunk_values(c)
        S = s0[:, None] + np.cumsum(vals[:, 1:], axis=1)
        S = np.concatenate([s0[:, None], S], axis=1)
        F = self.h * (S - 0.5 * (self.p[:, :1] + vals))
        j = np.clip((F <= target[:, None]).sum(axis=1) - 1, 0, self.width - 1)
        i = idx[self.rows, j]
        pi, pj = vals[self.rows, j], vals[self.rows, j + 1]
        u = np.maximum(target - F[self.rows, j], 0.0) / self.h
        # F_i + h (p_i t + d t^2 / 2) = target, stable root t = 2u / (p_i + sqrt(p_i^2 + 2 d u))
        disc = np.sqrt(np.maximum(pi * pi + 2.0 * (pj - pi) * u, 0.0))
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.where(pi + disc > 0, 2.0 * u / (pi + disc), 0.0)
        last = i >= G - 1
        t = np.where(last, 0.0, np.clip(t, 0.0, 1.0))
        return np.minimum(i, G - 1), t

    def quantile(self, prob, x0: float):
        """x at cumulative probability ``prob`` (scalar or per row) [climate unit]."""
        target = np.broadcast_to(np.asarray(prob, float), self.total.shape) * self.total
        i, t = self.quantile_index(target)
        return x0 + (i + t) * self.h

    def density_at(self, i: np.ndarray, t: np.ndarray) -> np.ndarray:
        """Linear interpolation of the (unnormalised) density at ``x_i + t h``."""
        G = self.p.shape[1]
        a = self.p[self.rows, i]
        b = self.p[self.rows, np.minimum(i + 1, G - 1)]
        return a + t * (b - a)


def hdi_unimodal(rows: GridRows, level: float, x0: float):
    """HDI ``[a, b]`` of unimodal rows: Illinois iteration on ``u = F(a) / Z`` for
    ``p(a) = p(b)``, ``F(b) - F(a) = level`` (``p(Q(u)) - p(Q(u + level))`` increases in u
    for a unimodal density). A density falling from the left edge gives ``u = 0``, one
    rising to the right edge ``u = 1 - level``."""
    B = rows.total.shape[0]

    def gap(u):
        i, t = rows.quantile_index(u * rows.total)
        k, s = rows.quantile_index((u + level) * rows.total)
        return rows.density_at(i, t) - rows.density_at(k, s)

    lo, hi = np.zeros(B), np.full(B, 1.0 - level)
    g_lo, g_hi = gap(lo), gap(hi)
    left, right = g_lo >= 0, g_hi <= 0               # the HDI touches an edge
    side = np.zeros(B)                               # Illinois: which end was kept twice
    u = 0.5 * (lo + hi)
    for _ in range(HDI_STEPS):
        with np.errstate(invalid="ignore", divide="ignore"):
            u = np.where(g_hi != g_lo, hi - g_hi * (hi - lo) / (g_hi - g_lo), 0.5 * (lo + hi))
        u = np.where((u > lo) & (u < hi), u, 0.5 * (lo + hi))
        g = gap(u)
        up = g < 0
        lo, g_lo = np.where(up, u, lo), np.where(up, g, g_lo)
        hi, g_hi = np.where(up, hi, u), np.where(up, g_hi, g)
        # Illinois step: halve the value at the end kept twice in a row
        g_hi = np.where(up & (side > 0), 0.5 * g_hi, g_hi)
        g_lo = np.where(~up & (side < 0), 0.5 * g_lo, g_lo)
        side = np.where(up, 1.0, -1.0)
    u = np.where(left, 0.0, np.where(right, 1.0 - level, u))
    return rows.quantile(u, x0), rows.quantile(u + level, x0)


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
    maximum at either edge): a cheap screen; rows with more than one are examined by
    :func:`significant_modes`."""
    up = p[:, 1:] > p[:, :-1]
    inner = (up[:, :-1] & ~up[:, 1:]).sum(axis=1)
    return inner + (~up[:, 0]) + up[:, -1]


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
