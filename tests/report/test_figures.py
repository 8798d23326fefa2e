"""Report figures draw the numbers they are given, and those numbers are right.

References: statsmodels OLS ``get_prediction().summary_frame()`` (mean_ci, obs_ci) and
``OLSInfluence`` (hat values, internally studentized residuals, Cook's distance) on the
NIST StRD Norris and Pontius data; ``Fit.predict`` for the bands drawn; scipy.stats
``probplot`` for the Q-Q points.
"""

from __future__ import annotations

import matplotlib
import numpy as np
import pytest
import statsmodels.api as sm
from matplotlib.collections import PolyCollection
from scipy import stats
from statsmodels.stats.outliers_influence import OLSInfluence

from _harness import nist_strd
from refit.models.fitting import fit
from refit.report import diagnostics as dg
from refit.report import figures as fg


def by_gid(fig, gid):
    """Artists of a figure with this gid (every axes)."""
    return [a for ax in fig.axes for a in ax.get_children() if a.get_gid() == gid]


def line(fig, gid, k=0):
    return by_gid(fig, gid)[k]


def band_vertices(fig, gid):
    poly = by_gid(fig, gid)[0]
    assert isinstance(poly, PolyCollection)
    return poly.get_paths()[0].vertices


@pytest.fixture(scope="module")
def norris():
    d = nist_strd("Norris")
    f = fit(d, response="y", predictors="x")
    res = sm.OLS(d.y.to_numpy(), sm.add_constant(d.x.to_numpy())).fit()
    return d, f, res


# ----------------------------------------------------------------------------- numbers
@pytest.mark.parametrize("level", [0.95, 0.8])
def test_regression_bands_match_statsmodels_linear(norris, level):
    # Reference: statsmodels get_prediction(...).summary_frame(alpha) on NIST Norris.
    d, f, res = norris
    x = np.linspace(0, 1000, 7)
    b = dg.regression_bands(f, x, level)
    sf = res.get_prediction(sm.add_constant(x)).summary_frame(alpha=1 - level)
    np.testing.assert_allclose(b["fitted"], sf["mean"], rtol=1e-10)
    np.testing.assert_allclose(b["mean_lower"], sf["mean_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(b["mean_upper"], sf["mean_ci_upper"], rtol=1e-9)
    np.testing.assert_allclose(b["pred_lower"], sf["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(b["pred_upper"], sf["obs_ci_upper"], rtol=1e-9)


def test_regression_bands_match_statsmodels_quadratic():
    # Reference: statsmodels on NIST Pontius (quadratic), x in units of 1e6 for its solver.
    d = nist_strd("Pontius")
    f = fit(d, response="y", predictors="x", form="quadratic")
    x = np.array([2e5, 1.5e6, 3.2e6])
    u, u0 = d.x.to_numpy() / 1e6, x / 1e6
    res = sm.OLS(d.y.to_numpy(), np.column_stack([np.ones(len(d)), u, u ** 2])).fit()
    sf = res.get_prediction(np.column_stack([np.ones(3), u0, u0 ** 2])).summary_frame(0.05)
    b = dg.regression_bands(f, x, 0.95)
    np.testing.assert_allclose(b["mean_lower"], sf["mean_ci_lower"], rtol=1e-8)
    np.testing.assert_allclose(b["pred_upper"], sf["obs_ci_upper"], rtol=1e-8)


def test_prediction_band_is_fit_predict_interval(norris):
    # The report's analytic prediction band is the interval Fit.predict gives.
    _, f, _ = norris
    x = np.linspace(-50, 1000, 11)
    b = dg.regression_bands(f, x, 0.9)
    p = f.predict(x, level=0.9)
    np.testing.assert_allclose(b["pred_lower"], p["lower"], rtol=1e-12)
    np.testing.assert_allclose(b["pred_upper"], p["upper"], rtol=1e-12)


def test_influence_matches_statsmodels(norris):
    # Reference: statsmodels OLSInfluence on NIST Norris.
    _, f, res = norris
    infl = dg.influence(f)
    ref = OLSInfluence(res)
    np.testing.assert_allclose(infl["leverage"], ref.hat_matrix_diag, rtol=1e-9)
    np.testing.assert_allclose(infl["studentized"], ref.resid_studentized_internal, rtol=1e-8)
    np.testing.assert_allclose(infl["cooks"], ref.cooks_distance[0], rtol=1e-8)
    assert infl["p"] == 2 and infl["n"] == 36


def test_influential_rule_and_order():
    cooks = np.array([0.01, 0.5, 0.02, 0.2, 0.0])
    lev = np.array([0.1, 0.1, 0.9, 0.1, 0.1])
    # n = 5, p = 1: Cook's > 4/5 none; leverage > 2/5: index 2. p = 1 with a bigger Cook's:
    assert dg.influential(cooks, lev, 1).tolist() == [2]
    cooks2 = cooks * 3   # 1.5 and 0.6 exceed 0.8? only 1.5 (index 1)
    assert dg.influential(cooks2, lev, 1).tolist() == [1, 2]
    assert dg.influential(cooks2, lev, 1, max_labels=1).tolist() == [1]


def test_normal_qq_is_scipy_probplot():
    # Reference: scipy.stats.probplot (Filliben plotting positions, LS line).
    v = np.array([0.3, -1.2, 2.2, 0.1, -0.4, 0.9, -0.05])
    osm, osr, (slope, icpt) = dg.normal_qq(v)
    (rm, rr), (rs, ri, _) = stats.probplot(v, dist="norm")
    np.testing.assert_allclose(osm, rm)
    np.testing.assert_allclose(osr, np.sort(v))
    assert (slope, icpt) == pytest.approx((rs, ri))


# ----------------------------------------------------------------------------- figures
def test_calibration_figure_draws_the_bands(norris):
    d, f, _ = norris
    x = np.linspace(0, 1000, 50)
    b = dg.regression_bands(f, x, 0.95)
    fig = fg.calibration((d.x, d.y), b, x_label="x", y_label="y", domain=f.ranges["x"])
    assert isinstance(fig.canvas, matplotlib.backends.backend_agg.FigureCanvasAgg)
    p = f.predict(x)
    np.testing.assert_allclose(line(fig, "prediction-lower").get_ydata(), p["lower"])
    np.testing.assert_allclose(line(fig, "prediction-upper").get_ydata(), p["upper"])
    np.testing.assert_allclose(line(fig, "fitted").get_ydata(), p["estimate"], rtol=1e-12)
    np.testing.assert_allclose(line(fig, "data").get_xdata(), d.x)
    # the filled polygons run along both bounds
    v = band_vertices(fig, "mean-band")
    for xi, lo, hi in zip(x, b["mean_lower"], b["mean_upper"]):
        assert np.isclose(v[:, 1][np.isclose(v[:, 0], xi)], [lo]).any()
        assert np.isclose(v[:, 1][np.isclose(v[:, 0], xi)], [hi]).any()
    lo, hi = f.ranges["x"]
    assert line(fig, "domain-min").get_xdata()[0] == lo
    assert line(fig, "domain-max").get_xdata()[0] == hi


def test_forward_figure_shows_inversion_and_turning_point():
    # A forward quadratic on the demo scenario's loess soils: the turning point lies inside
    # the climate range (refit.models.domain says so); the inversion panel is Fit.predict's.
    from refit._util.resources import demo_dir
    from refit.curate.store import open_store, typed_records

    st = open_store(demo_dir() / "store")
    rec = typed_records(st.records)
    rec = rec[(rec.parent_material == "loess")].dropna(subset=["map_mm", "bk_depth_cm"])
    f = fit(rec, "map_mm", "bk_depth_cm", form="quadratic", direction="forward")
    tp = f.domain.turning_point
    lo, hi = f.ranges["map_mm"]
    assert lo < tp < hi
    xs = np.linspace(lo, hi, 40)
    fx = np.linspace(*f.ranges["bk_depth_cm"], 30)
    p = f.predict(fx)
    inv = {"x": fx, "estimate": p["estimate"], "lower": p["lower"], "upper": p["upper"]}
    fig = fg.calibration((f.x[:, 0], f.y_model), dg.regression_bands(f, xs), x_label="MAP",
                         y_label="depth", domain=(lo, hi),
                         turning=(tp, f.domain.turning_point_kind, "map_mm"), inversion=inv)
    assert len(fig.axes) == 2
    assert line(fig, "turning-point").get_xdata()[0] == pytest.approx(tp)
    np.testing.assert_allclose(line(fig, "inversion-estimate").get_ydata(), p["estimate"])
    np.testing.assert_allclose(line(fig, "inversion-lower").get_ydata(), p["lower"])
    np.testing.assert_allclose(line(fig, "inversion-upper").get_ydata(), p["upper"])
    # the inversion panel has feature on x, climate on y
    np.testing.assert_allclose(line(fig, "data", 1).get_xdata(), f.y_model)


def test_residual_and_influence_figures(norris):
    d, f, _ = norris
    infl = dg.influence(f)
    qq = dg.normal_qq(infl["studentized"])
    fig = fg.residuals(infl["fitted"], infl["residuals"], qq, y_label="y")
    np.testing.assert_allclose(line(fig, "residuals").get_ydata(), f.result.residuals)
    np.testing.assert_allclose(line(fig, "qq-points").get_xdata(), qq[0])
    assert fig.axes[0].get_ylabel() == "residual (observed - fitted)"
    assert fig.axes[1].get_ylabel() == "internally studentized residual"
    assert not [a for a in fig.axes[0].get_lines() if a.get_gid() == "residual-trend"]
    # with a trend and a unit: the trend is statsmodels' LOWESS of the residuals on the
    # fitted values (computed here, frac 2/3, 3 iterations), the unit on the residual axis
    from statsmodels.nonparametric.smoothers_lowess import lowess

    trend = dg.residual_trend(infl["fitted"], infl["residuals"])
    ref = lowess(infl["residuals"], infl["fitted"], frac=2 / 3, it=3)
    np.testing.assert_allclose(trend[0], ref[:, 0])
    np.testing.assert_allclose(trend[1], ref[:, 1])
    fig = fg.residuals(infl["fitted"], infl["residuals"], qq, y_label="y [mm]", unit="mm",
                       trend=trend)
    np.testing.assert_allclose(line(fig, "residual-trend").get_ydata(), ref[:, 1])
    assert fig.axes[0].get_ylabel() == "residual (observed - fitted) [mm]"
    labels = [f"N{i:02d}" for i in range(len(d))]
    hi = dg.influential(infl["cooks"], infl["leverage"], infl["p"])
    assert len(hi) > 0
    fig = fg.influence(infl["leverage"], infl["cooks"], labels, hi, p=2)
    np.testing.assert_allclose(line(fig, "influence-points").get_ydata(), infl["cooks"])
    for ax in fig.axes:
        texts = {t.get_text() for t in ax.texts}
        assert texts == {labels[i] for i in hi}
    assert line(fig, "cooks-guide").get_ydata()[0] == pytest.approx(4 / len(d))
    # each label is anchored at its record's (leverage, Cook's distance)
    for t in fig.axes[0].texts:
        i = labels.index(t.get_text())
        assert t.xy == pytest.approx((infl["leverage"][i], infl["cooks"][i]))


def text_boxes(fig, ax):
    """Display-pixel boxes of an axes' label texts (without their leader lines), measured
    by the figure's own renderer after a full draw (what is saved is what is checked)."""
    from matplotlib.text import Text

    fig.canvas.draw()
    renderer = fig.canvas.get_renderer()
    return [(t.get_text(), Text.get_window_extent(t, renderer)) for t in ax.texts]


def assert_apart(fig, ax):
    boxes = text_boxes(fig, ax)
    frame = ax.get_window_extent(fig.canvas.get_renderer())
    for k, (a, ba) in enumerate(boxes):
        assert frame.contains(ba.x0, ba.y0) and frame.contains(ba.x1, ba.y1), a
        for b, bb in boxes[k + 1:]:
            assert not ba.overlaps(bb), (a, b, ba, bb)
    return [name for name, _ in boxes]


def test_influence_labels_do_not_overlap(norris):
    # Ten influential records crowded into one corner: each label must find its own place
    # (matplotlib's renderer measures the boxes; none may intersect another).
    rng = np.random.default_rng(5)
    n = 60
    lev = np.concatenate([rng.uniform(0.01, 0.05, n - 10), 0.20 + rng.uniform(0, 0.01, 10)])
    cooks = np.concatenate([rng.uniform(0, 0.03, n - 10), 0.30 + rng.uniform(0, 0.01, 10)])
    labels = [f"XX-{i:03d}" for i in range(n)]
    hi = dg.influential(cooks, lev, 2)
    assert len(hi) == 10
    fig = fg.influence(lev, cooks, labels, hi, p=2)
    for ax in fig.axes:
        drawn = assert_apart(fig, ax)
        assert len(drawn) >= 6
        # the most influential record is always labelled (placed first)
        assert labels[hi[0]] in drawn
        assert set(drawn) <= {labels[i] for i in hi}
    # and on real data (NIST Norris) every flagged record is labelled, none overlapping
    _, f, _ = norris
    infl = dg.influence(f)
    lab = [f"N{i:02d}" for i in range(infl["n"])]
    hi = dg.influential(infl["cooks"], infl["leverage"], infl["p"])
    fig = fg.influence(infl["leverage"], infl["cooks"], lab, hi, p=2)
    for ax in fig.axes:
        assert sorted(assert_apart(fig, ax)) == sorted(lab[i] for i in hi)


def test_coverage_rank_labels_do_not_overlap():
    # Two candidates at nearly the same (width, coverage), as ranks 8 and 9 often are.
    fig = fg.coverage_width([1, 2, 3, 8, 9], [0.95, 0.93, 0.91, 0.890, 0.889],
                            [460, 420, 425, 404.0, 405.5], [0.96, 0.94, 0.93, 0.93, 0.93],
                            [470, 425, 430, 416, 418], level=0.95, tolerance=0.05,
                            scheme="group-kfold")
    assert sorted(assert_apart(fig, fig.axes[0]), key=int) == ["1", "2", "3", "8", "9"]


def test_out_of_fold_sites_and_coverage_figures():
    obs, est = np.array([300.0, 500, 700]), np.array([350.0, 480, 650])
    fig = fg.out_of_fold(obs, est, label="map_mm [mm]", scheme="group-kfold",
                         metrics={"RMSEP": "40 mm"})
    np.testing.assert_allclose(line(fig, "oof-points").get_xdata(), est)
    # the metrics block: one length per line, so the monospaced values line up
    fig2 = fg.out_of_fold(obs, est, label="map_mm [mm]", scheme="group-kfold",
                          metrics={"RMSEP   ": "113.8 mm", "bias    ": "-21.8 mm",
                                   "coverage": "92.9%"})
    text = next(t for t in fig2.axes[0].texts if t.get_gid() == "oof-metrics").get_text()
    assert text.splitlines() == ["RMSEP     113.8 mm", "bias      -21.8 mm",
                                 "coverage     92.9%"]
    np.testing.assert_allclose(line(fig, "oof-points").get_ydata(), obs)
    one = line(fig, "one-to-one")
    np.testing.assert_allclose(one.get_xdata(), one.get_ydata())
    assert one.get_xdata()[0] <= 300 and one.get_xdata()[1] >= 700
    kept = np.array([True, False, True, True])
    fig = fg.sites([52.1, 52.5, 53.0, 54.0], [-39, -40, -41, -39.5], kept, n_missing=2)
    np.testing.assert_allclose(line(fig, "sites-kept").get_xdata(), [52.1, 53.0, 54.0])
    np.testing.assert_allclose(line(fig, "sites-removed").get_ydata(), [-40])
    assert "2 without coordinates" in fig.axes[0].get_title(loc="left")
    fig = fg.coverage_width([1, 2], [0.93, 0.80], [400, 300], [0.95, 0.9], [380, 290],
                            level=0.95, tolerance=0.05, scheme="group-kfold")
    np.testing.assert_allclose(line(fig, "scheme").get_ydata(), [0.93, 0.80])
    np.testing.assert_allclose(line(fig, "random-kfold").get_xdata(), [380, 290])
    band = by_gid(fig, "nominal-band")[0]   # a Rectangle: y in data units
    assert band.get_y() == pytest.approx(0.90)
    assert band.get_y() + band.get_height() == pytest.approx(1.0)


def test_figures_leave_pyplot_alone(norris):
    import matplotlib.pyplot as plt

    before = plt.get_fignums()
    d, f, _ = norris
    fg.calibration((d.x, d.y), dg.regression_bands(f, d.x.sort_values()), x_label="x",
                   y_label="y")
    assert plt.get_fignums() == before
    assert matplotlib.rcParams["axes.spines.top"] is True   # the style is not global
