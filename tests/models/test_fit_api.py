"""The public fitting API: coefficients and prediction intervals against statsmodels,
the exponential form with Duan's smearing, and the bad-input errors of issue 3."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from _harness import nist_strd
from refit.errors import InvalidDataError, UsageError
from refit.models.fitting import ESTIMATORS, fit


def sm_obs_ci(res, exog_new, alpha, weights=None):
    frame = res.get_prediction(exog_new, weights=weights).summary_frame(alpha=alpha)
    return frame["mean"].to_numpy(), frame["obs_ci_lower"].to_numpy(), \
        frame["obs_ci_upper"].to_numpy()


@pytest.mark.parametrize("level", [0.95, 0.8])
def test_ols_quadratic_interval_matches_statsmodels(level):
    # Reference: statsmodels OLS get_prediction(...).summary_frame(alpha) obs_ci, on the
    # NIST Pontius data (quadratic), at points inside and outside the data.
    d = nist_strd("Pontius")
    f = fit(d, response="y", predictors="x", form="quadratic")
    x0 = np.array([150000.0, 1.7e6, 3.0e6, 3.5e6])
    # statsmodels gets load in units of 1e6 (its pinv solve on raw x^2 ~ 1e13 loses about
    # 7 digits; predictions and intervals do not depend on the unit of x)
    u, u0 = d.x.to_numpy() / 1e6, x0 / 1e6
    res = sm.OLS(d.y.to_numpy(), np.column_stack([np.ones(len(d)), u, u ** 2])).fit()
    mean, lo, hi = sm_obs_ci(res, np.column_stack([np.ones(4), u0, u0 ** 2]), 1 - level)
    p = f.predict(x0, level=level)
    np.testing.assert_allclose(p.estimate, mean, rtol=1e-10)
    np.testing.assert_allclose(p.lower, lo, rtol=1e-10)
    np.testing.assert_allclose(p.upper, hi, rtol=1e-10)
    np.testing.assert_allclose(f.std_errors, res.bse / [1, 1e6, 1e12], rtol=1e-8)
    assert f.df_resid == res.df_resid and f.n == 40
    assert list(p["flags"]) == ["", "", "", "outside-calibration-range"]


def test_wls_interval_uses_the_new_observation_weight_like_statsmodels():
    # Reference: statsmodels WLS get_prediction(exog, weights=w0) obs_ci: the new
    # observation's variance is scale / w0 (w0 = 1 when not given).
    d = nist_strd("Norris")
    w = np.linspace(0.5, 3.0, len(d))
    d["w"] = w
    f = fit(d, response="y", predictors="x", estimator="wls", weights="w")
    res = sm.WLS(d.y.to_numpy(), sm.add_constant(d.x.to_numpy()), weights=w).fit()
    x0 = np.array([10.0, 500.0, 900.0])
    ex = sm.add_constant(x0)
    for w0 in (None, 2.5):
        mean, lo, hi = sm_obs_ci(res, ex, 0.05, weights=w0)
        p = f.predict(x0, weights=w0)
        np.testing.assert_allclose(p.estimate, mean, rtol=1e-10)
        np.testing.assert_allclose(p.lower, lo, rtol=1e-10)
        np.testing.assert_allclose(p.upper, hi, rtol=1e-10)
    np.testing.assert_allclose(f.coefficients, res.params, rtol=1e-10)
    assert f.r_squared == pytest.approx(res.rsquared, rel=1e-10)


def test_several_predictors_longley_match_statsmodels():
    # Reference: statsmodels OLS on NIST Longley (6 predictors); R^2 also certified by NIST.
    d = nist_strd("Longley")
    xs = [f"x{i}" for i in range(1, 7)]
    f = fit(d, response="y", predictors=xs)
    res = sm.OLS(d.y.to_numpy(), sm.add_constant(d[xs].to_numpy())).fit()
    np.testing.assert_allclose(f.coefficients.to_numpy(), res.params, rtol=1e-9)
    assert f.r_squared == pytest.approx(0.995479004577296, rel=1e-12)  # NIST certified
    new = d[xs].iloc[[0, 5]].copy()
    mean, lo, hi = sm_obs_ci(res, sm.add_constant(new.to_numpy(), has_constant="add"), 0.05)
    p = f.predict(new)
    np.testing.assert_allclose(p.lower, lo, rtol=1e-9)
    np.testing.assert_allclose(p.upper, hi, rtol=1e-9)
    assert list(p.index) == [0, 5]


def test_through_origin_noint1_certified_and_statsmodels_interval():
    # NIST StRD NoInt1 certified B1 (the header, "2.07438016528926", copied by
    # tests/models/test_lsq_nist.py's parser there) and statsmodels no-constant OLS intervals.
    d = nist_strd("NoInt1")
    f = fit(d, response="y", predictors="x", through_origin=True)
    assert f.terms == ["x"]
    res = sm.OLS(d.y.to_numpy(), d[["x"]].to_numpy()).fit()
    np.testing.assert_allclose(f.coefficients.to_numpy(), res.params, rtol=1e-12)
    mean, lo, hi = sm_obs_ci(res, np.array([[65.0], [80.0]]), 0.05)
    p = f.predict([65.0, 80.0])
    np.testing.assert_allclose(p.lower, lo, rtol=1e-10)
    np.testing.assert_allclose(p.upper, hi, rtol=1e-10)


def test_exponential_form_uses_duan_smearing_and_log_scale_interval():
    # ln y = a + b x fitted by OLS on ln y (statsmodels as reference); the mean estimate
    # is exp(a + b x0) times Duan's smearing factor mean(exp(e_i)) (Duan 1983, JASA
    # 78:605); the interval is the log-scale prediction interval exponentiated.
    rng = np.random.default_rng(7)
    x = np.linspace(0, 10, 40)
    y = np.exp(1.0 + 0.2 * x + rng.normal(0, 0.3, 40))
    d = pd.DataFrame({"x": x, "y": y})
    f = fit(d, response="y", predictors="x", form="exponential")
    res = sm.OLS(np.log(y), sm.add_constant(x)).fit()
    smear = np.mean(np.exp(res.resid))
    x0 = np.array([2.0, 7.5])
    mean, lo, hi = sm_obs_ci(res, sm.add_constant(x0), 0.05)
    p = f.predict(x0)
    np.testing.assert_allclose(p.estimate, np.exp(mean) * smear, rtol=1e-10)
    np.testing.assert_allclose(p.lower, np.exp(lo), rtol=1e-10)
    np.testing.assert_allclose(p.upper, np.exp(hi), rtol=1e-10)
    assert smear > 1.0  # convexity of exp: the median curve underestimates the mean


def test_forward_direction_predict_takes_the_feature():
    # Norris straight line used as a classical calibration (reference file section
    # 1.2(iii), COMPUTED): at y0 = 500 the estimate is 499.205596 with the Fieller
    # interval [497.385244, 501.026069]; the inverse regression gives 499.205095.
    d = nist_strd("Norris")
    fwd = fit(d, response="x", predictors="y", direction="forward")
    inv = fit(d, response="x", predictors="y", direction="inverse")
    p = fwd.predict(500.0)
    assert p.estimate[0] == pytest.approx(499.205596, abs=5e-7)
    assert (p.lower[0], p.upper[0]) == pytest.approx((497.385244, 501.026069), abs=5e-7)
    assert inv.predict(500.0).estimate[0] == pytest.approx(499.205095, abs=5e-7)
    assert fwd.terms == ["intercept", "x"]  # the forward equation is y (feature) on x


def test_resampling_intervals_are_wired_to_the_interval_functions():
    # The Fit passes its design and response unchanged: the same seed gives the same
    # numbers as calling refit.models.intervals directly.
    from refit.models import intervals as iv
    d = nist_strd("Norris")
    f = fit(d, response="y", predictors="x")
    X = sm.add_constant(d.x.to_numpy())
    x0 = np.array([100.0, 600.0])
    ref = iv.bootstrap_pairs(X, d.y.to_numpy(), sm.add_constant(x0), n_boot=200, seed=3)
    p = f.predict(x0, interval="bootstrap-pairs", n_boot=200, seed=3)
    np.testing.assert_allclose(p.lower, ref.lower)
    ref = iv.jackknife_plus(X, d.y.to_numpy(), sm.add_constant(x0), level=0.9)
    p = f.predict(x0, interval="jackknife+", level=0.9)
    np.testing.assert_allclose(p.upper, ref.upper)


def test_missing_values_refused_by_default_and_dropped_on_request():
    d = nist_strd("Norris")
    d.loc[[3, 8], "x"] = np.nan
    with pytest.raises(InvalidDataError, match=r"'x' at rows 3, 8"):
        fit(d, response="y", predictors="x")
    f = fit(d, response="y", predictors="x", missing="drop")
    assert f.n == 34 and f.n_dropped == 2
    p = f.predict([np.nan, 100.0])
    assert np.isnan(p.estimate[0]) and p["flags"][0] == "missing-value"


def _line(n=10):
    x = np.arange(1.0, n + 1)
    return pd.DataFrame({"x": x, "y": 2 * x + np.sin(x), "z": 3 * x, "w": np.ones(n)})


@pytest.mark.parametrize("change, kwargs, error, pattern", [
    (None, {"form": "quadratic"}, InvalidDataError, r"needs at least 4 rows.*got 3"),
    ("const", {}, InvalidDataError, r"predictor 'x' is constant \(every row = 5\)"),
    ("nan", {}, InvalidDataError, r"NaN values in 'y' at rows 1"),
    ("inf", {}, InvalidDataError, r"infinite values at rows 2"),
    ("text", {}, InvalidDataError, r"not numbers at rows 0 \(e.g. 'n/a'\)"),
    ("zero_w", {"estimator": "wls", "weights": "w"}, InvalidDataError,
     r"weights must be > 0.*rows 2"),
    ("neg_y", {"form": "exponential"}, InvalidDataError, r"'y' must be > 0.*rows 1"),
    (None, {"predictors": ["x", "z"]}, InvalidDataError, r"rank-deficient: terms 'x', 'z'"),
    (None, {"form": "cubic"}, UsageError,
     "choose one of: linear, quadratic, polynomial, exponential"),
    (None, {"estimator": "lasso"}, UsageError, "choose one of: " + ", ".join(ESTIMATORS)),
    (None, {"direction": "sideways"}, UsageError, "choose one of: inverse, forward"),
    (None, {"predictors": "depth"}, UsageError, r"'depth' is not in the table.*x, y"),
    (None, {"estimator": "theil-sen", "form": "quadratic"}, UsageError,
     "straight lines"),
    (None, {"direction": "forward", "predictors": ["x", "z"]}, UsageError, "one feature"),
])
def test_bad_input_gives_a_clear_library_error(change, kwargs, error, pattern):
    d = _line(3) if "form" in kwargs and kwargs["form"] == "quadratic" else _line()
    if change == "const":
        d["x"] = 5.0
    elif change == "nan":
        d.loc[1, "y"] = np.nan
    elif change == "inf":
        d.loc[2, "x"] = np.inf
    elif change == "text":
        d["x"] = d["x"].astype(object)
        d.loc[0, "x"] = "n/a"
    elif change == "zero_w":
        d.loc[2, "w"] = 0.0
    elif change == "neg_y":
        d.loc[1, "y"] = -1.0
    args = {"response": "y", "predictors": "x", **kwargs}
    with pytest.raises(error, match=pattern) as info:
        fit(d, **args)
    assert isinstance(info.value, ValueError)  # plain `except ValueError` works too


def test_errors_name_file_rows_when_given_a_refit_table():
    from refit.curate.tables import Table

    d = _line()
    d.loc[4, "y"] = np.nan
    t = Table(frame=d, path=Path("soils.csv"), source_rows=np.arange(2, 12), sha256="",
              notes=[])
    with pytest.raises(InvalidDataError, match=r"at file rows 6;"):
        fit(t, response="y", predictors="x")


@pytest.mark.parametrize("kwargs, pattern", [
    ({"level": 1.5}, "level must be a number between 0 and 1"),
    ({"interval": "magic"}, "choose one of: analytic"),
    ({"interval": "quantile"}, "estimator='quantile'"),
])
def test_bad_predict_arguments(kwargs, pattern):
    f = fit(_line(), response="y", predictors="x")
    with pytest.raises(UsageError, match=pattern):
        f.predict([1.0], **kwargs)
    with pytest.raises(InvalidDataError, match="not a number"):
        f.predict(["abc"])


# ----------------------------------------------------------------------------- estimators
STACKLOSS = pd.DataFrame({  # R datasets::stackloss (Brownlee 1965), from memory; it
    # reproduces the R MASS::rlm values below, which the reference notes confirm
    "air": [80, 80, 75, 62, 62, 62, 62, 62, 58, 58, 58, 58, 58, 58, 50, 50, 50, 50, 50, 56, 70],
    "water": [27, 27, 25, 24, 22, 23, 24, 24, 23, 18, 18, 17, 18, 19, 18, 18, 19, 19, 20, 20,
              20],
    "acid": [89, 88, 90, 87, 87, 87, 93, 93, 87, 80, 89, 88, 82, 93, 89, 86, 72, 79, 80, 82,
             91],
    "loss": [42, 37, 37, 28, 18, 18, 19, 20, 15, 14, 14, 13, 11, 12, 8, 7, 8, 8, 9, 15, 15],
})


def test_huber_through_fit_matches_r_mass_rlm():
    # R MASS::rlm stack-loss Huber fit (k = 1.345, MAD scale), as stored in statsmodels'
    # robust/tests/results/results_rlm.py (class Huber): rtol 1e-3, rlm's own tolerance.
    f = fit(STACKLOSS, response="loss", predictors=["air", "water", "acid"],
            estimator="huber")
    np.testing.assert_allclose(f.coefficients[["air", "water", "acid", "intercept"]],
                               [0.82937387, 0.92610818, -0.12784916, -41.02653105], rtol=1e-3)
    assert f.residual_std_error == pytest.approx(2.4407137948148447, rel=1e-3)
    p = f.predict(STACKLOSS[["air", "water", "acid"]].iloc[[0]])
    assert p.lower[0] < p.estimate[0] < p.upper[0]


def test_theil_sen_through_fit_matches_sen_1968_example():
    # Sen (1968) example as in scipy's theilslopes tests: slope 4.0; intercept 6.0 with
    # the 'joint' convention (median of y - b x), refit's default.
    d = pd.DataFrame({"x": [1, 2, 3, 4, 10, 12, 18], "y": [9, 15, 19, 20, 45, 55, 78]})
    f = fit(d, response="y", predictors="x", estimator="theil-sen")
    assert f.coefficients.to_dict() == pytest.approx({"intercept": 6.0, "x": 4.0})
    # scipy.stats.theilslopes (method='joint') is the outside reference for the estimate
    ref = stats.theilslopes(d.y, d.x, method="joint")
    assert f.predict([5.0]).estimate[0] == pytest.approx(ref.intercept + 5.0 * ref.slope)
    assert f.predict(5.0, interval="none").estimate[0] == pytest.approx(26.0)


def test_theil_sen_default_interval_is_an_approximate_bootstrap_t_band():
    d = pd.DataFrame({"x": [1, 2, 3, 4, 10, 12, 18], "y": [9, 15, 19, 20, 45, 55, 78]})
    f = fit(d, response="y", predictors="x", estimator="theil-sen")
    p = f.predict([5.0])
    assert p["flags"][0] == "approximate-interval" and f.cautions
    # the band is the t-band of refit's analytic interval with the bootstrap covariance
    # and the root-mean-square residual: rebuilt here from those pieces
    e = d.y - (6.0 + 4.0 * d.x)
    s2 = (e ** 2).sum() / 5
    g = np.array([1.0, 5.0])
    half = stats.t.ppf(0.975, 5) * np.sqrt(s2 + g @ f.covariance.to_numpy() @ g)
    assert (p.lower[0], p.upper[0]) == pytest.approx((26.0 - half, 26.0 + half), rel=1e-12)
    # seeded: the same covariance every time
    again = fit(d, response="y", predictors="x", estimator="theil-sen")
    np.testing.assert_array_equal(again.covariance, f.covariance)


def test_theil_sen_interval_covers_new_observations_near_nominal():
    # Monte Carlo (seeded): 100 lines y = 1 + 2x + Student-t(5) errors, n = 40, x ~ U(0, 10),
    # 8 new observations each. Nominal 95%; binomial SE over 800 trials 0.0077, larger
    # because the 8 share a fit: tolerance 0.035 (about 3 SE with that design effect,
    # common practice). The estimates equal scipy.stats.theilslopes (method 'joint').
    rng = np.random.default_rng(2024)
    hits = []
    for _ in range(100):
        x = rng.uniform(0, 10, 40)
        y = 1 + 2 * x + rng.standard_t(5, 40)
        f = fit(pd.DataFrame({"x": x, "y": y}), response="y", predictors="x",
                estimator="theil-sen")
        x0 = rng.uniform(0, 10, 8)
        y0 = 1 + 2 * x0 + rng.standard_t(5, 8)
        p = f.predict(x0)
        ref = stats.theilslopes(y, x, method="joint")
        np.testing.assert_allclose(p.estimate, ref.intercept + ref.slope * x0, rtol=1e-12)
        hits.extend((p.lower <= y0) & (y0 <= p.upper))
    assert abs(np.mean(hits) - 0.95) <= 0.035


def test_york_through_fit_matches_pearson_york_benchmark():
    # Pearson (1901) data with York (1966) weights; Williamson/Reed solution a =
    # 5.47991022, b = -0.48053341 (kmpfit tutorial table, reference notes 1.5).
    pytest.importorskip("refit.models.eiv")
    wx = np.array([1000, 1000, 500, 800, 200, 80, 60, 20, 1.8, 1])
    wy = np.array([1, 1.8, 4, 8, 20, 20, 70, 70, 100, 500])
    d = pd.DataFrame({"x": [0.0, 0.9, 1.8, 2.6, 3.3, 4.4, 5.2, 6.1, 6.5, 7.4],
                      "y": [5.9, 5.4, 4.4, 4.6, 3.5, 3.7, 2.8, 2.8, 2.4, 1.5],
                      "sx": 1 / np.sqrt(wx), "sy": 1 / np.sqrt(wy)})
    f = fit(d, response="y", predictors="x", estimator="york", x_sd="sx", y_sd="sy")
    assert f.coefficients["intercept"] == pytest.approx(5.47991022, abs=1e-7)
    assert f.coefficients["x"] == pytest.approx(-0.48053341, abs=1e-7)


def test_quantile_curves_match_statsmodels_quantreg():
    # statsmodels QuantReg at 0.025 / 0.5 / 0.975 is the reference for the curves.
    pytest.importorskip("refit.models.quantile")
    rng = np.random.default_rng(21)
    x = rng.uniform(0, 10, 200)
    y = 1 + 2 * x + rng.normal(0, 1 + 0.2 * x)
    f = fit(pd.DataFrame({"x": x, "y": y}), response="y", predictors="x",
            estimator="quantile")
    X = sm.add_constant(x)
    x0 = sm.add_constant(np.array([2.0, 8.0]))
    ref = {q: sm.QuantReg(y, X).fit(q=q).params for q in (0.025, 0.5, 0.975)}
    p = f.predict([2.0, 8.0])
    np.testing.assert_allclose(p.estimate, x0 @ ref[0.5], rtol=1e-6)
    np.testing.assert_allclose(p.lower, x0 @ ref[0.025], rtol=1e-6)
    np.testing.assert_allclose(p.upper, x0 @ ref[0.975], rtol=1e-6)
    with pytest.raises(UsageError, match="ask for level=0.95"):
        f.predict([2.0], level=0.9)
