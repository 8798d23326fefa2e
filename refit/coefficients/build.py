"""Building the content of a coefficient file from an in-memory Fit.

The public entry point is :func:`fit_record` (also ``refit.coefficients.fit_record``). The interval
block holds what a consumer needs to rebuild the interval without the calibration rows:

- ``analytic``: t quantile and degrees of freedom (covariance and residual SE at the top);
  for forward fits also the inversion's calibration range and how many calibration
  points lie on each monotonic branch of the curve (to pick the same root), the climate
  variable's physical bounds (they cut the search window and a line's limits), the
  new observation's standard deviation (Theil-Sen: the root-mean-square residual, not the
  robust scale) and whether the interval is approximate (the ``inversion`` block; also
  written for a forward fit with interval ``none``).
- ``split-conformal``: the training-part coefficients and the sorted calibration scores
  (any level, exact).
- ``jackknife+``: the n leave-one-out coefficient vectors and |LOO residuals| (exact).
- ``cv+``: the K fold coefficient vectors, each row's fold and |residual| (exact).
- ``bootstrap-*``: an approximation (the resampled draws are not carried): the bootstrap
  covariance of the coefficients and the pool of modified residuals.
- ``group-jackknife+`` / ``group-cv+``: per left-out unit (a group, or a fold of groups)
  its coefficient vector, per calibration soil its |residual| and its group index, per
  group its unit (cv+); the two-layer weights follow from the group sizes (exact).
- ``quantile``: the lower and upper quantile curves.

A mixed fit also carries ``between_source`` (variance components, their standard errors,
the groups column, the df rule, any fallback) and ``interval.between_covariance`` (B,
terms x terms): a new source's soil has variance ``s_e^2 / w0 + x0' (C + B) x0``.
"""

from __future__ import annotations

import datetime as _dt

import numpy as np

from refit.coefficients.format import (CAUTION, CANDIDATE_VERSION, schema_version_for, validate,
                                       with_hash)

APPROX_BOOTSTRAP = (
    "approximation: the in-memory bootstrap draws resampled fits and residuals with a "
    "seed; the file carries their summary instead. limits = estimate + q(pool, a/2) k and "
    "estimate + q(pool, 1 - a/2) k with k = sqrt(1/w0 + x0' coefficient_covariance x0 / "
    "var(pool)), q the linearly interpolated quantile of residual_pool and var its "
    "population variance; agrees with the in-memory interval to a few percent of its "
    "width, not to rounding")


def _branches(fit) -> dict:
    """The ``inversion`` block of a forward fit: calibration range, physical bounds,
    new-observation SD, approximate flag, and points per monotonic branch of a polynomial."""
    from refit.models.inversion.classical import branch_layout, physical_bounds

    lo, hi = fit.ranges[fit.x_names[0]]
    res = fit.result
    b_lo, b_hi = physical_bounds(fit)
    out = {"x_range": [lo, hi],
           "bounds": [float(b_lo) if np.isfinite(b_lo) else None,
                      float(b_hi) if np.isfinite(b_hi) else None],
           "prediction_sd": float(res.details.get("prediction_sd", res.residual_std_error)),
           "approximate": bool(res.details.get("approximate_interval", False))}
    if fit.form.degree < 2:
        return out
    poly = np.concatenate([[0.0] if fit.form.through_origin else [],
                           fit.result.coefficients])
    br = branch_layout(poly, (lo, hi), fit.x[:, 0])
    xs = [None if not np.isfinite(e) else float(br.c + br.h * e) for e in br.edges]
    out["branches"] = [{"from": xs[i], "to": xs[i + 1], "n_calibration": int(br.counts[i])}
                       for i in range(len(br.counts))]
    return out


def _analytic(fit, level: float) -> dict:
    from refit.coefficients.evaluate import t_quantile

    df = float(fit.df_resid)
    out = {"df": df, "t_quantile": t_quantile(level, df), "exact": True}
    if fit.direction == "forward":
        out["inversion"] = _branches(fit)
        out["rebuild"] = ("classical calibration: the climate values x whose prediction "
                          "band b(x) +- t_quantile sqrt(residual_std_error^2 + g(x)' "
                          "covariance g(x)) contains the measured feature")
    else:
        res = fit._filled()
        sd = res.details.get("prediction_sd")
        if sd is not None:  # Theil-Sen: the RMS residual, not the robust scale
            out["prediction_sd"] = float(sd)
        if res.details.get("approximate_interval"):
            out["approximate"] = True
        if res.details.get("variance_power") is not None:  # spread = s |eta|^theta
            out["variance_power"] = float(res.details["variance_power"])
        out["rebuild"] = ("estimate +- t_quantile sqrt(s^2 + x0' covariance x0), s = "
                          "prediction_sd if given, else residual_std_error; x0 the terms "
                          "at the new value")
    return out


def _split_conformal(X, y, level, seed) -> dict:
    from refit.models.linalg import ols_solve

    n = X.shape[0]
    n_cal = int(round(0.5 * n))
    perm = np.random.default_rng(seed).permutation(n)
    cal, train = perm[:n_cal], perm[n_cal:]
    b = ols_solve(X[train], y[train], "split_conformal")[0]
    scores = np.sort(np.abs(y[cal] - X[cal] @ b))
    k = int(np.ceil(level * (n_cal + 1) - 1e-9))
    q = float(scores[k - 1]) if k <= n_cal else None
    return {"centre_coefficients": b, "calibration_scores": scores, "quantile": q, "n_train": n - n_cal,
            "n_calib": n_cal, "calib_fraction": 0.5, "seed": seed, "exact": True,
            "rebuild": "x0' centre_coefficients +- q, q the ceil(level (n_calib + 1))-th "
                       "smallest calibration score (unbounded if that exceeds n_calib)"}


def _jackknife_plus(X, y) -> dict:
    from refit.models.intervals.conformal import one_minus_leverage
    from refit.models.linalg import ols_solve

    b, e, Q, R = ols_solve(X, y, "jackknife_plus")
    loo = e / one_minus_leverage(Q, "jackknife_plus")
    B = b[None, :] - (np.linalg.solve(R, Q.T) * loo[None, :]).T
    return {"centre_coefficients": b, "loo_coefficients": B, "loo_abs_residuals":
            np.abs(loo), "exact": True,
            "rebuild": "mu_i = x0' loo_coefficients[i]; lower = the floor((1 - level)(n + 1))"
                       "-th smallest of mu_i - loo_abs_residuals[i], upper = the "
                       "ceil(level (n + 1))-th smallest of mu_i + loo_abs_residuals[i]"}


def _cv_plus(X, y, seed, folds=10) -> dict:
    from sklearn.model_selection import KFold

    from refit.models.linalg import ols_solve

    n = X.shape[0]
    fold, r, B = np.empty(n, dtype=int), np.empty(n), []
    for k, (tr, te) in enumerate(KFold(folds, shuffle=True, random_state=seed).split(X)):
        bk = ols_solve(X[tr], y[tr], f"cv_plus (fold {k + 1})")[0]
        fold[te], r[te] = k, np.abs(y[te] - X[te] @ bk)
        B.append(bk)
    b = ols_solve(X, y, "cv_plus")[0]
    return {"centre_coefficients": b, "fold_coefficients": np.array(B), "row_folds": fold,
            "row_abs_residuals": r, "folds": folds, "seed": seed, "exact": True,
            "rebuild": "as jackknife+ with mu_i = x0' fold_coefficients[row_folds[i]] and "
                       "row_abs_residuals"}


def _bootstrap(fit, X, y, method, level, seed, n_boot=1000) -> dict:
    from refit.models import intervals as iv
    from refit.models.intervals.bootstrap import weighted_bootstrap_fit

    fun = iv.bootstrap_pairs if method == "bootstrap-pairs" else iv.bootstrap_residual
    pi = fun(X, y, X[:1], n_boot=n_boot, level=level, seed=seed, weights=fit.weights)
    wf = weighted_bootstrap_fit(X, y, X[:1], fit.weights, 1.0, level, n_boot, method)
    return {"centre_coefficients": wf.b, "coefficient_covariance":
            np.cov(pi.details["coefficients"], rowvar=False).reshape(X.shape[1], -1),
            "residual_pool": np.sort(wf.pool), "n_boot": n_boot, "seed": seed,
            "exact": False, "approximation": APPROX_BOOTSTRAP}


def _group_plus(fit, method, level, seed, folds) -> dict:
    from refit.models.intervals.group_conformal import too_few_groups
    from refit.models.predict import leave_group_out_of

    lgo = leave_group_out_of(fit, method, folds=folds, seed=seed)
    reason = too_few_groups(lgo.n_groups, 1.0 - level)
    out = {"centre_coefficients": fit.result.coefficients,
           "left_out_coefficients": lgo.unit_coefficients,
           "row_groups": lgo.row_groups, "row_abs_residuals": lgo.scores,
           "n_groups": lgo.n_groups, "groups": fit.extras.get("groups_column"),
           "unbounded": reason is not None, "reason": reason, "exact": True,
           "rebuild": "w_i = 1 / ((n_groups + 1) m_g), m_g the soils of soil i's group; "
                      "mu_i = x0' left_out_coefficients[u_i] (u_i = row_groups[i], or "
                      "group_folds[row_groups[i]] for group-cv+); upper = the smallest "
                      "mu_i + r_i whose cumulative weight (ascending) reaches level, lower "
                      "= the largest mu_i - r_i whose cumulative weight (descending) "
                      "reaches level; infinite when the weights sum to less than level"}
    if method == "group-cv+":
        out |= {"group_folds": lgo.group_units, "folds": int(lgo.unit_coefficients.shape[0]),
                "seed": seed}
    return out


def _refitted(fit, X, method, level, seed, folds) -> dict:
    """The stored quantities of a resampling interval refitted with a robust, quantile or
    York fit's own estimator (:mod:`refit.models.refitted`): the same fields, and the same
    rebuild, as the least-squares versions, so the numpy consumer needs nothing new."""
    from refit.models.refitted import refitted_interval

    opts = {"seed": seed, "folds": folds, "calib_fraction": 0.5, "n_boot": 1000}
    d = refitted_interval(fit, X[:1], level, method, opts).details
    b = fit.result.coefficients
    refits = f"refits with estimator {fit.estimator!r}"
    if method == "split-conformal":
        return {"centre_coefficients": d["centre_coefficients"],
                "calibration_scores": d["calibration_scores"],
                "quantile": None if np.isinf(d["quantile"]) else d["quantile"],
                "n_train": d["n_train"], "n_calib": d["n_calib"], "calib_fraction": 0.5,
                "seed": seed, "exact": True, "refits": refits,
                "rebuild": "x0' centre_coefficients +- q, q the ceil(level (n_calib + 1))-th "
                           "smallest calibration score (unbounded if that exceeds n_calib)"}
    if method == "jackknife+":
        return {"centre_coefficients": b, "loo_coefficients": d["loo_coefficients"],
                "loo_abs_residuals": d["loo_abs_residuals"], "exact": True, "refits": refits,
                "rebuild": "mu_i = x0' loo_coefficients[i]; lower = the floor((1 - level)"
                           "(n + 1))-th smallest of mu_i - loo_abs_residuals[i], upper = the "
                           "ceil(level (n + 1))-th smallest of mu_i + loo_abs_residuals[i]"}
    if method == "cv+":
        return {"centre_coefficients": b, "fold_coefficients": d["fold_coefficients"],
                "row_folds": d["row_folds"], "row_abs_residuals": d["row_abs_residuals"],
                "folds": folds, "seed": seed, "exact": True, "refits": refits,
                "rebuild": "as jackknife+ with mu_i = x0' fold_coefficients[row_folds[i]] "
                           "and row_abs_residuals"}
    return {"centre_coefficients": b, "coefficient_covariance":
            np.cov(d["coefficients"], rowvar=False).reshape(X.shape[1], -1),
            "residual_pool": d["residual_pool"], "n_boot": 1000, "seed": seed,
            "exact": False, "refits": refits, "approximation": APPROX_BOOTSTRAP}


def interval_record(fit, method: str, level: float, seed: int, *, folds: int = 10) -> dict:
    """The ``interval`` block (see the module docstring); ``folds`` of group-cv+ (capped
    at the number of groups, as ``Fit.predict`` does)."""
    from refit.models.finish import between_covariance
    from refit.models.intervals.group_conformal import GROUP_INTERVALS

    out = {"method": method, "level": float(level)}
    between = between_covariance(fit)
    if between is not None and method == "analytic":
        out["between_covariance"] = between
    if method in GROUP_INTERVALS:
        return out | _group_plus(fit, method, level, seed, folds)
    if method == "analytic":
        return out | _analytic(fit, level)
    if method == "none":
        extra = {"inversion": _branches(fit)} if fit.direction == "forward" else {}
        return out | {"level": None, "exact": True} | extra
    X, y = fit.form.design(fit.x), fit.y_model
    from refit.models.refitted import REFITTED

    if fit.estimator in REFITTED and method != "quantile":
        return out | _refitted(fit, X, method, level, seed, folds)
    if method == "quantile":
        qlo, qhi = fit.extras["quantiles"]
        cf = fit.extras["quantile_coefficients"]
        return out | {"quantiles": [qlo, qhi], "lower_coefficients": cf[float(qlo)],
                      "upper_coefficients": cf[float(qhi)], "exact": True,
                      "rebuild": "lower = x0' lower_coefficients, upper = x0' "
                                 "upper_coefficients"}
    if method == "split-conformal":
        return out | _split_conformal(X, y, level, seed)
    if method == "jackknife+":
        return out | _jackknife_plus(X, y)
    if method == "cv+":
        return out | _cv_plus(X, y, seed)
    return out | _bootstrap(fit, X, y, method, level, seed)


def _method_cautions(fit, method) -> list[str]:
    out = []
    if fit.estimator == "huber" and method == "analytic":
        out.append("The analytic interval of a Huber fit uses its robust scale and "
                   "covariance: an approximation.")
    if fit.direction == "forward":
        out.append("Forward fits are inverted as a classical calibration; where the slope is "
                   "weak the interval can be very wide or unbounded.")
    if method.startswith("bootstrap"):
        out.append("The bootstrap interval rebuilt from this file approximates the "
                   "in-memory one (see interval.approximation).")
    return out


def between_source_record(fit) -> dict | None:
    """The ``between_source`` block of a mixed fit (None for other estimators)."""
    if fit.estimator != "mixed":
        return None
    d = fit.result.details
    keys = ("between_sd", "within_sd", "icc", "between_sd_se", "within_sd_se", "icc_se",
            "n_groups", "df_method", "fallback", "random_slope", "boundary", "method",
            "uncertainty")
    out = {k: d.get(k) for k in keys if k in d}
    out["groups"] = fit.extras.get("groups_column")
    return out


def _domain(fit) -> dict:
    from refit.errors import InvalidDataError

    try:
        dom = fit.domain
    except InvalidDataError:  # too few rows for the broken-stick comparison
        dom = fit._core_domain()
    out = dom.to_dict()
    out["data_side"] = int(dom.data_side)
    return out


def build_record(fit, *, function_id, provenance, cv, interval_method, level, seed,
                 candidate, form_label, version, status, created, cautions,
                 folds=10) -> dict:
    """Content of a coefficient file (without its hash); see ``fit_record``."""
    import refit

    units = column_units()
    # Theil-Sen's bootstrap covariance and new-observation SD, as Fit.predict draws them,
    # so the file reproduces it (other estimators: the result as it is)
    res = fit._filled()
    dom = _domain(fit)
    interval = interval_record(fit, interval_method, level, seed, folds=folds)
    if interval.get("reason"):
        cautions = [*cautions, interval["reason"]]
    # the lowest schema version that describes the record: 1.4.0 with a worksheet in the
    # provenance, else 1.3.0, so fits from a store or a csv keep their bytes and hash
    schema_version = schema_version_for({"provenance": provenance})
    return {
        "schema_version": schema_version, "function_id": function_id, "version": version,
        "status": status, "created": created, "candidate": candidate,
        "response": {"name": fit.response, "unit": units.get(fit.response)},
        "predictors": [{"name": p, "unit": units.get(p), "valid_min": fit.ranges[p][0],
                        "valid_max": fit.ranges[p][1]} for p in fit.predictors],
        "direction": fit.direction, "form": form_label or fit.form.name,
        "degree": fit.form.degree, "estimator": fit.estimator,
        "equation": {"y": fit.y_name, "x": list(fit.x_names),
                     "scale": "log" if fit.form.log_response else "linear",
                     "smearing": fit.smearing if fit.form.log_response else None},
        "terms": list(fit.terms), "coefficients": res.coefficients,
        "covariance": (res.covariance if np.all(np.isfinite(res.covariance)) else None),
        "residual_std_error": fit.residual_std_error, "df_resid": fit.df_resid,
        "n": fit.n, "r_squared": fit.r_squared,
        "interval": interval,
        "cv": cv, "domain": dom,
        "provenance": {"kind": "refit", **provenance, **_groups_provenance(fit),
                       "software": {"refit": refit.__version__, "numpy": np.__version__}},
        "cautions": [CAUTION, *dom["cautions"], *_method_cautions(fit, interval_method),
                     *(fit.cautions if fit.estimator == "mixed" else []), *cautions],
    } | _optional_blocks(fit)


def _groups_provenance(fit) -> dict:
    """``groups`` (the column a fit with groups was given) and ``random_slope``, so a
    refit (``refit verify``) passes the same settings."""
    if "groups" not in fit.extras:
        return {}
    return {"groups": fit.extras.get("groups_column"),
            "random_slope": bool(fit.extras.get("random_slope", False))}


def _optional_blocks(fit) -> dict:
    out = {}
    block = between_source_record(fit)
    if block is not None:
        out["between_source"] = block
    return out


# ----------------------------------------------------------------------------- building
def column_units() -> dict[str, str | None]:
    """Unit of each canonical column, from schemas/calibration.table.json."""
    from refit.curate.units import schema_fields

    return {f["name"]: f.get("unit") for f in schema_fields()}


def fit_record(fit, *, function_id: str, provenance: dict, cv: dict | None,
               interval_method: str, level: float, seed: int = 0,
               candidate: str | None = None, form_label: str | None = None,
               version: str = CANDIDATE_VERSION, status: str = "candidate",
               created: str | None = None, cautions=(), folds: int = 10) -> dict:
    """The coefficient record of a :class:`refit.models.fitting.Fit` (validated, with its hash).

    Parameters
    ----------
    fit : refit.models.fitting.Fit
    function_id : str
        E.g. ``map_from_bk_depth``.
    provenance : dict
        ``dataset`` {kind, name, version, sha256, ...}, ``subset``, ``recipe`` (the
        recipe's dict, so the fit can be rebuilt), ``recipe_sha256``; ``kind`` and the
        software versions are added.
    cv : dict or None
        Cross-validation summary (scheme settings and skill).
    interval_method : str
        The fitting engine's interval name (``analytic``, ``split-conformal``,
        ``jackknife+``, ``cv+``, ``group-jackknife+``, ``group-cv+``,
        ``bootstrap-pairs``, ``bootstrap-residual``, ``quantile``, ``none``).
    level : float
        Interval level.
    seed : int
        Seed of the resampling interval (as passed to ``Fit.predict``).
    folds : int
        Folds of ``group-cv+`` (as passed to ``Fit.predict``; capped at the groups).
    candidate, form_label : str, optional
        The run's candidate label and the recipe's form name.
    version, status, created : str
        Semantic version, ``candidate`` or ``published``, ISO 8601 time (default now).
    cautions : sequence of str
        Extra cautions.
    """
    content = build_record(fit, function_id=function_id, provenance=provenance, cv=cv,
                           interval_method=interval_method, level=level, seed=seed,
                           candidate=candidate, form_label=form_label, version=version,
                           status=status, created=created or _dt.datetime.now(
                               _dt.UTC).isoformat(timespec="seconds"), cautions=cautions,
                           folds=folds)
    content = with_hash(content)
    return validate(content, where=f"record of {candidate or function_id}")
