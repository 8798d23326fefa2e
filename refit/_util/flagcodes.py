"""Per-row flag texts from boolean masks, through one bit code per row: numpy only.

Many rows share few distinct flag combinations, so each row gets an integer code (bit i
set when mask i is), the text is built once per code present (found with ``bincount``,
no sort) and looked up per row. Shared by the coefficient-file evaluator, the forward
inversion and ``Fit.predict``.
"""

from __future__ import annotations

import numpy as np

#: flag names shared by the prediction paths (the inversion's own flags live in
#: :mod:`refit.models.inversion.band`)
FLAG_MISSING = "missing-value"
FLAG_INVALID = "invalid-value"
FLAG_APPROX = "approximate-interval"
FLAG_CROSS = "quantiles-cross"
#: a classical-calibration limit cut at a physical bound of the climate variable (MAP >= 0):
#: the limit reported is the bound itself, the limit before the cut is kept beside it
#: (``lower_untruncated`` / ``upper_untruncated``). Not the search window's edge
#: (``open-below`` / ``open-above``, :mod:`refit.models.inversion.band`): there the band
#: did not close; here it closes (or runs on) past a value the climate cannot take.
FLAG_TRUNCATED = "truncated-at-bound"
#: the columns holding a truncated limit before the cut (NaN where nothing was cut)
UNTRUNCATED_COLUMNS = ("lower_untruncated", "upper_untruncated")


def bit_codes(masks, m: int) -> np.ndarray:
    """One int64 code per row: bit ``i`` set where ``masks[i]`` is true."""
    codes = np.zeros(m, dtype=np.int64)
    for i, mask in enumerate(masks):
        codes |= np.asarray(mask, dtype=bool).astype(np.int64) << i
    return codes


def present_codes(codes: np.ndarray) -> np.ndarray:
    """The distinct codes, ascending."""
    return np.flatnonzero(np.bincount(codes, minlength=1))


def text_by_code(codes: np.ndarray, render) -> np.ndarray:
    """Object array of ``render(code)`` per row, ``render`` called once per distinct code."""
    table = np.full(int(codes.max(initial=0)) + 1, "", dtype=object)
    for c in present_codes(codes):
        table[c] = render(int(c))
    return table[codes]


def joined_names(names, code: int) -> str:
    """';'-joined ``names[i]`` for the bits ``i`` set in ``code``."""
    return ";".join(nm for i, nm in enumerate(names) if code >> i & 1)
