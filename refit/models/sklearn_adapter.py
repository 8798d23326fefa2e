"""A scikit-learn compatible regressor around :func:`refit.models.fitting.fit`.

``TransferFunctionRegressor`` takes the fossil feature(s) as ``X`` and the climate value as
``y`` whatever the direction, so it drops into ``cross_val_score``,
``cross_val_predict``, ``GridSearchCV`` or a ``Pipeline``: for ``direction='forward'`` it
fits the feature on climate and predicts by classical calibration (inversion).
"""

from __future__ import annotations

import numpy as np
from sklearn.base import BaseEstimator, RegressorMixin
from sklearn.utils.validation import check_is_fitted, validate_data


class TransferFunctionRegressor(RegressorMixin, BaseEstimator):
    """Transfer function as a scikit-learn regressor.

    Parameters
    ----------
    form : str
        ``linear``, ``quadratic``, ``polynomial`` or ``exponential``.
    degree : int, optional
        Degree of a ``polynomial`` form.
    estimator : str
        ``ols``, ``wls`` (uses ``sample_weight``), ``huber``, ``theil-sen``, ``york``
        (not available here: it needs measurement SDs) or ``quantile``.
    direction : str
        ``inverse`` or ``forward``.
    through_origin : bool
        Fit without an intercept.
    level : float
        Level of :meth:`predict_interval`.
    interval : str, optional
        Interval method of :meth:`predict_interval` (see ``Fit.predict``).

    Attributes
    ----------
    fit_ : refit.models.fitting.Fit
        The fitted transfer function.
    n_features_in_ : int
    feature_names_in_ : ndarray of str
        Only when ``X`` was a DataFrame with string column names.
    """

    def __init__(self, form="linear", degree=None, estimator="ols", direction="inverse",
                 through_origin=False, level=0.95, interval=None):
        self.form = form
        self.degree = degree
        self.estimator = estimator
        self.direction = direction
        self.through_origin = through_origin
        self.level = level
        self.interval = interval

    def _names(self):
        names = getattr(self, "feature_names_in_", None)
        return ([str(c) for c in names] if names is not None
                else [f"x{j}" for j in range(self.n_features_in_)])

    def fit(self, X, y, sample_weight=None):
        """Fit on feature(s) ``X`` (n, k) and climate ``y`` (n,); returns self."""
        import pandas as pd

        from refit.models.fitting import fit

        from refit.errors import InvalidDataError

        X, y = validate_data(self, X, y, y_numeric=True, dtype=np.float64)
        if X.shape[0] < 2:
            raise InvalidDataError(f"a transfer function needs more than one row; got "
                                   f"{X.shape[0]} sample")
        names = self._names()
        frame = pd.DataFrame(X, columns=names)
        response = "__response__"
        frame[response] = y
        est, weights = self.estimator, None
        if sample_weight is not None:
            weights = np.asarray(sample_weight, dtype=float)
            if est == "ols":
                est = "wls"
        self.fit_ = fit(frame, response=response, predictors=names, form=self.form,
                        degree=self.degree, estimator=est, direction=self.direction,
                        weights=weights, through_origin=self.through_origin)
        return self

    def _predict_frame(self, X, interval):
        check_is_fitted(self, "fit_")
        X = validate_data(self, X, reset=False, dtype=np.float64)
        return self.fit_.predict(X, level=self.level, interval=interval)

    def predict(self, X):
        """Climate estimates for feature values ``X`` (n, k)."""
        return self._predict_frame(X, "none").estimate.to_numpy()

    def predict_interval(self, X):
        """``(n, 2)`` array of lower and upper limits at ``level`` with ``interval``."""
        frame = self._predict_frame(X, self.interval)
        return frame[["lower", "upper"]].to_numpy()

    def __sklearn_tags__(self):
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = False
        return tags
