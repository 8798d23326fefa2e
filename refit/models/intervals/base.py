"""What every prediction-interval method shares: the result type and the argument checks.

Internal to :mod:`refit.models.intervals` (which re-exports :class:`PredictionInterval`).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from refit.models.linalg import _as_design
from refit.errors import InvalidDataError, UsageError


@dataclass
class PredictionInterval:
    """Point estimates and interval limits for new observations.

    Unpacks as ``estimate, lower, upper = result``.

    Attributes
    ----------
    estimate, lower, upper : ndarray, shape (m,)
        In the units of the response. Limits may be ``-inf``/``+inf`` when the data are too
        few for the requested level (conformal methods; see ``details['unbounded']``).
    details : dict
        Method, level and method-specific extras.
    """

    estimate: np.ndarray
    lower: np.ndarray
    upper: np.ndarray
    details: dict = field(default_factory=dict)

    def __iter__(self):
        return iter((self.estimate, self.lower, self.upper))



def _as_rows(x0, p: int, who: str) -> np.ndarray:
    """Return the new design rows as a finite (m, p) float array."""
    x0 = np.asarray(x0, dtype=float)
    if x0.ndim == 1:
        x0 = x0[None, :] if x0.shape[0] == p else x0[:, None]
    if x0.ndim != 2 or x0.shape[1] != p:
        raise InvalidDataError(
            f"{who}: the new design rows must have {p} column(s) like the fitting design; "
            f"got shape {np.shape(x0)}. Build them with the same terms as the fit.")
    if not np.isfinite(x0).all():
        raise InvalidDataError(
            f"{who}: the new design rows hold missing or infinite values; pass finite values.")
    return x0


def _as_weights(weights, n: int, who: str) -> np.ndarray | None:
    if weights is None:
        return None
    w = np.asarray(weights, dtype=float)
    if w.shape != (n,) or not np.isfinite(w).all() or (w <= 0).any():
        raise InvalidDataError(
            f"{who}: weights must be {n} finite positive numbers, one per row; got shape "
            f"{w.shape} with minimum {np.nanmin(w) if w.size else 'n/a'}. Drop rows with zero "
            f"or negative weight, or fix the weights column.")
    return w


def _alpha(level: float, who: str) -> float:
    if not (isinstance(level, (int, float)) and 0.0 < float(level) < 1.0):
        raise UsageError(f"{who}: level must be a number between 0 and 1 (e.g. 0.95); "
                         f"got {level!r}.")
    return 1.0 - float(level)



def _prepare(X, y, x0, weights, who, min_extra=2, weight0=1.0):
    X, y = _as_design(X, y, min_extra=min_extra, who=who)
    x0 = _as_rows(x0, X.shape[1], who)
    w = _as_weights(weights, X.shape[0], who)
    sw = np.ones(X.shape[0]) if w is None else np.sqrt(w)
    if not (np.ndim(weight0) == 0 and np.isfinite(weight0) and weight0 > 0):
        raise InvalidDataError(f"{who}: weight0 (weight of the new observation) must be one "
                               f"positive number; got {weight0!r}.")
    return X, y, x0, sw

