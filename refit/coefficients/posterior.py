"""Posterior for climate from coefficient files alone: numpy and the standard library only.

:func:`proxy_from_record` reads what the posterior needs from a forward file's content
(``terms``, ``coefficients``, ``covariance``, ``residual_std_error``,
``interval.inversion.prediction_sd``, ``interval.between_covariance``, ``df_resid``, the
climate range, the feature's calibration range and the physical bounds);
:func:`posterior_from_records` runs :func:`refit.models.posterior.climate_posterior` on
them, the same numbers as on the in-memory fits. The README section "Posterior for
climate (any language)" gives the recipe without refit.

Which files can enter (and why):

- forward files with an analytic interval: yes;
- an interval of ``published`` kind (only the published +- figure, an in-sample
  standard error of the regression): refused. Such a figure understates the error of a
  new prediction, and weighting proxies by it makes the combination too sure; refit
  neither uses nor inflates it. Refit the equation on calibration data
  (``refit fit``) to get a forward file with its predictive error;
- inverse files (climate on feature): refused; the posterior needs the feature's
  density at each climate value, which only a forward fit gives;
- ``none`` (no error figure) and estimators without a coefficient covariance: refused.
"""

from __future__ import annotations

import math

import numpy as np

from refit.coefficients.evaluate import design_rows
from refit.errors import UsageError
from refit.models.posterior import (
    ForwardProxy,
    Posterior,
    Prior,
    climate_posterior,
    normal_prior,
    prior_from_dict,
    uniform_prior,
)

__all__ = [
    "Posterior",
    "Prior",
    "normal_prior",
    "posterior_from_records",
    "prior_from_dict",
    "proxy_from_record",
    "uniform_prior",
]


def _matrix(value, what: str, who: str) -> np.ndarray:
    if value is None:
        raise UsageError(f"{who}: the file gives no {what}, so the posterior cannot be formed")
    m = np.asarray([[math.nan if c is None else c for c in row] for row in value], float)
    if not np.all(np.isfinite(m)):
        raise UsageError(f"{who}: the file's {what} is not finite, so the posterior cannot "
                         "be formed; use a file from an estimator with a covariance (ols)")
    return m


def _refuse(rec: dict, who: str) -> None:
    """Refuse what cannot enter the posterior, with the reason and the fix."""
    iv = rec.get("interval") or {}
    method = iv.get("method")
    if method == "published":
        raise UsageError(f"{who}: its only error figure is the published +- (an in-sample "
                         "standard error of the regression, not a predictive error); the "
                         "posterior never weights a proxy by it. Refit the equation on "
                         "calibration data (refit fit, direction forward) and use that file")
    if rec.get("direction") != "forward":
        raise UsageError(f"{who}: an inverse file (climate on feature); the posterior needs "
                         "a forward file (the feature modelled on climate): fit with "
                         "direction forward")
    if method != "analytic":
        raise UsageError(f"{who}: interval {method!r}; the posterior needs the analytic "
                         "interval's numbers (covariance and residual SE)")


def proxy_from_record(rec: dict) -> ForwardProxy:
    """The :class:`refit.models.posterior.ForwardProxy` of a forward coefficient record
    (the file's parsed JSON content).

    s is ``residual_std_error`` with V = ``covariance + interval.between_covariance`` for
    a mixed fit, else ``interval.inversion.prediction_sd`` (or ``residual_std_error``)
    with V = ``covariance``; df is ``df_resid``.

    Raises
    ------
    UsageError
        A published +- only, an inverse file, no analytic interval, no covariance.
    """
    who = f"{rec.get('function_id', '?')} {rec.get('version', '')}".strip()
    _refuse(rec, who)
    iv = rec["interval"]
    inv = iv.get("inversion") or {}
    eq = rec["equation"]
    climate = eq["x"][0]
    cov = _matrix(rec.get("covariance"), "coefficient covariance", who)
    between = iv.get("between_covariance")
    if between is not None:
        cov = cov + _matrix(between, "between-source covariance", who)
        s = float(rec["residual_std_error"])
    else:
        s = float(inv.get("prediction_sd") or rec["residual_std_error"])
    feature = rec["predictors"][0]
    b_lo, b_hi = inv.get("bounds") or (None, None)
    terms = list(rec["terms"])
    return ForwardProxy(
        name=feature["name"],
        design=lambda g: design_rows(terms, [climate], np.asarray(g, float)[:, None]),
        coefficients=np.asarray(rec["coefficients"], float), covariance=cov, sd_new=s,
        df=float(rec["df_resid"]), log_response=eq.get("scale") == "log",
        climate_range=tuple(map(float, inv.get("x_range") or
                                rec["domain"]["ranges"][climate])),
        feature_range=(_num(feature.get("valid_min"), -math.inf),
                       _num(feature.get("valid_max"), math.inf)),
        bounds=(_num(b_lo, -math.inf), _num(b_hi, math.inf)))


def _num(v, default: float) -> float:
    return default if v is None else float(v)


def posterior_from_records(records, values, sd=None, *, prior: Prior | dict | None = None,
                           level: float = 0.95, n_grid: int = 2000,
                           keep_density: bool = False, hdi: bool = True) -> Posterior:
    """Posterior for climate from one or more forward coefficient records.

    Parameters
    ----------
    records : list of dict
        Parsed coefficient files (``Equation.record``), all for the same climate variable.
    values : array_like, shape (m, K)
        Measured features, column k for record k [their units]; NaN: not measured.
    sd : float or array_like, optional
        Measurement SDs [the features' units]; see
        :func:`refit.models.posterior.climate_posterior`.
    prior : Prior or dict, optional
        A :class:`Prior`, or what a result recorded (``Posterior.prior``); default uniform
        over the calibration range.
    level, n_grid, keep_density, hdi
        As :func:`refit.models.posterior.climate_posterior`.

    Raises
    ------
    UsageError
        Records for different climate variables, or any refusal of
        :func:`proxy_from_record`.
    """
    records = list(records)
    climates = {r["equation"]["x"][0] for r in records if r.get("equation")}
    if len(climates) > 1:
        raise UsageError(f"the files estimate different climate variables "
                         f"({', '.join(sorted(climates))}); a posterior combines proxies of "
                         "one variable: pass the files of one climate variable")
    proxies = [proxy_from_record(r) for r in records]
    if isinstance(prior, dict):
        prior = prior_from_dict(prior)
    return climate_posterior(proxies, values, sd, prior=prior, level=level, n_grid=n_grid,
                             keep_density=keep_density, hdi=hdi)
