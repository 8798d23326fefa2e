"""An estimate and its interval printed at one shared resolution (refit._util.numbers).

Checked against Python's own fixed-point formatting (``format(x, ".Nf")``, the language
reference's format-specification mini-language) with N from the largest value's decimal
exponent; the cases are the readings refit prints (MAP in mm near a bound of 0, MAT in
°C, an unbounded end, a missing one).
"""

from __future__ import annotations

import math

import pytest

from refit._util.numbers import reading_texts


@pytest.mark.parametrize("values, want", [
    ((285.056, 0.000569267, 570.229), ["285.1", "0.0", "570.2"]),   # an end at the bound 0
    ((1355.2, 859.5, 1979.1), ["1355", "860", "1979"]),
    ((12.094, 10.51, 13.77), ["12.09", "10.51", "13.77"]),
    ((12.094, None, math.inf), ["12.09", "-", "inf"]),
    ((-0.00001, 5.5, 9.99), ["0.000", "5.500", "9.990"]),               # no "-0.000"
    ((12345.6, 10000.2, 15000.0), ["12346", "10000", "15000"]),         # no 1.235e+04
    ((math.nan, math.nan, math.nan), ["-", "-", "-"]),
    ((0.0, 0.0, 0.0), ["0", "0", "0"]),
    ((650.0, 400.0, 900.0), ["650", "400", "900"]),                    # whole numbers all
    ((650.0, 400.4, 900.0), ["650.0", "400.4", "900.0"]),               # ... or none
])
def test_readings_share_the_resolution_of_their_largest_number(values, want):
    assert reading_texts(*values) == want


def test_the_resolution_is_four_significant_digits_of_the_largest():
    for top in (0.01234, 0.9, 9.99, 123.4, 999.9, 1234.5, 5e6 + 0.5):
        decimals = max(0, 3 - math.floor(math.log10(top)))
        assert reading_texts(top, top / 3) == [format(top, f".{decimals}f"),
                                              format(top / 3, f".{decimals}f")]
