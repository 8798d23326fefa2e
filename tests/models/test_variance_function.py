"""A spread that grows with the fitted value: estimator 'wls-power'.

Checked against statsmodels WLS (reference library) with the final weights, against the
variance-function formula computed by hand, against the coefficient-file consumer, and by
a seeded simulation of a funnel-shaped calibration (invented numbers): the interval widens
where the data do and covers at both ends, where a constant-width OLS interval does not.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

import refit
from refit.coefficients import load, write_record
from refit.coefficients.build import fit_record
from refit.errors import UsageError
from refit.models.variance import fit_power_variance, log_residual_slope

TRUE_THETA = 1.0
PROV = {"dataset": {"kind": "store", "name": "test", "version": 1, "sha256": "0" * 64},
        "subset": {"filters": []}, "recipe": None, "recipe_sha256": None}


def funnel(n: int, seed: int) -> pd.DataFrame:
    """Depth to Bk [cm] and MAP [mm] whose scatter is proportional to the mean."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(10, 250, n)
    mu = 150 + 3.0 * x
    y = mu + rng.normal(0, 1, n) * 0.15 * mu ** TRUE_THETA
    return pd.DataFrame({"bk_depth_cm": x, "map_mm": y})


def test_matches_statsmodels_wls_with_the_final_weights():
    sm = pytest.importorskip("statsmodels.api")
    d = funnel(300, 1)
    X = np.column_stack([np.ones(len(d)), d.bk_depth_cm])
    res = fit_power_variance(X, d.map_mm.to_numpy())
    ref = sm.WLS(d.map_mm.to_numpy(), X, weights=res.details["weights"]).fit()
    np.testing.assert_allclose(res.coefficients, ref.params, rtol=1e-10)
    # statsmodels' scale uses n - p; refit's n - p - 1 (theta is estimated too)
    n, p = X.shape
    assert res.residual_std_error ** 2 == pytest.approx(ref.scale * (n - p) / (n - p - 1),
                                                        rel=1e-10)
    np.testing.assert_allclose(res.covariance, ref.cov_params() * (n - p) / (n - p - 1),
                               rtol=1e-9)
    # at convergence theta is the log-residual slope of its own fit
    mu = X @ res.coefficients
    assert res.details["variance_power"] == pytest.approx(
        log_residual_slope(mu, d.map_mm.to_numpy() - mu), abs=1e-6)
    assert res.details["variance_converged"]


def test_theta_recovers_the_generating_power():
    # seeded simulation: the mean estimate over draws is near the true power (1.0)
    thetas = [refit.fit(funnel(400, s), "map_mm", ["bk_depth_cm"], estimator="wls-power")
              .result.details["variance_power"] for s in range(20)]
    assert np.mean(thetas) == pytest.approx(TRUE_THETA, abs=0.15)


def test_interval_is_the_variance_function_formula_and_the_file_agrees(tmp_path):
    from scipy import stats

    d = funnel(200, 3)
    f = refit.fit(d, "map_mm", ["bk_depth_cm"], estimator="wls-power")
    x0 = np.array([20.0, 120.0, 240.0])
    got = f.predict(x0, level=0.9)
    X0 = np.column_stack([np.ones(3), x0])
    b, C = f.result.coefficients, f.result.covariance
    mu0 = X0 @ b
    s, theta = f.result.residual_std_error, f.result.details["variance_power"]
    var = s ** 2 * np.abs(mu0) ** (2 * theta) + np.einsum("ij,jk,ik->i", X0, C, X0)
    t = stats.t.ppf(0.95, f.df_resid)
    np.testing.assert_allclose(got["lower"], mu0 - t * np.sqrt(var), rtol=1e-12)
    np.testing.assert_allclose(got["upper"], mu0 + t * np.sqrt(var), rtol=1e-12)
    width = got["upper"] - got["lower"]
    assert width[0] < width[1] < width[2]   # it widens where the data spread more
    rec = fit_record(f, function_id="map_from_bk_depth", provenance=PROV, cv=None,
                     interval_method="analytic", level=0.9)
    assert rec["interval"]["variance_power"] == pytest.approx(theta)
    path = write_record(rec, tmp_path / "f.json")
    filed = load(path).predict(x0, level=0.9)
    np.testing.assert_allclose(filed.lower, got["lower"], rtol=1e-10)
    np.testing.assert_allclose(filed.upper, got["upper"], rtol=1e-10)


def test_covers_at_both_ends_where_ols_does_not():
    # seeded: 60 calibrations of a funnel; new soils at the narrow end (Bk < 60 cm) and at
    # the wide end (Bk > 200 cm), coverage pooled over the draws
    hit = {"ols": np.zeros(2), "wls-power": np.zeros(2)}
    total = np.zeros(2)
    for seed in range(60):
        d = funnel(120, 100 + seed)
        new = funnel(200, 10_000 + seed)
        ends = [new[new.bk_depth_cm < 60], new[new.bk_depth_cm > 200]]
        total += [len(e) for e in ends]
        for est in hit:
            f = refit.fit(d, "map_mm", ["bk_depth_cm"], estimator=est)
            for k, e in enumerate(ends):
                p = f.predict(e.bk_depth_cm.to_numpy(), level=0.9)
                y = e.map_mm.to_numpy()
                hit[est][k] += np.sum((y >= p["lower"].to_numpy())
                                      & (y <= p["upper"].to_numpy()))
    cover = {k: v / total for k, v in hit.items()}
    # OLS: too wide at the narrow end, too narrow at the wide end
    assert cover["ols"][0] > 0.96 and cover["ols"][1] < 0.85
    # the variance function keeps both ends near the nominal 90 %
    assert 0.86 < cover["wls-power"][0] < 0.94 and 0.86 < cover["wls-power"][1] < 0.94


def test_forward_direction_and_through_origin_are_refused():
    d = funnel(50, 5)
    with pytest.raises(UsageError, match="inverse direction only"):
        refit.fit(d, "map_mm", ["bk_depth_cm"], estimator="wls-power", direction="forward")
    with pytest.raises(UsageError, match="needs an intercept"):
        refit.fit(d, "map_mm", ["bk_depth_cm"], estimator="wls-power", through_origin=True)
