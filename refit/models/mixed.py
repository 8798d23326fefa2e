"""Random-effects (mixed) estimator: a soil from a source the calibration never saw.

Model (random intercept per group, optionally a random slope on the one predictor)::

    y_ij = x_ij' b + z_ij' u_j + e_ij,   u_j ~ N(0, G),   e_ij ~ N(0, s_e^2)

with z_ij = (1) or (1, x_ij). Fitted by REML with statsmodels ``MixedLM`` (imported
lazily). For a new soil of a NEW group the prediction variance is

    s_e^2 + z0' G z0 + x0' Cov(b) x0,

Cov(b) the GLS covariance of the fixed effects from the mixed fit. Every analytic interval of a
mixed fit (``Fit.predict`` in both directions, the coefficient file) uses
``details["between_covariance"]`` B (terms x terms; s_u^2 in the intercept cell, the
random slope's block in original units) row by row:
``t(df) sqrt(s_e^2 / w0 + x0' (C + B) x0)``, exact for a random intercept and for a
random slope alike (:func:`new_source_interval` is the same formula). ``prediction_sd``
(``sqrt(s_e^2 + s_u^2)`` for a random intercept; for a random slope the widest
``s_e^2 + x' B x`` over the calibration rows) is kept for readers that know no B: for
them it is exact (intercept, w0 = 1) or conservative (slope).

Degrees of freedom (small number of groups)
-------------------------------------------
Few sources (5-15) leave the between-source variance poorly known, and it dominates the
new-source variance when sources differ. refit uses a Satterthwaite (1946) approximation
of the degrees of freedom of the prediction variance, split as in a one-way layout::

    v_w = s_e^2 (1 - 1/m)                 within-group part,  n - G degrees of freedom
    v_b = s_u^2 + s_e^2 / m + q           between-group part, G - p degrees of freedom
    df  = (v_w + v_b)^2 / (v_w^2 / (n - G) + v_b^2 / (G - p))

m = n / G the mean group size and q the mean of x_i' Cov(b) x_i over the calibration rows
(the between-group part holds the group means' variance s_u^2 + s_e^2/m and the
coefficient uncertainty, both estimated from G group-level units). df is kept in
[G - p, n - p]: G - p when sources differ strongly, towards the pooled n - p when they
do not. Plain G - p was the first candidate. In the seeded simulation of
``benchmarks/newsource.py`` (400 calibration draws each; between-source SD = within-source
SD; sources on slices of the predictor range) mean coverage of soils of new sources and
mean width / oracle width were, for 6, 10 and 15 sources: G - p 98.8 %, 97.3 %, 96.6 % at
1.47, 1.22, 1.14 (over-covers, needlessly wide with few sources); Satterthwaite 95.2 %,
95.2 %, 95.3 % at 1.16, 1.09, 1.06 (pooled OLS: 90.1 %, 92.1 %, 93.2 %). Hence the
default. ``df_method="groups"`` gives G - p.

Boundary and failures
---------------------
Between-source variance at zero (ratio s_u^2 / s_e^2 below 1e-3, or an optimiser that
stops without converging and no likelihood-ratio evidence for the variance,
2 (l - l_0) < 3.84, chi^2(1) 5 %): the fit falls back to pooled OLS (its coefficients,
covariance, residual SD and n - p degrees of freedom), never a narrower interval, and
says so in ``details["warnings"]``. A random slope whose variance is at zero or that does
not converge falls back to the random intercept, also recorded. A fit that does not converge
is restarted from where it stopped with other optimisers (:data:`RETRY_METHODS`); one
that still does not converge while the likelihood favours a between-source variance
raises :class:`refit.errors.InvalidDataError`.

References
----------
.. [1] Patterson, H. D. & Thompson, R. (1971). Recovery of inter-block information when
   block sizes are unequal. Biometrika 58:545-554 (REML; from memory).
.. [2] Satterthwaite, F. E. (1946). An approximate distribution of estimates of variance
   components. Biometrics Bulletin 2:110-114 (from memory).
.. [3] statsmodels ``MixedLM`` documentation (REML fit, ``cov_params``, ``cov_re``,
   ``scale``).
"""

from __future__ import annotations

import math
import warnings

import numpy as np

from refit.errors import InvalidDataError, UsageError
from refit.models.lsq import EstimatorResult, solve_lsq

#: s_u^2 / s_e^2 below this counts as the boundary (between-source variance zero)
BOUNDARY_RATIO = 1e-3
#: chi^2(1) 95 % point: a likelihood-ratio statistic below it is no evidence for s_u^2 > 0
LR_CRITICAL = 3.841
MIN_GROUPS_EXTRA = 1       # G - p must be at least this (a t quantile needs df >= 1)
DF_METHODS = ("satterthwaite", "groups")
#: optimisers tried, from where the first one stopped, when statsmodels' default does not
#: converge
RETRY_METHODS = ("bfgs", "nm", "powell")


# ----------------------------------------------------------------------------- groups
def group_codes(groups, n: int, *, p: int = 2, who: str = "mixed fit"):
    """Integer codes (0..G-1) of the group labels, the labels and the group sizes.

    Raises
    ------
    InvalidDataError
        Wrong length, missing labels, one group only, fewer than ``p + 1`` groups, or
        every group holding a single soil.
    """
    g = np.asarray(groups, dtype=object).ravel()
    if g.shape[0] != n:
        raise InvalidDataError(f"{who}: groups must give one label per row ({n}); got "
                               f"{g.shape[0]}")
    missing = np.array([v is None or (isinstance(v, float) and math.isnan(v)) or v == ""
                        for v in g], dtype=bool)
    if missing.any():
        rows = ", ".join(str(i + 1) for i in np.flatnonzero(missing)[:10])
        raise InvalidDataError(f"{who}: {int(missing.sum())} row(s) have no group label "
                               f"(rows {rows}); fill the group column or drop those rows "
                               "(missing='drop' in refit.fit)")
    labels, codes, sizes = np.unique(g.astype(str), return_inverse=True, return_counts=True)
    n_groups = labels.size
    if n_groups < 2:
        raise InvalidDataError(f"{who}: the groups column holds one group ({labels[0]!r}); "
                               "a between-source variance needs several sources: use "
                               "estimator='ols' or name a column with several groups")
    if n_groups < p + MIN_GROUPS_EXTRA:
        raise InvalidDataError(f"{who}: {n_groups} groups are too few for {p} fixed "
                               f"effect(s): the new-source interval needs at least "
                               f"{p + MIN_GROUPS_EXTRA} groups; add sources or use a "
                               "simpler form")
    if np.all(sizes == 1):
        raise InvalidDataError(f"{who}: every group holds a single soil, so within- and "
                               "between-source variance cannot be told apart; group "
                               "coarser (e.g. by region) or use estimator='ols'")
    return codes, labels, sizes


# ----------------------------------------------------------------------------- the fit
def _run_mixedlm(X, y, codes, exog_re):
    """statsmodels MixedLM REML fit; (model, result or None, warning texts)."""
    from statsmodels.regression.mixed_linear_model import MixedLM

    model = MixedLM(y, X, groups=codes, exog_re=exog_re)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            result = model.fit(reml=True)
        except (np.linalg.LinAlgError, ValueError, FloatingPointError):
            result = None
        for method in RETRY_METHODS:  # a stalled optimiser, restarted where it stopped
            if result is None or result.converged:
                break
            try:
                again = model.fit(reml=True, method=method, start_params=result.params_object,
                                  maxiter=5000)
            except (np.linalg.LinAlgError, ValueError, FloatingPointError):
                continue
            if again.converged:
                warnings.warn(f"converged on restarting with {method}")
                result = again
    return model, result, [str(w.message) for w in caught]


def _loglike_at_zero(model, fe) -> float:
    """REML log-likelihood with the between-group variance (nearly) zero."""
    from statsmodels.regression.mixed_linear_model import MixedLMParams

    k = model.k_re
    try:
        p0 = MixedLMParams.from_components(fe_params=np.asarray(fe, float),
                                           cov_re=np.eye(k) * 1e-10)
        return float(model.loglike(p0, profile_fe=True))
    except (np.linalg.LinAlgError, ValueError, FloatingPointError):  # pragma: no cover
        return float("nan")


def _satterthwaite_df(s_e2, s_u2, q_mean, n, n_groups, p):
    m = n / n_groups
    v_w = s_e2 * (1.0 - 1.0 / m)
    v_b = s_u2 + s_e2 / m + q_mean
    df_w, df_b = max(n - n_groups, 1), n_groups - p
    df = (v_w + v_b) ** 2 / (v_w ** 2 / df_w + v_b ** 2 / df_b)
    return float(min(max(df, df_b), n - p))


def _pooled_fallback(X, y, names, details, reason):
    ols = solve_lsq(X, y, names=names)
    s = float(ols.residual_std_error)
    details.update(fallback="pooled-ols", boundary=True, prediction_sd=s, within_sd=s,
                   between_sd=0.0, icc=0.0, df_method="pooled n - p",
                   between_covariance=np.zeros((X.shape[1], X.shape[1])))
    details["warnings"].append(reason + "; the interval uses pooled OLS (its residual SD "
                               f"{s:.4g} and {int(ols.df_resid)} degrees of freedom), which "
                               "is never narrower than a zero between-source variance "
                               "would give")
    return EstimatorResult(ols.coefficients, ols.covariance, s, ols.df_resid, ols.fitted,
                           ols.residuals, None, details)


def _slope_design(X, column):
    """(1, scaled predictor) for the random slope, and the map back to (1, x)."""
    x = X[:, column]
    c, d = float(x.mean()), float(x.std()) or 1.0
    to_x = np.array([[1.0, 0.0], [-c / d, 1.0 / d]])  # z_scaled = to_x @ (1, x)
    return np.column_stack([np.ones_like(x), (x - c) / d]), to_x


def _components(result, p, k_re, to_x, column, n_terms):
    """Within variance, between covariance (terms x terms, original units) and the
    Wald standard error of the variance ratio s_u^2 / s_e^2 (statsmodels' cov_params)."""
    scale = float(result.scale)
    cov_re = np.atleast_2d(np.asarray(result.cov_re, dtype=float))
    if k_re == 2:
        cov_re = to_x.T @ cov_re @ to_x
    between = np.zeros((n_terms, n_terms))
    idx = [0] if k_re == 1 else [0, column]
    between[np.ix_(idx, idx)] = cov_re
    cp = np.asarray(result.cov_params(), dtype=float)
    ratio_se = float(np.sqrt(cp[p, p])) if cp.shape[0] > p and cp[p, p] >= 0 else float("nan")
    return scale, between, ratio_se


def _describe(details, scale, between, ratio_se, n, n_groups, p):
    """Variance components, their approximate standard errors and the ICC."""
    s_u2 = float(between[0, 0])
    lam = s_u2 / scale
    s_u = math.sqrt(max(s_u2, 0.0))
    s_e = math.sqrt(scale)
    df_w = max(n - n_groups, 1)
    details.update(
        within_sd=s_e, between_sd=s_u, icc=lam / (1.0 + lam),
        variance_ratio=lam, variance_ratio_se=ratio_se,
        # delta method, s_e^2 treated as known: d sqrt(lam s_e^2) / d lam
        between_sd_se=(s_e * ratio_se / (2.0 * math.sqrt(lam)) if lam > 0 else float("nan")),
        within_sd_se=s_e / math.sqrt(2.0 * df_w),
        icc_se=ratio_se / (1.0 + lam) ** 2,
        uncertainty=("Wald standard errors: variance ratio from statsmodels MixedLM "
                     "cov_params (observed information), between_sd and icc by the delta "
                     "method with s_e^2 fixed; within_sd from chi^2 with n - G df"))


def _prediction_sd(scale, between, X):
    """sqrt(s_e^2 + max over the calibration rows of x' G x): exact for a random
    intercept, the widest in the calibration range for a random slope (for readers that
    know no between-source covariance; refit's own intervals use B row by row)."""
    zgz = np.einsum("ij,jk,ik->i", X, between, X)
    return float(np.sqrt(scale + max(float(zgz.max()), 0.0))), float(zgz.mean())


def fit_mixed(X, y, groups, *, random_slope: bool = False, slope_column: int = 1,
              names=None, df_method: str = "satterthwaite") -> EstimatorResult:
    """Random-effects fit (REML, statsmodels MixedLM) with a new-source prediction SD.

    Parameters
    ----------
    X : ndarray, shape (n, p)
        Design matrix with the intercept as its first column [terms' units].
    y : ndarray, shape (n,)
        Response [its unit].
    groups : array_like, shape (n,)
        Group (source) label of each row; no missing labels.
    random_slope : bool
        Also a random slope on design column ``slope_column`` (the single predictor).
    names : sequence of str, optional
        Term names (messages only).
    df_method : str
        ``satterthwaite`` (default; see the module notes) or ``groups`` (G - p).

    Returns
    -------
    EstimatorResult
        ``coefficients`` the fixed effects (design order); ``covariance`` their GLS
        covariance (``cov_params()`` fixed block); ``residual_std_error`` the within-source
        SD sqrt(scale); ``df_resid`` the small-number-of-groups df. ``details``:
        ``prediction_sd`` (new soil of a new source, without coefficient uncertainty),
        ``between_sd``, ``within_sd``, ``icc``, their standard errors (``*_se``, see
        ``uncertainty``), ``between_covariance`` (terms x terms; zeros outside the random
        terms), ``n_groups``, ``group_sizes``, ``converged``, ``boundary``, ``fallback``
        (None, ``pooled-ols`` or ``random-intercept``), ``df_method``, ``warnings``.

    Raises
    ------
    InvalidDataError
        Bad groups (see :func:`group_codes`) or a fit that does not converge while the
        likelihood favours a between-source variance.
    """
    if df_method not in DF_METHODS:
        raise UsageError(f"df_method must be one of {', '.join(DF_METHODS)}; got {df_method!r}")
    X = np.asarray(X, dtype=float)
    y = np.asarray(y, dtype=float)
    n, p = X.shape
    codes, labels, sizes = group_codes(groups, n, p=p)
    n_groups = labels.size
    details = {"n_groups": int(n_groups), "group_sizes": dict(zip(labels.tolist(),
               sizes.tolist())), "warnings": [], "fallback": None, "boundary": False,
               "random_slope": bool(random_slope), "df_method": df_method,
               "method": "REML (statsmodels MixedLM)"}
    if np.any(sizes == 1):
        details["warnings"].append(f"{int(np.sum(sizes == 1))} group(s) hold a single soil; "
                                   "they inform the between-source variance only")
    if random_slope:
        out = _fit_slope(X, y, codes, slope_column, names, details)
        if out is not None:
            return _finish(out, X, y, n, n_groups, p, details, df_method, names=names,
                           slope_column=slope_column)
    model, result, msgs = _run_mixedlm(X, y, codes, None)
    return _finish((model, result, msgs, None, 1), X, y, n, n_groups, p, details, df_method,
                   names=names, slope_column=slope_column)


def _fit_slope(X, y, codes, column, names, details):
    """Random intercept and slope; None (with the reason recorded) when it must fall back
    to the random intercept."""
    if X.shape[1] <= column:
        raise UsageError("random_slope needs the predictor's column in the design; the "
                         f"design has {X.shape[1]} column(s)")
    z, to_x = _slope_design(X, column)
    model, result, msgs = _run_mixedlm(X, y, codes, z)
    why = None
    if result is None:
        why = "the random-slope fit failed numerically"
    elif not result.converged:
        why = "the random-slope fit did not converge"
    else:
        cov = np.asarray(result.cov_re, float)
        if cov[1, 1] / float(result.scale) < BOUNDARY_RATIO:
            why = "the random-slope variance is at zero (boundary)"
    if why is None:
        return model, result, msgs, to_x, 2
    details["fallback"] = "random-intercept"
    details["random_slope"] = False
    details["warnings"].append(why + "; fitted with a random intercept only")
    return None


def _finish(fitted, X, y, n, n_groups, p, details, df_method, *, names=None, slope_column=1):
    model, result, msgs, to_x, k_re = fitted
    details["statsmodels_messages"] = sorted(set(msgs))
    if result is None:
        raise InvalidDataError(
            "mixed fit: statsmodels MixedLM failed numerically on these data (singular "
            "covariance); check the groups column, or use estimator='ols' with a "
            "group-level conformal interval")
    details["converged"] = bool(result.converged)
    scale, between, ratio_se = _components(result, p, k_re, to_x, slope_column, p)
    ratio = float(between[0, 0]) / scale
    if ratio < BOUNDARY_RATIO:
        return _pooled_fallback(X, y, names, details, "the between-source variance is at "
                                f"zero (boundary; ratio to the within variance {ratio:.2g})")
    if not result.converged:
        lr = 2.0 * (float(result.llf) - _loglike_at_zero(model, result.fe_params))
        details["likelihood_ratio"] = lr
        if not np.isfinite(lr) or lr < LR_CRITICAL:
            return _pooled_fallback(X, y, names, details, "the mixed fit did not converge "
                                    "and the likelihood gives no evidence of a between-"
                                    f"source variance (likelihood ratio {lr:.3g} < 3.84)")
        raise InvalidDataError(
            "mixed fit: REML did not converge although the likelihood favours a "
            f"between-source variance (likelihood ratio {lr:.3g}); check the groups and "
            "the predictor's scale, or use estimator='ols' with a group-level conformal "
            "interval")
    b = np.asarray(result.fe_params, dtype=float)
    cov = np.asarray(result.cov_params(), dtype=float)[:p, :p]
    _describe(details, scale, between, ratio_se, n, n_groups, p)
    pred_sd, zgz_mean = _prediction_sd(scale, between, X)
    q_mean = float(np.einsum("ij,jk,ik->i", X, cov, X).mean())
    df = (float(n_groups - p) if df_method == "groups"
          else _satterthwaite_df(scale, zgz_mean, q_mean, n, n_groups, p))
    details.update(prediction_sd=pred_sd, between_covariance=between, boundary=False)
    fitted_values = X @ b
    return EstimatorResult(b, cov, float(np.sqrt(scale)), df, fitted_values,
                           y - fitted_values, None, details)


def new_source_interval(result: EstimatorResult, X0, level: float = 0.95, *, w0=1.0):
    """Prediction interval for a soil of a new source, row by row.

    Parameters
    ----------
    result : EstimatorResult
        From :func:`fit_mixed`.
    X0 : array_like, shape (m, p)
        Design rows of the new soils (terms as in the fit).
    level : float
        Coverage, 0 < level < 1.
    w0 : float or array_like
        Weight of each new observation (within-source variance s_e^2 / w0).

    Returns
    -------
    estimate, lower, upper : ndarray, shape (m,)
        ``x0'b -/+ t(df) sqrt(s_e^2 / w0 + x0' G x0 + x0' Cov(b) x0)``, G the between-
        source covariance in the design's terms (``details['between_covariance']``).
    """
    from scipy import stats

    if not 0 < level < 1:
        raise UsageError(f"level must be between 0 and 1 (e.g. 0.95); got {level!r}")
    X0 = np.atleast_2d(np.asarray(X0, dtype=float))
    d = result.details
    between = d.get("between_covariance")
    if between is None:
        between = np.zeros((X0.shape[1], X0.shape[1]))
    est = X0 @ result.coefficients
    var = (result.residual_std_error ** 2 / np.asarray(w0, dtype=float)
           + np.einsum("ij,jk,ik->i", X0, between, X0)
           + np.einsum("ij,jk,ik->i", X0, result.covariance, X0))
    half = stats.t.ppf(0.5 + level / 2.0, result.df_resid) * np.sqrt(var)
    return est, est - half, est + half
