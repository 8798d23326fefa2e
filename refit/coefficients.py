"""Candidate coefficient records: one JSON document per fitted candidate of a run.

Provisional: these records carry the fields of the coefficient-file contract (DESIGN.md)
with ``version`` ``"0.0.0-candidate"``; they are unpublished candidates. Publishing
(immutable, versioned files, checked by a JSON Schema) comes with the coefficient-file work.

Everything is plain JSON: numbers, text, lists and objects; NaN and infinities become
``null``. ``sha256`` is the hash of the canonical content (keys sorted, no spaces, UTF-8)
without the ``sha256`` key itself.
"""

from __future__ import annotations

import datetime as _dt
import json
import math

import numpy as np

SCHEMA_VERSION = "0.1-candidate"
CANDIDATE_VERSION = "0.0.0-candidate"
CAUTION = ("An estimate from a transfer function carries a wide interval; use it for "
           "research, not for engineering, hazard or regulatory decisions.")


def plain(value):
    """A JSON-ready copy of ``value``: numpy scalars and arrays to Python, NaN/inf to None."""
    if isinstance(value, dict):
        return {str(k): plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [plain(v) for v in value]
    if isinstance(value, np.ndarray):
        return plain(value.tolist())
    if isinstance(value, (bool, np.bool_)):
        return bool(value)
    if isinstance(value, (int, np.integer)):
        return int(value)
    if isinstance(value, (float, np.floating)):
        return float(value) if math.isfinite(value) else None
    if value is None or isinstance(value, str):
        return value
    try:
        import pandas as pd

        if value is pd.NA or value is pd.NaT:
            return None
    except ImportError:  # pragma: no cover
        pass
    return str(value)


def canonical_bytes(content: dict) -> bytes:
    """Canonical JSON bytes (keys sorted, compact, UTF-8) used for the hash."""
    return json.dumps(plain(content), sort_keys=True, separators=(",", ":"),
                      ensure_ascii=False, allow_nan=False).encode("utf-8")


def column_units() -> dict[str, str | None]:
    """Unit of each canonical column, from schemas/calibration.table.json."""
    from .units import schema_fields

    return {f["name"]: f.get("unit") for f in schema_fields()}


# ----------------------------------------------------------------------------- interval
def _t_quantile(level: float, df: float) -> float:
    from scipy import stats

    return float(stats.t.ppf(0.5 + level / 2, df))


def interval_record(fit, method: str, engine: str, level: float, seed: int) -> dict:
    """What a consumer needs to rebuild the candidate's interval without the data.

    ``analytic``: t quantile and degrees of freedom (with the coefficients' covariance and
    the residual standard error at the top level). ``split-conformal``: the coefficients
    fitted on the training part and the conformal quantile (the interval is their
    prediction +- q). Other resampling methods need the calibration rows; for
    ``jackknife+`` the half-width from the leave-one-out residuals is given as an
    approximation.
    """
    from . import intervals as iv

    out = {"method": method, "engine_method": engine, "level": level}
    res = fit.result
    if method == "analytic":
        out.update(df=res.df_resid, t_quantile=_t_quantile(level, res.df_resid))
        out["rebuild"] = (
            "estimate +- t_quantile * sqrt(residual_std_error^2 + x0' covariance x0), x0 "
            "the terms at the new value" if fit.direction == "inverse" else
            "classical calibration: the climate values whose prediction band for the "
            "feature (t_quantile, residual_std_error, covariance) contains the measured "
            "feature (Fieller's interval for a line)")
        return out
    X = fit.form.design(fit.x)
    y = fit.y_model
    if method == "split-conformal":
        pi = iv.split_conformal(X, y, np.eye(X.shape[1]), level=level, seed=seed)
        out.update(centre_coefficients=pi.estimate, quantile=pi.details["quantile"],
                   n_train=pi.details["n_train"], n_calib=pi.details["n_calib"], seed=seed,
                   rebuild="x0' centre_coefficients +- quantile")
    elif method == "jackknife+":
        loo = np.sort(np.abs(iv.loo_residuals(X, y)))
        k = math.ceil(level * (len(loo) + 1) - 1e-9)
        out.update(approximate_half_width=loo[k - 1] if k <= len(loo) else None,
                   rebuild="needs the calibration rows (it combines all n leave-one-out "
                   "fits); without them, estimate +- approximate_half_width")
    elif method == "quantile":
        coefs = fit.extras.get("quantile_coefficients", {})
        out["quantile_coefficients"] = {str(q): b for q, b in coefs.items()}
        out["rebuild"] = "lower and upper curves: x0' quantile_coefficients[q]"
    else:
        out.update(seed=seed, rebuild="needs the calibration rows: refit the subset and "
                   "resample with the same seed")
    return out


# ----------------------------------------------------------------------------- record
def candidate_record(fit, spec, *, function_id: str, level: float, seed: int,
                     cv: dict, data: dict, subset: dict, recipe_sha256: str,
                     created: str | None = None) -> dict:
    """The coefficient record of one candidate fitted on the whole subset.

    Parameters
    ----------
    fit : refit.fitting.Fit
    spec : refit.matrix.Spec
    function_id : str
    level : float
        Interval level.
    seed : int
        The recipe's seed.
    cv : dict
        Cross-validation summary: scheme settings and skill (see :mod:`refit.matrix`).
    data : dict
        Dataset provenance: kind, name, version, sha256, path.
    subset : dict
        The filters and the rows each kept.
    recipe_sha256 : str
    created : str, optional
        ISO 8601 time; default now (UTC).
    """
    import refit

    units = column_units()
    dom = fit.domain
    ranges = fit.ranges
    res = fit.result
    content = {
        "schema_version": SCHEMA_VERSION,
        "function_id": function_id,
        "version": CANDIDATE_VERSION,
        "created": created or _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
        "candidate": spec.label,
        "response": {"name": fit.response, "unit": units.get(fit.response)},
        "predictors": [{"name": p, "unit": units.get(p), "valid_min": ranges[p][0],
                        "valid_max": ranges[p][1]} for p in fit.predictors],
        "direction": fit.direction,
        "form": spec.form_label,
        "degree": fit.form.degree,
        "estimator": fit.estimator,
        "equation": {"y": fit.y_name, "x": list(fit.x_names),
                     "scale": "log" if fit.form.log_response else "linear",
                     "smearing": fit.smearing if fit.form.log_response else None},
        "terms": list(fit.terms),
        "coefficients": res.coefficients,
        "covariance": res.covariance,
        "residual_std_error": fit.residual_std_error,
        "df_resid": fit.df_resid,
        "n": fit.n,
        "r_squared": fit.r_squared,
        "interval": interval_record(fit, spec.method, spec.interval, level, seed),
        "cv": cv,
        "domain": dom.to_dict(),
        "provenance": {"dataset": data, "subset": subset, "recipe_sha256": recipe_sha256,
                       "software": {"refit": refit.__version__, "numpy": np.__version__}},
        "cautions": [CAUTION, *dom.cautions, *_method_cautions(fit, spec)],
    }
    content = plain(content)
    content["sha256"] = _sha(content)
    return content


def _sha(content: dict) -> str:
    from ._atomic import sha256_bytes

    return sha256_bytes(canonical_bytes(content))


def _method_cautions(fit, spec) -> list[str]:
    out = []
    if fit.estimator == "huber" and spec.method == "analytic":
        out.append("The analytic interval of a Huber fit uses its robust scale and "
                   "covariance: an approximation.")
    if fit.direction == "forward":
        out.append("Forward fits are inverted as a classical calibration; where the slope is "
                   "weak the interval can be very wide or unbounded.")
    return out
