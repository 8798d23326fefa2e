"""Apply an in-memory fit to fossil feature values: the engine of ``Fit.predict``.

Input checks (values to an (m, k) float array, weights of new observations), the inverse
direction's bands (analytic, resampling, quantile curves), finished (flags, back-transform)
by :func:`refit.models.finish.inverse_finish` as the coefficient-file evaluator does, and
the forward direction through the shared numpy core
:func:`refit.models.inversion.forward.forward_predict`.
"""

from __future__ import annotations

import numpy as np

from refit._util.flagcodes import UNTRUNCATED_COLUMNS, joined_names, present_codes
from refit.models import finish
from refit.models.finish import between_covariance
from refit.models.intervals.group_conformal import GROUP_INTERVALS

_PREDICTION_COLUMNS = ("estimate", "lower", "upper", "flags")
#: a forward prediction whose classical-calibration set is two rays for some row keeps the
#: second ray in these columns (NaN for the other rows; flag ``two-rays``)
_OTHER_RAY = ("other_lower", "other_upper")
#: a forward prediction with a limit cut at a physical bound (flag ``truncated-at-bound``)
#: keeps the limit before the cut in these columns (NaN for the other rows and sides)
_UNTRUNCATED = UNTRUNCATED_COLUMNS


def _shape_values(arr: np.ndarray, names: list[str]) -> np.ndarray:
    from refit.errors import UsageError

    k = len(names)
    if arr.ndim <= 1:
        arr = arr.reshape(-1, 1) if k == 1 else arr.reshape(1, -1)
    if arr.ndim != 2 or arr.shape[1] != k:
        raise UsageError(f"values must have {k} column(s) ({names}); got shape {arr.shape}")
    return arr


def _has_complex(values) -> bool:
    """Whether ``values`` hold a complex number (numpy would drop its imaginary part)."""
    kind = getattr(getattr(values, "dtype", None), "kind", None)
    if kind is None:
        try:
            arr = np.asarray(values)
        except (TypeError, ValueError):
            arr = np.asarray(values, dtype=object)
        kind = arr.dtype.kind
        values = arr
    if kind == "c":
        return True
    if kind == "O":
        return any(isinstance(v, (complex, np.complexfloating))
                   for v in np.asarray(values, dtype=object).ravel())
    return False


def _values_matrix(values, names: list[str]):
    """Fossil feature values as an (m, k) float array plus the index for the output."""
    import pandas as pd

    from refit.errors import InvalidDataError, UsageError

    index = values.index if isinstance(values, (pd.Series, pd.DataFrame)) else None
    if isinstance(values, (pd.DataFrame, dict)):
        missing = [n for n in names if n not in values]
        if missing:
            raise UsageError(f"values lack column(s) {missing}; the fit needs {names} "
                             f"(got {list(values.keys())})")
        cols = [values[n] for n in names]
        if any(_has_complex(c) for c in cols):
            raise InvalidDataError(f"values for {names} hold complex numbers; a measurement "
                                   "is a real number: pass the real values")
    elif _has_complex(values):
        raise InvalidDataError(f"values for {names} hold complex numbers; a measurement is "
                               "a real number: pass the real values")
    else:
        try:  # fast path: already numeric
            arr = _shape_values(np.asarray(values, dtype=float), names)
            cols = None
        except (TypeError, ValueError):
            raw = _shape_values(np.asarray(values, dtype=object), names)
            cols = [raw[:, j] for j in range(raw.shape[1])]
    if cols is not None:
        series = [pd.Series(np.atleast_1d(np.asarray(c, dtype=object))) for c in cols]
        arr = np.column_stack([pd.to_numeric(c, errors="coerce")
                               .to_numpy(dtype=float, na_value=np.nan) for c in series])
        bad = np.isnan(arr) & np.column_stack([c.notna().to_numpy() for c in series])
        if bad.any():
            r, c = np.argwhere(bad)[0]
            raise InvalidDataError(f"value {series[c].iat[r]!r} for {names[c]!r} (position "
                                   f"{r}) is not a number; correct it or leave it empty")
    if np.isinf(arr).any():
        r, c = np.argwhere(np.isinf(arr))[0]
        raise InvalidDataError(f"value for {names[c]!r} at position {r} is infinite; "
                               "use a finite number or leave it empty")
    return arr, index


def _t(level: float, df: float) -> float:
    from scipy import stats

    return float(stats.t.ppf(0.5 + level / 2.0, df))


def flag_categorical(masks: dict[str, np.ndarray], m: int, *, sort: bool = False):
    """';'-joined flag names per row as a pandas Categorical (one category per combination
    present): the texts of :func:`refit.models.finish.flag_strings`, built per code.

    ``sort`` orders the categories lexicographically, as ``pandas.Categorical`` of the
    texts would have them.
    """
    import pandas as pd

    names, codes = finish.flag_codes(masks, m)
    lookup, dtype = _flag_categories(names, present_codes(codes), sort)
    # the codes index the categories by construction, so pandas need not check them again
    return pd.Categorical.from_codes(lookup[codes], dtype=dtype, validate=False)


_FLAG_CATEGORIES: dict = {}


def _flag_categories(names: tuple, present: np.ndarray, sort: bool):
    """(code -> category position, Categorical dtype) of the flag combinations present,
    built once per (names, combinations, order): a handful occur, and building and
    checking the categories is most of the cost of the flags."""
    import pandas as pd

    key = (names, present.tobytes(), sort)
    hit = _FLAG_CATEGORIES.get(key)
    if hit is not None:
        return hit
    text = [joined_names(names, int(code)) for code in present]
    if sort:
        order = sorted(range(len(text)), key=text.__getitem__)
        present, text = present[order], [text[i] for i in order]
    lookup = np.zeros(1 << len(names), dtype=np.int64)
    lookup[present] = np.arange(len(present))
    if len(_FLAG_CATEGORIES) >= 4096:  # bound the cache
        _FLAG_CATEGORIES.clear()
    hit = _FLAG_CATEGORIES[key] = (lookup, pd.CategoricalDtype(categories=text))
    return hit


_COLUMN_INDEXES: dict = {}
_BLOCK_KINDS = "fiub"   # numpy kinds stored as 2-D blocks: float, int, unsigned, bool


def _blocks(columns):
    """pandas blocks of the columns: each numpy dtype stacked into one 2-D array (rows =
    columns), each Categorical on its own; None when a column needs pandas' inference
    (e.g. object arrays of text, which become the string dtype)."""
    import pandas as pd

    groups: dict = {}
    blocks = []
    for j, col in enumerate(columns):
        if isinstance(col, pd.Categorical):
            blocks.append((col, np.array([j])))
        elif isinstance(col, np.ndarray) and col.ndim == 1 and col.dtype.kind in _BLOCK_KINDS:
            groups.setdefault(col.dtype, []).append(j)
        else:
            return None
    for place in groups.values():
        blocks.append((np.stack([columns[j] for j in place]), np.array(place)))
    return blocks


def result_frame(names: tuple, columns, index=None):
    """A DataFrame of the 1-D ``columns`` (copied into fresh blocks) named ``names``.

    Numeric columns and Categoricals go straight into pandas blocks
    (``pandas.api.internals.create_dataframe_from_blocks``: no per-column checks, which
    cost more than a small prediction); other columns through ``pandas.DataFrame``.
    Every table with the same names shares one column Index, built once: pandas builds
    the look-up table of a string Index on the first column read, and a shared Index
    keeps it.
    """
    import pandas as pd
    from pandas.api.internals import create_dataframe_from_blocks

    labels = _COLUMN_INDEXES.get(names)
    if labels is None:
        labels = _COLUMN_INDEXES[names] = pd.Index(list(names))
    blocks = _blocks(columns)
    if blocks is None:
        frame = pd.DataFrame(dict(enumerate(columns)), index=index)
        frame.columns = labels
        return frame
    index = pd.RangeIndex(len(columns[0])) if index is None else index
    return create_dataframe_from_blocks(blocks, index=index, columns=labels)


def _analytic_band(fit, X0, eta, w0, level):
    from refit.errors import UsageError

    res = fit.result
    if not np.all(np.isfinite(res.covariance)):
        raise UsageError(f"estimator {fit.estimator!r} gives no coefficient covariance, so "
                         "there is no analytic interval; use interval='bootstrap-pairs' or a "
                         "conformal interval with an OLS fit, or interval='none'")
    half = _t(level, res.df_resid) * np.sqrt(new_observation_variance(fit, X0, w0))
    return eta - half, eta + half


def new_observation_variance(fit, X0, w0=1.0) -> np.ndarray:
    """Variance of a new observation about the fitted equation at the design rows ``X0``
    [response unit^2, model scale]: ``s^2 / w0 + x0' C x0``, with s the new observation's
    SD (``prediction_sd`` where the estimator gives one, else the residual SE) and C the
    coefficient covariance; for a mixed fit ``s_e^2 / w0 + x0' (C + B) x0`` (see
    :func:`between_covariance`). The one formula of every analytic band (the report draws
    it too)."""
    res = fit.result
    between = between_covariance(fit)
    theta = res.details.get("variance_power")
    if theta is not None:  # the spread as a power of the mean: sigma^2 |mu0|^(2 theta)
        from refit.models.variance import power_variance_sd

        mu0 = X0 @ np.asarray(res.coefficients, float)
        q = np.einsum("ij,jk,ik->i", X0, res.covariance, X0)
        return power_variance_sd(res.residual_std_error, theta, mu0, w0) ** 2 + q
    if between is not None:  # mixed: s_e^2 / w0 + x0' (C + B) x0, row by row
        s2 = res.residual_std_error ** 2
        q = np.einsum("ij,jk,ik->i", X0, res.covariance + between, X0)
    else:
        s2 = res.details.get("prediction_sd", res.residual_std_error) ** 2
        factor = res.details.get("factor")
        if factor is not None:
            q = factor.quad_form(X0) * s2
        else:
            q = np.einsum("ij,jk,ik->i", X0, res.covariance, X0)
    return s2 / w0 + q


# ----------------------------------------------------------------------------- group-level


def leave_out_fitter(fit):
    """``fit_rows(row indices) -> coefficients`` refitting with the fit's own estimator,
    or None for OLS (the fast QR path of :mod:`refit.models.intervals.group_conformal`).

    Raises
    ------
    UsageError
        York (the measurement SDs are not kept with the fit).
    """
    from refit.errors import UsageError

    X = fit.form.design(fit.x)
    y = fit.y_model
    est = fit.estimator
    if est == "ols":
        return None
    if est == "wls":
        from refit.models.lsq import solve_lsq

        return lambda rows: solve_lsq(X[rows], y[rows], weights=fit.weights[rows],
                                      intercept=fit.form.intercept).coefficients
    if est == "huber":
        from refit.models.robust import fit_huber

        return lambda rows: fit_huber(X[rows], y[rows]).coefficients
    if est == "theil-sen":
        from refit.models.robust import fit_theil_sen

        how = fit.result.details.get("intercept", "joint")
        return lambda rows: fit_theil_sen(X[rows, 1], y[rows], intercept=how).coefficients
    if est == "quantile":
        from refit.models.quantile import fit_quantiles

        def median(rows):
            return np.asarray(next(iter(fit_quantiles(X[rows], y[rows],
                                                      quantiles=(0.5,)).values())), float)
        return median
    if est == "mixed":
        from refit.models.mixed import fit_mixed

        labels = np.asarray(fit.extras["groups"], dtype=object)
        slope = bool(fit.extras.get("random_slope", False))
        return lambda rows: fit_mixed(X[rows], y[rows], labels[rows], random_slope=slope,
                                      names=fit.terms).coefficients
    raise UsageError(f"interval 'group-jackknife+'/'group-cv+' refits the estimator on "
                     f"the kept sources; {est!r} needs per-row measurement SDs that the fit "
                     "does not keep: use estimator 'ols' or 'huber' for a group-level "
                     "interval")


def group_folds(fit, folds: int) -> int:
    """Folds of group-cv+: ``folds`` capped at the number of groups."""
    n_groups = np.unique(np.asarray(fit.extras["groups"], dtype=str)).size
    return int(min(folds, n_groups))


def leave_group_out_of(fit, interval: str, *, folds: int = 10, seed: int = 0):
    """The :class:`refit.models.intervals.group_conformal.LeaveGroupOut` of a fit (its own
    estimator, its groups): what both ``Fit.predict`` and the coefficient file use."""
    from refit.models.intervals.group_conformal import leave_group_out

    k = None if interval == "group-jackknife+" else group_folds(fit, folds)
    key = (interval, k, None if k is None else seed)
    cache = fit.extras.setdefault("_leave_group_out", {})  # refits run once per setting
    if key not in cache:
        cache[key] = leave_group_out(fit.form.design(fit.x), fit.y_model,
                                     fit.extras["groups"], folds=k, seed=seed,
                                     fit_rows=leave_out_fitter(fit),
                                     who=f"interval {interval!r}")
    return cache[key]


def _group_band(fit, X0, eta, ok, level, interval, opts):
    """Group-level jackknife+ / CV+ limits; the reason when they are unbounded."""
    from refit.models.intervals.group_conformal import too_few_groups

    lgo = leave_group_out_of(fit, interval, folds=opts["folds"], seed=opts["seed"])
    alpha = 1.0 - level
    lo, hi = np.full(len(ok), np.nan), np.full(len(ok), np.nan)
    lo[ok], hi[ok] = lgo.limits(X0[ok], alpha)
    return lo, hi, too_few_groups(lgo.n_groups, alpha)


def _resampled_band(fit, X0, eta, ok, w0, level, interval, opts):
    from refit.models import intervals as iv
    from refit.errors import UsageError

    from refit.models.refitted import REFITTED

    if fit.estimator in REFITTED:  # refits with the fit's own estimator
        return _refitted_band(fit, X0, ok, w0, level, interval, opts)
    if fit.estimator not in ("ols", "wls"):
        raise UsageError(f"interval {interval!r} refits the estimator on resampled rows; "
                         f"{fit.estimator!r} fits use 'analytic' or a group-level interval")
    if fit.weights is not None and interval not in ("bootstrap-pairs", "bootstrap-residual"):
        raise UsageError(f"interval {interval!r} does not take weights; use "
                         "'bootstrap-pairs' or 'bootstrap-residual' with a WLS fit")
    x0 = X0[ok]
    if interval == "jackknife+" and "q" in fit.result.details and fit.weights is None:
        from refit.models.intervals.conformal import jackknife_plus_fitted  # the fit's own QR: no second one

        pi = jackknife_plus_fitted(x0, eta[ok], fit.result, level=level)
        out = np.full((3, len(ok)), np.nan)
        out[:, ok] = np.vstack([pi.estimate, pi.lower, pi.upper])
        return out
    X = fit.form.design(fit.x)
    y = fit.y_model
    if interval.startswith("bootstrap"):
        fun = iv.bootstrap_pairs if interval == "bootstrap-pairs" else iv.bootstrap_residual
        w0v = np.broadcast_to(w0, ok.shape)[ok]
        out = np.full((3, len(ok)), np.nan)
        idx = np.flatnonzero(ok)
        for wv in np.unique(w0v):  # the resampling functions take one new-row weight
            sel = w0v == wv
            pi = fun(X, y, x0[sel], n_boot=opts["n_boot"], level=level, seed=opts["seed"],
                     weights=fit.weights, weight0=float(wv))
            out[:, idx[sel]] = np.vstack([pi.estimate, pi.lower, pi.upper])
        return out
    elif interval == "split-conformal":
        pi = iv.split_conformal(X, y, x0, level=level, seed=opts["seed"],
                                calib_fraction=opts["calib_fraction"])
    elif interval == "jackknife+":
        pi = iv.jackknife_plus(X, y, x0, level=level)
    else:
        pi = iv.cv_plus(X, y, x0, level=level, folds=opts["folds"], seed=opts["seed"])
    out = np.full((3, len(ok)), np.nan)
    out[:, ok] = np.vstack([pi.estimate, pi.lower, pi.upper])
    return out


def _refitted_band(fit, X0, ok, w0, level, interval, opts):
    """Estimate and limits (3, m) of a resampling interval refitted with the fit's own
    estimator (:mod:`refit.models.refitted`); bootstraps once per new-row weight."""
    from refit.models.refitted import refitted_interval

    out = np.full((3, len(ok)), np.nan)
    idx = np.flatnonzero(ok)
    w0v = np.broadcast_to(w0, ok.shape)[ok]
    weights = np.unique(w0v) if interval.startswith("bootstrap") else [None]
    for wv in weights:
        sel = np.ones(len(idx), bool) if wv is None else w0v == wv
        pi = refitted_interval(fit, X0[idx[sel]], level, interval, opts,
                               1.0 if wv is None else float(wv))
        out[:, idx[sel]] = np.vstack([pi.estimate, pi.lower, pi.upper])
    return out


def _quantile_band(fit, X0, level):
    from refit.errors import UsageError

    if fit.estimator != "quantile":
        raise UsageError("interval 'quantile' comes from quantile curves: fit with "
                         "estimator='quantile'")
    qlo, qhi = fit.extras["quantiles"]
    if abs((qhi - qlo) - level) > 1e-9:
        raise UsageError(f"the quantile curves were fitted at {qlo} and {qhi}, a "
                         f"{qhi - qlo:g} interval; ask for level={qhi - qlo:g} or refit "
                         "with other quantiles")
    coefs = fit.extras["quantile_coefficients"]
    return X0 @ coefs[float(qlo)], X0 @ coefs[float(qhi)]


def _predict_inverse(fit, v, level, interval, w0, opts):
    m = v.shape[0]
    ok = ~np.isnan(v).any(axis=1)
    X0 = fit.form.design(v)
    eta = X0 @ fit.result.coefficients
    lo = hi = np.full(m, np.nan)
    reason = None
    if interval == "analytic":
        lo, hi = _analytic_band(fit, X0, eta, w0, level)
    elif interval in GROUP_INTERVALS:
        lo, hi, reason = _group_band(fit, X0, eta, ok, level, interval, opts)
    elif interval == "quantile":
        lo, hi = _quantile_band(fit, X0, level)
    elif interval != "none":
        eta, lo, hi = _resampled_band(fit, X0, eta, ok, w0, level, interval, opts)
    turning = None
    if fit.form.degree == 2 and v.shape[1] == 1:
        dom = fit._core_domain()
        turning = (dom.turning_point, dom.data_side)
    eta, lo, hi, masks = finish.inverse_finish(
        eta, lo, hi, v, ok=ok, method=interval,
        ranges=[fit.ranges[name] for name in fit.x_names],
        approximate=interval == "analytic" and bool(
            fit.result.details.get("approximate_interval")),
        turning=turning, log_response=fit.form.log_response, smearing=fit.smearing)
    return eta, lo, hi, flag_categorical(masks, m), reason


def _predict_forward(fit, v, level, interval, w0):
    """Forward fits: check the request, then classical calibration through
    :func:`refit.models.inversion.forward.forward_predict`; returns estimate, lower,
    upper, flags, other_lower, other_upper (the second ray of a two-ray set),
    lower_untruncated, upper_untruncated (a limit cut at a physical bound, before the
    cut)."""
    from refit.models.inversion.forward import forward_predict
    from refit.models.inversion.classical import physical_bounds
    from refit.errors import UsageError

    if interval not in ("analytic", "none"):
        raise UsageError(f"interval {interval!r} is not available for direction 'forward'; "
                         "the classical-calibration interval is 'analytic' (band inversion)")
    res = fit.result
    cov_ok = bool(np.all(np.isfinite(res.covariance)))
    if interval == "analytic" and not cov_ok:
        raise UsageError(f"estimator {fit.estimator!r} gives no coefficient covariance, so "
                         "the calibration interval cannot be formed; use interval='none' for "
                         "the estimate alone, or estimator 'ols'")
    # the band also decides whether a value beyond the turning point is consistent with
    # the curve, so it is used for interval='none' too (limits then blanked)
    between = between_covariance(fit) if cov_ok and interval == "analytic" else None
    s2new = 0.0
    if cov_ok:
        sd = res.residual_std_error if between is not None else \
            res.details.get("prediction_sd", res.residual_std_error)
        s2new = sd ** 2 / w0
    return forward_predict(
        v[:, 0], coefficients=res.coefficients,
        covariance=res.covariance if cov_ok else np.zeros_like(res.covariance),
        sigma2_new=s2new, t=_t(level, res.df_resid), domain=fit.ranges[fit.x_names[0]],
        degree=fit.form.degree, through_origin=fit.form.through_origin,
        log_response=fit.form.log_response, x_cal=fit.x[:, 0], bounds=physical_bounds(fit),
        with_interval=interval != "none", between_covariance=between,
        approximate=interval == "analytic" and bool(res.details.get("approximate_interval")),
        feature_range=fit.ranges[fit.y_name], with_rays=True, with_untruncated=True)


def predict_fit(fit, values, level: float, interval: str, *, weights=None, seed: int = 0,
                n_boot: int = 1000, folds: int = 10, calib_fraction: float = 0.5):
    """Apply a :class:`refit.models.fitting.Fit` to fossil feature values (see ``Fit.predict``)."""
    from refit.errors import InvalidDataError

    v, index = _values_matrix(values, fit.predictors)
    m = v.shape[0]
    w0 = np.ones(m) if weights is None else np.broadcast_to(
        np.asarray(weights, dtype=float), (m,))
    if not np.all(np.isfinite(w0) & (w0 > 0)):
        raise InvalidDataError("weights of new observations must be finite and > 0")
    opts = {"seed": seed, "n_boot": n_boot, "folds": folds, "calib_fraction": calib_fraction}
    reason = None
    names, columns = _PREDICTION_COLUMNS, ()
    if fit.direction == "forward":
        est, lo, hi, flags, *extra = _predict_forward(fit, v, level, interval, w0)
        # the other ray's columns where some row has one (finite limits); the limits
        # before a cut at a bound where some row was cut (they may be infinite)
        for pair, used in ((_OTHER_RAY, np.isfinite), (_UNTRUNCATED, lambda a: ~np.isnan(a))):
            part, extra = extra[:2], extra[2:]
            if used(part[0]).any() or used(part[1]).any():
                names, columns = names + pair, columns + tuple(part)
    else:
        est, lo, hi, flags, reason = _predict_inverse(fit, v, level, interval, w0, opts)
    frame = result_frame(names, (est, lo, hi, flags, *columns), index)
    if reason:  # the limits are infinite: say why, with the result
        frame.attrs["cautions"] = [reason]
    return frame
