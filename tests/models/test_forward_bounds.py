"""A forward line whose estimate lies outside the physical bounds of the climate.

A weak slope's Fieller set can be two rays; when the ray holding the estimate lies wholly
below 0 mm of rain, reporting it cut at the bound gave a lower limit above the upper one
(0 mm .. -497 mm). The rule (``refit.models.inversion.classical.bound_line_set``): the
estimate is not a value the climate can take (NaN, ``beyond-search-window``); the limits
are the part of the confidence set inside the bounds: the estimate's own part cut there,
else the other ray cut there, else NaN; never lower > upper.

Outside references: the exact set ``{x : (y0 - b0 - b1 x)^2 <= t^2 (s^2 + V00 + 2 x V01
+ x^2 V11)}`` (Fieller, E. C. 1954, Some problems in interval estimation, JRSS B 16:175-185;
Draper & Smith, Applied Regression Analysis, 3rd ed., section 3.2 — both from memory),
solved here as a quadratic inequality with numpy.roots on statsmodels' OLS fit and its
covariance, t from scipy.stats.t. The file consumer must give the same numbers bit for bit.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from _harness import fieller_set

from refit.coefficients import fit_record, load, write_record
from refit.models.fitting import fit

PROV = {"dataset": {"kind": "store", "name": "test", "version": 1, "sha256": "0" * 64},
        "subset": {"filters": []}, "recipe": None, "recipe_sha256": None}
COLUMNS = ("estimate", "lower", "upper", "other_lower", "other_upper",
           "lower_untruncated", "upper_untruncated")


def _data(slope=-0.01, sd=3.0, seed=3):
    """Five soils, Bk depth [cm] on MAP [mm] (seeded simulation, test data only)."""
    rng = np.random.default_rng(seed)
    x = np.array([100.0, 200.0, 300.0, 400.0, 500.0])
    return x, 40 + slope * x + rng.normal(0, sd, 5)


def _exact(x, y, y0, level=0.95):
    """(A, roots sorted, estimate, statsmodels results) of the Fieller set."""
    coef, roots, est, res = fieller_set(x, y, y0, level)
    assert np.all(np.abs(np.roots(coef).imag) == 0)
    return coef[0], roots, est, res


def _fit(x, y, bounds=None):
    f = fit(pd.DataFrame({"map_mm": x, "bk_depth_cm": y}), response="map_mm",
            predictors="bk_depth_cm", direction="forward")
    if bounds is not None:
        f.extras["bounds"] = bounds
    return f


def _same_as_file(f, values, tmp_path):
    """Fit.predict and the coefficient file's evaluator, compared bit for bit."""
    p = f.predict(values)
    rec = fit_record(f, function_id="map_from_bk", provenance=PROV, cv=None,
                     interval_method="analytic", level=0.95)
    q = load(write_record(rec, tmp_path / "f.json")).predict(np.asarray(values, float))
    # Fit.predict leaves out the ray and before-the-cut columns when every row is NaN
    p = p.assign(**{k: np.nan for k in COLUMNS if k not in p.columns})
    for k in COLUMNS:
        got = getattr(q, k)
        got = np.full(len(p), np.nan) if got is None else got
        np.testing.assert_array_equal(got, p[k].to_numpy(float), err_msg=k)
    assert list(q.flags) == list(p["flags"].astype(str))
    return p


def test_estimate_ray_wholly_below_zero_rain_reports_the_other_ray(tmp_path):
    x, y = _data()
    a, (r1, r2), est, res = _exact(x, y, 100.0)
    # weak slope (statsmodels p = 0.36): A < 0, two rays; the estimate (about -3051 mm)
    # lies on x <= r1 (about -497 mm), wholly below 0 mm; the other ray x >= r2 (about
    # 1976 mm) reaches into 0..12000 mm (the map_mm schema range)
    assert res.pvalues[1] > 0.05 and a < 0
    assert est <= r1 < 0 < r2 < 12000
    p = _same_as_file(_fit(x, y), [100.0], tmp_path)
    assert np.isnan(p.estimate[0])
    assert p.lower[0] == pytest.approx(r2, rel=1e-10) and p.upper[0] == 12000.0
    assert p.lower[0] <= p.upper[0]
    assert p["upper_untruncated"][0] == np.inf and np.isnan(p["lower_untruncated"][0])
    assert np.isnan(p.other_lower[0]) and np.isnan(p.other_upper[0])
    assert p["flags"][0] == ("outside-calibration-range;unbounded;two-rays;"
                             "beyond-search-window;truncated-at-bound")


def test_estimate_ray_partly_inside_keeps_both_parts(tmp_path):
    # y0 = 60 cm: estimate about -946 mm on x <= r1 (about 156 mm): that ray cut at 0 mm
    # is the interval, the other ray (x >= 771 mm) cut at 12000 mm stays beside it
    x, y = _data()
    _, (r1, r2), est, _ = _exact(x, y, 60.0)
    assert est < 0 < r1 < r2 < 12000
    p = _same_as_file(_fit(x, y), [60.0], tmp_path)
    assert np.isnan(p.estimate[0])
    assert p.lower[0] == 0.0 and p.upper[0] == pytest.approx(r1, rel=1e-10)
    assert p["lower_untruncated"][0] == -np.inf
    assert p.other_lower[0] == pytest.approx(r2, rel=1e-10) and p.other_upper[0] == 12000.0


def test_no_part_of_the_set_inside_the_bounds_gives_nan_limits(tmp_path):
    # declared bounds 0..1500 mm: the other ray (x >= 1976 mm) lies beyond them too
    x, y = _data()
    _, (r1, r2), _, _ = _exact(x, y, 100.0)
    assert r1 < 0 and r2 > 1500
    p = _same_as_file(_fit(x, y, bounds=(0.0, 1500.0)), [100.0, 60.0], tmp_path)
    for k in COLUMNS:
        assert np.isnan(p[k][0]), k
    assert p["flags"][0] == "outside-calibration-range;unbounded;two-rays;beyond-search-window"
    # row 1 (60 cm): the estimate's ray 0..156 mm is inside; the other ray 771..1500 mm
    assert p.upper[1] <= 1500 and p.other_upper[1] == 1500.0


def test_finite_interval_wholly_below_zero_rain_gives_nan_limits(tmp_path):
    # a significant slope (A > 0): the set is one interval; for a reading far beyond the
    # data it lies wholly below 0 mm: no limits (before: 0 mm .. a negative upper limit)
    x, y = _data(slope=0.1, sd=1.0)
    a, (lo, hi), est, _ = _exact(x, y, 15.0)
    assert a > 0 and lo < est < hi < 0
    p = _same_as_file(_fit(x, y), [15.0, 50.0], tmp_path)
    assert np.isnan(p.estimate[0]) and np.isnan(p.lower[0]) and np.isnan(p.upper[0])
    assert "truncated-at-bound" not in p["flags"][0].split(";")
    assert "beyond-search-window" in p["flags"][0].split(";")
    _, (lo1, hi1), est1, _ = _exact(x, y, 50.0)  # an ordinary row is unchanged
    assert (p.estimate[1], p.lower[1], p.upper[1]) == pytest.approx((est1, lo1, hi1),
                                                                     rel=1e-10)


@pytest.mark.parametrize("seed", range(6))
def test_lower_never_exceeds_upper(seed, tmp_path):
    # readings across and far beyond the data, weak and strong slopes
    x, y = _data(slope=(-0.01, 0.003, 0.1)[seed % 3], seed=seed)
    values = np.linspace(-80.0, 160.0, 61)
    p = _same_as_file(_fit(x, y), values, tmp_path)
    lo, hi = p.lower.to_numpy(float), p.upper.to_numpy(float)
    both = ~np.isnan(lo) & ~np.isnan(hi)
    assert both.any() and (lo[both] <= hi[both]).all()
    assert (lo[both] >= 0).all() and (hi[both] <= 12000).all()
