"""`refit apply --posterior` and the `--combine` rule: the CSV's posterior columns against
Equation.posterior and refit.models.posterior on the same fits, the consistency test
against its formula computed here with scipy, and the combination of proxies weighted by
cross-validated errors (a published +- alone is left out, never used).

Calibrations and fossils are a seeded simulation (invented data), as the rules allow."""

from __future__ import annotations

import csv
import io
import json
import math

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner
from scipy import integrate, stats

from refit.apply.combine import combine_proxies
from refit.apply.estimates import apply_files
from refit.cli.apply import apply
from refit.coefficients import fit_record, load, write_record
from refit.models.fitting import fit
from refit.models.posterior import climate_posterior, forward_proxy

PROV = {"dataset": {"name": "t", "version": 1, "sha256": "0" * 64}, "subset": {},
        "recipe": None, "recipe_sha256": None}
RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"
CIA_K = "refit/published/map_from_cia_k.sheldon2002.json"
DEMO = "calib_demo/fossils.csv"
COLS = ["posterior_median", "posterior_mode", "posterior_lower", "posterior_upper",
        "posterior_hdi_lower", "posterior_hdi_upper", "proxy_chi2", "proxy_chi2_p"]


@pytest.fixture(scope="module")
def files(tmp_path_factory):
    """Two forward fits (depth to Bk and Bk thickness on MAP) and their files."""
    rng = np.random.default_rng(11)
    x = rng.uniform(200, 1200, 60)
    t = pd.DataFrame({"map_mm": x, "bk_depth_cm": 10 + 0.08 * x + rng.normal(0, 8, 60),
                      "bk_thickness_cm": 20 + 0.05 * x + rng.normal(0, 6, 60)})
    fits = {p: fit(t, "map_mm", [p], direction="forward")
            for p in ("bk_depth_cm", "bk_thickness_cm")}
    folder = tmp_path_factory.mktemp("fwd")
    paths = {}
    for p, f in fits.items():
        rec = fit_record(f, function_id=f"map_from_{p}", cv=None, level=0.95,
                         interval_method="analytic", provenance=PROV)
        paths[p] = str(write_record(rec, folder / f"{p}.json"))
    return fits, paths


def _fossils(depth, thick, sd_d=5.0, sd_t=4.0):
    n = len(depth)
    return pd.DataFrame({"paleosol_id": [f"P{i}" for i in range(n)],
                         "bk_depth_cm": depth, "bk_depth_sd_cm": np.full(n, sd_d),
                         "bk_thickness_cm": thick, "bk_thickness_sd_cm": np.full(n, sd_t)})


def test_posterior_columns_equal_file_and_fit(files):
    fits, paths = files
    depth, thick = np.array([40.0, 60.0, 75.0, 90.0]), np.array([40.0, 50.0, 52.0, 70.0])
    res = apply_files([paths["bk_depth_cm"], paths["bk_thickness_cm"]],
                      _fossils(depth, thick), posterior=True).results
    for p, v, sd in (("bk_depth_cm", depth, 5.0), ("bk_thickness_cm", thick, 4.0)):
        rows = res[res["function_id"] == f"map_from_{p}"]
        file_post = load(paths[p]).posterior(v, sd=np.full(v.size, sd))
        fit_post = climate_posterior([forward_proxy(fits[p])], v, np.full(v.size, sd))
        for col in COLS[:6]:
            got = rows[col].to_numpy(float)
            # same numbers as the file's own evaluation; the fit in memory to 1e-10
            # (coefficients round-trip through JSON)
            np.testing.assert_allclose(got, file_post.columns()[col], rtol=0, atol=1e-9)
            np.testing.assert_allclose(got, fit_post.columns()[col], rtol=1e-10, atol=1e-7)
    both = res[res["function_id"] == "posterior"].reset_index(drop=True)
    assert list(both["paleosol_id"]) == ["P0", "P1", "P2", "P3"]
    ref = climate_posterior([forward_proxy(fits["bk_depth_cm"]),
                             forward_proxy(fits["bk_thickness_cm"])],
                            np.column_stack([depth, thick]), [5.0, 4.0])
    for col in COLS:
        np.testing.assert_allclose(both[col].to_numpy(float), ref.columns()[col],
                                   rtol=1e-10, atol=1e-7)
    # the combined row's estimate and interval are the posterior's median and interval
    np.testing.assert_allclose(both["estimate"], both["posterior_median"])
    np.testing.assert_allclose(both["lower"], both["posterior_lower"])
    # the chi-square p-value as scipy computes it (scipy.stats.chi2, 1 df)
    np.testing.assert_allclose(both["proxy_chi2_p"], stats.chi2.sf(both["proxy_chi2"], 1),
                               rtol=1e-9)
    recorded = json.loads(both["posterior_prior"].iloc[0])
    assert recorded["prior"]["kind"] == "uniform" and recorded["grid"]["points"] == 2000


def test_planted_disagreement_flagged_with_chi2(files):
    fits, paths = files
    # depth 30 cm says ~250 mm, thickness 75 cm says ~1100 mm: planted disagreement;
    # the second paleosol agrees (both ~700 mm)
    depth, thick = np.array([30.0, 66.0]), np.array([75.0, 55.0])
    res = apply_files([paths["bk_depth_cm"], paths["bk_thickness_cm"]],
                      _fossils(depth, thick), posterior=True).results
    both = res[res["function_id"] == "posterior"].reset_index(drop=True)
    assert "proxies-disagree" in both["flags"][0] and "chi2 =" in both["flag_details"][0]
    assert "proxies-disagree" not in both["flags"][1]
    # chi2 computed here: each proxy's own Student t likelihood (scipy.stats.t) normalised
    # over its own support (the recorded consistency grid) by scipy's trapezoid, its mean
    # and variance, then sum (m_k - m)^2 / v_k about the precision-weighted mean
    # (Cochran's Q, from memory)
    rec = json.loads(both["posterior_prior"][0])
    g = rec["consistency_grid"]
    grid = np.linspace(g["low"], g["high"], g["points"])
    for i in range(2):
        means, variances = [], []
        for p, v, sd in (("bk_depth_cm", depth[i], 5.0), ("bk_thickness_cm", thick[i], 4.0)):
            px = forward_proxy(fits[p])
            loc, var = px.location_variance(grid)
            d = stats.t.pdf(v, px.df, loc=loc, scale=np.sqrt(var + sd * sd))
            z = integrate.trapezoid(d, grid)
            m = integrate.trapezoid(grid * d, grid) / z
            means.append(m)
            variances.append(integrate.trapezoid((grid - m) ** 2 * d, grid) / z)
        w = 1 / np.array(variances)
        pooled = np.sum(w * means) / w.sum()
        chi2 = float(np.sum(w * (np.array(means) - pooled) ** 2))
        assert both["proxy_chi2"][i] == pytest.approx(chi2, rel=1e-6)
        assert both["proxy_chi2_p"][i] == pytest.approx(stats.chi2.sf(chi2, 1), rel=1e-6)
    assert both["proxy_chi2_p"][0] < 0.05 < both["proxy_chi2_p"][1]


def _row(fid, est, lo, hi, level, file):
    return {"paleosol_id": "A", "row": 2, "coefficient_file": file, "function_id": fid,
            "version": "1", "status": "", "candidate": "", "direction": "inverse",
            "response": "map_mm", "unit": "mm", "predictors_used": fid, "estimate": est,
            "lower": lo, "upper": hi, "level": level, "interval": "", "flags": "",
            "flag_details": "", "problem": ""}


def test_combine_uses_cross_validated_errors():
    z = stats.norm.ppf(0.975)
    rows = pd.DataFrame([_row("bk", 600.0, 600 - z * 100, 600 + z * 100, 0.95, "a"),
                         _row("cia", 1000.0, 900.0, 1100.0, None, "b")])
    recs = {"a": {"interval": {"method": "analytic"}, "cv": {"rmsep": 150.0}},
            "b": {"interval": {"method": "published"}, "cv": {"rmsep": 300.0}}}
    got = combine_proxies(rows, 0.95, recs).iloc[0]
    # rule: se = max(interval SE, cv.rmsep): 150 (not 100) and 300 (not the published 100)
    w = np.array([1 / 150**2, 1 / 300**2])
    e = np.array([600.0, 1000.0])
    mean = np.sum(w * e) / w.sum()
    chi2 = np.sum(w * (e - mean) ** 2)                 # 1.42 on 1 df: Birge ratio 1.19
    se = math.sqrt(1 / w.sum()) * math.sqrt(max(1.0, chi2))
    assert got["estimate"] == pytest.approx(mean)
    assert got["upper"] - got["lower"] == pytest.approx(2 * z * se)
    assert "proxies-disagree" not in got["flags"]      # p = 0.23 (scipy.stats.chi2.sf)
    assert f"p = {stats.chi2.sf(chi2, 1):.3g}" in got["flag_details"]
    # without a cross-validated error the published +- is left out: nothing combined
    recs["b"]["cv"] = None
    got = combine_proxies(rows, 0.95, recs).iloc[0]
    assert math.isnan(got["estimate"]) and "proxy-left-out" in got["flags"]
    assert "published ± 100" in got["problem"]


def test_combine_flags_disagreeing_proxies():
    z = stats.norm.ppf(0.975)
    rows = pd.DataFrame([_row("bk", 400.0, 400 - z * 80, 400 + z * 80, 0.95, "a"),
                         _row("th", 1000.0, 1000 - z * 90, 1000 + z * 90, 0.95, "b")])
    got = combine_proxies(rows, 0.95, {}).iloc[0]
    w = np.array([1 / 80**2, 1 / 90**2])
    e = np.array([400.0, 1000.0])
    chi2 = np.sum(w * (e - np.sum(w * e) / w.sum()) ** 2)   # 24.9: p = 6e-7
    assert "proxies-disagree" in got["flags"]
    assert f"chi2 = {chi2:.3g}" in got["flag_details"]
    # the interval widened by sqrt(chi2): never narrower than the proxies' scatter
    assert got["upper"] - got["lower"] == pytest.approx(
        2 * z * math.sqrt(1 / w.sum()) * math.sqrt(chi2))


def test_demo_published_pair_is_not_combined_silently():
    # MB-P01: Retallack (1994) depth to Bk and Sheldon (2002) CIA-K, both published +-
    # only with no cross-validated error: left out, said in the row
    res = apply_files([RETALLACK, CIA_K], DEMO, combine=True, seed=3).results
    comb = res[(res["function_id"] == "combined") & (res["paleosol_id"] == "MB-P01")].iloc[0]
    assert math.isnan(comb["estimate"]) and "fewer than two proxies" in comb["problem"]
    assert "proxy-left-out" in comb["flags"]


def test_cli_posterior_writes_columns_and_json(files, tmp_path):
    _, paths = files
    table = tmp_path / "f.csv"
    _fossils(np.array([50.0, 70.0]), np.array([45.0, 55.0])).to_csv(table, index=False)
    out = tmp_path / "est.csv"
    res = CliRunner().invoke(apply, [paths["bk_depth_cm"], paths["bk_thickness_cm"],
                                     "--fossils", str(table), "--posterior", "--prior",
                                     "normal:700:300", "--out", str(out)])
    assert res.exit_code == 0, res.output
    got = pd.read_csv(out)
    assert set(COLS) <= set(got.columns) and (got["function_id"] == "posterior").sum() == 2
    # the number of HDI pieces is written as a whole number (1, not 1.0) on every row
    rows = list(csv.DictReader(io.StringIO(out.read_text())))
    assert {r["posterior_hdi_pieces"] for r in rows[:2]} == {"1"}
    meta = json.loads((tmp_path / "est.csv.posterior.json").read_text())
    assert meta["posteriors"][-1]["prior"] == {"kind": "normal", "mean": 700.0, "sd": 300.0}
    for bad in (["--prior", "beta:1:2", "--posterior"], ["--prior", "uniform:1:2"]):
        res = CliRunner().invoke(apply, [paths["bk_depth_cm"], "--fossils", str(table),
                                         *bad])
        assert res.exit_code == 2 and "Error:" in res.output and "Traceback" not in res.output


def test_compare_draws_the_posterior_beside_the_frequentist_interval(files, tmp_path):
    # refit compare --posterior: each forward file's row keeps its frequentist interval
    # and gains the posterior's median and interval (the numbers apply writes); the
    # combined posterior is a row of its own kind; the figure's legend names both
    from refit.apply.compare import (
        _legend_handles,
        compare_files,
        figure_png,
        has_posterior,
    )

    _, paths = files
    fossils = _fossils(np.array([30.0, 66.0]), np.array([75.0, 55.0]))
    table, result = compare_files([paths["bk_depth_cm"], paths["bk_thickness_cm"]],
                                  fossils=fossils, posterior=True)
    applied = result.results
    fwd = table[table["origin"] != "posterior"].reset_index(drop=True)
    ref = applied[applied["function_id"] != "posterior"].reset_index(drop=True)
    for col in ("posterior_median", "posterior_lower", "posterior_upper"):
        assert np.allclose(fwd[col].astype(float), ref[col].astype(float), rtol=0, atol=0)
    assert np.all(np.isfinite(fwd["lower"].astype(float)))     # frequentist kept beside
    both = table[table["origin"] == "posterior"].reset_index(drop=True)
    label = "posterior bk_depth_cm + bk_thickness_cm"
    assert len(both) == 2 and list(both["fit"]) == [label, label]
    assert np.allclose(both["estimate"], both["posterior_median"])
    assert "proxies-disagree" in both["flags"][0]
    assert has_posterior(table) and not has_posterior(table.drop(
        columns=["posterior_median"]).assign(origin="refit"))
    labels = [h.get_label() for h in _legend_handles(table)]
    assert "posterior median" in labels and any("posterior interval" in x for x in labels)
    plain_rows = table[table["origin"] != "posterior"].drop(columns=["posterior_median"])
    assert not any("posterior" in h.get_label() for h in _legend_handles(plain_rows))
    # the drawing changes when the posterior is there (not a silent no-op)
    plain = table.copy()
    plain[["posterior_median", "posterior_lower", "posterior_upper"]] = np.nan
    plain = plain[plain["origin"] != "posterior"]
    drawn = fwd.copy()
    assert figure_png(drawn) != figure_png(plain)
