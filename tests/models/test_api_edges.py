"""API edges of refit.fit and Fit.predict: refit's own errors, never silent damage.

Reference: scipy.stats.linregress (computed in the test) on the unscaled predictor; least
squares is equivariant under scaling a predictor, so the slope of x * s is the slope of x
divided by s and the intercept, R^2 and the slope's t value do not change.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

import refit
from refit.errors import InvalidDataError

X = np.arange(1.0, 13.0)
Y = 3.0 * X + np.random.default_rng(20261209).normal(0, 1.5, X.size)  # seeded simulation


@pytest.mark.parametrize("scale", [1e154, 1e-300, 1e-160, 1e150])
def test_a_predictor_far_from_one_is_not_called_constant(scale):
    ref = stats.linregress(X, Y)
    fit = refit.fit({"x": X * scale, "y": Y}, "y", ["x"])
    b0, b1 = fit.coefficients.to_numpy()
    assert b0 == pytest.approx(ref.intercept, rel=1e-10)
    assert b1 * scale == pytest.approx(ref.slope, rel=1e-10)
    assert fit.r_squared == pytest.approx(ref.rvalue ** 2, rel=1e-10)


@pytest.mark.parametrize("value", [1e-300, 1e154, 7.0])
def test_a_truly_constant_predictor_is_still_refused(value):
    with pytest.raises(InvalidDataError, match="constant"):
        refit.fit({"x": np.full(X.size, value), "y": Y}, "y", ["x"])


@pytest.mark.parametrize("values", [[1 + 2j], np.array([1 + 2j, 3.0]), {"x": [2 + 0j]},
                                    pd.DataFrame({"x": [1 + 1j]})],
                         ids=["list", "array", "dict", "frame"])
def test_fit_predict_refuses_complex_values(values):
    fit = refit.fit({"x": X, "y": Y}, "y", ["x"])
    with pytest.raises(InvalidDataError, match="complex"):
        fit.predict(values)
    # a real value still predicts: intercept + slope * 3 (linregress, above)
    ref = stats.linregress(X, Y)
    est = np.asarray(fit.predict([3.0]).estimate, dtype=float)
    assert est[0] == pytest.approx(ref.intercept + 3.0 * ref.slope, rel=1e-10)
