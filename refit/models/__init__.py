"""Models: the science of fitting a transfer function.

Owns the forms and their design matrices (``forms``), least squares by QR (``lsq``,
``linalg``), robust, errors-in-variables, quantile and segmented estimators (``robust``,
``eiv``, ``quantile``, ``segmented``), where an equation holds (``domain``), intervals for
a new observation (``intervals``: analytic base, bootstrap, conformal), the
classical-calibration inversion (``inversion``), ``refit.fit`` and ``Fit`` (``fitting``,
``inputs``, ``predict``) and the scikit-learn adapter (``sklearn_adapter``).

Public names: ``fit``, ``Fit``, ``TransferFunctionRegressor``. Works on arrays and
frames only: never reads a store, a recipe or a coefficient file.
"""
