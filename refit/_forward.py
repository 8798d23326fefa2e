"""Forward-direction prediction from plain numbers: numpy only.

One function, :func:`forward_predict`, turns measured feature values into climate
estimates, limits and flags by classical calibration (:mod:`refit.calibrate`). It is the
shared core of ``Fit.predict`` (the in-memory fit, :mod:`refit._predict`) and of the
coefficient-file evaluator (:mod:`refit._evaluate`): each caller checks its own input and
hands over the numbers (coefficients, covariance, the new observation's variance, the t
quantile, the calibration range, the branch counts as stand-in calibration points and the
physical bounds). Nothing here imports pandas or scipy.
"""

from __future__ import annotations

import numpy as np

from . import calibrate as cal

FLAG_MISSING = "missing-value"
FLAG_INVALID = "invalid-value"
FLAG_APPROX = "approximate-interval"


def _model_scale(values, log_response: bool):
    """The feature on the equation's scale, with the missing and invalid (<= 0 under a log
    response) masks."""
    y0 = np.array(values, dtype=float, copy=True)
    missing = np.isnan(y0)
    invalid = np.zeros_like(missing)
    if log_response:
        invalid = ~missing & ~(y0 > 0)
        y0[invalid] = np.nan
        y0 = np.log(y0)
    return y0, missing, invalid


def _flag_text(flags, outside, missing, invalid, approximate: bool) -> np.ndarray:
    """';'-joined flags per row: the inversion's own flags, then the range, missing,
    invalid and approximate-interval flags."""
    text = []
    for i, f in enumerate(flags):
        f = list(f)
        if outside[i] and cal.FLAG_OUTSIDE not in f:
            f.insert(0, cal.FLAG_OUTSIDE)
        if missing[i]:
            f.append(FLAG_MISSING)
        if invalid[i]:
            f.append(FLAG_INVALID)
        elif approximate and not missing[i]:
            f.append(FLAG_APPROX)
        text.append(";".join(f))
    return np.asarray(text, dtype=object)


def forward_predict(values, *, coefficients, covariance, sigma2_new, t: float, domain,
                    degree: int, through_origin: bool = False, log_response: bool = False,
                    x_cal=None, bounds=(-np.inf, np.inf), with_interval: bool = True,
                    approximate: bool = False):
    """Invert a fitted ``feature = f(climate)`` at measured feature values.

    Parameters
    ----------
    values : ndarray, shape (m,)
        The feature as measured [its unit]; NaN for missing.
    coefficients : ndarray
        The equation's coefficients in increasing powers of climate (no intercept term
        when ``through_origin``).
    covariance : ndarray
        Their covariance (zeros when unknown: then only the point estimate is meaningful).
    sigma2_new : float or ndarray
        Variance of each new observation on the equation's scale [feature^2].
    t : float
        Student t quantile ``t(0.5 + level/2; df)``.
    domain : (float, float)
        Calibration range of climate [its unit].
    degree : int
        Degree of the curve (1: a line, Fieller's interval).
    through_origin : bool
        The equation has no intercept.
    log_response : bool
        The equation models ln(feature) (exponential form).
    x_cal : ndarray, optional
        Calibration climate values, or stand-ins with the same count on each monotonic
        branch (only those counts matter).
    bounds : (float, float)
        Physical bounds of climate [its unit]; they cut a line's limits and the
        polynomial's search window (:func:`refit.domain.search_window`).
    with_interval : bool
        False: limits are NaN and the interval flags (:data:`refit.calibrate.INTERVAL_FLAGS`)
        are dropped.
    approximate : bool
        Add ``approximate-interval`` to rows with a value.

    Returns
    -------
    estimate, lower, upper : ndarray
        Climate [its unit].
    flags : ndarray of str
        ';'-joined flag names per row (see :mod:`refit.calibrate`).
    """
    y0, missing, invalid = _model_scale(values, log_response)
    poly = np.concatenate([[0.0] if through_origin else [], coefficients])
    cov = np.pad(covariance, ((1, 0), (1, 0))) if through_origin else covariance
    if degree == 1:
        est, lo, hi, unb = cal.fieller_line(y0, poly[0], poly[1], cov, sigma2_new, t)
        est, lo, hi, flags = cal._bound_line(est, lo, hi, unb, bounds)
    else:
        def design(x):
            return np.vander(x, degree + 1, increasing=True)

        est, lo, hi, flags = cal.invert_polynomial(
            y0, poly, design, cov, sigma2_new, t, domain, x_cal,
            window=cal.search_window(domain, bounds))
    if not with_interval:
        lo, hi = np.full_like(est, np.nan), np.full_like(est, np.nan)
        flags = [tuple(f for f in fl if f not in cal.INTERVAL_FLAGS) for fl in flags]
    outside = cal.range_flags(est, domain)
    return est, lo, hi, _flag_text(flags, outside, missing, invalid, approximate)
