"""Limits cut at a physical bound (MAP >= 0): flagged truncated-at-bound, the limit before
the cut kept, written as the bound exactly, from the fit through the file to apply.

Reference: Fieller's interval for x from a fitted line and one new reading, in the
textbook form (Draper, N.R. & Smith, H. (1998). Applied Regression Analysis, 3rd ed.,
Wiley, section 3.2, "inverse regression (the calibration problem)"; Fieller, E.C. (1954).
JRSS B 16:175; the formula as written below is from memory):

    x_hat = (y0 - b0) / b1,   g = t^2 s^2 / (b1^2 Sxx)
    limits = xbar + [(x_hat - xbar) -+ (t s / b1) sqrt((x_hat - xbar)^2 / Sxx
                                                       + (1 - g)(1 + 1/n))] / (1 - g)

computed here with numpy and scipy.stats.t from the calibration data alone.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from refit.apply.estimates import apply_files
from refit.apply.propagation import mixture_interval
from refit.coefficients import fit_record, load, write_record
from refit.models.fitting import fit

PROV = {"dataset": {"kind": "store", "name": "t", "version": 1, "sha256": "0" * 64},
        "subset": {"filters": []}, "recipe": None, "recipe_sha256": None}
Y0 = 38.0  # a shallow Bk horizon [cm]: its Fieller interval runs below 0 mm


def _calibration():
    """A weakly determined line, MAP 150..1350 mm (seeded; a test input, not demo data)."""
    rng = np.random.default_rng(3)
    x = np.linspace(150.0, 1350.0, 16)
    return x, 15 + 0.09 * x + rng.normal(0, 12, x.size)


def _fieller_by_hand(x, y, y0, level=0.95):
    """Draper & Smith's closed form (module docstring), by plain sums."""
    n = len(x)
    xbar = x.mean()
    sxx = float(np.sum((x - xbar) ** 2))
    b1 = float(np.sum((x - xbar) * (y - y.mean())) / sxx)
    b0 = float(y.mean() - b1 * xbar)
    s = math.sqrt(float(np.sum((y - b0 - b1 * x) ** 2)) / (n - 2))
    t = float(stats.t.ppf(0.5 + level / 2, n - 2))
    x_hat = (y0 - b0) / b1
    g = t * t * s * s / (b1 * b1 * sxx)
    half = t * s / b1 * math.sqrt((x_hat - xbar) ** 2 / sxx + (1 - g) * (1 + 1 / n))
    return x_hat, xbar + (x_hat - xbar - half) / (1 - g), xbar + (x_hat - xbar + half) / (1 - g)


@pytest.fixture(scope="module")
def setting(tmp_path_factory):
    x, y = _calibration()
    f = fit(pd.DataFrame({"map_mm": x, "bk_depth_cm": y}), "map_mm", "bk_depth_cm",
            direction="forward")
    folder = tmp_path_factory.mktemp("bounds")
    rec = fit_record(f, function_id="map_from_bk_depth", provenance=PROV, cv=None,
                     interval_method="analytic", level=0.95)
    path = str(write_record(rec, folder / "forward.json"))
    fossils = folder / "fossils.csv"
    pd.DataFrame({"paleosol_id": ["A", "B", "C"], "bk_depth_cm": [Y0, Y0, 90.0],
                  "bk_depth_sd_cm": [None, 3.0, 3.0]}).to_csv(fossils, index=False)
    return x, y, f, path, str(fossils)


def test_hand_fieller_interval_is_cut_at_zero_and_flagged(setting):
    x, y, f, path, _ = setting
    est, lo, hi = _fieller_by_hand(x, y, Y0)
    assert lo < 0 < est < hi  # the worked interval runs below 0 mm: about [-234, 706]
    assert (round(lo), round(hi)) == (-234, 706)
    # the fit in memory
    p = f.predict([Y0])
    assert p["flags"][0] == "truncated-at-bound"          # not open-below: no window edge
    assert p["lower"][0] == 0.0                            # the bound exactly
    assert p["lower_untruncated"][0] == pytest.approx(lo, rel=1e-10)
    assert math.isnan(p["upper_untruncated"][0])
    assert (p["estimate"][0], p["upper"][0]) == pytest.approx((est, hi), rel=1e-10)
    # the coefficient file (numpy-only evaluator)
    q = load(path).predict([Y0])
    assert q.lower[0] == 0.0 and q.flags[0] == "truncated-at-bound"
    assert q.lower_untruncated[0] == pytest.approx(lo, rel=1e-10)
    assert q.upper[0] == pytest.approx(hi, rel=1e-10)


def test_apply_keeps_the_limit_before_the_cut_and_writes_the_bound(setting):
    x, y, _, path, fossils = setting
    est, lo, hi = _fieller_by_hand(x, y, Y0)
    res = apply_files([path], fossils, seed=0).results.set_index("paleosol_id")
    a = res.loc["A"]   # no measurement SD: the file's own interval
    assert a["estimate"] == pytest.approx(est, rel=1e-10)
    assert a["lower"] == 0.0 and a["upper"] == pytest.approx(hi, rel=1e-10)
    assert a["lower_untruncated"] == pytest.approx(lo, rel=1e-10)
    assert math.isnan(a["upper_untruncated"])
    assert a["flags"] == "truncated-at-bound"
    assert "past the physical bound 0" in a["flag_details"]
    assert "lower_untruncated keeps it" in a["flag_details"]
    c = res.loc["C"]   # a deep horizon: nothing cut, nothing flagged
    assert c["lower"] > 0 and math.isnan(c["lower_untruncated"]) and c["flags"] == ""


def test_monte_carlo_limit_at_the_bound_is_the_bound_not_float_noise(setting):
    _, _, _, path, fossils = setting
    res = apply_files([path], fossils, seed=0).results.set_index("paleosol_id")
    b = res.loc["B"]   # depth SD 3 cm: every draw's interval is cut at 0 mm
    assert b["propagation"].startswith("monte-carlo")
    # the mixture of the draws' cut intervals puts its 2.5 % tail on 0 mm up to the root
    # finder's rounding: refit writes the bound itself
    eq = load(path)
    draws = Y0 + 3.0 * np.random.default_rng(0).normal(size=4000)
    mp = eq.predict(draws)
    raw = mixture_interval(mp.estimate, mp.lower, mp.upper, 0.95)[0]
    assert raw != 0.0 and abs(raw) < 1e-9        # float noise, as the issue saw it
    assert b["lower"] == 0.0 and "truncated-at-bound" in b["flags"].split(";")
    # before the cut the measurement error widens the interval: the Monte Carlo limit
    # lies below the file's own limit before the cut (law of total variance)
    assert b["lower_untruncated"] < res.loc["A", "lower_untruncated"] < 0
    # a Monte Carlo interval that does not reach the bound is not flagged
    c = res.loc["C"]
    assert c["propagation"].startswith("monte-carlo") and c["flags"] == ""


def test_csv_writes_the_bound_and_the_untruncated_columns(setting, tmp_path):
    from click.testing import CliRunner

    from refit.cli import main

    x, y, _, path, fossils = setting
    _, lo, _ = _fieller_by_hand(x, y, Y0)
    out = tmp_path / "est.csv"
    res = CliRunner().invoke(main, ["apply", path, "--fossils", fossils, "--out", str(out)])
    assert res.exit_code == 0, res.output
    raw = pd.read_csv(out, dtype=str, keep_default_na=False).set_index("paleosol_id")
    assert raw.loc["A", "lower"] == "0.0" and raw.loc["B", "lower"] == "0.0"
    assert float(raw.loc["A", "lower_untruncated"]) == pytest.approx(lo, rel=1e-10)
    assert raw.loc["C", "lower_untruncated"] == "" and raw.loc["A", "upper_untruncated"] == ""
