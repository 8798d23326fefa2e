"""Numbers for people: an estimate and its interval at one shared resolution.

Standard library only. Printing each number in four significant digits on its own shows
an interval end near zero with a precision the interval never had (``285.1 [0.0005693,
570.2]``); the three numbers of one reading share the resolution of the largest of them.
"""

from __future__ import annotations

import math

#: significant digits of the largest number of a reading
DIGITS = 4


def reading_texts(*values, missing: str = "-", infinity: str = "inf") -> list[str]:
    """Each value with the decimals that give the largest finite one :data:`DIGITS`
    significant digits (at least none, at most 12); ``missing`` for a missing value,
    ``infinity`` (with a minus sign below) for an unbounded end. A value that rounds to
    zero prints as "0" at that resolution (no "-0.0").

    >>> reading_texts(285.056, 0.000569, 570.229)
    ['285.1', '0.0', '570.2']
    >>> reading_texts(650.0, 400.0, 900.0)
    ['650', '400', '900']
    >>> reading_texts(12.094, None, float("inf"))
    ['12.09', '-', 'inf']
    """
    nums = [float(v) if isinstance(v, (int, float)) else math.nan for v in values]
    finite = [abs(v) for v in nums if math.isfinite(v)]
    top = max(finite, default=0.0)
    if top > 0:
        decimals = min(12, max(0, DIGITS - 1 - math.floor(math.log10(top))))
    else:
        decimals = 0
    if decimals and all(not math.isfinite(v) or float(f"{v:.{decimals}f}") == round(v)
                        for v in nums):
        decimals = 0          # whole numbers all: 650 [400, 900], not 650.0 [400.0, 900.0]
    out = []
    for v in nums:
        if math.isnan(v):
            out.append(missing)
        elif math.isinf(v):
            out.append(infinity if v > 0 else "-" + infinity)
        else:
            text = f"{v:.{decimals}f}"
            out.append(text[1:] if text.startswith("-") and float(text) == 0 else text)
    return out
