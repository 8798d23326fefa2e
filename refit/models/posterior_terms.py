"""The per-row log densities of the posterior on a grid, and their moments: numpy only.

:class:`_Tables` holds what depends on the grid alone (computed once per run);
:func:`_log_likelihoods` adds the proxies' Student t (or normal) log densities of a block
of rows; :func:`_row_moments` the trapezoid moments row by row. Used
by :mod:`refit.models.posterior`; every row's numbers depend on that row alone.
"""

from __future__ import annotations

import math

import numpy as np

from refit.models.posterior_inputs import BLOCK_ROWS


class _Tables:
    """What every row shares, from the grid alone (computed once per run): per proxy the
    predictive location f_k(x) and variance v_k(x), and for a measurement SD s the
    parts of its term that do not depend on the measured value, cached per (proxy, s).

    With ``V = v + s^2``, ``a = (df + 1) / 2`` and ``d = df V`` the Student t term is
    ``-a log(1 + r^2 / d) - log(V) / 2 = -a log(r^2 + d) + (a - 1/2) log V + a log df``:
    the constant ``a log df`` is dropped (every density is normalised), ``(a - 1/2) log V``
    is added once per grid point (not per row and point), and proxies with the same df
    share one logarithm, ``-a log Π_k (r_k^2 + d_k)``. The normal's term is
    ``-c r^2 - log(V) / 2``, ``c = 1 / (2 V)``. A proxy whose SD changes from row to row
    takes the same formulas with V per row and point, so a row's numbers never depend on
    the other rows of its block.
    """

    def __init__(self, proxies, grid, checked: bool = True):
        self.loc, self.var = [], []
        for p in proxies:
            loc, var = p.location_variance(grid, checked=checked)
            self.loc.append(loc)
            self.var.append(var)
        self.df = [float(p.df) for p in proxies]
        self.a = [None if math.isinf(df) else 0.5 * (df + 1.0) for df in self.df]
        self.finite = all(np.isfinite(v).all() for v in self.var)
        self._cache: dict = {}
        self._tiles: dict = {}

    def parts(self, j: int, V: np.ndarray, logV: np.ndarray | None = None):
        """(d or c, the value-free part of the term) of proxy j for total variance V
        (overwritten; ``logV`` a buffer of V's shape for the second, or None)."""
        logV = np.log(V, out=logV)
        if self.a[j] is None:
            np.multiply(logV, -0.5, out=logV)
            return np.divide(0.5, V, out=V), logV
        np.multiply(logV, self.a[j] - 0.5, out=logV)
        return np.multiply(V, self.df[j], out=V), logV

    def tiled(self, table, j: int, n: int) -> np.ndarray:
        """``table[j]`` repeated on n rows (a row-by-row copy, kept: numpy combines a
        full array with a column much faster than a row with a column)."""
        key = (id(table), j)
        got = self._tiles.get(key)
        if got is None or got.shape[0] < n:
            got = self._tiles[key] = np.tile(table[j], (max(n, BLOCK_ROWS), 1))
        return got[:n]

    def constants(self, j: int, s: float):
        """:meth:`parts` of proxy j for one measurement SD s, cached."""
        key = (j, s)
        got = self._cache.get(key)
        if got is None:
            got = self._cache[key] = self.parts(j, self.var[j] + s * s)
        return got


def _residual_sq(tab, j, yj, present, out):
    """``out = (f_j(x) - y_j)^2`` (rows without a value: 0)."""
    # on the transposes: numpy subtracts a row from every row of an array side by side on
    # threads, a column from every column not (and at half the speed)
    np.subtract(tab.tiled(tab.loc, j, out.shape[0]).T, np.where(present, yj, 0.0),
                out=out.T)
    np.square(out, out=out)


def _scratch(pool, key, n: int, G: int) -> np.ndarray:
    """An (n, G) buffer kept in ``pool`` (a dict of one thread's) under ``key``; a fresh
    array when ``pool`` is None."""
    if pool is None:
        return np.empty((n, G))
    got = pool.get(key)
    if got is None or got.shape[0] < n or got.shape[1] != G:
        got = pool[key] = np.empty((max(n, BLOCK_ROWS), G))
    return got[:n]


def _log_likelihoods(tab: _Tables, y, s, base, lp, t, tmp, which=None, pool=None) -> None:
    """``lp = base + Σ_k log t_k`` (up to constants) for the rows of ``y``, ``s`` ((n, K),
    model scale; NaN: proxy not measured, its term left out) over the proxies ``which``
    (default all). ``base`` (G,) is the log prior (or 0); ``t``, ``tmp`` (n, G) scratch;
    ``pool`` a dict of the calling thread's where further scratch is kept between calls
    (a proxy whose SD changes from row to row needs two more arrays of the block's size).

    The value-free parts are summed onto ``base`` in proxy order (0 for a row without the
    proxy), then each group of proxies with one df adds ``-a log Π (r^2 + d)`` (factor 1
    for a row without the proxy), then each normal proxy ``-c r^2``: the same operations
    in the same order for every row, whatever the other rows of the block hold.
    """
    present = ~np.isnan(y)
    B = base
    groups: dict = {}
    normals = []
    for j in range(y.shape[1]) if which is None else which:
        pj = present[:, j]
        if not pj.any():
            continue
        sj = s[:, j]
        if np.all(sj == sj[0]):
            scale, part = tab.constants(j, float(sj[0]))
            B = B + part if pj.all() else B + np.where(pj[:, None], part, 0.0)
        else:
            G = tab.var[j].size
            V = _scratch(pool, ("V", j), sj.size, G)
            np.add(tab.tiled(tab.var, j, sj.size).T, sj * sj, out=V.T)   # v_j(x) + s^2
            scale, part = tab.parts(j, V, _scratch(pool, ("logV", j), sj.size, G))
            if not pj.all():
                part[~pj] = 0.0
            B = np.add(part, B, out=part)
        if tab.a[j] is None:
            normals.append((j, scale))
        else:
            groups.setdefault(tab.a[j], []).append((j, scale))
    filled = False
    for a, members in groups.items():
        for k, (j, d) in enumerate(members):
            r = t if k == 0 else tmp
            _residual_sq(tab, j, y[:, j], present[:, j], r)
            np.add(r, d, out=r)
            if not present[:, j].all():
                r[~present[:, j]] = 1.0
            if k:
                np.multiply(t, tmp, out=t)
        np.log(t, out=t)
        np.multiply(t, -a, out=t)
        np.add(lp if filled else B, t, out=lp)
        filled = True
    if not filled:
        lp[:] = B
    for j, c in normals:
        _residual_sq(tab, j, y[:, j], present[:, j], t)
        np.multiply(t, c, out=t)
        if not present[:, j].all():
            t[~present[:, j]] = 0.0
        np.subtract(lp, t, out=lp)


def _log_likelihoods_apart(tab: _Tables, y, s, base, lp, t, tmp) -> None:
    """As :func:`_log_likelihoods`, one proxy at a time: for rows where a group's product
    overflowed (a measurement absurdly far from every curve)."""
    lp[:] = base
    part, zero = np.empty_like(lp), np.zeros(lp.shape[1])
    for j in range(y.shape[1]):
        if not np.isnan(y[:, j]).all():
            _log_likelihoods(tab, y, s, zero, part, t, tmp, which=(j,))
            np.add(lp, part, out=lp)


def _row_moments(p, W, out=None):
    """``p @ W`` row by row (``numpy.einsum``'s own loops: each row's moments are sums
    over that row alone, and the loops release the interpreter lock, so row blocks on
    threads run side by side; a BLAS product of a few columns serialises threads on
    OpenBLAS's buffer lock and can depend on how many rows share the call)."""
    out = np.empty((p.shape[0], W.shape[1])) if out is None else out
    Wt = W.T if W.T.flags.c_contiguous else np.ascontiguousarray(W.T)
    np.einsum("ij,kj->ik", p, Wt, out=out)
    return out


def chunk_sums(p, starts, out):
    """``numpy.add.reduceat(p, starts, axis=1)`` for chunks of equal width (the last may be
    shorter): the full chunks summed over a reshaped view by ``numpy.einsum`` (a sum over
    a short last axis is slow in ``numpy.sum``; reduceat holds the interpreter lock)."""
    n, G = p.shape
    w = int(starts[1] - starts[0]) if starts.size > 1 else G
    k = G // w
    full = k * w
    if k:
        np.einsum("ijk->ij", p[:, :full].reshape(n, k, w), out=out[:, :k])
    if full < G:
        np.sum(p[:, full:], axis=1, out=out[:, k])
    return out


def _mean_sd(M, centre):
    mean = M[:, 1] / M[:, 0]
    var = np.maximum(M[:, 2] / M[:, 0] - mean * mean, 0.0)
    return mean + centre, np.sqrt(var)


class _Even:
    """An even grid with its trapezoid weights and centred points."""

    def __init__(self, grid):
        self.grid, self.h = grid, float(grid[1] - grid[0])
        self.centre = 0.5 * (grid[0] + grid[-1])
        self.xc = grid - self.centre
        self.wts = np.full(grid.size, self.h)
        self.wts[[0, -1]] *= 0.5
        # (G, 3) in column order: its transpose, read by :func:`_row_moments`, is contiguous
        self.moment_weights = np.asfortranarray(np.column_stack(
            [self.wts, self.wts * self.xc, self.wts * self.xc * self.xc]))
