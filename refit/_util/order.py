"""Order statistics of the conformal intervals, shared by the fitting engine
(:mod:`refit.models.intervals.conformal`) and the numpy-only coefficient-file evaluator
(:mod:`refit.coefficients.evaluate`), so both pick the same ranks.

The finite-sample ranks are those of Barber, Candès, Ramdas & Tibshirani (2021),
"Predictive inference with the jackknife+", *Annals of Statistics* 49:486-507: the lower
limit is the floor(alpha (n + 1))-th smallest, the upper the ceil((1 - alpha)(n + 1))-th.
numpy only: importing this module must stay cheap.
"""

from __future__ import annotations

import math

import numpy as np


def rank_lower(alpha: float, n: int) -> int:
    """floor(alpha (n + 1)): 1-based rank of the lower quantile (0 means -inf)."""
    return int(math.floor(alpha * (n + 1) + 1e-9))


def rank_upper(alpha: float, n: int) -> int:
    """ceil((1 - alpha)(n + 1)): 1-based rank of the upper quantile (> n means +inf)."""
    return int(math.ceil((1.0 - alpha) * (n + 1) - 1e-9))


def kth_smallest(values: np.ndarray, k: int, axis: int = -1) -> np.ndarray:
    """k-th smallest (1-based) along ``axis``; -inf for k < 1, +inf for k > size."""
    size = values.shape[axis]
    shape = np.delete(np.array(values.shape), axis % values.ndim)
    if k < 1:
        return np.full(shape, -np.inf)
    if k > size:
        return np.full(shape, np.inf)
    return np.take(np.partition(values, k - 1, axis=axis), k - 1, axis=axis)


def kth_in_place(values: np.ndarray, k: int) -> np.ndarray:
    """As :func:`kth_smallest` along the last axis of a scratch array, partitioned in
    place (no copy of the input)."""
    size = values.shape[-1]
    if k < 1:
        return np.full(values.shape[:-1], -np.inf)
    if k > size:
        return np.full(values.shape[:-1], np.inf)
    values.partition(k - 1, axis=-1)
    return values[..., k - 1].copy()


#: Ranks this close to either end are taken by repeated arg-extremes instead of a
#: partition: each pass is one vectorised sweep, cheaper than numpy's row-by-row
#: introselect for up to about three passes.
EDGE_PASSES = 3


def kth_in_place_finite(values: np.ndarray, k: int) -> np.ndarray:
    """As :func:`kth_in_place` for a 2-D C-ordered scratch array of finite values
    (overwritten). A rank within :data:`EDGE_PASSES` of either end is found by taking out
    the current extreme of every row that many times (one copy per pass, so ties count
    as in a sort); other ranks by partition."""
    rows, size = values.shape
    if k < 1 or k > size or min(k, size - k + 1) > EDGE_PASSES:
        return kth_in_place(values, k)
    largest = size - k + 1 < k
    passes = size - k + 1 if largest else k
    pick, fill = (np.argmax, -np.inf) if largest else (np.argmin, np.inf)
    at = np.arange(rows)
    for _ in range(passes - 1):
        values[at, pick(values, axis=1)] = fill
    return values[at, pick(values, axis=1)]
