"""A forward file whose classical-calibration set is two rays: the numpy-only evaluator's
Prediction carries the other ray (``other_lower``, ``other_upper``) exactly as
``Fit.predict`` does, and both equal the real roots of Fieller's quadratic computed here.

Outside reference: Fieller's inequality ``(y0 - b0 - b1 x)^2 <= t^2 (s^2 + g' C g)``,
``g = (1, x)`` (Fieller 1954, JRSS B 16:175; Brown 1982, JRSS B 44:287; both from memory),
its roots by numpy.roots and the t quantile by scipy.stats.t. Calibration data are a seeded
simulation (invented), as the rules allow.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from refit.coefficients import fit_record, load, write_record
from refit.models.fitting import fit

PROV = {"dataset": {"name": "t", "version": 1, "sha256": "0" * 64}, "subset": {},
        "recipe": None, "recipe_sha256": None}
VALUES = [50.0, 57.0, 40.0, 66.0, np.nan]


@pytest.fixture(scope="module")
def weak(tmp_path_factory):
    """A forward line of depth to Bk on MAT whose slope is far from significant (t ~ 0.5),
    and its coefficient file."""
    rng = np.random.default_rng(4)
    x = np.linspace(5, 20, 30)
    t = pd.DataFrame({"mat_c": x, "bk_depth_cm": 50 + 0.3 * x + rng.normal(0, 5, 30)})
    f = fit(t, "mat_c", ["bk_depth_cm"], direction="forward")
    rec = fit_record(f, function_id="mat_from_bk_depth_cm", cv=None, level=0.95,
                     interval_method="analytic", provenance=PROV)
    path = write_record(rec, tmp_path_factory.mktemp("rays") / "mat.json")
    return f, load(path)


def test_file_prediction_carries_the_other_ray_as_fit_predict(weak):
    f, eq = weak
    mine = f.predict(VALUES)
    got = eq.predict(VALUES)
    assert got.two_rays and "two-rays" in got.flags[2] and "two-rays" in got.flags[3]
    for col in ("estimate", "lower", "upper", "other_lower", "other_upper"):
        assert np.array_equal(getattr(got, col), mine[col].to_numpy(float), equal_nan=True), col
    assert list(got.flags) == list(mine["flags"])
    frame = got.to_frame()
    assert list(frame.columns) == list(mine.columns)
    # rows whose set is not two rays keep NaN there
    assert np.isnan(got.other_lower[[0, 1, 4]]).all()


def test_rays_are_the_roots_of_fiellers_quadratic(weak):
    f, eq = weak
    b0, b1 = f.result.coefficients
    C = f.result.covariance
    s2 = f.result.residual_std_error ** 2
    t2 = stats.t.ppf(0.975, f.result.df_resid) ** 2
    got = eq.predict(VALUES)
    for i in (2, 3):                       # y0 = 40 and 66: far from the data's 51-54
        y0 = VALUES[i]
        # (y0 - b0 - b1 x)^2 - t^2 (s^2 + C00 + 2 C01 x + C11 x^2) = 0
        a = b1 * b1 - t2 * C[1, 1]
        b = -2 * b1 * (y0 - b0) - 2 * t2 * C[0, 1]
        c = (y0 - b0) ** 2 - t2 * (s2 + C[0, 0])
        r1, r2 = np.sort(np.roots([a, b, c]).real)
        assert a < 0                        # slope not significant: the set does not close
        ends = sorted(e for e in (got.lower[i], got.upper[i], got.other_lower[i],
                                  got.other_upper[i]) if abs(e) < 40)   # bounds: MAT +-40
        assert ends == pytest.approx([r1, r2], rel=1e-9)


def test_inverse_file_and_prediction_without_rays(weak, tmp_path):
    # an inverse file never has two rays: the fields exist, all NaN, and to_frame keeps
    # its four columns
    rng = np.random.default_rng(2)
    x = rng.uniform(20, 120, 30)
    t = pd.DataFrame({"bk_depth_cm": x, "map_mm": 100 + 8 * x + rng.normal(0, 50, 30)})
    f = fit(t, "map_mm", ["bk_depth_cm"])
    rec = fit_record(f, function_id="map_from_bk_depth_cm", cv=None, level=0.95,
                     interval_method="analytic", provenance=PROV)
    got = load(write_record(rec, tmp_path / "inv.json")).predict([50.0, 80.0])
    assert not got.two_rays and np.isnan(got.other_lower).all()
    assert list(got.to_frame().columns) == ["estimate", "lower", "upper", "flags"]
    assert np.allclose(got.estimate, f.predict([50.0, 80.0])["estimate"], rtol=1e-12)
