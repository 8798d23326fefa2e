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

from refit.models.inversion.classical import fieller_line, invert_polynomial
from refit.models.fitting import fit

NIST = Path(__file__).resolve().parents[1] / "data" / "nist"


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
    e2, lo2, hi2, flags = invert_polynomial([500.0], res.params, res.cov_params(), s ** 2, t,
                                            (x.min(), x.max()))
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


# ----------------------------------------------------------------------------- search window
# The forward band is inverted only on the monotonic branch holding the estimate, inside
# the calibration range widened by half its width per side and cut at the schema range of
# the climate column (map_mm >= 0). Constructed data with a known turning point:
# bk = 20 + 0.0004 (map - 250)^2, minimum 20 cm at 250 mm, soils at 100..900 mm (most
# above the turning point), normal noise sd 15 cm (seeded).
def _turning():
    rng = np.random.default_rng(3)
    x = np.linspace(100.0, 900.0, 60)
    y = 20 + 0.0004 * (x - 250.0) ** 2 + rng.normal(0, 15.0, x.size)
    return fit(pd.DataFrame({"map_mm": x, "bk_depth_cm": y}), response="map_mm",
               predictors="bk_depth_cm", form="quadratic", direction="forward")


def test_search_window_is_half_the_range_wider_and_cut_at_the_schema_bounds():
    from refit.models.domain import schema_bounds, search_window

    # schemas/calibration.table.json: map_mm minimum 0, maximum 12000; mat_c -40..40
    assert schema_bounds("map_mm") == (0.0, 12000.0)
    assert schema_bounds("not_a_column") == (-np.inf, np.inf)
    assert search_window((158.0, 883.0), (0.0, 12000.0)) == (0.0, 1245.5)
    assert search_window((-10.0, 10.0), (-40.0, 40.0)) == (-20.0, 20.0)


def test_band_open_past_the_turning_point_stops_there():
    f = _turning()
    tp = f.domain.turning_point
    b0, b1, b2 = f.result.coefficients
    p = f.predict(40.0)
    # estimate: the larger root of the fitted parabola (numpy.roots as outside reference)
    assert p.estimate[0] == pytest.approx(max(np.roots([b2, b1, b0 - 40.0])).real, rel=1e-12)
    assert p["flags"][0] == "open-below"
    assert p.lower[0] == pytest.approx(tp, rel=1e-12)  # not a number beyond the minimum
    assert tp < p.estimate[0] < p.upper[0] < 900
    # the band really holds 40 cm at the turning point and not at the upper limit
    t = stats.t.ppf(0.975, f.df_resid)
    g = np.array([1.0, tp, tp ** 2])
    half = t * np.sqrt(f.residual_std_error ** 2 + g @ f.result.covariance @ g)
    assert abs(40.0 - g @ f.result.coefficients) < half


def test_value_below_the_minimum_but_inside_the_band_reads_the_turning_point():
    f = _turning()
    tp = f.domain.turning_point
    p = f.predict([12.0, -60.0])
    # 12 cm: below the fitted minimum (~20 cm) but within the band there: estimate = the
    # turning point (the closest point of the curve), interval open on that side
    assert p.estimate[0] == pytest.approx(tp, rel=1e-12)
    assert p["flags"][0] == "beyond-turning-point;open-below"
    assert p.lower[0] == pytest.approx(tp, rel=1e-12) and tp < p.upper[0] < 900
    # -60 cm: the band excludes it everywhere: no estimate, no interval
    assert np.isnan(p.estimate[1]) and np.isnan(p.lower[1]) and np.isnan(p.upper[1])
    # (-60 cm also lies below the depths measured: the range flag follows the feature)
    assert p["flags"][1] == "outside-calibration-range;beyond-turning-point"


def test_root_beyond_the_window_gives_no_estimate_but_the_band_inside():
    f = _turning()
    b0, b1, b2 = f.result.coefficients
    y0 = b0 + b1 * 1320 + b2 * 1320 ** 2  # root at 1320 mm; window ends at 900 + 400
    p = f.predict(y0)
    assert np.isnan(p.estimate[0])
    assert p["flags"][0] == "outside-calibration-range;beyond-search-window;open-above"
    assert p.upper[0] == 1300.0 and 900 < p.lower[0] < 1300


def test_line_limits_are_cut_at_zero_rain():
    # weak line: the Fieller lower limit (closed form, checked against the textbook form
    # above) falls below 0 mm; refit reports exactly 0 and 'truncated-at-bound' (not
    # 'open-below': a line has no search window), keeps the limit before the cut in
    # lower_untruncated, the upper limit unchanged
    rng = np.random.default_rng(8)
    x = np.linspace(50.0, 400.0, 25)
    y = 10 + 0.05 * x + rng.normal(0, 5.0, x.size)
    d = pd.DataFrame({"map_mm": x, "bk_depth_cm": y})
    f = fit(d, response="map_mm", predictors="bk_depth_cm", direction="forward")
    res = sm.OLS(y, sm.add_constant(x)).fit()
    t = stats.t.ppf(0.975, len(x) - 2)
    est, lo, hi, _ = fieller_line([12.0], *res.params, res.cov_params(), res.scale, t)
    assert lo[0] < 0 < est[0]
    p = f.predict(12.0)
    assert p.lower[0] == 0.0 and p["flags"][0] == "truncated-at-bound"
    assert p["lower_untruncated"][0] == pytest.approx(lo[0], rel=1e-10)
    assert np.isnan(p["upper_untruncated"][0])
    assert p.upper[0] == pytest.approx(hi[0], rel=1e-10)
    assert p.estimate[0] == pytest.approx(est[0], rel=1e-10)


# ----------------------------------------------------------------------------- vectorised
# The earlier per-row routine (roots polished by brentq, band edges by doubling steps from
# the estimate and brentq), kept here as the reference the vectorised inversion must equal.
def _ref_polish(fun, u, span):
    from scipy.optimize import brentq

    for h in (1e-9, 1e-7, 1e-5, 1e-3):
        a, b = u - h * span, u + h * span
        fa, fb = fun(a), fun(b)
        if fa == 0:
            return a
        if fb == 0:
            return b
        if np.sign(fa) != np.sign(fb):
            return brentq(fun, a, b, xtol=1e-15 * max(1.0, abs(u)), rtol=1e-15, maxiter=200)
    return u


def _ref_edge(fun, u0, direction, limit):
    from scipy.optimize import brentq

    step, inner = 1e-8, u0
    while step <= limit:
        outer = u0 + direction * step
        if fun(outer) > 0:
            a, b = sorted((inner, outer))
            return brentq(fun, a, b, xtol=1e-14 * max(1.0, abs(u0)), rtol=1e-15, maxiter=200)
        inner, step = outer, step * 2.0
    return direction * np.inf


def _ref_invert(y0, poly, cov, s2, t, domain, x_cal):
    """Per-row reference: (estimate, lower, upper) or NaN where it found no root."""
    from numpy.polynomial import Polynomial
    from numpy.polynomial import polynomial as P

    c, h = 0.5 * (domain[0] + domain[1]), 0.5 * (domain[1] - domain[0])
    pu0 = Polynomial(poly)(Polynomial([c, h])).coef
    u_cal = (np.asarray(x_cal) - c) / h
    turning = np.sort(P.polyroots(P.polyder(pu0)).real)
    out = []
    for yi in y0:
        def band(u, yi=yi):
            x = c + h * u
            g = np.array([1.0, x, x * x])
            return (yi - P.polyval(x, poly)) ** 2 - t * t * (s2 + g @ cov @ g)

        pu = pu0.copy()
        pu[0] -= yi
        r = P.polyroots(pu)
        r = np.sort(r.real[np.abs(r.imag) <= 1e-7 * np.maximum(1.0, np.abs(r.real))])
        roots = np.array([_ref_polish(lambda u: P.polyval(u, pu), v, 1 + abs(v)) for v in r])
        if len(roots) == 0:
            out.append((np.nan, np.nan, np.nan))
            continue
        inside = roots[np.abs(roots) <= 1]
        if len(inside) == 1:
            u = inside[0]
        elif len(inside) > 1:
            edges = np.concatenate([[-np.inf], turning, [np.inf]])
            main = np.argmax(np.histogram(u_cal, bins=edges)[0])
            on = inside[(inside >= edges[main]) & (inside <= edges[main + 1])]
            pick = on if len(on) else inside
            u = pick[np.argmin(np.abs(pick))]
        else:
            u = roots[np.argmin(np.abs(roots))]
        lo, hi = _ref_edge(band, u, -1, 1e12), _ref_edge(band, u, 1, 1e12)
        out.append(tuple(c + h * np.array([u, lo, hi])))
    return np.array(out).T


@pytest.mark.parametrize("make", ["turning", "pontius"])
def test_vectorised_inversion_equals_the_per_row_routine(make):
    from refit.models.predict import _t
    from refit.models.inversion.classical import search_window
    from refit.models.domain import schema_bounds

    if make == "turning":
        f = _turning()
        y0 = np.random.default_rng(1).uniform(-20, 400, 300)
    else:
        f = fit(strd("Pontius"), response="x", predictors="y", form="quadratic",
                direction="forward")
        y0 = np.random.default_rng(2).uniform(0.0, 3.5, 300)
    res, dom = f.result, f.ranges[f.x_names[0]]
    t = _t(0.95, res.df_resid)
    ref = _ref_invert(y0, res.coefficients, res.covariance, res.residual_std_error ** 2, t,
                      dom, f.x[:, 0])
    p = f.predict(y0)
    w_lo, w_hi = search_window(dom, schema_bounds(f.x_names[0]))
    # where the old result lies within the window and on one branch, the numbers agree
    tp = f.domain.turning_point
    within = (ref[1] >= w_lo) & (ref[2] <= w_hi)
    if tp is not None:
        within &= (ref[1] >= tp) | (ref[2] <= tp)
    assert within.sum() > 100
    scale = dom[1] - dom[0]
    for k, col in enumerate(["estimate", "lower", "upper"]):
        np.testing.assert_allclose(p[col].to_numpy()[within], ref[k][within],
                                   rtol=0, atol=1e-9 * scale)
    # elsewhere the limits stay inside the window and the flags say which side is open
    out = ~within & np.isfinite(p.lower.to_numpy())
    assert np.all((p.lower[out] >= w_lo) & (p.upper[out] <= w_hi))
    assert all(("open-" in fl) or ("beyond" in fl) for fl in p["flags"][~within])


def test_vectorised_quadratic_roots_equal_numpy_roots():
    # Reference: numpy.roots (companion-matrix eigenvalues, a general-purpose library) on
    # each of 2,000 seeded random quadratics; the closed form used for every value at once
    # (cancellation-free formula q = -(b + sign(b) sqrt(disc)) / 2, roots q/a and c/q)
    # must give the same real roots to 1e-9 relative, and NaN where there are none.
    from refit.models.inversion.classical import _all_roots

    rng = np.random.default_rng(20261201)
    n = 2_000
    a = rng.normal(size=n) * 10.0 ** rng.uniform(-3, 3, n)
    b = rng.normal(size=n) * 10.0 ** rng.uniform(-3, 3, n)
    c = rng.normal(size=n) * 10.0 ** rng.uniform(-3, 3, n)
    got = np.vstack([_all_roots(np.array([0.0, b[i], a[i]]), np.array([-c[i]]))[0]
                     for i in range(n)])
    batch = _all_roots(np.array([0.0, 1.0, 1.0]), np.array([2.0, -0.25, -5.0]))
    np.testing.assert_allclose(batch[0], [-2.0, 1.0], rtol=1e-12)  # u^2 + u - 2 = 0
    assert batch[1].tolist() == [-0.5, -0.5]  # (u + 1/2)^2 = 0: a double root
    assert np.isnan(batch[2]).all()  # u^2 + u + 5 > 0: no real root
    n_real = 0
    for i in range(n):
        ref = np.roots([a[i], b[i], c[i]])
        if np.all(np.abs(ref.imag) == 0):
            np.testing.assert_allclose(got[i], np.sort(ref.real), rtol=1e-9)
            n_real += 1
        else:
            assert np.isnan(got[i]).all()
    assert 500 < n_real < 1_900  # both kinds were exercised


@pytest.mark.parametrize("threads", ["1", "2"])
def test_many_values_in_blocks_equal_one_by_one(monkeypatch, threads):
    # The inversion runs rows in blocks (calibrate.ROW_BLOCK) and locates band crossings
    # through exact per-node thresholds; each row must get exactly what it gets alone.
    # Reference: NIST StRD Pontius (forward quadratic, as in the handbook case above).
    import refit.models.inversion.classical as cal

    d = strd("Pontius")
    f = fit(d, response="x", predictors="y", form="quadratic", direction="forward")
    rng = np.random.default_rng(5)
    y = np.concatenate([rng.uniform(-0.5, 4.0, 300), [1.239722, np.nan]])
    one = pd.concat([f.predict(v) for v in y], ignore_index=True)
    monkeypatch.setenv("REFIT_THREADS", threads)  # blocks serially or on two threads
    old = cal.ROW_BLOCK
    try:
        cal.ROW_BLOCK = 7
        many = f.predict(y).reset_index(drop=True)
    finally:
        cal.ROW_BLOCK = old
    pd.testing.assert_frame_equal(many, one, check_exact=True)
    assert many["flags"].str.len().gt(0).any()  # flagged rows are among them


def test_band_node_search_equals_the_elementwise_matrix():
    # The (grid x rows) comparison |y0 - f_g| > r_g that refit used to build in full is the
    # reference (plain numpy, element by element); the threshold/sparse-table search must
    # pick the same nearest outside node on each side for every row, ties at the
    # thresholds included (values placed exactly on f_g +- r_g and one ulp either side).
    from refit.models.inversion.bandgrid import BandNodes

    rng = np.random.default_rng(11)
    G = 257
    fg = np.cumsum(rng.normal(size=G)) * 1e3
    r = np.abs(rng.normal(size=G)) * 5e2 + rng.uniform(0, 1, G)
    edge = np.concatenate([fg + r, fg - r])
    y = np.concatenate([rng.uniform(fg.min() - 2e3, fg.max() + 2e3, 3_000), edge,
                        np.nextafter(edge, np.inf), np.nextafter(edge, -np.inf)])
    start = rng.integers(-1, G + 1, len(y))
    pos = np.abs(y[None, :] - fg[:, None]) > r[:, None]
    ar = np.arange(G)[:, None]
    want_up = np.min(np.where(pos & (ar >= start), ar, G), axis=0)
    want_dn = np.max(np.where(pos & (ar <= start), ar, -1), axis=0)
    nodes = BandNodes(fg, r)
    np.testing.assert_array_equal(nodes.first_outside(np.clip(start, 0, G), y), want_up)
    np.testing.assert_array_equal(nodes.last_outside(np.clip(start, -1, G - 1), y), want_dn)
    assert 0 < (want_up < G).mean() < 1 and 0 < (want_dn >= 0).mean() < 1


def test_grid_node_counts_equal_numpy_searchsorted():
    # Reference: numpy.searchsorted(grid, u, "right") (a general-purpose library routine)
    # on the band grid of a curve with its turning point inside the window; values on the
    # nodes exactly, one ulp either side, and seeded random values.
    from refit.models.inversion.band import GridSearch, PolyBand, branch_layout

    br = branch_layout(np.array([1.0, 0.3, 2.0]), (-1.0, 3.0))
    assert len(br.turning) == 1
    window_u = (-1.7, 1.9)
    search = GridSearch(PolyBand(br, np.eye(3) * 1e-3, 2.0), window_u, 0.5, 10)
    grid = search.grid
    assert len(search.extra) == 1 and br.turning[0] in grid
    u = np.concatenate([grid, np.nextafter(grid, np.inf), np.nextafter(grid, -np.inf),
                        np.random.default_rng(3).uniform(*window_u, 5_000)])
    u = u[(u >= window_u[0]) & (u <= window_u[1])]
    np.testing.assert_array_equal(search.count_up_to(u), np.searchsorted(grid, u, "right"))


def test_threshold_and_matrix_node_searches_give_the_same_numbers(monkeypatch):
    # Few rows compare every row with every grid node; many rows use the exact per-node
    # thresholds (refit.models.inversion.bandgrid). Forcing either path on the same 400 values of the NIST
    # Pontius forward quadratic (outside reference data, as above) must give identical
    # estimates, limits and flags.
    import refit.models.inversion.band as inv

    f = fit(strd("Pontius"), response="x", predictors="y", form="quadratic",
            direction="forward")
    y = np.random.default_rng(9).uniform(-0.5, 4.0, 400)
    monkeypatch.setattr(inv, "THRESHOLD_ROWS", 0)
    thresholds = f.predict(y)
    monkeypatch.setattr(inv, "THRESHOLD_ROWS", 10**9)
    matrix = f.predict(y)
    pd.testing.assert_frame_equal(thresholds, matrix, check_exact=True)
    assert thresholds["lower"].notna().sum() > 300  # intervals were found
    assert thresholds["flags"].str.contains("outside-calibration-range").any()


def test_polynomial_band_open_past_the_bound_and_past_the_window():
    # The band of a very noisy curve (new-observation SD 1000 feature units on a curve
    # that rises 50 units over the data) never closes: below, the window is cut at the
    # bound 0, so the limit is 0 flagged truncated-at-bound, and the search without the
    # bound (the range 100..500 widened by half its width: -100) does not close either,
    # so the limit before the cut is that window edge, flagged open-below as well; above,
    # no bound cuts the window (700): open-above alone. The rule of
    # refit.models.inversion.classical (module notes), checked on its definition.
    from refit.models.inversion.classical import invert_polynomial_bounded

    poly = np.array([0.0, 0.1, 1e-6])
    cov = np.diag([1.0, 1e-6, 1e-12])
    est, lo, hi, masks, (lo_u, hi_u) = invert_polynomial_bounded(
        [30.0], poly, cov, 1e6, 2.0, (100.0, 500.0), bounds=(0.0, np.inf))
    assert 100 < est[0] < 500
    assert lo[0] == 0.0 and masks["truncated-at-bound"][0] and masks["open-below"][0]
    assert lo_u[0] == pytest.approx(-100.0, abs=1e-9) and np.isnan(hi_u[0])
    assert hi[0] == pytest.approx(700.0, abs=1e-9) and masks["open-above"][0]
    # a bound that does not cut the window changes nothing
    e2, lo2, hi2, m2, (lu2, hu2) = invert_polynomial_bounded(
        [30.0], poly, cov, 1e6, 2.0, (100.0, 500.0), bounds=(-500.0, np.inf))
    assert lo2[0] == pytest.approx(-100.0, abs=1e-9) and m2["open-below"][0]
    assert not m2["truncated-at-bound"][0] and np.isnan(lu2[0])
