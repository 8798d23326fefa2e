"""Coefficient files: the file alone reproduces the in-memory fit; bad files are refused.

References: the in-memory ``Fit.predict`` (itself checked against statsmodels in
test_fit_api.py) for every interval method, and statsmodels OLS ``get_prediction``
(observation interval) directly for the analytic band rebuilt from the file. Tolerance
1e-9 relative: both sides do the same arithmetic up to rounding (~1e-13 seen).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from refit.coefficients import (SCHEMA_VERSION, canonical_bytes, content_sha256, fit_record,
                                load, read_record, with_hash, write_record)
from refit.errors import InvalidDataError, UnreadableInputError, UsageError
from refit.models.fitting import fit

PROV = {"dataset": {"kind": "store", "name": "test", "version": 1, "sha256": "0" * 64},
        "subset": {"filters": []}, "recipe": None, "recipe_sha256": None}
RTOL = 1e-9


@pytest.fixture(scope="module")
def table():
    rng = np.random.default_rng(20261201)
    n = 80
    d = rng.uniform(10, 200, n)
    c = rng.uniform(40, 90, n)
    p = 140 + 6 * d - 0.013 * d * d + 3 * c + rng.normal(0, 60, n)
    return pd.DataFrame({"bk_depth_cm": d, "cia_k": c, "map_mm": p,
                         "w": rng.uniform(0.5, 2.0, n)})


def _record(f, method, tmp_path, seed=7, level=0.95):
    rec = fit_record(f, function_id="map_from_bk_depth", provenance=PROV, cv=None,
                     interval_method=method, level=level, seed=seed)
    return write_record(rec, tmp_path / "f.json")


def _same(a, b, flags=True):
    for k in ("estimate", "lower", "upper"):
        np.testing.assert_allclose(getattr(b, k), a[k].to_numpy(float), rtol=RTOL,
                                   atol=1e-9, equal_nan=True, err_msg=k)
    if flags:
        assert list(b.flags) == list(a["flags"].astype(str))


DEPTHS = np.array([5.0, 20.0, 50.0, 100.0, 150.0, 199.0, 260.0, 400.0, np.nan])
CASES = [(form, deg, "inverse", m) for form, deg in
         [("linear", None), ("quadratic", None), ("polynomial", 3), ("exponential", None)]
         for m in ("analytic", "split-conformal", "jackknife+", "cv+")]
CASES += [(form, deg, "forward", "analytic") for form, deg in
          [("linear", None), ("quadratic", None), ("exponential", None)]]


@pytest.mark.parametrize("form,degree,direction,method", CASES)
def test_file_reproduces_fit(table, tmp_path, form, degree, direction, method):
    f = fit(table, "map_mm", ["bk_depth_cm"], form=form, degree=degree, direction=direction)
    eq = load(_record(f, method, tmp_path))
    v = DEPTHS if direction == "inverse" else np.array([300, 500, 700, 900, 1200, np.nan])
    _same(f.predict(v, interval=method, seed=7), eq.predict(v))
    assert eq.predict(v).exact


def test_several_predictors_and_other_level(table, tmp_path):
    f = fit(table, "map_mm", ["bk_depth_cm", "cia_k"], form="quadratic")
    eq = load(_record(f, "analytic", tmp_path))
    v = pd.DataFrame({"bk_depth_cm": [30.0, 120.0, 250.0], "cia_k": [45.0, 70.0, 99.0]})
    _same(f.predict(v, level=0.8), eq.predict(v, level=0.8))
    _same(f.predict(v), eq.predict({k: v[k].to_numpy() for k in v}))


def test_conformal_other_level_uses_stored_scores(table, tmp_path):
    f = fit(table, "map_mm", ["bk_depth_cm"], form="linear")
    eq = load(_record(f, "split-conformal", tmp_path, seed=3))
    for level in (0.5, 0.8, 0.9):
        _same(f.predict(DEPTHS, level=level, interval="split-conformal", seed=3),
              eq.predict(DEPTHS, level=level))


@pytest.mark.parametrize("estimator", ["wls", "huber"])
def test_weighted_and_robust(table, tmp_path, estimator):
    kw = {"weights": "w"} if estimator == "wls" else {}
    f = fit(table, "map_mm", ["bk_depth_cm"], form="quadratic", estimator=estimator, **kw)
    eq = load(_record(f, "analytic", tmp_path))
    _same(f.predict(DEPTHS, weights=2.0), eq.predict(DEPTHS, weights=2.0))


def test_quantile_curves(table, tmp_path):
    f = fit(table, "map_mm", ["bk_depth_cm"], estimator="quantile", quantiles=(0.05, 0.95))
    eq = load(_record(f, "quantile", tmp_path, level=0.9))
    assert eq.record["covariance"] is None
    _same(f.predict(DEPTHS, level=0.9), eq.predict(DEPTHS))


def test_analytic_band_against_statsmodels(table, tmp_path):
    # reference: statsmodels OLS get_prediction, observation interval (obs_ci_*)
    import statsmodels.api as sm

    f = fit(table, "map_mm", ["bk_depth_cm"], form="quadratic")
    eq = load(_record(f, "analytic", tmp_path))
    d = table["bk_depth_cm"].to_numpy()
    X = np.column_stack([np.ones_like(d), d, d * d])
    x0 = np.array([20.0, 100.0, 180.0])
    frame = sm.OLS(table["map_mm"].to_numpy(), X).fit().get_prediction(
        np.column_stack([np.ones(3), x0, x0 * x0])).summary_frame(alpha=0.05)
    got = eq.predict(x0)
    np.testing.assert_allclose(got.estimate, frame["mean"], rtol=1e-9)
    np.testing.assert_allclose(got.lower, frame["obs_ci_lower"], rtol=1e-9)
    np.testing.assert_allclose(got.upper, frame["obs_ci_upper"], rtol=1e-9)


def test_bootstrap_is_labelled_approximate_and_close(table, tmp_path):
    # The file carries a summary of the bootstrap, not its draws: the rebuilt limits are an
    # approximation. Seeded example: each limit within 10% of the in-memory interval's
    # width (bound chosen for this design, n = 80, B = 1000; observed 0.5-6%).
    f = fit(table, "map_mm", ["bk_depth_cm"], form="linear")
    eq = load(_record(f, "bootstrap-pairs", tmp_path, seed=11))
    assert eq.record["interval"]["exact"] is False
    assert "approximation" in eq.record["interval"]["approximation"]
    x = np.array([20.0, 100.0, 180.0])
    a = f.predict(x, interval="bootstrap-pairs", seed=11)
    b = eq.predict(x)
    width = (a["upper"] - a["lower"]).to_numpy()
    np.testing.assert_allclose(b.estimate, a["estimate"], rtol=RTOL)
    assert np.all(np.abs(b.lower - a["lower"].to_numpy()) < 0.10 * width)
    assert np.all(np.abs(b.upper - a["upper"].to_numpy()) < 0.10 * width)
    assert not b.exact


# ----------------------------------------------------------------------------- the format
def test_hash_is_of_canonical_content(table, tmp_path):
    import hashlib

    f = fit(table, "map_mm", ["bk_depth_cm"])
    path = _record(f, "analytic", tmp_path)
    rec = json.loads(path.read_text("utf-8"))
    body = {k: v for k, v in rec.items() if k != "sha256"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert rec["sha256"] == hashlib.sha256(text.encode("utf-8")).hexdigest()
    assert canonical_bytes(rec) == text.encode("utf-8")
    # the newest schema is 1.4.0; a fit without a worksheet is written as 1.3.0, the lowest
    # version that describes it, so its bytes and hash are as before the sheet member
    assert SCHEMA_VERSION == "1.4.0"
    assert rec["schema_version"] == "1.3.0"
    assert "sheet" not in rec["provenance"]["dataset"]
    for key in ("function_id", "version", "created", "response", "predictors", "direction",
                "form", "estimator", "terms", "coefficients", "covariance",
                "residual_std_error", "df_resid", "n", "r_squared", "interval", "cv",
                "domain", "provenance", "cautions"):
        assert key in rec


def _rewrite(path, change, rehash=True):
    rec = json.loads(path.read_text("utf-8"))
    change(rec)
    if rehash:
        rec = with_hash(rec)
    path.write_text(json.dumps(rec), "utf-8")


@pytest.fixture
def good(table, tmp_path):
    return _record(fit(table, "map_mm", ["bk_depth_cm"]), "analytic", tmp_path)


def test_edited_file_refused(good):
    _rewrite(good, lambda r: r["coefficients"].__setitem__(0, 1.0), rehash=False)
    with pytest.raises(InvalidDataError, match=r"f\.json: \$\.sha256 does not match"):
        load(good)


@pytest.mark.parametrize("change,where", [
    (lambda r: r.pop("terms"), r"\$: 'terms' is a required property"),
    (lambda r: r["interval"].__setitem__("level", 1.5), r"\$\.interval\.level"),
    (lambda r: r["predictors"][0].__setitem__("name", 3), r"\$\.predictors\[0\]\.name"),
    (lambda r: r.__setitem__("direction", "sideways"), r"\$\.direction"),
])
def test_schema_violation_names_the_field(good, change, where):
    _rewrite(good, change)
    with pytest.raises(InvalidDataError, match=where):
        read_record(good)


def test_unknown_schema_version(good):
    _rewrite(good, lambda r: r.__setitem__("schema_version", "2.0.0"))
    with pytest.raises(InvalidDataError, match=r"\$\.schema_version is '2\.0\.0'"):
        load(good)


def test_truncated_missing_and_nan_files(good, tmp_path):
    text = good.read_text("utf-8")
    good.write_text(text[: len(text) // 2], "utf-8")
    with pytest.raises(InvalidDataError, match="not valid JSON.*truncated"):
        load(good)
    with pytest.raises(UnreadableInputError, match="no such coefficient file"):
        load(tmp_path / "absent.json")
    good.write_text(text.replace('"r_squared": ', '"r_squared": NaN, "x": '), "utf-8")
    with pytest.raises(InvalidDataError, match="NaN is not allowed"):
        load(good)


def test_wrong_shape_of_covariance_refused(good):
    _rewrite(good, lambda r: r.__setitem__("covariance", [[1.0]]))
    with pytest.raises(InvalidDataError, match=r"\$\.covariance must be 2 x 2"):
        load(good)


def test_bad_values_and_levels(good):
    eq = load(good)
    with pytest.raises(InvalidDataError):
        eq.predict(["deep"])
    with pytest.raises(UsageError, match="level must be"):
        eq.predict([10.0], level=95)
    with pytest.raises(UsageError, match="lack column"):
        eq.predict({"depth": [1.0]})
    out = eq.predict([np.nan, 10.0])
    assert out.flags[0] == "missing-value" and np.isnan(out.estimate[0])


def test_run_folder_records_load(tmp_path):
    # the fit matrix's candidate files are valid coefficient files carrying the recipe
    from refit.coefficients import validate

    rec = json.loads(json.dumps(fit_record(
        fit(pd.DataFrame({"bk_depth_cm": [1.0, 2.0, 3.0, 5.0], "map_mm": [2.0, 4.1, 5.9,
            10.2]}), "map_mm", ["bk_depth_cm"]), function_id="map_from_bk_depth",
        provenance=PROV | {"recipe": {"function": {"id": "map_from_bk_depth"}}}, cv=None,
        interval_method="analytic", level=0.95)))
    validate(rec)
    assert rec["provenance"]["recipe"]["function"]["id"] == "map_from_bk_depth"
    assert rec["sha256"] == content_sha256(rec)


@pytest.fixture(scope="module")
def dry_table():
    # Seeded invented dry-climate calibration: MAP 30-700 mm and a Bk depth that deepens
    # with MAP, scattered enough that prediction bands of shallow Bk horizons reach 0 mm.
    rng = np.random.default_rng(20261202)
    n = 60
    p = rng.uniform(30, 700, n)
    d = 8 + 0.16 * p - 5e-5 * p * p + rng.normal(0, 9, n)
    return pd.DataFrame({"bk_depth_cm": np.round(d, 1), "map_mm": np.round(p, 1)})


def test_forward_file_cuts_at_the_physical_bound_like_the_fit(dry_table, tmp_path):
    # Reference: the in-memory Fit.predict, which cuts the search window at map_mm >= 0
    # (the schema range of the column). The file must record that bound and reproduce
    # estimate, limits and flags to 1e-9; without the bound (a file of the old layout)
    # the limits would run below 0 mm, so this check can fail.
    from refit.coefficients.evaluate import evaluate

    f = fit(dry_table, "map_mm", ["bk_depth_cm"], form="quadratic", direction="forward")
    path = _record(f, "analytic", tmp_path)
    v = np.array([0.5, 2.0, 5.0, 10.0, 20.0, 40.0, 80.0, np.nan])
    a = f.predict(v)
    cut = a["flags"].str.contains("truncated-at-bound") & (a["lower"] == 0.0)
    assert cut.sum() >= 2  # the band does reach 0 mm for shallow horizons
    assert not a["flags"].str.contains("open-below").any()  # a bound, not the window's edge
    assert (a.loc[cut, "lower_untruncated"] < 0).all()
    assert a.loc[~cut, "lower_untruncated"].isna().all()
    b = load(path).predict(v)
    _same(a, b)
    # the file keeps the limit before the cut as the fit does (the band's crossing below
    # 0 mm, searched again without the bound)
    np.testing.assert_allclose(b.lower_untruncated, a["lower_untruncated"], rtol=1e-9,
                               equal_nan=True)
    assert np.isnan(b.upper_untruncated).all() and b.truncated()
    rec = read_record(path)
    assert rec["interval"]["inversion"]["bounds"] == [0.0, 12000.0]
    del rec["interval"]["inversion"]["bounds"]
    old = evaluate(rec, v[:, None], 0.95, np.ones(len(v)))
    assert np.nanmin(old[1]) < 0.0


def test_forward_theil_sen_file_reproduces_the_approximate_interval(dry_table, tmp_path):
    # Reference: Fit.predict of a Theil-Sen forward line (bootstrap covariance, RMS
    # residual as the new observation's SD, 'approximate-interval' flag, limits cut at
    # 0 mm); the file must give the same estimate, limits and flags to 1e-9.
    f = fit(dry_table, "map_mm", ["bk_depth_cm"], form="linear", estimator="theil-sen",
            direction="forward")
    path = _record(f, "analytic", tmp_path)
    v = np.array([0.5, 3.0, 15.0, 40.0, 70.0, 100.0, np.nan])
    a = f.predict(v)
    assert a["flags"].iloc[2].endswith("approximate-interval")
    assert (a["lower"] == 0.0).any()
    b = load(path).predict(v)
    _same(a, b)
    inv = read_record(path)["interval"]["inversion"]
    assert inv["approximate"] is True
    assert inv["prediction_sd"] != pytest.approx(read_record(path)["residual_std_error"])


def test_inverse_theil_sen_file_reproduces_the_approximate_interval(dry_table, tmp_path):
    # Reference: Fit.predict of a Theil-Sen inverse line (bootstrap covariance, RMS
    # residual as the new observation's SD, 'approximate-interval' flag); the file must
    # give the same estimate, limits and flags to 1e-9 (it used to carry no covariance).
    f = fit(dry_table, "map_mm", ["bk_depth_cm"], form="linear", estimator="theil-sen")
    path = _record(f, "analytic", tmp_path)
    v = np.array([5.0, 20.0, 60.0, 150.0, np.nan])
    a = f.predict(v)
    assert a["flags"].iloc[1] == "approximate-interval"
    b = load(path).predict(v)
    _same(a, b)
    iv = read_record(path)["interval"]
    assert iv["approximate"] is True
    assert iv["prediction_sd"] != pytest.approx(read_record(path)["residual_std_error"])


def test_pruned_plus_band_equals_the_full_order_statistics(monkeypatch):
    # Reference: numpy.sort over all n leave-out values per new row, ranks of Barber,
    # Candes, Ramdas & Tibshirani (2021, Ann. Stat. 49:486), lower floor(alpha(n+1))-th
    # smallest of x'B_i - r_i, upper ceil((1-alpha)(n+1))-th smallest of x'B_i + r_i.
    # The evaluator keeps only the rows that can reach those ranks; the limits must be the
    # same, on one thread or several.
    import refit.coefficients.evaluate as ev

    rng = np.random.default_rng(20261202)
    n, p, m = 150, 3, 9_000
    b = np.array([500.0, 3.0, -0.004])
    B = b + rng.normal(size=(n, p)) * [5.0, 0.05, 1e-4]
    r = np.abs(rng.normal(0, 80.0, n))
    v = rng.uniform(5, 300, m)
    x0 = np.column_stack([np.ones(m), v, v * v])
    alpha = 0.1
    monkeypatch.setenv("REFIT_THREADS", "1")
    lo, hi = ev._plus_band(x0, B, b, r, alpha)
    monkeypatch.setenv("REFIT_THREADS", "2")  # blocks on two threads: the same bits
    lo2, hi2 = ev._plus_band(x0, B, b, r, alpha)
    np.testing.assert_array_equal(lo2, lo)
    np.testing.assert_array_equal(hi2, hi)
    mu = x0 @ B.T
    k_lo, k_hi = int(np.floor(alpha * (n + 1))), int(np.ceil((1 - alpha) * (n + 1)))
    want_lo = np.sort(mu - r, axis=1)[:, k_lo - 1]
    want_hi = np.sort(mu + r, axis=1)[:, k_hi - 1]
    np.testing.assert_allclose(lo, want_lo, rtol=1e-13)
    np.testing.assert_allclose(hi, want_hi, rtol=1e-13)
    # the pruning did cut: fewer candidate rows than n for these blocks
    W, g = ev._deviation_basis(B - b)
    norm = np.sqrt(np.einsum("ij,jk,ik->i", x0, W, x0)).max()
    scale = float(np.abs(B).max() * np.abs(x0).max() + r.max())
    assert ev._candidates(r, norm * g, k_lo, scale).size < n / 2


@pytest.mark.parametrize("direction,method", [("forward", "analytic"),
                                              ("inverse", "jackknife+"), ("inverse", "cv+")])
def test_repeated_values_evaluated_once_give_the_same_bits(table, tmp_path, monkeypatch,
                                                           direction, method):
    # Fossil depths recorded to 0.1 cm repeat in a large batch; the evaluator then works
    # once per distinct value. Reference: the plain row-by-row evaluation of the same file
    # (the shortcut switched off); every estimate, limit and flag must be identical.
    import refit.coefficients.evaluate as ev

    f = fit(table, "map_mm", ["bk_depth_cm"], form="quadratic", direction=direction)
    eq = load(_record(f, method, tmp_path))
    rng = np.random.default_rng(12)
    v = (np.round(rng.uniform(2.0, 320.0, 70_000), 1) if direction == "inverse"
         else np.round(rng.uniform(150.0, 1300.0, 70_000), 0))
    v[::997] = np.nan
    assert ev._repeats_pay(eq.record, v[:, None], np.ones(v.size))
    fast = eq.predict(v)
    monkeypatch.setattr(ev, "DEDUP_ROWS", 10**9)
    plain = eq.predict(v)
    for k in ("estimate", "lower", "upper"):  # forward: every bit; else the last bit of
        # a matrix product may differ (BLAS rounding depends on the matrix's size)
        np.testing.assert_allclose(getattr(fast, k), getattr(plain, k), err_msg=k,
                                   rtol=0 if direction == "forward" else 5e-16, atol=0)
    assert list(fast.flags) == list(plain.flags)
    # an inverse analytic file is cheap: evaluated row by row whatever the repeats
    assert not ev._repeats_pay({"direction": "inverse", "interval": {"method": "analytic"}},
                               v[:, None], np.ones(v.size))
    assert np.isnan(fast.estimate[::997]).all()


def test_malformed_subset_filters_are_refused_by_the_schema(table, tmp_path):
    # Found by the 10,000-example fuzz run: a file whose provenance.subset.filters held a
    # null crashed `refit apply` (the setting comparison read it). The schema now says what
    # a filter is, so the file is refused on loading with the JSON path of the bad entry.
    from refit.coefficients import dumps, with_hash

    f = fit(table, "map_mm", ["bk_depth_cm"])
    rec = read_record(_record(f, "analytic", tmp_path))
    rec["provenance"]["subset"]["filters"] = [None]
    bad = tmp_path / "bad.json"
    bad.write_text(dumps(with_hash(rec)), encoding="utf-8")
    with pytest.raises(InvalidDataError, match=r"\$\.provenance\.subset\.filters\[0\]"):
        load(bad)
    for value in (None, [], {"min": 1, "upper": 3}):  # not a value of its kind
        kind = "range" if isinstance(value, dict) else "one-of" if value == [] else "equals"
        rec["provenance"]["subset"]["filters"] = [
            {"column": "parent_material", "kind": kind, "value": value}]
        bad.write_text(dumps(with_hash(rec)), encoding="utf-8")
        with pytest.raises(InvalidDataError, match=r"filters\[0\]"):
            load(bad)
    rec["provenance"]["subset"]["filters"] = [
        {"column": "parent_material", "kind": "equals", "value": "loess"}]
    good = tmp_path / "good.json"
    good.write_text(dumps(with_hash(rec)), encoding="utf-8")
    assert load(good).record["provenance"]["subset"]["filters"][0]["kind"] == "equals"
