"""The naive way of the ``scale`` case: scikit-learn ``cross_val_predict`` per candidate.

``python naive_scale.py TABLE.csv FOLDS SEED`` reads the table with pandas, keeps the rows
with ``map_mm``, ``bk_depth_cm`` and ``source``, and for each inverse candidate (linear,
quadratic, cubic OLS) runs ``cross_val_predict`` with ``GroupKFold`` by source and, beside
it, shuffled ``KFold``, through a small scikit-learn estimator wrapping statsmodels OLS whose
``predict`` returns the estimate and the 95 % prediction interval from
``get_prediction``. The forward candidates (feature on climate, inverted) have no
scikit-learn counterpart and are left out, so the naive side does less work than refit.
Prints one JSON object ``{"work_s": ..., "n": ...}``.
"""

from __future__ import annotations

import json
import sys
import time

import numpy as np
import pandas as pd
import statsmodels.api as sm
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.model_selection import GroupKFold, KFold, cross_val_predict


class PolyOLS(BaseEstimator, RegressorMixin):
    """OLS of y on 1, x, ..., x^degree with statsmodels (the naive researcher's wrapper)."""

    def __init__(self, degree=1):
        self.degree = degree

    def _design(self, X):
        x = np.asarray(X, float)[:, 0]
        return np.column_stack([x ** k for k in range(self.degree + 1)])

    def fit(self, X, y):
        self.res_ = sm.OLS(np.asarray(y, float), self._design(X)).fit()
        return self

    def predict(self, X):
        """Estimate and 95 % prediction limits, shape (m, 3) (cross_val_predict accepts
        only the standard method names, so the interval comes through ``predict``)."""
        sf = self.res_.get_prediction(self._design(X)).summary_frame(alpha=0.05)
        return sf[["mean", "obs_ci_lower", "obs_ci_upper"]].to_numpy()


def main(path, folds, seed):
    t0 = time.perf_counter()
    frame = pd.read_csv(path).dropna(subset=["map_mm", "bk_depth_cm", "source"])
    X, y, groups = frame[["bk_depth_cm"]].to_numpy(), frame["map_mm"].to_numpy(), frame["source"]
    out = {}
    for degree in (1, 2, 3):
        for name, cv in (("group-kfold", GroupKFold(n_splits=folds)),
                         ("kfold", KFold(n_splits=folds, shuffle=True, random_state=seed))):
            pred = cross_val_predict(PolyOLS(degree), X, y, groups=groups, cv=cv,
                                     method="predict")
            rmsep = float(np.sqrt(np.mean((pred[:, 0] - y) ** 2)))
            cover = float(np.mean((y >= pred[:, 1]) & (y <= pred[:, 2])))
            out[f"degree{degree}/{name}"] = {"rmsep": rmsep, "coverage": cover}
    print(json.dumps({"work_s": time.perf_counter() - t0, "n": int(len(y)), "scores": out}))


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]), int(sys.argv[3]))
