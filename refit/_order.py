"""Order statistics of the conformal intervals, shared by the fitting engine
(:mod:`refit._conformal`) and the numpy-only coefficient-file evaluator
(:mod:`refit._evaluate`), so both pick the same ranks.

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
