"""diff: the values it reports, checked against the files' own fields.

Standard errors are square roots of the covariance diagonal; the analytic interval of an
inverse OLS fit is ``yhat +- t_{(1+level)/2, df} sqrt(s^2 + x0' V x0)`` (the textbook
prediction interval, e.g. Montgomery, Peck & Vining, Introduction to Linear Regression
Analysis, 5th ed., eq. 3.54), with the t quantile from scipy.stats.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest
from scipy import stats

from _harness import make_fits, recipe_toml
from refit.coefficients import dumps
from refit._util.resources import demo_dir
from refit.publish.diff import diff_files, reference_grid
from refit.errors import InvalidDataError, UnreadableInputError

RECIPE = recipe_toml(subset={"parent_material": "loess"},
                     validation={"scheme": "kfold", "folds": 5, "seed": 3})
LINEAR = "linear__ols__inverse__analytic.json"


@pytest.fixture(scope="module")
def pair(tmp_path_factory):
    """The linear fit on the demo store, then on the store after the incoming batch."""
    from refit.curate.store import admit

    root = tmp_path_factory.mktemp("diff")
    a = make_fits(root, RECIPE, "run1")
    admit(demo_dir() / "incoming_soils.csv", root / "store", today="2026-12-02")
    b = make_fits(root, RECIPE, "run2")
    return a, b


def _load(path):
    return json.loads(Path(path).read_text("utf-8"))


def test_coefficients_and_errors(pair):
    a, b = pair
    d = diff_files(a / LINEAR, b / LINEAR)
    ca, cb = _load(a / LINEAR), _load(b / LINEAR)
    rows = {r["term"]: r for r in d["coefficients"]}
    assert list(rows) == ["intercept", "bk_depth_cm"]
    for i, term in enumerate(rows):
        r = rows[term]
        assert r["a"] == ca["coefficients"][i] and r["b"] == cb["coefficients"][i]
        assert r["change"] == pytest.approx(cb["coefficients"][i] - ca["coefficients"][i],
                                            rel=1e-12)
        assert r["se_a"] == pytest.approx(math.sqrt(ca["covariance"][i][i]), rel=1e-12)
        assert r["se_b"] == pytest.approx(math.sqrt(cb["covariance"][i][i]), rel=1e-12)
    fit = {r["quantity"]: r for r in d["fit"]}
    assert fit["n"]["change"] == cb["n"] - ca["n"] > 0        # the batch added soils


def test_provenance_and_bump(pair):
    a, b = pair
    d = diff_files(a / LINEAR, b / LINEAR)
    prov = {r["item"]: r for r in d["provenance"]}
    assert prov["dataset version"]["b"] == prov["dataset version"]["a"] + 1
    assert not prov["dataset sha256"]["same"]
    assert prov["form"]["same"] and prov["subset filters"]["a"] == "parent_material equals loess"
    assert d["bump"] == "minor"
    assert "provenance.dataset.version" in d["changes"]["minor"]
    cv = {r["metric"]: r for r in d["cv"]}
    assert cv["rmsep"]["a"] == _load(a / LINEAR)["cv"]["rmsep"]


def test_estimates_at_reference_values(pair):
    a, b = pair
    ca, cb = _load(a / LINEAR), _load(b / LINEAR)
    d = diff_files(a / LINEAR, b / LINEAR)
    lo = min(ca["predictors"][0]["valid_min"], cb["predictors"][0]["valid_min"])
    hi = max(ca["predictors"][0]["valid_max"], cb["predictors"][0]["valid_max"])
    xs = [r["bk_depth_cm"] for r in d["at_reference"]]
    assert xs == pytest.approx([lo, lo + (hi - lo) / 4, (lo + hi) / 2, lo + 3 * (hi - lo) / 4,
                                hi], rel=1e-12)
    for row in d["at_reference"]:
        for tag, c in (("a", ca), ("b", cb)):
            x0 = np.array([1.0, row["bk_depth_cm"]])
            est = float(x0 @ c["coefficients"])
            t = stats.t.ppf(0.975, c["df_resid"])
            half = t * math.sqrt(c["residual_std_error"] ** 2
                                 + x0 @ np.array(c["covariance"]) @ x0)
            assert row[f"estimate_{tag}"] == pytest.approx(est, rel=1e-9)
            assert row[f"width_{tag}"] == pytest.approx(2 * half, rel=1e-9)
        assert row["change_estimate"] == pytest.approx(row["estimate_b"] - row["estimate_a"])


def test_form_change_and_explicit_values(pair):
    a, _ = pair
    d = diff_files(a / LINEAR, a / "quadratic__ols__inverse__analytic.json", at=[50.0, 400.0])
    assert d["bump"] == "major"
    terms = {r["term"]: r for r in d["coefficients"]}
    assert terms["bk_depth_cm^2"]["a"] is None and terms["bk_depth_cm^2"]["b"] is not None
    assert [r["bk_depth_cm"] for r in d["at_reference"]] == [50.0, 400.0]
    # 400 cm lies beyond both files' calibration range: flagged
    assert "outside-calibration-range" in d["at_reference"][1]["flags_a"]
    assert d["at_reference"][0]["flags_a"] == ""


def test_different_predictors_have_no_reference_rows():
    a = {"predictors": [{"name": "bk_depth_cm", "valid_min": 1.0, "valid_max": 2.0}]}
    b = {"predictors": [{"name": "cia_k", "valid_min": 1.0, "valid_max": 2.0}]}
    assert reference_grid(a, b) is None


def test_bad_files(pair, tmp_path):
    a, _ = pair
    with pytest.raises(UnreadableInputError):
        diff_files(a / LINEAR, tmp_path / "missing.json")
    content = _load(a / LINEAR)
    content["n"] += 1
    bad = tmp_path / "bad.json"
    bad.write_text(dumps(content), encoding="utf-8")
    with pytest.raises(InvalidDataError, match="sha256"):
        diff_files(a / LINEAR, bad)
