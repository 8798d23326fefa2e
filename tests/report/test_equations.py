"""The equation shown is the equation used: what the report and `refit fit` print produces
the coefficient file's estimates.

Sources: the full-data line against statsmodels OLS; split-conformal's centre against
numpy.linalg.lstsq on the training part drawn by the same seeded permutation (the split
rule is the one documented in refit/coefficients/build.py: the first half of
``default_rng(seed).permutation(n)`` calibrates, the rest trains). Data: a seeded simulation.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from refit.coefficients import Equation, fit_record
from refit.models.fitting import fit
from refit.report.equations import equation_text, used_equation

PROV = {"dataset": {"kind": "store", "name": "t", "version": 1, "sha256": "0" * 64},
        "subset": {"filters": []}, "recipe": None, "recipe_sha256": None}
SEED = 7


@pytest.fixture(scope="module")
def table():
    rng = np.random.default_rng(3)
    d = rng.uniform(10, 150, 60)
    return pd.DataFrame({"bk_depth_cm": d, "map_mm": 390 + 2.2 * d + rng.normal(0, 90, 60)})


def _record(table, method):
    f = fit(table, "map_mm", ["bk_depth_cm"])
    return fit_record(f, function_id="map_from_bk_depth", provenance=PROV, cv=None,
                      interval_method=method, level=0.9, seed=SEED)


def _numbers(text: str) -> list[float]:
    return [float(v) for v in re.findall(r"-?\d+\.?\d*", text.split("=", 1)[1])]


def test_split_conformal_shows_its_training_part_centre(table):
    rec = _record(table, "split-conformal")
    used = used_equation(rec)
    n = len(table)
    perm = np.random.default_rng(SEED).permutation(n)
    train = perm[int(round(0.5 * n)):]
    X = np.column_stack([np.ones(n), table["bk_depth_cm"]])
    want = np.linalg.lstsq(X[train], table["map_mm"].to_numpy()[train], rcond=None)[0]
    assert used["source"] == "split-centre"
    np.testing.assert_allclose(used["coefficients"], want, rtol=1e-10)
    # the printed equation (4 significant digits) gives the file's own estimates
    a, b = _numbers(used["text"])
    est = Equation(rec).predict([40.0, 120.0]).estimate
    np.testing.assert_allclose(est, [a + b * 40.0, a + b * 120.0], rtol=2e-3)
    # and it is not the full-data line, which the note names beside it
    assert used["full_text"] != used["text"]
    assert "training part" in used["note"] and used["full_text"] in used["note"]
    assert f"{n - int(round(0.5 * n))} of {n} soils" in used["note"]


def test_analytic_shows_the_full_data_fit(table):
    import statsmodels.api as sm

    rec = _record(table, "analytic")
    used = used_equation(rec)
    ref = sm.OLS(table["map_mm"], sm.add_constant(table["bk_depth_cm"])).fit().params
    assert used["source"] == "full-data" and used["note"] == ""
    np.testing.assert_allclose(used["coefficients"], ref.to_numpy(), rtol=1e-10)
    est = Equation(rec).predict([80.0]).estimate
    a, b = _numbers(used["text"])
    np.testing.assert_allclose(est, [a + b * 80.0], rtol=2e-3)


def test_equation_text_ascii_and_signs():
    text = equation_text(["intercept", "bk_depth_cm", "bk_depth_cm^2"], [12.5, -0.25, 0.001],
                         "map_mm", ascii_only=True)
    assert text == "map_mm = 12.5 - 0.25 * bk_depth_cm + 0.001 * bk_depth_cm^2"
    text.encode("ascii")
    assert equation_text(["intercept", "bk_depth_cm^2"], [-1.0, 2.0], "y") == "y = -1 + 2 × bk_depth_cm²"
