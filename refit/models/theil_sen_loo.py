"""Exact leave-one-out Theil-Sen lines from one sorted set of pairwise slopes.

The Theil-Sen slope of n points is the median of the N = n(n-1)/2 pairwise slopes (pairs
with equal x skipped; Theil 1950, Sen 1968). Leaving point k out removes exactly the
n - 1 slopes of the pairs that hold k, so every leave-one-out slope is an order
statistic of the *same* sorted set with a known list of positions taken out: sort the
slopes once (N log N), then for each k find the median of what is left by counting the
removed positions below it (a search in k's n - 1 sorted positions). n leave-one-out
lines cost O(n^2 log n) in all instead of n refits of O(n^2 log n) each.

The slopes are formed as ``scipy.stats.theilslopes`` forms them ((y_a - y_b) / (x_a -
x_b) with x_a > x_b) and the median of an even count is the mean of the two middle
values as ``numpy.median`` computes it, so every leave-one-out slope equals a refit with
``scipy.stats.theilslopes`` bit for bit (tested). Numpy only.

References
----------
Theil, H. (1950). A rank-invariant method of linear and polynomial regression analysis.
Proc. Kon. Ned. Akad. Wetensch. A 53.
Sen, P. K. (1968). Estimates of the regression coefficient based on Kendall's tau. JASA
63:1379-1389.
"""

from __future__ import annotations

import numpy as np


def _pair_index(n: int) -> np.ndarray:
    """(n, n-1) index, into the pairs of ``numpy.triu_indices(n, 1)``, of the pairs that
    hold each point (row k: its pairs with every other point, in order)."""
    k = np.arange(n)[:, None]
    other = np.arange(n - 1)[None, :]
    other = other + (other >= k)                 # every l != k
    i, j = np.minimum(k, other), np.maximum(k, other)
    return i * (2 * n - i - 1) // 2 + (j - i - 1)


def _kth_left(removed_sorted: np.ndarray, n_removed: np.ndarray, t: np.ndarray):
    """Sorted position of the t-th (0-based) slope left after taking out each row's
    ``removed_sorted`` positions (the first ``n_removed`` of the row are real)."""
    cols = np.arange(removed_sorted.shape[1])[None, :]
    q = removed_sorted - cols                     # non-decreasing along each row
    q = np.where(cols < n_removed[:, None], q, np.iinfo(np.int64).max)
    return t + (q <= t[:, None]).sum(axis=1)


def loo_slopes(x, y) -> np.ndarray:
    """The n leave-one-out Theil-Sen slopes (NaN where no pair with distinct x is left).

    Parameters
    ----------
    x, y : ndarray, shape (n,)
        The line's x and y [their units].

    Returns
    -------
    ndarray, shape (n,)
        Slope of the line without point k [y per x], for each k.
    """
    x, y = np.asarray(x, float), np.asarray(y, float)
    n = len(x)
    i, j = np.triu_indices(n, 1)
    a = np.where(x[j] > x[i], j, i)               # the point with the larger x
    b = np.where(x[j] > x[i], i, j)
    keep = x[a] != x[b]
    slopes = (y[a[keep]] - y[b[keep]]) / (x[a[keep]] - x[b[keep]])
    order = np.argsort(slopes, kind="stable")
    sorted_slopes = slopes[order]
    n_valid = len(slopes)
    rank = np.full(len(i), n_valid, dtype=np.int64)   # pairs with equal x: past the end
    rank[np.flatnonzero(keep)[order]] = np.arange(n_valid)
    removed = np.sort(rank[_pair_index(n)], axis=1)
    n_removed = (removed < n_valid).sum(axis=1)
    left = n_valid - n_removed
    out = np.full(n, np.nan)
    has = left > 0
    t_hi = left // 2                               # 0-based middle (upper middle if even)
    t_lo = np.where(left % 2 == 1, t_hi, t_hi - 1)
    p_hi = _kth_left(removed, n_removed, t_hi)
    p_lo = _kth_left(removed, n_removed, t_lo)
    s_lo = sorted_slopes[np.minimum(p_lo, n_valid - 1)]
    s_hi = sorted_slopes[np.minimum(p_hi, n_valid - 1)]
    even = left % 2 == 0
    out[has] = np.where(even, (s_lo + s_hi) / 2, s_hi)[has]
    return out


def loo_lines(x, y, intercept: str = "joint") -> np.ndarray:
    """(n, 2) leave-one-out Theil-Sen lines ``[a, b]``, the intercept by refit's rule
    (:func:`refit.models.robust.fit_theil_sen`): ``joint`` a = median(y - b x),
    ``separate`` a = median(y) - b median(x), over the kept points."""
    x, y = np.asarray(x, float), np.asarray(y, float)
    n = len(x)
    b = loo_slopes(x, y)
    others = np.arange(n - 1)[None, :]
    others = others + (others >= np.arange(n)[:, None])
    xs, ys = x[others], y[others]
    if intercept == "joint":
        a = np.median(ys - b[:, None] * xs, axis=1)
    else:
        a = np.median(ys, axis=1) - b * np.median(xs, axis=1)
    return np.column_stack([a, b])
