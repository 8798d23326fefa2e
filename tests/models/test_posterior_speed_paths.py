"""The posterior's fast paths against their plain definitions.

Each shortcut taken for speed in :mod:`refit.models.posterior_terms` and
:mod:`refit.models.posterior_grid` is checked against the general-purpose way numpy
itself defines the quantity (``numpy.add.reduceat``, ``numpy.cumsum`` and a per-row loop,
``numpy.einsum``/matmul), on seeded random rows; the highest-density pieces' sequence view
against the list it replaces.
"""

from __future__ import annotations

import numpy as np
import pytest

from refit.models.posterior_grid import GridRows, chunk_starts, raw_peak_counts
from refit.models.posterior_inputs import HdiPieces
from refit.models.posterior_terms import _row_moments, chunk_sums


def _rows(n=300, G=2000, seed=11):
    """Random unimodal-ish and rough densities (each row's maximum about 1)."""
    rng = np.random.default_rng(seed)
    x = np.linspace(0.0, 1.0, G)
    mu, sd = rng.uniform(0.1, 0.9, n), rng.uniform(0.002, 0.3, n)
    p = np.exp(-0.5 * ((x[None, :] - mu[:, None]) / sd[:, None]) ** 2)
    p[: n // 4] += rng.uniform(0, 0.5, (n // 4, G))          # rough rows, many peaks
    return np.maximum(p, 1e-300)


@pytest.mark.parametrize("G", [16, 17, 2000, 2001, 4096])
def test_chunk_sums_equal_numpy_reduceat(G):
    p = _rows(n=40, G=G)
    starts = chunk_starts(G)
    want = np.add.reduceat(p, starts, axis=1)                 # numpy's own definition
    got = chunk_sums(p, starts, np.empty_like(want))
    assert np.allclose(got, want, rtol=1e-13, atol=0)


def test_row_moments_equal_matmul():
    p = _rows(n=50)
    W = np.asfortranarray(np.random.default_rng(3).normal(size=(p.shape[1], 3)))
    assert np.allclose(_row_moments(p, W), p @ W, rtol=1e-12, atol=1e-12)
    assert np.allclose(_row_moments(p, np.ascontiguousarray(W)), p @ W, rtol=1e-12, atol=1e-12)


def test_peak_counts_equal_a_plain_loop():
    p = _rows(n=80, G=300)
    p[0] = np.linspace(1.0, 0.0, 300)              # falling from the left edge: 1
    p[1] = np.linspace(0.0, 1.0, 300)              # rising to the right edge: 1
    p[2] = 1.0                                     # flat: none
    want = []
    for row in p:                                  # the definition, point by point
        G = row.size
        k = sum(1 for i in range(1, G - 1) if row[i - 1] < row[i] >= row[i + 1])
        want.append(k + (row[0] > row[1]) + (row[-1] > row[-2]))
    assert raw_peak_counts(p).tolist() == want


def test_quantile_near_equals_quantile_index():
    """From a known point of the distribution function, the next quantile is the same
    whether solved in that cell or located afresh (targets in the same cell, the next
    cells and far away)."""
    p = _rows(n=400)
    h = 1.0 / (p.shape[1] - 1)
    rows = GridRows(np.ascontiguousarray(p), h, chunk_starts(p.shape[1]))
    rng = np.random.default_rng(5)
    sel = np.arange(p.shape[0])
    Z = rows.total
    u0 = rng.uniform(0.01, 0.99, sel.size)
    i0, t0 = rows.quantile_index(u0 * Z, sel)
    for step in (1e-12, 1e-6, 1e-3, 0.05, 0.3):
        u1 = np.clip(u0 + rng.choice([-1, 1], sel.size) * step, 0.0, 1.0)
        want_i, want_t = rows.quantile_index(u1 * Z, sel)
        got_i, got_t = rows.quantile_near(u1 * Z, i0, t0, u0 * Z, sel)
        assert np.allclose(got_i + got_t, want_i + want_t, rtol=0, atol=1e-9), step


def test_hdi_pieces_read_as_the_list_of_rows():
    lower = np.array([1.0, np.nan, 3.0, 5.0])
    upper = np.array([2.0, np.nan, 4.0, 9.0])
    pieces = HdiPieces(lower, upper, {3: [(5.0, 6.0), (8.0, 9.0)]})
    want = [[(1.0, 2.0)], [], [(3.0, 4.0)], [(5.0, 6.0), (8.0, 9.0)]]
    assert list(pieces) == want and len(pieces) == 4
    assert pieces[-1] == want[-1] and pieces[1:3] == want[1:3]
    assert pieces.counts().tolist() == [1, 0, 1, 2]
    with pytest.raises(IndexError):
        pieces[4]
