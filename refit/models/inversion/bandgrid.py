"""Nearest grid node outside a prediction band, for many rows at once without a
(grid x rows) matrix: numpy only.

Used by :func:`refit.models.inversion.classical.invert_polynomial` when every row shares one
new-observation variance. At grid node ``g`` the band for a new observation is
``|y0 - f_g| <= r_g``; a row lies outside it there when ``fl(y0 - f_g) > r_g`` or
``fl(y0 - f_g) < -r_g`` (``fl``: the rounded float difference, as numpy computes it). Both
tests are monotone in ``y0`` (rounding is monotone), so each node has two exact float
thresholds: outside above iff ``y0 >= A_g``, outside below iff ``y0 < C_g``. They are found
by bisection over the ordered bit patterns of float64 (:func:`node_thresholds`), so the
thresholds reproduce the element-wise comparison bit for bit.

The nearest node on each side of a row's start that is outside the band is then a "first
index at or after p where A_g <= y0 (or C_g > y0)" query, answered by binary lifting over
sparse tables of range minima / maxima (:func:`first_outside`): O(log G) vectorised steps
per row instead of G comparisons (Bender & Farach-Colton 2000, LATIN, sparse tables;
from memory).
"""

from __future__ import annotations

import numpy as np

_SIGN = np.int64(0x7FFFFFFFFFFFFFFF)


def _key(x: np.ndarray) -> np.ndarray:
    """Order-preserving map of finite or infinite float64 to int64."""
    i = np.asarray(x, dtype=np.float64).view(np.int64)
    return i ^ ((i >> 63) & _SIGN)


def _unkey(k: np.ndarray) -> np.ndarray:
    return (k ^ ((k >> 63) & _SIGN)).view(np.float64)


def _smallest_true(pred, n: int) -> np.ndarray:
    """Smallest float ``y`` (per element) with ``pred(y)`` true, ``pred`` monotone
    (false then true) over [-inf, +inf]; +inf when false everywhere below +inf."""
    lo = np.full(n, _key(np.array([-np.inf]))[0])
    hi = np.full(n, _key(np.array([np.inf]))[0])
    for _ in range(66):  # the key range spans < 2^64: bisection ends within 64 steps
        busy = hi > lo + 1  # (hi - lo itself can overflow int64)
        if not busy.any():
            break
        mid = (lo >> 1) + (hi >> 1) + (lo & hi & 1)
        ok = pred(_unkey(mid))
        hi = np.where(busy & ok, mid, hi)
        lo = np.where(busy & ~ok, mid, lo)
    first = np.where(pred(_unkey(lo)), lo, hi)
    return _unkey(first)


def node_thresholds(fg: np.ndarray, r: np.ndarray):
    """Exact thresholds ``(A, C)`` of the band nodes (see the module notes).

    Parameters
    ----------
    fg, r : ndarray, shape (G,)
        Curve value and band half-width at each node, finite.

    Returns
    -------
    A, C : ndarray, shape (G,)
        ``fl(y - fg) > r`` iff ``y >= A``; ``fl(y - fg) < -r`` iff ``y < C`` (finite y).
    """
    fg, r = np.asarray(fg, float), np.asarray(r, float)
    with np.errstate(invalid="ignore", over="ignore"):
        a = _smallest_true(lambda y: (y - fg) > r, len(fg))
        c = _smallest_true(lambda y: (y - fg) >= -r, len(fg))
    return a, c


def _sparse(values: np.ndarray, reduce, pad: float, levels: int) -> list[np.ndarray]:
    """Tables ``t[k][g] = reduce(values[g : g + 2^k])`` for ``k < levels``, padded with
    ``pad`` (a value that reads as "inside") far enough that every lookup of
    :func:`_first_at_or_after` stays in range."""
    length = len(values) + (2 << levels)
    cur = np.full(length, pad)
    cur[:len(values)] = values
    out = [cur]
    for k in range(1, levels):
        span = 1 << (k - 1)
        nxt = np.full(length, pad)
        nxt[:length - span] = reduce(cur[:length - span], cur[span:])
        out.append(nxt)
        cur = nxt
    return out


def _first_at_or_after(t_a, t_c, start: np.ndarray, y: np.ndarray, size: int) -> np.ndarray:
    """First index ``g >= start`` whose node is outside (``size`` when none): skip the
    largest run of nodes that are all inside (min A > y and max C <= y over the run),
    by powers of two from the largest; the padding beyond ``size`` reads as inside."""
    pos = np.minimum(start, size).astype(np.intp)
    for k in range(len(t_a) - 1, -1, -1):
        inside = (t_a[k][pos] > y) & (t_c[k][pos] <= y)
        pos += inside * (1 << k)
    return np.minimum(pos, size)


class BandNodes:
    """Threshold tables of one grid, queried for the nearest outside node per row."""

    def __init__(self, fg: np.ndarray, r: np.ndarray):
        a, c = node_thresholds(fg, r)
        self.size = len(fg)
        levels = max(1, int(self.size).bit_length())  # 2^(levels-1) <= size < 2^levels

        def tables(a_, c_):
            return (_sparse(a_, np.minimum, np.inf, levels),
                    _sparse(c_, np.maximum, -np.inf, levels))

        self._fwd, self._rev = tables(a, c), tables(a[::-1], c[::-1])

    def first_outside(self, above: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Smallest node index ``>= above`` outside the band for ``y``; ``G`` when none."""
        return _first_at_or_after(*self._fwd, above, y, self.size)

    def last_outside(self, below: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Largest node index ``<= below`` outside the band for ``y``; -1 when none."""
        g = self.size
        start = np.where(below < 0, g, g - 1 - below)
        return g - 1 - _first_at_or_after(*self._rev, start, y, g)
