"""The scikit-learn wrapper: scikit-learn's own estimator checks and model-selection tools."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from sklearn.model_selection import KFold, cross_val_predict, cross_val_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer
from sklearn.utils.estimator_checks import check_estimator

from refit.models.fitting import fit
from refit.models.sklearn_adapter import TransferFunctionRegressor

# scikit-learn's general estimator checks (reference library). The one failure left is
# by design: equal-weight equivalence drops rows with weight 0, and with 30 features the
# remaining rows are too few for 31 coefficients plus a residual degree of freedom.
EXPECTED_FAILURES = {
    "check_sample_weight_equivalence_on_dense_data":
        "weight-0 rows are dropped, leaving fewer rows than coefficients + 1",
}


def test_scikit_learn_estimator_checks():
    results = check_estimator(TransferFunctionRegressor(), on_fail=None,
                              expected_failed_checks=EXPECTED_FAILURES)
    failed = [r["check_name"] for r in results if r["status"] == "failed"]
    assert failed == []
    assert sum(r["status"] == "passed" for r in results) > 30


def _data(seed=4):
    rng = np.random.default_rng(seed)
    depth = rng.uniform(20, 120, 60)
    climate = 150 + 4.0 * depth + rng.normal(0, 30, 60)
    return depth.reshape(-1, 1), climate


@pytest.mark.parametrize("params", [
    {"form": "linear"},
    {"form": "quadratic"},
    {"form": "linear", "direction": "forward"},
])
def test_cross_val_predict_equals_a_manual_loop(params):
    # scikit-learn's cross_val_predict with KFold must give exactly the predictions of
    # refitting refit.fit on each training part and predicting the held-out part.
    X, y = _data()
    cv = KFold(5, shuffle=True, random_state=0)
    got = cross_val_predict(TransferFunctionRegressor(**params), X, y, cv=cv)
    manual = np.empty_like(y)
    frame = pd.DataFrame({"x0": X[:, 0], "climate": y})
    for train, test in cv.split(X):
        f = fit(frame.iloc[train], response="climate", predictors="x0", **params)
        manual[test] = f.predict(X[test, 0], interval="none").estimate
    np.testing.assert_allclose(got, manual, rtol=1e-12)


def test_in_a_pipeline_and_cross_val_score():
    X, y = _data()
    pipe = make_pipeline(FunctionTransformer(np.sqrt),
                         TransferFunctionRegressor(form="quadratic"))
    scores = cross_val_score(pipe, X, y, cv=KFold(4), scoring="r2")
    assert scores.shape == (4,) and np.all(scores > 0.5)


def test_predict_interval_and_feature_names():
    X, y = _data()
    frame = pd.DataFrame({"bk_depth_cm": X[:, 0]})
    reg = TransferFunctionRegressor(level=0.9).fit(frame, y)
    assert list(reg.feature_names_in_) == ["bk_depth_cm"]
    assert reg.fit_.terms == ["intercept", "bk_depth_cm"]
    limits = reg.predict_interval(frame.iloc[:3])
    ref = fit(frame.assign(map_mm=y), response="map_mm",
              predictors="bk_depth_cm").predict(frame.iloc[:3], level=0.9)
    np.testing.assert_allclose(limits, ref[["lower", "upper"]].to_numpy(), rtol=1e-12)
