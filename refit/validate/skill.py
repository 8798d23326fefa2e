"""Skill of out-of-fold predictions: point errors and prediction-interval scores.

Pure functions on arrays. ``obs`` are the observed values and ``pred`` the predictions of
the same rows [both in the units of the response]; ``lower`` and ``upper`` are the limits of
central prediction intervals at level ``1 - alpha``.

References
----------
.. [1] Gneiting, T. & Raftery, A. E. (2007). Strictly proper scoring rules, prediction, and
   estimation. Journal of the American Statistical Association 102(477):359-378, eq. (43)
   (the interval score).
.. [3] Clopper, C. J. & Pearson, E. S. (1934). The use of confidence or fiducial limits
   illustrated in the case of the binomial. Biometrika 26(4):404-413 (the exact bound).
.. [2] Allen, D. M. (1974). The relationship between variable selection and data
   augmentation and a method for prediction. Technometrics 16:125-127 (prediction error
   sum of squares; R^2 of prediction = 1 - PRESS / SS_tot).
"""

from __future__ import annotations

import math

import numpy as np

from refit.errors import InvalidDataError, UsageError

__all__ = ["rmsep", "mae", "bias", "r2_prediction", "coverage", "mean_width",
           "interval_score", "skill_scores", "coverage_upper_bound", "least_passing_coverage"]

#: Confidence of the one-sided coverage check of the ranking rule (common practice: 95 %).
COVERAGE_CONFIDENCE = 0.95


def _arrays(*arrays, names):
    """Equal-length, non-empty 1-d float arrays, or InvalidDataError naming the mismatch."""
    out = [np.asarray(a, dtype=float).ravel() for a in arrays]
    sizes = {len(a) for a in out}
    if len(sizes) != 1:
        got = ", ".join(f"{n} {len(a)}" for n, a in zip(names, out))
        raise InvalidDataError(f"the arrays must hold one value per row each; got {got} "
                               "values: pass arrays of the same rows")
    if not out[0].size:
        raise InvalidDataError("no rows to score: " + ", ".join(names) + " are empty")
    return out


# The measures on checked float arrays (the public functions check, then call these;
# skill_scores checks once and calls them directly).
def _rmsep(o, p) -> float:
    d = p - o
    return float(math.sqrt(np.mean(d * d)))


def _mae(o, p) -> float:
    return float(np.mean(np.abs(p - o)))


def _bias(o, p) -> float:
    return float(np.mean(p - o))


def _r2_prediction(o, p) -> float:
    ss_tot = float(np.sum((o - o.mean()) ** 2))
    if ss_tot == 0.0:
        return float("nan")
    return float(1.0 - np.sum((o - p) ** 2) / ss_tot)


def _coverage(o, lo, hi) -> float:
    return float(np.mean((lo <= o) & (o <= hi)))


def _mean_width(lo, hi) -> float:
    return float(np.mean(hi - lo))


def _interval_score(o, lo, hi, a: float) -> float:
    with np.errstate(invalid="ignore"):
        below = np.where(o < lo, lo - o, 0.0)
        above = np.where(o > hi, o - hi, 0.0)
    return float(np.mean((hi - lo) + (2.0 / a) * (below + above)))


def rmsep(obs, pred) -> float:
    """Root mean squared error of prediction, ``sqrt(mean((pred - obs)^2))`` [units of obs]."""
    return _rmsep(*_arrays(obs, pred, names=("obs", "pred")))


def mae(obs, pred) -> float:
    """Mean absolute error, ``mean(|pred - obs|)`` [units of obs]."""
    return _mae(*_arrays(obs, pred, names=("obs", "pred")))


def bias(obs, pred) -> float:
    """Mean error, ``mean(pred - obs)`` [units of obs]: > 0 when predictions run high."""
    return _bias(*_arrays(obs, pred, names=("obs", "pred")))


def r2_prediction(obs, pred) -> float:
    """R^2 of prediction, ``1 - SS_pred / SS_tot`` [dimensionless].

    ``SS_pred = sum((obs - pred)^2)`` of out-of-fold predictions (PRESS for leave-one-out)
    and ``SS_tot = sum((obs - mean(obs))^2)``; may be negative when the predictions do worse
    than the mean of the observations. NaN when all observations are equal.
    """
    return _r2_prediction(*_arrays(obs, pred, names=("obs", "pred")))


def coverage(obs, lower, upper) -> float:
    """Share of observations inside their interval, ``mean(lower <= obs <= upper)``."""
    return _coverage(*_arrays(obs, lower, upper, names=("obs", "lower", "upper")))


def mean_width(lower, upper) -> float:
    """Mean interval width, ``mean(upper - lower)`` [units of obs]; inf if any is unbounded."""
    return _mean_width(*_arrays(lower, upper, names=("lower", "upper")))


def _check_alpha(alpha) -> float:
    if isinstance(alpha, bool) or not isinstance(alpha, (int, float, np.floating)) \
            or not 0.0 < float(alpha) < 1.0:
        raise UsageError(f"alpha must be a number between 0 and 1 (0.05 for 95% intervals); "
                         f"got {alpha!r}")
    return float(alpha)


def interval_score(obs, lower, upper, alpha) -> float:
    """Mean interval score of central ``(1 - alpha)`` prediction intervals [units of obs].

    Parameters
    ----------
    obs, lower, upper : array_like, shape (n,)
        Observations and interval limits [units of the response].
    alpha : float
        ``1 - level`` (0.05 for 95% intervals).

    Returns
    -------
    float
        Mean over rows of ``IS = (u - l) + (2/alpha)(l - y) 1{y < l} + (2/alpha)(y - u)
        1{y > u}``; lower is better. Infinite when any interval is unbounded.

    Notes
    -----
    A proper scoring rule: its expectation is smallest for the true ``alpha/2`` and
    ``1 - alpha/2`` quantiles. It rewards narrow intervals and penalises each miss in
    proportion to its distance, scaled by ``2/alpha``. ``alpha/2`` times it equals the sum
    of the pinball losses of the two limits at levels ``alpha/2`` and ``1 - alpha/2``.

    References
    ----------
    .. [1] Gneiting & Raftery (2007), JASA 102:359-378, eq. (43).
    """
    a = _check_alpha(alpha)
    return _interval_score(*_arrays(obs, lower, upper, names=("obs", "lower", "upper")), a)


def skill_scores(obs, pred, lower, upper, level) -> dict:
    """All skill measures of out-of-fold predictions in one dict.

    Parameters
    ----------
    obs, pred : array_like, shape (n,)
        Observations and point predictions [units of the response].
    lower, upper : array_like, shape (n,)
        Prediction-interval limits (NaN when the method gives none) [units of the response].
    level : float
        Nominal level of the intervals, e.g. 0.95.

    Returns
    -------
    dict
        ``rmsep``, ``mae``, ``bias``, ``r2_prediction`` over the rows with a finite
        prediction; ``coverage``, ``mean_width``, ``interval_score`` over the rows with
        both limits present (infinite limits count: an unbounded interval covers and
        makes the width and score infinite; NaN when no row has limits); ``n`` (rows
        scored), ``n_no_estimate`` (rows whose prediction is missing, e.g. a curve that
        cannot be inverted there; they are left out of every measure), ``n_unbounded``
        (rows with an infinite limit) and ``level``.
    """
    if isinstance(level, bool) or not isinstance(level, (int, float, np.floating)) \
            or not 0.0 < float(level) < 1.0:
        raise UsageError(f"level must be a number between 0 and 1 (e.g. 0.95); got {level!r}")
    o, p, lo, hi = _arrays(obs, pred, lower, upper, names=("obs", "pred", "lower", "upper"))
    scored = np.isfinite(p) & np.isfinite(o)
    n_scored = int(np.count_nonzero(scored))
    out = {"n": n_scored, "n_no_estimate": len(o) - n_scored, "level": float(level)}
    nan = float("nan")
    if n_scored:
        if n_scored < len(o):  # (all scored: the arrays as they are, no copies)
            o, p, lo, hi = o[scored], p[scored], lo[scored], hi[scored]
        out.update(rmsep=_rmsep(o, p), mae=_mae(o, p), bias=_bias(o, p),
                   r2_prediction=_r2_prediction(o, p))
    else:
        out.update(rmsep=nan, mae=nan, bias=nan, r2_prediction=nan)
    has = ~(np.isnan(lo) | np.isnan(hi))
    n_has = int(np.count_nonzero(has))
    out["n_unbounded"] = int(np.count_nonzero(has & (np.isinf(lo) | np.isinf(hi))))
    if n_has:
        if n_has < len(o):
            o, lo, hi = o[has], lo[has], hi[has]
        out.update(coverage=_coverage(o, lo, hi), mean_width=_mean_width(lo, hi),
                   interval_score=_interval_score(o, lo, hi, 1.0 - float(level)))
    else:
        out.update(coverage=nan, mean_width=nan, interval_score=nan)
    return out


def coverage_upper_bound(covered: float, n: int,
                         confidence: float = COVERAGE_CONFIDENCE) -> float:
    """One-sided exact (Clopper-Pearson) upper confidence bound of a coverage.

    Parameters
    ----------
    covered : float
        Soils whose observed value fell inside their out-of-fold interval; under repeated
        cross-validation the mean count over the repeats, which may be fractional (the
        bound's Beta quantile is continuous in it).
    n : int
        Soils scored.
    confidence : float
        Confidence of the one-sided bound.

    Returns
    -------
    float
        The largest coverage the data do not reject at ``1 - confidence``: the
        ``confidence`` quantile of Beta(covered + 1, n - covered); 1 when every soil was
        covered [3]_. An interval whose bound is below its nominal level *under-covers*:
        an exact one-sided binomial test rejects "coverage >= nominal".
    """
    from scipy.stats import beta

    k, n = float(covered), int(n)
    if n <= 0 or not 0 <= k <= n:
        raise InvalidDataError(f"a coverage needs 0 <= covered <= n and n > 0; got "
                               f"covered = {covered}, n = {n}")
    return 1.0 if k >= n else float(beta.ppf(confidence, k + 1, n - k))


def least_passing_coverage(level: float, n: int,
                           confidence: float = COVERAGE_CONFIDENCE) -> float:
    """The smallest out-of-fold coverage of ``n`` soils not shown to fall short of ``level``.

    The coverage c at which :func:`coverage_upper_bound` (c n, n) equals ``level`` (it
    rises with c); ``level - least_passing_coverage`` is the ranking rule's one-sided
    tolerance in percentage points (it shrinks as n grows: about 1.645 binomial standard
    errors).
    """
    from scipy.optimize import brentq

    n = int(n)
    if n <= 0:
        return float("inf")
    gap = lambda c: coverage_upper_bound(c * n, n, confidence) - level  # noqa: E731
    return 0.0 if gap(0.0) >= 0 else float(brentq(gap, 0.0, 1.0, xtol=1e-12))
