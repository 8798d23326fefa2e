"""apply: estimates, intervals, flags and the Monte Carlo propagation.

Sources: the analytic prediction interval is checked against the file's own interval
(itself checked against statsmodels in test_coefficients); the propagation against the
law of total variance (a mixture of normals with means a + b x, x ~ N(mu, sd), has
variance s^2 + b^2 sd^2: standard probability) and against numpy sampling of a mixture;
the published Retallack (1994) equation against the worked value of Caudill et al. (1996,
J. Sed. Res. 66:58): D = 100 cm -> 648 +- 141 mm.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from refit.apply.estimates import (RESULT_COLUMNS, FLAG_PUBLISHED, FLAG_SETTING, FLAG_UNRECORDED, apply_equations,
                         combine_proxies, load_equations, mixture_interval)
from refit.coefficients import fit_record, load, write_record
from refit.models.fitting import fit
from refit.curate.fossils import check_fossil_frame

SUBSET = {"filters": [
    {"column": "vegetation", "kind": "one-of", "value": ["grassland", "savanna"]},
    {"column": "parent_material", "kind": "equals", "value": "loess"},
    {"column": "age_ka", "kind": "range", "value": {"min": 5}}]}
PROV = {"dataset": {"kind": "store", "name": "t", "version": 1, "sha256": "0" * 64},
        "subset": SUBSET, "recipe": None, "recipe_sha256": None}
RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"


def _calib(n=400, seed=11, slope=3.0):
    rng = np.random.default_rng(seed)
    d = rng.uniform(10, 200, n)
    return pd.DataFrame({"bk_depth_cm": d, "map_mm": 150 + slope * d + rng.normal(0, 60, n)})


def _file(tmp_path, name, table, **kw):
    f = fit(table, "map_mm", ["bk_depth_cm"], **kw)
    rec = fit_record(f, function_id="map_from_bk_depth", provenance=PROV, cv=None,
                     interval_method="analytic", level=0.95)
    return str(write_record(rec, tmp_path / name))


@pytest.fixture(scope="module")
def linear(tmp_path_factory):
    return _file(tmp_path_factory.mktemp("c"), "lin.json", _calib())


def _report(rows):
    return check_fossil_frame(pd.DataFrame(rows))


def _fossil(pid="P1", depth=100.0, sd=None, **extra):
    row = {"paleosol_id": pid, "bk_depth_cm": depth, "bk_thickness_cm": 40.0,
           "vegetation": "grassland", "parent_material": "loess", "age_ka": 10.0}
    if sd is not None:
        row["bk_depth_sd_cm"] = sd
    row.update(extra)
    return row


def test_zero_sd_monte_carlo_equals_the_analytic_interval(linear):
    eqs, _ = load_equations([linear])
    res = apply_equations(eqs, _report([_fossil(sd=0.0)]), seed=3).results.iloc[0]
    ref = load(linear).predict([100.0])
    assert res["propagation"].startswith("monte-carlo")
    assert res["estimate"] == pytest.approx(ref.estimate[0], rel=1e-12)
    assert res["lower"] == pytest.approx(ref.lower[0], rel=1e-9)
    assert res["upper"] == pytest.approx(ref.upper[0], rel=1e-9)


def test_monte_carlo_converges_to_analytic_as_sd_shrinks(linear):
    eqs, _ = load_equations([linear])
    ref = load(linear).predict([100.0])
    gaps = []
    for sd in (10.0, 1.0, 0.01):
        r = apply_equations(eqs, _report([_fossil(sd=sd)]), seed=3).results.iloc[0]
        gaps.append(abs(r["upper"] - ref.upper[0]) + abs(r["lower"] - ref.lower[0]))
    assert gaps[0] > gaps[1] > gaps[2] and gaps[2] < 1e-3 * (ref.upper[0] - ref.lower[0])


def test_propagation_follows_the_law_of_total_variance(linear):
    # y | x ~ t_df(a + b x, se(x)); with df ~ 400 and se(x) nearly flat near x = 100,
    # Var(y) ~= se^2 + b^2 sd^2 (law of total variance), interval ~= est -+ z sqrt(.)
    eq = load(linear)
    b = eq.record["coefficients"][1]
    p = eq.predict([100.0])
    se = (p.upper[0] - p.estimate[0]) / 1.9659  # t(0.975; 398)
    sd = 20.0
    res = apply_equations([(linear, eq)], _report([_fossil(sd=sd)]), seed=5,
                          n_draws=20000).results.iloc[0]
    half = 1.959964 * np.sqrt(se**2 + (b * sd) ** 2)
    assert (res["upper"] - res["lower"]) / 2 == pytest.approx(half, rel=0.015)
    assert "bk_depth_cm (sd 20)" in res["propagation"]


def test_mixture_interval_against_sampling():
    # reference: 2e6 numpy draws of an equal mixture of N(0, 1) and N(3, 0.5^2)
    rng = np.random.default_rng(1)
    x = np.concatenate([rng.normal(0, 1, 1_000_000), rng.normal(3, 0.5, 1_000_000)])
    ql, qu = np.quantile(x, [0.05, 0.95])
    z = 1.6448536269514722
    lo, hi, n = mixture_interval([0.0, 3.0], [-z, 3 - 0.5 * z], [z, 3 + 0.5 * z], 0.90)
    assert n == 2 and lo == pytest.approx(ql, abs=0.01) and hi == pytest.approx(qu, abs=0.01)


def test_seeded_and_reproducible(linear):
    eqs, _ = load_equations([linear])
    rep = _report([_fossil(sd=15.0)])
    a = apply_equations(eqs, rep, seed=1).results
    b = apply_equations(eqs, rep, seed=1).results
    c = apply_equations(eqs, rep, seed=2).results
    assert a["lower"][0] == b["lower"][0] and a["lower"][0] != c["lower"][0]


def test_flags_outside_range_and_setting(linear):
    eqs, _ = load_equations([linear])
    rows = [_fossil("in"), _fossil("out", depth=260.0),
            _fossil("forest", vegetation="forest"), _fossil("noage", age_ka=np.nan)]
    res = apply_equations(eqs, _report(rows)).results.set_index("paleosol_id")
    assert res.loc["in", "flags"] == ""
    assert res.loc["out", "flags"] == "outside-calibration-range"
    assert res.loc["forest", "flags"] == FLAG_SETTING
    assert "vegetation 'forest'" in res.loc["forest", "flag_details"]
    assert res.loc["noage", "flags"] == FLAG_UNRECORDED


def test_forward_flags_turning_point_two_roots_unbounded(tmp_path):
    rng = np.random.default_rng(3)
    m = rng.uniform(200, 900, 60)
    quad = pd.DataFrame({"map_mm": m, "bk_depth_cm": -200 + 0.9 * m - 0.0006 * m * m
                         + rng.normal(0, 5, 60)})
    flat = pd.DataFrame({"map_mm": m, "bk_depth_cm": 100 + rng.normal(0, 30, 60)})
    fq = _file(tmp_path, "fq.json", quad, form="quadratic", direction="forward")
    fl = _file(tmp_path, "fl.json", flat, form="linear", direction="forward")
    eqs, _ = load_equations([fq, fl])
    rows = [_fossil("a", depth=136.0), _fossil("b", depth=140.0)]
    res = apply_equations(eqs, _report(rows)).results
    flags = {(r.coefficient_file[-7:], r.paleosol_id): r.flags.split(";")
             for r in res.itertuples()}
    assert "two-roots" in flags[("fq.json", "a")]
    assert "beyond-turning-point" in flags[("fq.json", "b")]
    assert "unbounded" in flags[("fl.json", "a")]


def test_published_equation_worked_value_and_flag():
    # Caudill et al. (1996): D = 100 cm -> 648 +- 141 mm with Retallack (1994)
    eqs, _ = load_equations([RETALLACK])
    r = apply_equations(eqs, _report([_fossil()])).results.iloc[0]
    assert r["estimate"] == pytest.approx(648.1, abs=0.05)
    assert (r["lower"], r["upper"]) == pytest.approx((648.1 - 141, 648.1 + 141), abs=0.05)
    assert FLAG_PUBLISHED in r["flags"].split(";")


def test_bad_rows_and_files_do_not_stop_the_others(linear, tmp_path):
    bad_file = tmp_path / "cia.json"
    bad_file.write_text(open("refit/published/map_from_cia_k.sheldon2002.json").read())
    eqs, probs = load_equations([linear, str(bad_file), str(tmp_path / "missing.json")])
    assert len(eqs) == 2 and "no such coefficient file" in probs[0]["message"]
    rows = [_fossil("neg", depth=-5.0), _fossil("ok"), _fossil("empty", depth=np.nan)]
    out = apply_equations(eqs, _report(rows))
    res = out.results.set_index("paleosol_id")
    assert "rejected by the checks" in res.loc["neg", "problem"]
    assert "bk_depth_cm" in res.loc["neg", "problem"]
    assert np.isfinite(res.loc["ok", "estimate"]) and res.loc["ok", "problem"] == ""
    assert res.loc["empty", "problem"] == "no value for bk_depth_cm in this row"
    lacks = [p["message"] for p in out.problems if "lacks" in p["message"]]
    assert lacks and "cia_k" in lacks[0]


def test_decompaction_in_apply_and_unknown_order(linear):
    eqs, _ = load_equations([linear])
    rows = [_fossil("arid", depth=90.0, burial_depth_km=2.0, soil_order="Aridisols"),
            _fossil("vert", depth=90.0, burial_depth_km=2.0, soil_order="Vertisols")]
    out = apply_equations(eqs, _report(rows), decompact=True)
    res = out.results.set_index("paleosol_id")
    d = 90.0 / 0.849865411821154  # B at 2 km, Aridisols (LOW CONFIDENCE constants)
    assert res.loc["arid", "estimate"] == pytest.approx(load(linear).predict([d]).estimate[0])
    assert "decompacted" in res.loc["arid", "predictors_used"]
    assert "no compaction constants for 'Vertisols'" in res.loc["vert", "problem"]
    rec = out.decompaction.set_index("paleosol_id")
    assert rec.loc["arid", "bk_depth_cm_measured"] == 90.0
    assert rec.loc["arid", "bk_depth_cm"] == pytest.approx(d)


def test_combined_estimate_is_inverse_variance_weighted():
    # two proxies, 95 % intervals: se = width / (2 x 1.959964); weights 1/se^2 (by hand)
    res = pd.DataFrame({
        "paleosol_id": ["P", "P"], "row": [2, 2], "coefficient_file": ["a", "b"],
        "function_id": ["f", "g"], "response": ["map_mm"] * 2, "unit": ["mm"] * 2,
        "predictors_used": ["bk_depth_cm=100", "cia_k=70"], "estimate": [600.0, 800.0],
        "lower": [600 - 1.959964 * 100, 800 - 1.959964 * 200],
        "upper": [600 + 1.959964 * 100, 800 + 1.959964 * 200], "level": [0.95, 0.95],
        "problem": ["", ""]}).reindex(columns=RESULT_COLUMNS)
    c = combine_proxies(res, 0.95).iloc[0]
    w1, w2 = 1 / 100**2, 1 / 200**2
    assert c["estimate"] == pytest.approx((600 * w1 + 800 * w2) / (w1 + w2), rel=1e-6)
    assert c["upper"] - c["estimate"] == pytest.approx(1.959964 / np.sqrt(w1 + w2), rel=1e-6)
    assert c["flags"] == "proxies-may-be-correlated"
