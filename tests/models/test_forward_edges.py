"""Forward direction at the edges: the range flag follows the measured feature, a flat line
is unbounded, and a weak slope's two-ray Fieller set keeps both rays.

Outside references: NIST StRD Norris and Pontius data (tests/data/nist, public domain);
statsmodels OLS for the fitted line and its covariance; scipy.stats.t for the quantile;
numpy.roots / numpy.polynomial for the exact solution of the band inequality (the
classical-calibration set: reference notes 2(a), Fieller 1954 / Eisenhart 1939, from
memory). The file consumer (``refit.coefficients.load(...).predict``) must agree with
``Fit.predict`` in every row.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from _harness import fieller_set
from numpy.polynomial import polynomial as P
from scipy import stats

from refit.coefficients import fit_record, load, write_record
from refit.coefficients.evaluate import predict_forward
from refit.models.fitting import fit

NIST = Path(__file__).resolve().parents[1] / "data" / "nist"
PROV = {"dataset": {"kind": "store", "name": "test", "version": 1, "sha256": "0" * 64},
        "subset": {"filters": []}, "recipe": None, "recipe_sha256": None}


def strd(name: str) -> pd.DataFrame:
    lines = (NIST / f"{name}.dat").read_text().splitlines()
    first, last = map(int, re.search(r"Data\s+\(lines (\d+) to (\d+)\)",
                                     "\n".join(lines[:10])).groups())
    rows = [[float(v) for v in ln.split()] for ln in lines[first - 1:last]]
    return pd.DataFrame(rows, columns=lines[first - 2].split()[1:])


def _file(f, tmp_path, name="f.json"):
    rec = fit_record(f, function_id="x_from_y", provenance=PROV, cv=None,
                     interval_method="analytic", level=0.95)
    return load(write_record(rec, tmp_path / name))


def _agree(p, q):
    for k in ("estimate", "lower", "upper"):
        np.testing.assert_allclose(getattr(q, k), p[k].to_numpy(float), rtol=1e-9,
                                   equal_nan=True, err_msg=k)
    assert list(q.flags) == list(p["flags"].astype(str))


# ----------------------------------------------------------------------------- item: flags
@pytest.mark.parametrize("form", ["linear", "quadratic"])
@pytest.mark.parametrize("direction", ["forward", "inverse"])
def test_range_flag_follows_the_feature_at_both_edges(form, direction, tmp_path):
    # NIST StRD Norris (x = reference ozone, y = instrument reading): the feature is y.
    # Its calibration range is [min y, max y]; the edges themselves are inside, one step
    # of the float grid beyond is outside, in both directions and in the file.
    d = strd("Norris")
    f = fit(d, response="x", predictors="y", form=form, direction=direction)
    lo, hi = d.y.min(), d.y.max()
    values = [lo, hi, np.nextafter(lo, -np.inf), np.nextafter(hi, np.inf), 0.5 * (lo + hi)]
    p = f.predict(values)
    outside = ["outside-calibration-range" in s for s in p["flags"]]
    assert outside == [False, False, True, True, False]
    _agree(p, _file(f, tmp_path).predict(values))


def test_forward_flag_no_longer_follows_the_estimate(tmp_path):
    # NIST StRD Pontius, quadratic forward fit (load from deflection): at the lowest and
    # highest deflection the classical estimates fall just outside the loads
    # 150,000-3,000,000 (the curve does not pass through the end points), yet the readings
    # are inside their range: no flag (the estimate-based rule flagged both)
    d = strd("Pontius")
    f = fit(d, response="x", predictors="y", form="quadratic", direction="forward")
    p = f.predict([d.y.min(), d.y.max()])
    assert p.estimate[0] < d.x.min() and p.estimate[1] > d.x.max()
    assert list(p["flags"]) == ["", ""]
    _agree(p, _file(f, tmp_path).predict([d.y.min(), d.y.max()]))


def test_quadratic_forward_file_far_beyond_the_range_is_flagged(tmp_path):
    # NIST StRD Pontius (deflection y vs load x), quadratic forward fit: a reading of 1e307
    # has no estimate and no interval, and is flagged outside the calibration range in
    # Fit.predict and in the coefficient file
    d = strd("Pontius")
    f = fit(d, response="x", predictors="y", form="quadratic", direction="forward")
    with np.errstate(all="ignore"):
        p = f.predict([1e307])
        q = _file(f, tmp_path).predict([1e307])
    assert p["flags"][0].startswith("outside-calibration-range")
    assert q.flags[0] == p["flags"][0]
    assert np.isnan(p.estimate[0]) and np.isnan(q.estimate[0])


def test_constant_feature_forward_fit_is_unbounded(tmp_path):
    # NIST StRD Norris reference values with a feature that does not respond (constant):
    # the fitted slope is 0, so no climate can be read off it: estimate NaN, limits the
    # whole line (cut at the schema bounds when the column has them), flag 'unbounded'
    d = strd("Norris")
    t = pd.DataFrame({"climate": d.x, "feature": np.full(len(d), 7.5)})
    f = fit(t, response="climate", predictors="feature", direction="forward")
    assert f.result.coefficients[1] == 0.0
    with np.errstate(all="ignore"):
        p = f.predict([7.5, 9.0])
        q = _file(f, tmp_path).predict([7.5, 9.0])
    assert np.isnan(p.estimate).all()
    assert (p.lower == -np.inf).all() and (p.upper == np.inf).all()
    assert all("unbounded" in s for s in p["flags"])
    assert "outside-calibration-range" in p["flags"][1]
    _agree(p, q)


# ----------------------------------------------------------------------------- two rays
def _weak_line():
    """Five soils, weak slope (seeded simulation): statsmodels' t test of the slope has
    p = 0.96, so the 95% Fieller set is the whole line near the readings (14-27) and two
    rays for a reading far beyond them."""
    rng = np.random.default_rng(3)
    x = np.array([100.0, 200.0, 300.0, 400.0, 500.0])
    y = 20 + 0.01 * x + rng.normal(0, 3, 5)
    return x, y


def _exact_rays(x, y, y0, level=0.95):
    """The exact Fieller set on statsmodels' fit (see ``_harness.fieller_set``)."""
    return fieller_set(x, y, y0, level)


def test_weak_slope_line_reports_the_ray_holding_the_estimate(tmp_path):
    x, y = _weak_line()
    y0 = 60.0  # far beyond the readings (about 14-27)
    coef, (r1, r2), est, res = _exact_rays(x, y, y0)
    assert res.pvalues[1] > 0.05 and coef[0] < 0  # not significant: A < 0, two rays
    inside = lambda v: np.polyval(coef, v) <= 0
    assert inside(r1 - 1) and inside(r2 + 1) and not inside(0.5 * (r1 + r2))
    f = fit(pd.DataFrame({"climate": x, "feature": y}), response="climate",
            predictors="feature", direction="forward")
    p = f.predict([y0, 22.0])
    # row 0: the estimate lies on one ray; that ray is reported with its finite end kept
    on_upper = est >= r2
    assert on_upper or est <= r1
    exp_lo, exp_hi = (r2, np.inf) if on_upper else (-np.inf, r1)
    assert p.estimate[0] == pytest.approx(est, rel=1e-10)
    assert (p.lower[0], p.upper[0]) == pytest.approx((exp_lo, exp_hi), rel=1e-10)
    other = (-np.inf, r1) if on_upper else (r2, np.inf)
    assert (p.other_lower[0], p.other_upper[0]) == pytest.approx(other, rel=1e-10)
    assert p["flags"][0] == "outside-calibration-range;unbounded;two-rays"
    # row 1: a reading near the middle gives the whole line (no real roots: B^2 < AC)
    assert (p.lower[1], p.upper[1]) == (-np.inf, np.inf)
    assert np.isnan(p.other_lower[1]) and p["flags"][1] == "unbounded"
    # the file gives the same rows, and its evaluator keeps the other ray too
    eq = _file(f, tmp_path)
    _agree(p, eq.predict([y0, 22.0]))
    *_, olo, ohi = predict_forward(eq.record, np.array([[y0], [22.0]]), 0.95,
                                   np.ones(2), with_rays=True)
    np.testing.assert_allclose([olo[0], ohi[0]], other, rtol=1e-10)


def test_weak_slope_rays_are_cut_at_zero_rain():
    # the same line with climate = map_mm (schema bounds 0..12000 mm): the infinite end of
    # each ray is cut at the bound and flagged truncated-at-bound (the limit before the
    # cut, -inf or +inf, kept beside it); a ray wholly below 0 mm disappears (NaN), the
    # 'two-rays' flag stays
    x, y = _weak_line()
    _, (r1, r2), est, _ = _exact_rays(x, y, 60.0)
    f = fit(pd.DataFrame({"map_mm": x, "bk_depth_cm": y}), response="map_mm",
            predictors="bk_depth_cm", direction="forward")
    p = f.predict([60.0])
    flags = p["flags"][0].split(";")
    assert "two-rays" in flags and "unbounded" in flags
    if est >= r2:
        assert p.lower[0] == pytest.approx(r2, rel=1e-10) and p.upper[0] == 12000.0
        assert "truncated-at-bound" in flags and "open-above" not in flags
        assert p["upper_untruncated"][0] == np.inf and np.isnan(p["lower_untruncated"][0])
        exp = (0.0, r1) if r1 >= 0 else (np.nan, np.nan)
    else:
        assert p.upper[0] == pytest.approx(r1, rel=1e-10) and p.lower[0] == 0.0
        assert "truncated-at-bound" in flags and "open-below" not in flags
        assert p["lower_untruncated"][0] == -np.inf and np.isnan(p["upper_untruncated"][0])
        exp = (r2, 12000.0) if r2 <= 12000 else (np.nan, np.nan)
    got = (p.get("other_lower", pd.Series([np.nan]))[0],
           p.get("other_upper", pd.Series([np.nan]))[0])
    np.testing.assert_allclose(got, exp, rtol=1e-10, equal_nan=True)


def _parabola():
    """Feature = (climate - 5)^2 on 0..10 plus small seeded noise: a turning point at 5
    inside the range (as in test_classical_inversion.py)."""
    rng = np.random.default_rng(5)
    x = np.linspace(0, 10, 41)
    return x, (x - 5) ** 2 + rng.normal(0, 0.05, x.size)


def _band_quartic(res, y0, t):
    """Coefficients (increasing powers) of (y0 - f(x))^2 - t^2 (s^2 + g(x)' V g(x)), the
    band inequality of a quadratic f with g(x) = (1, x, x^2): a quartic."""
    b, V, s2 = res.params, res.cov_params(), res.scale
    resid = P.polysub([y0], b)
    q = np.zeros(5)
    for i in range(3):
        for j in range(3):
            q[i + j] += V[i, j]
    q[0] += s2
    return P.polysub(P.polymul(resid, resid), t * t * q)


@pytest.mark.parametrize("y0", [16.0, 0.004])
def test_polynomial_band_limits_are_the_exact_roots_on_the_estimates_branch(y0):
    # Quadratic forward fit with a turning point. The exact classical-calibration set is
    # {x : quartic(x) <= 0}, whose ends are real roots of the quartic (numpy.polynomial
    # roots on statsmodels' fit). refit reports the part on the estimate's monotonic
    # branch: a limit equals the nearest root on that side when it lies on the branch,
    # else the turning point, flagged open-below/open-above (the set runs on past it).
    x, y = _parabola()
    res = sm.OLS(y, np.column_stack([np.ones_like(x), x, x * x])).fit()
    t = stats.t.ppf(0.975, len(x) - 3)
    roots = P.polyroots(_band_quartic(res, y0, t))
    real = np.sort(roots.real[np.abs(roots.imag) < 1e-9])
    f = fit(pd.DataFrame({"climate": x, "feature": y}), response="climate",
            predictors="feature", form="quadratic", direction="forward")
    p = f.predict([y0])
    est, lo, hi = p.estimate[0], p.lower[0], p.upper[0]
    tp = f.domain.turning_point
    assert abs(tp - 5.0) < 0.05
    side = 1 if est > tp else -1  # the branch of the estimate
    below = real[real < est]
    above = real[real > est]
    flags = p["flags"][0].split(";")
    for limit, nearest, open_flag in ((lo, below.max(initial=-np.inf), "open-below"),
                                      (hi, above.min(initial=np.inf), "open-above")):
        on_branch = (nearest - tp) * side > 0
        if on_branch:
            assert limit == pytest.approx(nearest, rel=1e-9)
            assert open_flag not in flags
        else:
            assert limit == pytest.approx(tp, rel=1e-9) and open_flag in flags
    # y0 = 0.004: close to the curve's minimum; the exact set crosses the turning point
    if y0 < 0.01:
        assert (below.max() - tp) * side < 0 or (above.min() - tp) * side < 0


@pytest.mark.parametrize("y0", [0.5, 5.0, 20.0])
def test_polynomial_limit_cut_at_zero_rain_keeps_the_exact_root_below(y0, tmp_path):
    # A quadratic forward fit of Bk depth on MAP (seeded simulation; turning point near
    # 1600 mm, beyond the data). For a shallow horizon the exact classical-calibration set
    # (band quartic <= 0, roots by numpy.polynomial on statsmodels' fit) starts below
    # 0 mm: refit reports 0 mm exactly, flags truncated-at-bound (not open-below: the band
    # does close, past the bound), and keeps the quartic's root in lower_untruncated.
    rng = np.random.default_rng(3)
    p = rng.uniform(30, 700, 60)
    d = 8 + 0.16 * p - 5e-5 * p * p + rng.normal(0, 9, 60)
    res = sm.OLS(d, np.column_stack([np.ones_like(p), p, p * p])).fit()
    t = stats.t.ppf(0.975, len(p) - 3)
    roots = P.polyroots(_band_quartic(res, y0, t))
    real = np.sort(roots.real[np.abs(roots.imag) < 1e-9])
    f = fit(pd.DataFrame({"map_mm": p, "bk_depth_cm": d}), "map_mm", ["bk_depth_cm"],
            form="quadratic", direction="forward")
    out = f.predict([y0])
    # (0.5 cm: the curve's root lies below 0 mm, so no estimate, flagged
    # beyond-search-window; the set still straddles 0 mm and is cut there)
    est = out["estimate"][0] if np.isfinite(out["estimate"][0]) else 0.0
    assert est < f.domain.turning_point        # on the data's branch
    # the set's ends nearest the estimate: the quartic's closest roots on either side
    lower_ref, upper_ref = real[real < est].max(), real[real > est].min()
    assert lower_ref < 0 < upper_ref < f.domain.turning_point
    assert out["lower"][0] == 0.0
    assert "truncated-at-bound" in out["flags"][0].split(";")
    assert "open-below" not in out["flags"][0].split(";")
    assert out["lower_untruncated"][0] == pytest.approx(lower_ref, rel=1e-9)
    assert out["upper"][0] == pytest.approx(upper_ref, rel=1e-9)
    q = _file(f, tmp_path).predict([y0])
    assert q.lower[0] == 0.0 and q.lower_untruncated[0] == pytest.approx(lower_ref, rel=1e-9)
