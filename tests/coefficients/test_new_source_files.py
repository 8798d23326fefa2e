"""Coefficient files of new-source intervals: the mixed fit's between-source block and
covariance, and the group-level jackknife+/CV+ quantities, evaluated with numpy alone.

Checks: the file consumer equals ``Fit.predict`` to 1e-10 in both directions where the
direction applies; the random-slope interval against statsmodels ``MixedLM`` numbers
(fixed-effect covariance, cov_re, scale) computed here; the group intervals against a
brute-force leave-one-group-out computation written plainly here (Barber, Candes, Ramdas
& Tibshirani 2021, Ann. Statist. 49:486, for the jackknife+ limits; Dunn, Wasserman &
Ramdas 2023, JASA, for the two-layer weights); unbounded limits with their reason; a
tampered new field fails the hash check. Data: seeded invented clustered calibrations.
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from statsmodels.regression.mixed_linear_model import MixedLM

from refit.coefficients import content_sha256, dumps, fit_record, load, write_record
from refit.errors import InvalidDataError, UsageError
from refit.models.fitting import fit
from refit.models.robust import fit_huber

PROV = {"dataset": {"name": "invented", "version": 1, "sha256": "0" * 64}, "subset": {},
        "recipe": None, "recipe_sha256": None}
DEPTHS = np.array([20.0, 45.0, 70.0, 95.0, 130.0, np.nan])
MAPS = np.array([250.0, 420.0, 610.0, 800.0])
TOL = 1e-10


def clustered(seed=7, n_sources=24, sd_source=80.0, sd_soil=60.0, soils=6, slope_sd=0.0):
    rng = np.random.default_rng(seed)
    codes = np.repeat(np.arange(n_sources), soils)
    centre = rng.uniform(30, 120, n_sources)[codes]
    depth = centre + rng.uniform(-25, 25, codes.size)
    slope = 5.0 + rng.normal(0, slope_sd, n_sources)[codes]
    map_mm = (150 + slope * depth + rng.normal(0, sd_source, n_sources)[codes]
              + rng.normal(0, sd_soil, codes.size))
    return pd.DataFrame({"bk_depth_cm": depth, "map_mm": map_mm,
                         "source": [f"src{c:02d}" for c in codes]})


def written(f, method, tmp_path, name="f.json", **kw):
    rec = fit_record(f, function_id="map_from_bk_depth", cv=None, level=0.95,
                     interval_method=method, provenance=PROV, **kw)
    return load(write_record(rec, tmp_path / name)), rec


def same(file_pred, fit_pred):
    for col in ("estimate", "lower", "upper"):
        a, b = getattr(file_pred, col), fit_pred[col].to_numpy()
        np.testing.assert_array_equal(np.isnan(a), np.isnan(b))
        np.testing.assert_allclose(a, b, rtol=TOL, atol=TOL)
    assert list(file_pred.flags) == list(fit_pred["flags"].astype(str))


# ----------------------------------------------------------------------------- mixed
@pytest.mark.parametrize("direction", ["inverse", "forward"])
@pytest.mark.parametrize("slope", [False, True])
def test_mixed_file_equals_fit_predict(tmp_path, direction, slope):
    d = clustered(seed=5, slope_sd=0.8 if slope else 0.0)
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source",
            direction=direction, random_slope=slope)
    assert f.result.details["random_slope"] is slope  # no fallback on these data
    eq, rec = written(f, "analytic", tmp_path)
    bs = rec["between_source"]
    det = f.result.details
    assert bs["groups"] == "source" and bs["n_groups"] == 24
    assert bs["between_sd"] == pytest.approx(det["between_sd"], rel=1e-15)
    assert bs["icc"] == pytest.approx(det["icc"], rel=1e-15)
    assert bs["df_method"] == "satterthwaite" and bs["fallback"] is None
    assert rec["provenance"]["groups"] == "source"
    assert rec["provenance"]["random_slope"] is slope
    np.testing.assert_allclose(rec["interval"]["between_covariance"],
                               det["between_covariance"], rtol=1e-15)
    values = DEPTHS if direction == "inverse" else MAPS
    for level in (0.95, 0.8):
        same(eq.predict(values, level), f.predict(values, level))
    if direction == "inverse":  # new observations' weights: s_e^2 / w0 only
        w0 = np.array([1.0, 2.0, 4.0, 1.0, 3.0, 1.0])
        same(eq.predict(DEPTHS, weights=w0), f.predict(DEPTHS, weights=w0))


def _statsmodels_slope(d):
    # Reference: statsmodels MixedLM (REML) with a random intercept and slope on
    # (1, (x - c)/s), fitted here; cov_re mapped to (1, x) terms
    x = d.bk_depth_cm.to_numpy()
    c, s = x.mean(), x.std()
    Z = np.column_stack([np.ones_like(x), (x - c) / s])
    X = np.column_stack([np.ones_like(x), x])
    ref = MixedLM(d.map_mm.to_numpy(), X, groups=d.source.to_numpy(), exog_re=Z).fit(reml=True)
    T = np.array([[1.0, 0.0], [-c / s, 1.0 / s]])
    return ref, T.T @ np.asarray(ref.cov_re) @ T, np.asarray(ref.cov_params())[:2, :2]


def test_random_slope_interval_from_statsmodels_numbers(tmp_path):
    d = clustered(seed=5, slope_sd=0.8)
    ref, B, C = _statsmodels_slope(d)
    assert ref.converged
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source", random_slope=True)
    eq, _ = written(f, "analytic", tmp_path)
    x0 = DEPTHS[:-1]
    X0 = np.column_stack([np.ones_like(x0), x0])
    # new-source variance s_e^2 + x0' B x0 + x0' C x0, row by row (statsmodels numbers)
    var = ref.scale + np.einsum("ij,jk,ik->i", X0, B + C, X0)
    half = stats.t.ppf(0.975, f.df_resid) * np.sqrt(var)
    est = X0 @ ref.fe_params
    p, q = f.predict(x0), eq.predict(x0)
    # the same REML optimum to the optimiser's tolerance
    np.testing.assert_allclose(p["lower"], est - half, rtol=1e-6)
    np.testing.assert_allclose(p["upper"], est + half, rtol=1e-6)
    np.testing.assert_allclose(q.upper, est + half, rtol=1e-6)
    # the width now changes with x as B says: not the constant widest variance
    w = p["upper"].to_numpy() - p["lower"].to_numpy()
    assert np.ptp(w) > 0.01 * w.mean()
    assert not any("widest" in c for c in f.cautions)


def test_random_slope_forward_band_from_statsmodels_numbers():
    d = clustered(seed=5, slope_sd=0.8)
    # forward: depth = a + b map, random intercept and slope on map (statsmodels here)
    m = d.map_mm.to_numpy()
    c, s = m.mean(), m.std()
    Xf = np.column_stack([np.ones_like(m), m])
    Z = np.column_stack([np.ones_like(m), (m - c) / s])
    ref = MixedLM(d.bk_depth_cm.to_numpy(), Xf, groups=d.source.to_numpy(),
                  exog_re=Z).fit(reml=True)
    T = np.array([[1.0, 0.0], [-c / s, 1.0 / s]])
    V = np.asarray(ref.cov_params())[:2, :2] + T.T @ np.asarray(ref.cov_re) @ T
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source",
            direction="forward", random_slope=True)
    assert f.result.details["random_slope"]
    t = stats.t.ppf(0.975, f.df_resid)
    a, b = ref.fe_params
    y0 = np.array([60.0, 90.0])
    p = f.predict(y0)
    for i, y in enumerate(y0):
        # limits: roots of (y - a - b x)^2 = t^2 (s_e^2 + g' V g), g = (1, x) (Fieller)
        quad = [b * b - t * t * V[1, 1], -2 * b * (y - a) - 2 * t * t * V[0, 1],
                (y - a) ** 2 - t * t * (ref.scale + V[0, 0])]
        lo, hi = np.sort(np.roots(quad).real)
        assert p["lower"].iat[i] == pytest.approx(lo, rel=1e-6)
        assert p["upper"].iat[i] == pytest.approx(hi, rel=1e-6)


# ----------------------------------------------------------------------------- group intervals
def brute(X, y, groups, x0, alpha, fit_one, fold_of=None):
    """Leave-one-group-out (or fold) refits and the weighted limits, written plainly."""
    labels = np.unique(groups)
    G = labels.size
    fold_of = fold_of if fold_of is not None else {lab: i for i, lab in enumerate(labels)}
    hi_vals, lo_vals, w = [], [], []
    for lab in labels:
        rows = groups == lab
        out = np.array([fold_of[v] == fold_of[lab] for v in groups])
        b = fit_one(X[~out], y[~out])
        for ri in np.abs(y[rows] - X[rows] @ b):
            hi_vals.append(x0 @ b + ri)
            lo_vals.append(x0 @ b - ri)
            w.append(1.0 / ((G + 1) * rows.sum()))
    hi_vals, lo_vals, w = np.array(hi_vals).T, np.array(lo_vals).T, np.array(w)
    lower, upper = [], []
    for j in range(x0.shape[0]):
        o = np.argsort(hi_vals[j])
        k = np.nonzero(np.cumsum(w[o]) >= 1 - alpha - 1e-12)[0]
        upper.append(hi_vals[j][o][k[0]] if k.size else np.inf)
        o = np.argsort(-lo_vals[j])
        k = np.nonzero(np.cumsum(w[o]) >= 1 - alpha - 1e-12)[0]
        lower.append(lo_vals[j][o][k[0]] if k.size else -np.inf)
    return np.array(lower), np.array(upper)


FITS = {"ols": lambda X, y: np.linalg.lstsq(X, y, rcond=None)[0],
        "huber": lambda X, y: fit_huber(X, y).coefficients}


@pytest.mark.parametrize("estimator", ["ols", "huber"])
@pytest.mark.parametrize("method", ["group-jackknife+", "group-cv+"])
def test_group_interval_file_equals_fit_and_brute_force(tmp_path, estimator, method):
    d = clustered(seed=3)
    f = fit(d, "map_mm", "bk_depth_cm", estimator=estimator, groups="source")
    eq, rec = written(f, method, tmp_path, folds=6, seed=4)
    iv = rec["interval"]
    assert iv["n_groups"] == 24 and iv["groups"] == "source" and not iv["unbounded"]
    assert np.shape(iv["left_out_coefficients"]) == ((24, 2) if method == "group-jackknife+"
                                                      else (6, 2))
    for level in (0.95, 0.8):
        p = f.predict(DEPTHS, level, interval=method, folds=6, seed=4)
        same(eq.predict(DEPTHS, level), p)
        fold_of = None
        if method == "group-cv+":
            labels = np.unique(d.source)
            fold_of = dict(zip(labels, iv["group_folds"]))
        X = np.column_stack([np.ones(len(d)), d.bk_depth_cm])
        x0 = np.column_stack([np.ones(5), DEPTHS[:-1]])
        lo, hi = brute(X, d.map_mm.to_numpy(), d.source.to_numpy(), x0, 1 - level,
                       FITS[estimator], fold_of)
        # lstsq against block deletion (OLS) or the same IRLS (Huber): rounding apart
        np.testing.assert_allclose(p["lower"].to_numpy()[:-1], lo, rtol=1e-8)
        np.testing.assert_allclose(p["upper"].to_numpy()[:-1], hi, rtol=1e-8)


def test_mixed_group_jackknife_refits_the_mixed_model(tmp_path):
    d = clustered(seed=9, n_sources=20)
    f = fit(d, "map_mm", "bk_depth_cm", estimator="mixed", groups="source")
    eq, rec = written(f, "group-jackknife+", tmp_path)
    same(eq.predict(DEPTHS, 0.9), f.predict(DEPTHS, 0.9, interval="group-jackknife+"))
    # the left-out vector of the first source is a mixed refit without it (statsmodels)
    keep = d.source != "src00"
    X = np.column_stack([np.ones(keep.sum()), d.bk_depth_cm[keep]])
    ref = MixedLM(d.map_mm[keep].to_numpy(), X, groups=d.source[keep].to_numpy()).fit(reml=True)
    np.testing.assert_allclose(rec["interval"]["left_out_coefficients"][0], ref.fe_params,
                               rtol=1e-6)


@pytest.mark.parametrize("method", ["group-jackknife+", "group-cv+"])
def test_too_few_groups_is_unbounded_with_its_reason(tmp_path, method):
    d = clustered(seed=2, n_sources=8, soils=8)
    f = fit(d, "map_mm", "bk_depth_cm", groups="source")
    p = f.predict(DEPTHS, interval=method, folds=4)
    ok = ~np.isnan(DEPTHS)
    assert np.all(np.isneginf(p["lower"][ok])) and np.all(np.isposinf(p["upper"][ok]))
    assert all("unbounded" in s for s in p["flags"].astype(str)[ok])
    # 95 % needs at least ceil(0.95 / 0.05) = 19 groups (G / (G + 1) >= 0.95)
    assert "8 groups are too few" in p.attrs["cautions"][0] and "19" in p.attrs["cautions"][0]
    eq, rec = written(f, method, tmp_path, folds=4)
    assert rec["interval"]["unbounded"] is True
    assert rec["interval"]["reason"] == p.attrs["cautions"][0]
    assert rec["interval"]["reason"] in rec["cautions"]
    q = eq.predict(DEPTHS)
    same(q, p)
    assert q.cautions == (p.attrs["cautions"][0],)
    # 80 % needs 4 groups: bounded, no caution, file and fit agree
    q8, p8 = eq.predict(DEPTHS, 0.8), f.predict(DEPTHS, 0.8, interval=method, folds=4)
    assert np.all(np.isfinite(q8.upper[ok])) and q8.cautions == ()
    assert "cautions" not in p8.attrs
    same(q8, p8)


def test_group_interval_needs_groups():
    f = fit(clustered(), "map_mm", "bk_depth_cm")
    with pytest.raises(UsageError, match=r"groups=.*groups='source'"):
        f.predict(DEPTHS, interval="group-jackknife+")
    g = fit(clustered(), "map_mm", "bk_depth_cm", groups="source", direction="forward")
    with pytest.raises(UsageError, match="not available for direction 'forward'"):
        g.predict(MAPS, interval="group-cv+")


# ----------------------------------------------------------------------------- the format
@pytest.mark.parametrize("field,method", [
    (("interval", "between_covariance", 1, 1), "analytic"),
    (("between_source", "between_sd"), "analytic"),
    (("interval", "left_out_coefficients", 3, 1), "group-jackknife+"),
    (("interval", "row_abs_residuals", 7), "group-jackknife+"),
    (("interval", "row_groups", 0), "group-cv+")])
def test_tampered_new_field_fails_the_hash(tmp_path, field, method):
    d = clustered(seed=5, slope_sd=0.8)
    kw = ({"estimator": "mixed", "random_slope": True} if method == "analytic" else {})
    f = fit(d, "map_mm", "bk_depth_cm", groups="source", **kw)
    _, rec = written(f, method, tmp_path, folds=5)
    assert load(tmp_path / "f.json").sha256 == rec["sha256"]
    node = rec
    for key in field[:-1]:
        node = node[key]
    node[field[-1]] = node[field[-1]] + 1
    (tmp_path / "t.json").write_text(dumps(rec), encoding="utf-8")
    with pytest.raises(InvalidDataError, match="sha256 does not match"):
        load(tmp_path / "t.json")


def test_schema_1_1_files_still_read(tmp_path):
    f = fit(clustered(), "map_mm", "bk_depth_cm")
    _, rec = written(f, "analytic", tmp_path)
    assert rec["schema_version"] == "1.3.0"
    old = dict(rec, schema_version="1.1.0")
    old["sha256"] = content_sha256(old)
    (tmp_path / "old.json").write_text(dumps(old), encoding="utf-8")
    same(load(tmp_path / "old.json").predict(DEPTHS), f.predict(DEPTHS))


def test_group_shapes_are_checked(tmp_path):
    f = fit(clustered(), "map_mm", "bk_depth_cm", groups="source")
    _, rec = written(f, "group-jackknife+", tmp_path)
    bad = json.loads(json.dumps(rec))
    bad["interval"]["row_groups"][0] = 99
    bad["sha256"] = content_sha256(bad)
    (tmp_path / "bad.json").write_text(dumps(bad), encoding="utf-8")
    with pytest.raises(InvalidDataError, match="row_groups must use every group"):
        load(tmp_path / "bad.json")
