"""Resampling and conformal intervals of a robust, quantile or York fit: its own refits.

``Fit.predict`` sends OLS and WLS fits to the closed-form and batched least-squares paths
(:mod:`refit.models.intervals`); every other estimator but ``mixed`` comes here, where
each refit uses the fit's own estimator (:func:`row_fitter`) and the method definitions
of :mod:`refit.models.intervals.refits`. Theil-Sen's leave-one-out lines come exact and
fast from one sorted set of pairwise slopes (:mod:`refit.models.theil_sen_loo`), Huber's from one vectorised IRLS over all n
leave-one-out problems (:mod:`refit.models.robust_loo`), Theil-Sen's
case-resampled lines from the batched bootstrap of :func:`refit.models.robust.fit_theil_sen`.
The leave-one-out coefficients are kept with the fit, so the coefficient file and
cross-validation reuse them.
"""

from __future__ import annotations

import numpy as np

from refit.errors import UsageError

#: estimators whose resampling intervals come from their own refits here
REFITTED = ("huber", "theil-sen", "quantile", "york")
#: up to this many rows Huber's leave-one-out fits iterate together
#: (:func:`refit.models.robust_loo.huber_loo`, n x n work arrays); above, one by one
HUBER_BATCH_MAX = 3000


def row_fitter(fit):
    """``fit_rows(rows, y=None) -> coefficients``: the fit's estimator on those rows (of
    ``y`` when given, e.g. a residual-bootstrap response), with their measurement SDs
    for York."""
    X = fit.form.design(fit.x)
    y_fit = fit.y_model
    est = fit.estimator
    if est == "huber":
        from refit.models.robust import fit_huber

        return lambda rows, y=None: fit_huber(X[rows], (y_fit if y is None else y)[rows]
                                              ).coefficients
    if est == "theil-sen":
        from refit.models.robust import fit_theil_sen

        how = fit.result.details.get("intercept", "joint")
        return lambda rows, y=None: fit_theil_sen(
            X[rows, 1], (y_fit if y is None else y)[rows], intercept=how).coefficients
    if est == "quantile":
        from refit.models.quantile import fit_quantiles

        def median(rows, y=None):
            yy = (y_fit if y is None else y)[rows]
            return np.asarray(next(iter(fit_quantiles(X[rows], yy, quantiles=(0.5,))
                                        .values())), float)
        return median
    if est == "york":
        sds = fit.extras.get("measurement_sds")
        if sds is None:
            raise UsageError("this York fit keeps no measurement SDs to refit with; refit "
                             "it with x_sd= and y_sd=")
        from refit.models.eiv import fit_york

        xs, ys = sds
        return lambda rows, y=None: fit_york(X[rows, 1], (y_fit if y is None else y)[rows],
                                             xs[rows], ys[rows]).coefficients
    raise UsageError(f"estimator {est!r} has no refitted intervals here")


def loo_coefficients_of(fit) -> np.ndarray:
    """(n, p) leave-one-out coefficients of the fit's estimator, computed once per fit
    (Theil-Sen: :func:`refit.models.theil_sen_loo.loo_lines`, exact)."""
    cache = fit.extras.setdefault("_refits", {})
    if "loo" not in cache:
        n = len(fit.y_model)
        if fit.estimator == "theil-sen" and n - 1 <= _exact_max():
            from refit.models.theil_sen_loo import loo_lines

            cache["loo"] = loo_lines(fit.x[:, 0], fit.y_model,
                                     fit.result.details.get("intercept", "joint"))
        elif fit.estimator == "huber" and fit.form.n_params + 3 <= n <= HUBER_BATCH_MAX:
            # (fewer rows: the one-by-one refits refuse with fit_huber's own message)
            from refit.models.robust_loo import huber_loo

            cache["loo"] = huber_loo(fit.form.design(fit.x), fit.y_model,
                                     k=fit.result.details.get("k", 1.345))
        else:
            from refit.models.intervals.refits import loo_coefficients

            cache["loo"] = loo_coefficients(n, row_fitter(fit))
    return cache["loo"]


def _exact_max() -> int:
    from refit.models.robust import THEIL_SEN_EXACT_MAX

    return THEIL_SEN_EXACT_MAX


def _theil_sen_draws(fit, n_boot: int, seed: int):
    from refit.models.robust import _theil_sen_bootstrap

    how = fit.result.details.get("intercept", "joint")
    return _theil_sen_bootstrap(fit.x[:, 0], fit.y_model, n_boot, seed, how)


def refitted_interval(fit, x0: np.ndarray, level: float, interval: str, opts: dict,
                      w0: float = 1.0):
    """The :class:`refit.models.intervals.base.PredictionInterval` of ``interval`` for
    design rows ``x0``, every refit by the fit's own estimator."""
    from refit.models.intervals import refits as rf

    X, y, b = fit.form.design(fit.x), fit.y_model, fit.result.coefficients
    if interval == "split-conformal":
        return rf.split_conformal(X, y, x0, row_fitter(fit), level=level, seed=opts["seed"],
                                  calib_fraction=opts["calib_fraction"])
    if interval == "jackknife+":
        return rf.jackknife_plus(X, y, x0, b, loo_coefficients_of(fit), level=level)
    if interval == "cv+":
        return rf.cv_plus(X, y, x0, b, row_fitter(fit), level=level, folds=opts["folds"],
                          seed=opts["seed"])
    kind = "pairs" if interval == "bootstrap-pairs" else "residual"
    draws = (_theil_sen_draws(fit, opts["n_boot"], opts["seed"])
             if fit.estimator == "theil-sen" and kind == "pairs" else None)
    return rf.bootstrap(X, y, x0, b, row_fitter(fit), kind=kind, n_boot=opts["n_boot"],
                        level=level, seed=opts["seed"], weight0=w0, draws=draws)
