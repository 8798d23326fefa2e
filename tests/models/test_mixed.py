"""The mixed (random-effects) estimator: fixed effects, variance components and the
new-source prediction interval against statsmodels MixedLM computed in the test; the
forward direction; bad groups and the boundary fallback.

Data: seeded invented clustered calibrations (sources with their own MAP offset, each on a
slice of the depth range).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.regression.mixed_linear_model import MixedLM

import refit.models.mixed as mixed
from refit.errors import InvalidDataError, UsageError
from refit.models.fitting import fit
from refit.models.mixed import fit_mixed, new_source_interval


def clustered(seed=7, n_sources=8, sd_source=80.0, sd_soil=60.0, soils=15):
    rng = np.random.default_rng(seed)
    codes = np.repeat(np.arange(n_sources), soils)
    centre = rng.uniform(30, 120, n_sources)[codes]
    depth = centre + rng.uniform(-20, 20, codes.size)
    map_mm = (150 + 5 * depth + rng.normal(0, sd_source, n_sources)[codes]
              + rng.normal(0, sd_soil, codes.size))
    return pd.DataFrame({"bk_depth_cm": depth, "map_mm": map_mm,
                         "source": [f"src{c}" for c in codes]})


def statsmodels_reml(d, exog_re=None):
    # Reference: statsmodels MixedLM, REML, fitted directly here
    X = np.column_stack([np.ones(len(d)), d.bk_depth_cm])
    return X, MixedLM(d.map_mm.to_numpy(), X, groups=d.source.to_numpy(),
                      exog_re=exog_re).fit(reml=True)


def test_fixed_effects_and_variance_components_match_statsmodels():
    d = clustered()
    X, ref = statsmodels_reml(d)
    assert ref.converged
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")
    # same REML optimum: agreement to the optimiser's tolerance (statsmodels MixedLM)
    np.testing.assert_allclose(f.result.coefficients, ref.fe_params, rtol=1e-8)
    np.testing.assert_allclose(f.result.covariance, ref.cov_params()[:2, :2], rtol=1e-8)
    np.testing.assert_allclose(f.residual_std_error ** 2, ref.scale, rtol=1e-8)
    det = f.result.details
    np.testing.assert_allclose(det["between_sd"] ** 2, ref.cov_re.iloc[0, 0]
                               if hasattr(ref.cov_re, "iloc") else ref.cov_re[0, 0], rtol=1e-8)
    s_u2 = det["between_sd"] ** 2
    np.testing.assert_allclose(det["prediction_sd"] ** 2, ref.scale + s_u2, rtol=1e-8)
    np.testing.assert_allclose(det["icc"], s_u2 / (s_u2 + ref.scale), rtol=1e-8)
    assert det["n_groups"] == 8 and det["converged"] and not det["boundary"]
    assert det["fallback"] is None and f.cautions == []
    assert det["between_sd_se"] > 0 and det["within_sd_se"] > 0


def _satterthwaite(scale, s_u2, cov, X, n, g, p=2):
    # the df rule of refit.models.mixed, written out from statsmodels' numbers
    m = n / g
    q = np.mean(np.einsum("ij,jk,ik->i", X, cov, X))
    v_w, v_b = scale * (1 - 1 / m), s_u2 + scale / m + q
    df = (v_w + v_b) ** 2 / (v_w ** 2 / (n - g) + v_b ** 2 / (g - p))
    return min(max(df, g - p), n - p)


@pytest.mark.parametrize("level", [0.95, 0.8])
def test_predict_is_the_new_source_interval_from_statsmodels_numbers(level):
    d = clustered(seed=11)
    X, ref = statsmodels_reml(d)
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")
    x0 = np.array([40.0, 75.0, 110.0])
    X0 = np.column_stack([np.ones(3), x0])
    cov = ref.cov_params()[:2, :2]
    s_u2 = float(np.asarray(ref.cov_re)[0, 0])
    var = ref.scale + s_u2 + np.einsum("ij,jk,ik->i", X0, cov, X0)
    df = _satterthwaite(ref.scale, s_u2, cov, X, len(d), 8)
    np.testing.assert_allclose(f.df_resid, df, rtol=1e-8)
    est = X0 @ ref.fe_params
    half = stats.t.ppf(0.5 + level / 2, df) * np.sqrt(var)
    p = f.predict(x0, level=level)
    np.testing.assert_allclose(p.estimate, est, rtol=1e-8)
    np.testing.assert_allclose(p.lower, est - half, rtol=1e-7)
    np.testing.assert_allclose(p.upper, est + half, rtol=1e-7)
    e2, lo2, hi2 = new_source_interval(f.result, X0, level)
    np.testing.assert_allclose(lo2, p.lower, rtol=1e-12)
    np.testing.assert_allclose(hi2, p.upper, rtol=1e-12)


def test_groups_df_method_is_g_minus_p():
    d = clustered(seed=3)
    X = np.column_stack([np.ones(len(d)), d.bk_depth_cm])
    res = fit_mixed(X, d.map_mm.to_numpy(), d.source.to_numpy(), df_method="groups")
    assert res.df_resid == 8 - 2


def test_random_slope_between_covariance_matches_statsmodels():
    d = clustered(seed=5)
    x = d.bk_depth_cm.to_numpy()
    c, s = x.mean(), x.std()
    Z = np.column_stack([np.ones_like(x), (x - c) / s])
    X, ref = statsmodels_reml(d, exog_re=Z)
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source", random_slope=True)
    det = f.result.details
    assert det["random_slope"] and det["fallback"] is None
    # G in (1, x) terms from statsmodels' cov_re on (1, (x - c)/s): T' G_z T
    T = np.array([[1.0, 0.0], [-c / s, 1.0 / s]])
    np.testing.assert_allclose(det["between_covariance"], T.T @ np.asarray(ref.cov_re) @ T,
                               rtol=1e-6)
    X0 = np.column_stack([np.ones(2), [35.0, 115.0]])
    var = (ref.scale + np.einsum("ij,jk,ik->i", X0, T.T @ np.asarray(ref.cov_re) @ T, X0)
           + np.einsum("ij,jk,ik->i", X0, ref.cov_params()[:2, :2], X0))
    est, lo, hi = new_source_interval(f.result, X0, 0.95)
    np.testing.assert_allclose(hi - est, stats.t.ppf(0.975, f.df_resid) * np.sqrt(var),
                               rtol=1e-6)
    # Fit.predict uses the between-source covariance row by row: the same interval
    p = f.predict(X0[:, 1])
    np.testing.assert_allclose(p.lower, lo, rtol=1e-12)
    np.testing.assert_allclose(p.upper, hi, rtol=1e-12)


def test_forward_direction_contains_classical_estimate_and_is_wider_than_pooled():
    d = clustered(seed=13)
    fm = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source",
             direction="forward")
    fo = fit(d, "map_mm", "bk_depth_cm", direction="forward")
    depth = np.array([60.0, 80.0])
    pm, po = fm.predict(depth), fo.predict(depth)
    # classical estimate: solve depth = a + b map with the mixed fixed effects (statsmodels)
    Xf = np.column_stack([np.ones(len(d)), d.map_mm])
    ref = MixedLM(d.bk_depth_cm.to_numpy(), Xf, groups=d.source.to_numpy()).fit(reml=True)
    a, b = ref.fe_params
    np.testing.assert_allclose(pm.estimate, (depth - a) / b, rtol=1e-7)
    assert np.all((pm.lower < pm.estimate) & (pm.estimate < pm.upper))
    assert np.all(pm.upper - pm.lower > po.upper - po.lower)


# ----------------------------------------------------------------------------- bad input
def test_mixed_needs_groups():
    with pytest.raises(UsageError, match="needs groups="):
        fit(clustered(), "map_mm", "bk_depth_cm", estimator="mixed")


def test_random_slope_needs_mixed_and_a_line():
    d = clustered()
    with pytest.raises(UsageError, match="random_slope goes with"):
        fit(d, "map_mm", "bk_depth_cm", groups="source", random_slope=True)
    with pytest.raises(UsageError, match="straight line"):
        fit(d, "map_mm", "bk_depth_cm", form="quadratic", estimator="mixed",
            groups="source", random_slope=True)


def test_unknown_groups_column():
    with pytest.raises(UsageError, match="not in the table"):
        fit(clustered(), "map_mm", "bk_depth_cm", estimator="mixed", groups="region")


def test_one_group_is_refused():
    d = clustered().assign(source="all")
    with pytest.raises(InvalidDataError, match="one group"):
        fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")


def test_too_few_groups_is_refused():
    d = clustered(n_sources=2)
    with pytest.raises(InvalidDataError, match="too few"):
        fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")


def test_groups_of_one_soil():
    d = clustered()
    with pytest.raises(InvalidDataError, match="single soil"):
        fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups=np.arange(len(d)))
    labels = d.source.to_numpy().copy()
    labels[:2] = ["lone1", "lone2"]
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups=labels)
    assert any("single soil" in c for c in f.cautions)


def test_missing_group_labels_refused_or_dropped():
    d = clustered()
    d.loc[[4, 9], "source"] = None
    with pytest.raises(InvalidDataError, match=r"'source' at rows 4, 9"):
        fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source", missing="drop")
    assert f.n_dropped == 2 and f.n == len(d) - 2


def test_boundary_falls_back_to_pooled_ols_never_narrower():
    d = clustered(seed=21, sd_source=0.0)  # no between-source variance
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")
    o = fit(d, "map_mm", "bk_depth_cm")
    det = f.result.details
    assert det["boundary"] and det["fallback"] == "pooled-ols"
    assert any("pooled OLS" in c for c in f.cautions)
    x0 = [50.0, 100.0]
    pm, po = f.predict(x0), o.predict(x0)
    # the fallback is pooled OLS's interval (statsmodels-checked in test_fit_api)
    np.testing.assert_allclose(pm.lower, po.lower, rtol=1e-10)
    np.testing.assert_allclose(pm.upper, po.upper, rtol=1e-10)
    assert f.df_resid == len(d) - 2


def test_non_convergence_with_a_real_between_variance_is_an_error(monkeypatch):
    real = mixed._run_mixedlm

    def stalled(*args):
        model, result, msgs = real(*args)
        result.converged = False
        return model, result, msgs

    monkeypatch.setattr(mixed, "_run_mixedlm", stalled)
    with pytest.raises(InvalidDataError, match="did not converge"):
        fit(clustered(sd_source=150.0), "map_mm", "bk_depth_cm", estimator="mixed",
            groups="source")


def test_non_convergence_without_evidence_falls_back(monkeypatch):
    real = mixed._run_mixedlm

    def stalled(*args):
        model, result, msgs = real(*args)
        result.converged = False
        return model, result, msgs

    monkeypatch.setattr(mixed, "_run_mixedlm", stalled)
    d = clustered(seed=2, sd_source=3.0)
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")
    assert f.result.details["fallback"] == "pooled-ols"
    assert any("did not converge" in c or "boundary" in c for c in f.cautions)
