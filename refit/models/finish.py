"""The shared tail of a prediction, once its band is known: flags, back-transform, flag texts.

Two paths predict the inverse direction (climate on feature): ``Fit.predict`` on an
in-memory fit (:mod:`refit.models.predict`) and the coefficient-file evaluator
(:mod:`refit.coefficients.evaluate`). Each forms its own band; both then finish here, so a
file and the fit it came from flag and back-transform the same rows the same way.

Numpy and the standard library only at module level (the coefficient-file consumer imports
this module); pandas is never imported here: the Categorical form of the flags is
asked for, which the file evaluator never does.
"""

from __future__ import annotations

import numpy as np

from refit._util.flagcodes import (
    FLAG_APPROX,
    FLAG_CROSS,
    FLAG_MISSING,
    bit_codes,
    joined_names,
    text_by_code,
)
from refit.models.domain import extrapolation_mask
from refit.models.inversion.band import FLAG_BEYOND_TP, FLAG_OUTSIDE, FLAG_UNBOUNDED

#: order of the inverse direction's flags in a row's ';'-joined text
INVERSE_FLAG_ORDER = (FLAG_MISSING, FLAG_CROSS, FLAG_UNBOUNDED, FLAG_OUTSIDE, FLAG_APPROX,
                      FLAG_BEYOND_TP)

_UNBOUNDED_FREE = ("analytic", "none", "published")


def inverse_finish(eta, lo, hi, v, *, ok, method: str, ranges, approximate: bool, turning,
                   log_response: bool, smearing: float):
    """The flags and the back-transform of an inverse prediction, shared by ``Fit.predict``
    (:mod:`refit.models.predict`) and the file evaluator, once the band is known.

    Parameters
    ----------
    eta, lo, hi : ndarray
        Estimate and limits on the equation's scale.
    v : ndarray, shape (m, k)
        The predictor values.
    ok : ndarray of bool
        Rows with every value present.
    method : str
        The interval method (``quantile`` may cross; resampled limits may be unbounded).
    ranges : list of (float or None, float or None)
        Calibration range of each predictor, in the columns' order.
    approximate : bool
        Flag rows with a value ``approximate-interval``.
    turning : (float or None, int) or None
        For a quadratic in one predictor: its turning point (None: not in the data's
        reach) and the side holding the data; None for other forms (no such flag).
    log_response, smearing : bool, float
        The equation models ln(response): exponentiate, the estimate times Duan's
        smearing factor for the analytic, none and published intervals.

    Returns
    -------
    eta, lo, hi : ndarray
        In the response's units.
    masks : dict
        Flag name -> boolean mask, in :data:`INVERSE_FLAG_ORDER`.

    References
    ----------
    Duan, N. (1983). Smearing estimate: a nonparametric retransformation method. Journal
    of the American Statistical Association 78(383), 605-610.
    """
    m = v.shape[0]
    masks = {FLAG_MISSING: ~ok}
    if method == "quantile":
        masks[FLAG_CROSS] = lo > hi
    elif method not in _UNBOUNDED_FREE:
        masks[FLAG_UNBOUNDED] = ok & ~(np.isfinite(lo) & np.isfinite(hi))
    out = np.zeros(m, dtype=bool)
    for j, (lo_r, hi_r) in enumerate(ranges):
        out |= extrapolation_mask(v[:, j], lo_r, hi_r)
    masks[FLAG_OUTSIDE] = out
    if approximate:
        masks[FLAG_APPROX] = ok
    if turning is not None:
        tp, side = turning
        with np.errstate(invalid="ignore"):
            masks[FLAG_BEYOND_TP] = (np.zeros(m, dtype=bool) if tp is None
                                     else (v[:, 0] - tp) * side < 0)
    if log_response:
        smear = smearing if method in _UNBOUNDED_FREE else 1.0
        eta, lo, hi = np.exp(eta) * smear, np.exp(lo), np.exp(hi)
    return eta, lo, hi, masks


def flag_codes(masks: dict, m: int, order=None) -> tuple[tuple, np.ndarray]:
    """(names in order, one bit code per row) of boolean flag masks."""
    names = tuple(masks) if order is None else tuple(nm for nm in order if nm in masks)
    return names, bit_codes([masks[nm] for nm in names], m)


def flag_strings(masks: dict, m: int, order=None) -> np.ndarray:
    """';'-joined flag names per row from boolean masks, through one bit code per row.

    Parameters
    ----------
    masks : dict
        Flag name -> boolean mask of shape (m,).
    m : int
        Number of rows.
    order : sequence of str, optional
        Order of the names in a row's text (names without a mask are skipped); default
        the masks' own order.

    Returns
    -------
    ndarray of str (object)
        The texts; :func:`refit.models.predict.flag_categorical` gives the same texts as a
        pandas Categorical (numpy only here: the coefficient-file consumer imports this).
    """
    names, codes = flag_codes(masks, m, order)
    return text_by_code(codes, lambda code: joined_names(names, code))


def between_covariance(fit):
    """The between-source covariance B (terms x terms) of a mixed fit, else None.

    A soil of a new source has variance ``s_e^2 / w0 + x0' B x0`` about the fixed
    effects (Searle, Casella & McCulloch 1992, ch. 6, from memory): the random
    intercept's B holds s_u^2 in its first cell, so ``x0' B x0 = s_u^2``; a random slope
    adds its x-dependent part. Every analytic interval of a mixed fit (inverse band,
    forward band, coefficient file) uses it."""
    if fit.estimator != "mixed":
        return None
    b = fit.result.details.get("between_covariance")
    return None if b is None else np.asarray(b, dtype=float)
