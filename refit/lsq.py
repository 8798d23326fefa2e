"""Least squares on centred and scaled terms, and the result every estimator returns.

(The solver arrives with the fitting engine; ``EstimatorResult`` is the shared contract.)
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np


@dataclass
class EstimatorResult:
    """What any estimator returns for one design matrix and response.

    Attributes
    ----------
    coefficients : ndarray, shape (p,)
        In the order of the design's columns (original, unscaled terms).
    covariance : ndarray, shape (p, p)
        Covariance of the coefficients; NaN-filled where the method gives none.
    residual_std_error : float
        Residual standard error sigma [units of the response].
    df_resid : float
        Residual degrees of freedom.
    fitted, residuals : ndarray, shape (n,)
        Fitted values and residuals on the fitting scale.
    weights : ndarray or None
        Final weights (e.g. Huber IRLS weights), if the method has them.
    details : dict
        Method-specific extras (scale, iterations, slope confidence limits, ...).
    """

    coefficients: np.ndarray
    covariance: np.ndarray
    residual_std_error: float
    df_resid: float
    fitted: np.ndarray
    residuals: np.ndarray
    weights: np.ndarray | None = None
    details: dict = field(default_factory=dict)
