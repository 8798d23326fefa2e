"""Prediction intervals for a new observation: bootstrap and conformal.

Every function takes a design matrix ``X`` (n, p) with the intercept column included when
the model has one, the response ``y`` (n,) and the design rows ``x0`` (m, p) of the new
observations, and returns a :class:`PredictionInterval` whose ``estimate``, ``lower`` and
``upper`` arrays have shape (m,) and are in the units of ``y``. The model is linear least
squares (OLS, or WLS where ``weights`` is accepted); no statsmodels model is refitted in a
Python loop: resampled fits are solved in batches with array operations and the
leave-one-out fits of jackknife+ come from a closed form.

Every random step takes a ``seed`` and uses its own :class:`numpy.random.Generator`.

The bootstrap methods live in ``refit/models/intervals/bootstrap.py``, the conformal ones (and
:func:`loo_residuals`) in ``refit/models/intervals/conformal.py``, the result type and argument checks in
``refit/models/intervals/base.py``, the QR/OLS helpers in ``refit/models/linalg.py``; import them from here.

References
----------
.. [1] Davison, A. C. & Hinkley, D. V. (1997). *Bootstrap Methods and their Application*.
   Cambridge University Press. Sections 6.2-6.3 (residual and case resampling,
   modified residuals, prediction error resampling, Algorithm 6.4).
.. [2] Lei, J., G'Sell, M., Rinaldo, A., Tibshirani, R. J. & Wasserman, L. (2018).
   Distribution-free predictive inference for regression. JASA 113:1094-1111.
.. [3] Barber, R. F., Candes, E. J., Ramdas, A. & Tibshirani, R. J. (2021). Predictive
   inference with the jackknife+. Annals of Statistics 49(1):486-507.
.. [4] Allen, D. M. (1974). The relationship between variable selection and data
   augmentation and a method for prediction. Technometrics 16:125-127 (PRESS).
"""

from __future__ import annotations

from refit.models.intervals.bootstrap import bootstrap_pairs, bootstrap_residual
from refit.models.intervals.conformal import cv_plus, jackknife_plus, loo_residuals, split_conformal
from refit.models.intervals.base import PredictionInterval

__all__ = [
    "PredictionInterval",
    "bootstrap_pairs",
    "bootstrap_residual",
    "split_conformal",
    "jackknife_plus",
    "cv_plus",
    "loo_residuals",
]
