"""Classical calibration (forward direction): point estimates, band-inversion intervals,
flags. Outside references: NIST/SEMATECH e-Handbook load-cell case study and NIST StRD
data; the reference page tests/../calibration-statistics notes say which numbers are
published and which were computed (COMPUTED = our own cross-check, not published)."""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from refit.calibrate import fieller_line, invert_polynomial
from refit.fitting import fit

NIST = Path(__file__).parent / "data" / "nist"


def strd(name: str) -> pd.DataFrame:
    lines = (NIST / f"{name}.dat").read_text().splitlines()
    first, last = map(int, re.search(r"Data\s+\(lines (\d+) to (\d+)\)",
                                     "\n".join(lines[:10])).groups())
    rows = [[float(v) for v in ln.split()] for ln in lines[first - 1:last]]
    return pd.DataFrame(rows, columns=lines[first - 2].split()[1:])


def test_load_cell_calibration_nist_handbook():
    # NIST/SEMATECH e-Handbook 4.6.1.10 (Pontius load cell; in Pontius.dat y = deflection,
    # x = load): a new deflection of 1.239722 gives a load of 1,705,106 (published).
    # 95% interval by inverting the prediction band (handbook 4.5.2.1 method):
    # [1,704,513.4, 1,705,697.8], COMPUTED in the reference notes, rounded to 0.1.
    d = strd("Pontius")
    f = fit(d, response="x", predictors="y", form="quadratic", direction="forward")
    p = f.predict(1.239722)
    assert round(p.estimate[0]) == 1_705_106
    assert p.lower[0] == pytest.approx(1_704_513.4, abs=0.06)
    assert p.upper[0] == pytest.approx(1_705_697.8, abs=0.06)
    assert p["flags"][0] == ""
    # the curve's other root is far outside the loads 150,000-3,000,000 (COMPUTED:
    # 229,899,180; the handbook says "over 229,899,600" with its rounded coefficients)
    b = f.result.coefficients
    assert max(np.roots([b[2], b[1], b[0] - 1.239722])) == pytest.approx(229_899_180, abs=1)


def _norris_line():
    d = strd("Norris")
    res = sm.OLS(d.y.to_numpy(), sm.add_constant(d.x.to_numpy())).fit()
    return d, res


def test_norris_fieller_closed_form_equals_numerical_inversion():
    # Reference notes 1.2(iii), COMPUTED: Norris, y0 = 500, 95%: x_hat = 499.205596,
    # Fieller = numerical inversion = [497.385244, 501.026069]. The textbook Fieller form
    # (Eisenhart 1939, from memory) is evaluated here independently from statsmodels'
    # fit, and refit's closed form and its numerical band inversion must both equal it.
    d, res = _norris_line()
    b0, b1 = res.params
    s, n = np.sqrt(res.scale), len(d)
    x = d.x.to_numpy()
    xbar, sxx = x.mean(), ((x - x.mean()) ** 2).sum()
    t = stats.t.ppf(0.975, n - 2)
    xhat = (500 - b0) / b1
    g = t ** 2 * s ** 2 / (b1 ** 2 * sxx)
    centre = xbar + (xhat - xbar) / (1 - g)
    half = t * s / (abs(b1) * (1 - g)) * np.sqrt((xhat - xbar) ** 2 / sxx + (1 - g) * (1 + 1 / n))
    textbook = (centre - half, centre + half)
    est, lo, hi, unbounded = fieller_line([500.0], b0, b1, res.cov_params(), s ** 2, t)
    e2, lo2, hi2, flags = invert_polynomial([500.0], res.params, lambda v: np.vander(
        v, 2, increasing=True), res.cov_params(), s ** 2, t, (x.min(), x.max()))
    assert not unbounded and flags == [()]
    np.testing.assert_allclose([lo[0], hi[0]], textbook, rtol=1e-12)
    np.testing.assert_allclose([lo2[0], hi2[0]], textbook, rtol=1e-12)
    assert est[0] == pytest.approx(499.205596, abs=5e-7)
    assert (lo[0], hi[0]) == pytest.approx((497.385244, 501.026069), abs=5e-7)


def test_inverse_estimate_is_classical_estimate_shrunk_by_r_squared():
    # Identity for straight lines (reference notes 2(a); Krutchkoff 1967, Technometrics
    # 9:425): inverse estimate - xbar = r^2 (classical estimate - xbar). Norris, y0 = 500:
    # inverse estimate 499.205095 (COMPUTED in the reference notes).
    d = strd("Norris")
    fwd = fit(d, response="x", predictors="y", direction="forward")
    inv = fit(d, response="x", predictors="y", direction="inverse")
    r2 = np.corrcoef(d.x, d.y)[0, 1] ** 2
    xbar = d.x.mean()
    classical = fwd.predict(500.0).estimate[0]
    assert inv.predict(500.0).estimate[0] == pytest.approx(
        xbar + r2 * (classical - xbar), rel=1e-12)
    assert inv.predict(500.0).estimate[0] == pytest.approx(499.205095, abs=5e-7)
    assert fwd.r_squared == pytest.approx(r2, rel=1e-12) == inv.r_squared


def test_weak_slope_gives_an_unbounded_interval():
    # Fieller: the set is bounded only if the slope is significant at the chosen level
    # (g < 1 <=> |t-stat of b1| > t quantile; reference notes 2(a)). statsmodels' t test
    # of the slope serves as the outside check of significance.
    rng = np.random.default_rng(11)
    x = np.arange(1.0, 13.0)
    y = 5 + 0.01 * x + rng.normal(0, 1, x.size)
    res = sm.OLS(y, sm.add_constant(x)).fit()
    assert res.pvalues[1] > 0.05
    f = fit(pd.DataFrame({"climate": x, "feature": y}), response="climate",
            predictors="feature", direction="forward")
    p = f.predict(5.05)
    assert p.lower[0] == -np.inf and p.upper[0] == np.inf
    assert "unbounded" in p["flags"][0]
    # the switch happens exactly at the level where the slope test turns significant
    # (two-sided p-value p: significant at level L iff L < 1 - p)
    edge = 1 - res.pvalues[1]
    bounded = f.predict(5.05, level=edge * 0.999)
    assert np.isfinite(bounded.lower[0]) and np.isfinite(bounded.upper[0])
    assert not np.isfinite(f.predict(5.05, level=edge * 1.001).upper[0])


def _parabola():
    # y = (x - 5)^2 on 0..10 plus small seeded noise: turning point inside the range
    rng = np.random.default_rng(5)
    x = np.linspace(0, 10, 41)
    y = (x - 5) ** 2 + rng.normal(0, 0.05, x.size)
    return fit(pd.DataFrame({"climate": x, "feature": y}), response="climate",
               predictors="feature", form="quadratic", direction="forward")


def test_two_roots_inside_the_range_are_flagged():
    f = _parabola()
    p = f.predict(4.0)  # (x - 5)^2 = 4 at x = 3 and x = 7
    assert "two-roots" in p["flags"][0]
    assert min(abs(p.estimate[0] - 3), abs(p.estimate[0] - 7)) < 0.05
    assert p.lower[0] < p.estimate[0] < p.upper[0]


def test_value_beyond_the_extreme_cannot_be_inverted():
    f = _parabola()
    p = f.predict(-3.0)  # below the minimum of the curve: no real root
    assert np.isnan(p.estimate[0]) and "beyond-turning-point" in p["flags"][0]


def test_estimate_outside_the_calibration_range_is_flagged():
    d = strd("Pontius")
    f = fit(d, response="x", predictors="y", form="quadratic", direction="forward")
    p = f.predict([0.05, 1.0, 3.0])
    assert list(p["flags"]) == ["outside-calibration-range", "",
                                "outside-calibration-range"]
    assert p.estimate[0] < d.x.min() and p.estimate[2] > d.x.max()
    # the band inversion holds the estimate, whatever side
    assert np.all((p.lower < p.estimate) & (p.estimate < p.upper))


def test_replicates_narrow_the_interval_like_one_over_m():
    # Mean of m new readings: variance s^2/m (reference notes 2(a), 1/m term). With
    # weights=m on predict the Fieller interval equals the textbook formula with 1/m.
    d, res = _norris_line()
    f = fit(d, response="x", predictors="y", direction="forward")
    t = stats.t.ppf(0.975, len(d) - 2)
    est, lo, hi, _ = fieller_line([500.0], *res.params, res.cov_params(), res.scale / 4, t)
    p = f.predict(500.0, weights=4)
    assert (p.lower[0], p.upper[0]) == pytest.approx((lo[0], hi[0]), rel=1e-12)
    assert p.upper[0] - p.lower[0] < f.predict(500.0).upper[0] - f.predict(500.0).lower[0]
