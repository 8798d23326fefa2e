"""Forward-direction prediction from plain numbers: numpy only.

One function, :func:`forward_predict`, turns measured feature values into climate
estimates, limits and flags by classical calibration (:mod:`refit.models.inversion.classical`). It is the
shared core of ``Fit.predict`` (the in-memory fit, :mod:`refit.models.predict`) and of the
coefficient-file evaluator (:mod:`refit.coefficients.evaluate`): each caller checks its own input and
hands over the numbers (coefficients, covariance, the new observation's variance, the t
quantile, the calibration range, the branch counts as stand-in calibration points and the
physical bounds). Nothing here imports pandas or scipy.
"""

from __future__ import annotations

import numpy as np

from refit.models.inversion import classical as cal
from refit._util.flagcodes import FLAG_APPROX, FLAG_INVALID, FLAG_MISSING, bit_codes, text_by_code


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


def _row_flags(code: int, names, n_inv: int) -> str:
    """The ';'-joined flags of one bit code (the inversion's flags, then the range,
    missing, invalid and approximate-interval flags)."""
    f = [nm for i, nm in enumerate(names[:n_inv]) if code >> i & 1]
    outside, missing, invalid, approx = (code >> (n_inv + j) & 1 for j in range(4))
    if outside and cal.FLAG_OUTSIDE not in f:
        f.insert(0, cal.FLAG_OUTSIDE)
    if missing:
        f.append(FLAG_MISSING)
    if invalid:
        f.append(FLAG_INVALID)
    elif approx and not missing:
        f.append(FLAG_APPROX)
    return ";".join(f)


def _flag_text(masks: dict, order, outside, missing, invalid, approximate: bool) -> np.ndarray:
    """';'-joined flags per row, through one bit code per row (the text is built once
    per distinct code): the inversion's flags in ``order``, then the range, missing,
    invalid and approximate-interval flags."""
    m = len(outside)
    names = list(order)
    extra = [outside, missing, invalid, np.full(m, bool(approximate))]
    codes = bit_codes([masks[nm] for nm in names] + extra, m)
    return text_by_code(codes, lambda code: _row_flags(code, names, len(names)))


def forward_predict(values, *, coefficients, covariance, sigma2_new, t: float, domain,
                    degree: int, through_origin: bool = False, log_response: bool = False,
                    x_cal=None, bounds=(-np.inf, np.inf), with_interval: bool = True,
                    approximate: bool = False, between_covariance=None,
                    feature_range=None, with_rays: bool = False,
                    with_untruncated: bool = False):
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
        Calibration range of climate [its unit] (scaling, root choice, search window).
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
        polynomial's search window (:func:`refit.models.domain.search_window`).
    with_interval : bool
        False: limits are NaN and the interval flags (:data:`refit.models.inversion.classical.INTERVAL_FLAGS`)
        are dropped.
    approximate : bool
        Add ``approximate-interval`` to rows with a value.
    feature_range : (float or None, float or None), optional
        Calibration range of the *feature* [its unit] (the predictor's ``valid_min`` and
        ``valid_max``): a measured value outside it is flagged
        ``outside-calibration-range``, as in the inverse direction. None (callers
        without it): the flag follows the estimate against ``domain``.
    with_rays : bool
        Also return ``other_lower``, ``other_upper``: the second ray of a line's two-ray
        Fieller set, cut at the bounds (NaN for other rows; see
        :func:`refit.models.inversion.classical.fieller_set`).
    with_untruncated : bool
        Also return ``lower_untruncated``, ``upper_untruncated`` (after the rays when
        both are asked): a limit cut at a physical bound (flag ``truncated-at-bound``)
        before the cut; NaN on the sides not cut (see
        :mod:`refit.models.inversion.classical`).
    between_covariance : ndarray, optional
        Between-source covariance B of a mixed fit (terms x terms, as ``covariance``):
        the new observation's variance is then ``sigma2_new + g(x)' B g(x)`` at each
        climate value x (a random slope makes it depend on x). The band variance
        ``sigma2_new + g(x)' (V + B) g(x)`` is the same quadratic form in g(x) as
        without B, so the line's Fieller inversion and the polynomial band search stay
        exact with V + B.

    Returns
    -------
    estimate, lower, upper : ndarray
        Climate [its unit].
    flags : ndarray of str
        ';'-joined flag names per row (see :mod:`refit.models.inversion.classical`).
    other_lower, other_upper : ndarray
        Only with ``with_rays``.
    lower_untruncated, upper_untruncated : ndarray
        Only with ``with_untruncated``.
    """
    y0, missing, invalid = _model_scale(values, log_response)
    if between_covariance is not None:
        covariance = np.asarray(covariance, float) + np.asarray(between_covariance, float)
    poly = np.concatenate([[0.0] if through_origin else [], coefficients])
    cov = np.pad(covariance, ((1, 0), (1, 0))) if through_origin else covariance
    other = np.full((2, len(y0)), np.nan)
    if degree == 1:
        fs = cal.fieller_set(y0, poly[0], poly[1], cov, sigma2_new, t)
        est, lo, hi, masks, untruncated, other = cal.bound_line_set(fs, bounds)
        order = cal.LINE_FLAG_ORDER
    else:
        est, lo, hi, masks, untruncated = cal.invert_polynomial_bounded(
            y0, poly, cov, sigma2_new, t, domain, x_cal, bounds)
        order = cal.POLYNOMIAL_FLAG_ORDER
    untruncated = np.array(untruncated, dtype=float).reshape(2, -1)
    if not with_interval:
        lo, hi = np.full_like(est, np.nan), np.full_like(est, np.nan)
        other[:] = np.nan
        untruncated[:] = np.nan
        order = tuple(nm for nm in order if nm not in cal.INTERVAL_FLAGS)
    if feature_range is None:
        outside = cal.range_flags(est, domain)
    else:  # the measured feature against its own calibration range
        from refit.models.domain import extrapolation_mask

        outside = extrapolation_mask(values, *feature_range)
        masks[cal.FLAG_OUTSIDE] = outside
    flags = _flag_text(masks, order, outside, missing, invalid, approximate)
    out = (est, lo, hi, flags)
    if with_rays:
        out += (other[0], other[1])
    if with_untruncated:
        out += (untruncated[0], untruncated[1])
    return out
