"""Fit a transfer function and predict climate from a fossil feature, with intervals.

``fit(table, response="map_mm", predictors=["bk_depth_cm"], form=..., estimator=...,
direction=...)`` returns a :class:`Fit`; ``Fit.predict(values)`` takes the feature as
measured in a fossil and returns the climate estimate with an interval and flags.

Directions
----------
``inverse``
    Climate regressed on the feature (``map_mm ~ bk_depth_cm``) and applied directly. The
    estimate shrinks toward the calibration mean (for a line, by the factor r^2 relative
    to classical calibration); defensible when the calibration soils are a random sample
    of the population the fossils come from (Krutchkoff 1967, Technometrics 9:425;
    Osborne 1991, Int. Stat. Rev. 59:309, from memory).
``forward``
    The feature regressed on climate (``bk_depth_cm ~ map_mm``, the way the soil responds)
    and inverted as a classical calibration (Eisenhart 1939, Ann. Math. Stat. 10:162, from
    memory): see :mod:`refit.models.inversion.classical`. Unbiased in slope, wider, unstable when the slope
    is weak. One feature only.

Weights (WLS) are relative inverse variances, ``var(e_i) = sigma^2 / w_i``. A new
observation's variance is ``sigma^2 / w0`` with ``w0 = 1`` unless ``predict(weights=...)``
says otherwise (the convention of statsmodels ``get_prediction``); ``w0 = m`` gives the
interval for the mean of m replicate measurements.

The analytic interval for a new observation is ``estimate +- t(df) sqrt(s^2 / w0 +
x0' V x0)`` with V the estimator's coefficient covariance and s its residual scale: exact
for OLS/WLS under normal errors; for Huber it uses the robust scale and the ``rlm``
covariance, for York the descriptive scatter about the line (both approximations). Theil-Sen has
no closed-form covariance: refit takes it from seeded case resamples
(:data:`THEIL_SEN_BOOT`, :data:`THEIL_SEN_SEED`) and uses the root-mean-square residual
for the new observation; the rows carry the flag ``approximate-interval``. On lines with
Student-t(5) errors its 95% intervals cover about 95% of new observations (tested).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from refit.models.inputs import (STRAIGHT_LINE_ONLY, _check_constant, _check_positive, _check_rows,
                          _drop_missing, fit_columns)
from refit.errors import UsageError
from refit.models.forms import Form, duan_smearing, make_form
from refit.models.intervals.group_conformal import GROUP_INTERVALS  # noqa: F401  (need groups=)
from refit.models.lsq import EstimatorResult, solve_lsq

ESTIMATORS = ("ols", "wls", "huber", "theil-sen", "york", "quantile", "mixed", "wls-power")
DIRECTIONS = ("inverse", "forward")
INTERVALS = ("analytic", "bootstrap-pairs", "bootstrap-residual", "split-conformal",
             "jackknife+", "cv+", "group-jackknife+", "group-cv+", "quantile", "none")
#: Theil-Sen's coefficient covariance comes from this many seeded case resamples
#: (refit.models.robust.fit_theil_sen), drawn on first need (an analytic interval, the forward
#: inversion, ``covariance`` or ``std_errors``); cost grows as n_boot n^2.
THEIL_SEN_BOOT = 500
THEIL_SEN_SEED = 20240
CAUTION_APPROXIMATE = "approximate-interval"
_RESAMPLING = ("bootstrap-pairs", "bootstrap-residual", "split-conformal", "jackknife+", "cv+")


# ----------------------------------------------------------------------------- input checks
def _choice(value, valid, what: str) -> str:
    if not isinstance(value, str) or value not in valid:
        raise UsageError(f"unknown {what} {value!r}; choose one of: {', '.join(valid)}")
    return value


# ----------------------------------------------------------------------------- estimators
def _r_squared(y, fitted, w, intercept: bool) -> float:
    w = np.ones_like(y) if w is None else w
    e = y - fitted
    ybar = (w @ y) / w.sum() if intercept else 0.0
    tss = w @ (y - ybar) ** 2
    return float(1.0 - (w @ (e * e)) / tss) if tss > 0 else float("nan")


def _estimate(estimator, X, y, form, w, x_sd, y_sd, quantiles, lsq: EstimatorResult,
              groups=None, random_slope=False):
    """Run the chosen estimator on the design; returns (result, extras)."""
    if estimator in ("ols", "wls"):
        return lsq, {}
    if estimator == "wls-power":
        from refit.models.variance import fit_power_variance

        return fit_power_variance(X, y, names=form.terms), {}
    if estimator == "mixed":
        from refit.models.mixed import fit_mixed

        return fit_mixed(X, y, groups, random_slope=random_slope, names=form.terms), {}
    if estimator == "huber":
        from refit.models.robust import fit_huber

        return fit_huber(X, y), {}
    if estimator == "theil-sen":
        from refit.models.robust import fit_theil_sen

        return fit_theil_sen(X[:, 1], y), {}
    if estimator == "york":
        from refit.models.eiv import fit_york

        return fit_york(X[:, 1], y, x_sd, y_sd), {}
    from refit.models.quantile import fit_quantiles

    qs = tuple(sorted({float(quantiles[0]), 0.5, float(quantiles[-1])}))
    coefs = {float(q): np.asarray(b, float) for q, b in fit_quantiles(X, y, quantiles=qs).items()}
    b = coefs[0.5]
    fitted = X @ b
    df = len(y) - X.shape[1]
    s = float(np.sqrt(np.sum((y - fitted) ** 2) / df))
    res = EstimatorResult(b, np.full((len(b), len(b)), np.nan), s, float(df), fitted,
                          y - fitted, None, {"quantiles": coefs})
    return res, {"quantile_coefficients": coefs}


def _check_estimator_args(estimator, form, weights, x_sd, y_sd, quantiles):
    if estimator in STRAIGHT_LINE_ONLY and (form.name != "linear" or len(form.predictors) != 1
                                            or form.through_origin):
        raise UsageError(f"estimator {estimator!r} fits straight lines with an intercept and "
                         f"one predictor only; got form {form.name!r} with "
                         f"{len(form.predictors)} predictor(s)"
                         + (" through the origin" if form.through_origin else "")
                         + "; use 'ols', 'wls', 'huber' or 'quantile' for other forms")
    if estimator == "wls" and weights is None:
        raise UsageError("estimator 'wls' needs weights= (a column name or an array)")
    if weights is not None and estimator != "wls":
        raise UsageError(f"weights were given but estimator is {estimator!r}; use "
                         "estimator='wls' for weighted least squares")
    if estimator == "york" and (x_sd is None or y_sd is None):
        raise UsageError("estimator 'york' needs x_sd= and y_sd= (measurement standard "
                         "deviations of the equation's x and y: column names or values)")
    if estimator == "wls-power" and form.through_origin:
        raise UsageError("estimator 'wls-power' models the spread as a power of the fitted "
                         "value and needs an intercept; drop through_origin")
    if estimator == "mixed" and form.through_origin:
        raise UsageError("estimator 'mixed' has a random intercept per group, so the form "
                         "needs an intercept; drop through_origin")
    if estimator == "quantile":
        q = tuple(quantiles)
        if len(q) != 2 or not (0 < q[0] < 0.5 < q[1] < 1):
            raise UsageError(f"quantiles must be two levels (lower, upper) with "
                             f"0 < lower < 0.5 < upper < 1; got {quantiles!r}")


def _check_group_args(estimator, form, groups, random_slope):
    if estimator == "mixed" and groups is None:
        raise UsageError("estimator 'mixed' needs groups= (the column naming each soil's "
                         "source or region, e.g. groups='source', or one label per row)")
    if random_slope and estimator != "mixed":
        raise UsageError(f"random_slope goes with estimator='mixed'; got {estimator!r}")
    if random_slope and (form.name != "linear" or len(form.predictors) != 1):
        raise UsageError("random_slope takes a straight line on one predictor (form "
                         f"'linear'); got form {form.name!r} with {len(form.predictors)} "
                         "predictor(s): drop random_slope or use form='linear'")


def _add_groups(cols: dict, table, groups, n: int):
    """Put the group codes (NaN = no label) among the fit's columns, so rows without a
    label are refused (or dropped) with the others; returns (key, labels)."""
    if groups is None:
        return None, None
    from refit.models.inputs import group_codes_column

    codes, labels = group_codes_column(table, groups, n)
    key = groups if isinstance(groups, str) and groups not in cols else "groups"
    cols[key] = codes
    return key, labels


# ----------------------------------------------------------------------------- the Fit
@dataclass
class Fit:
    """A fitted transfer function (see :func:`fit`).

    The equation is ``form`` in the fitting orientation: climate on feature(s) for
    ``direction='inverse'``, the feature on climate for ``'forward'``. ``x_names`` and
    ``y_name`` are the equation's regressor(s) and response.
    """

    form: Form
    estimator: str
    direction: str
    response: str
    predictors: list[str]
    x_names: list[str]
    y_name: str
    result: EstimatorResult
    condition_number: float
    r_squared: float
    x: np.ndarray
    y_model: np.ndarray
    weights: np.ndarray | None
    ranges: dict
    n_dropped: int = 0
    smearing: float = 1.0
    extras: dict = field(default_factory=dict)
    _domain: object = None

    @property
    def terms(self) -> list[str]:
        """Ordered term names."""
        return self.form.terms

    @property
    def coefficients(self):
        """Coefficients by term (pandas Series)."""
        import pandas as pd

        return pd.Series(self.result.coefficients, index=self.terms, name="coefficient")

    @property
    def covariance(self):
        """Coefficient covariance (pandas DataFrame, terms x terms)."""
        import pandas as pd

        return pd.DataFrame(self._filled().covariance, index=self.terms, columns=self.terms)

    @property
    def std_errors(self):
        """Standard errors of the coefficients (pandas Series by term)."""
        import pandas as pd

        return pd.Series(np.sqrt(np.diag(self._filled().covariance)), index=self.terms,
                         name="std_error")

    @property
    def residual_std_error(self) -> float:
        """Residual standard error [units of the equation's response, log for exponential]."""
        return float(self.result.residual_std_error)

    @property
    def df_resid(self) -> float:
        """Residual degrees of freedom."""
        return float(self.result.df_resid)

    @property
    def n(self) -> int:
        """Number of rows used."""
        return int(len(self.y_model))

    @property
    def form_name(self) -> str:
        """The form's name (``linear``, ``quadratic``, ...)."""
        return self.form.name

    @property
    def domain(self):
        """Domain of validity (:class:`refit.models.domain.Domain`); the broken-stick comparison
        runs on first access for single-predictor fits."""
        from refit.models import domain as dm
        dom = self._core_domain()
        if dom.broken_stick is None and len(self.x_names) == 1 and "_bs" not in self.extras:
            self.extras["_bs"] = True
            bs = dm.compare_broken_stick(self.x[:, 0], self.y_model)
            if bs is not None:
                dom.broken_stick = bs
                caution = dm.broken_stick_caution(bs, self.x_names[0])
                if caution:
                    dom.cautions.append(caution)
        return dom

    @property
    def cautions(self) -> list[str]:
        """Plain-language cautions about the fit's intervals (the domain's own cautions
        are in ``domain.cautions``); for ``mixed`` fits, every fallback (pooled OLS at
        the boundary, random intercept for a failed random slope) and its reason."""
        if self.estimator == "mixed":
            return [f"between-source: {w}" for w in self.result.details.get("warnings", [])]
        if self.estimator != "theil-sen":
            return []
        return [f"{CAUTION_APPROXIMATE}: the Theil-Sen analytic interval is approximate: "
                f"t-band from a bootstrap covariance ({THEIL_SEN_BOOT} case resamples, seed "
                f"{THEIL_SEN_SEED}) and the root-mean-square residual"]

    def _filled(self) -> EstimatorResult:
        """The result, with Theil-Sen's bootstrap covariance drawn on first need.

        Theil-Sen has no closed-form covariance: refit takes the covariance of the
        coefficients over THEIL_SEN_BOOT seeded case resamples (Efron & Tibshirani 1993,
        ch. 9, from memory) and, for the new observation's variance, the root-mean-square
        residual sqrt(sum e^2 / (n - 2)) rather than the robust (MAD) scale, which
        understates the error variance when the tails are heavy."""
        res = self.result
        if self.estimator == "theil-sen" and not np.all(np.isfinite(res.covariance)):
            from refit.models.robust import fit_theil_sen

            boot = fit_theil_sen(self.x[:, 0], self.y_model, n_boot=THEIL_SEN_BOOT,
                                 seed=THEIL_SEN_SEED,
                                 intercept=res.details.get("intercept", "joint"))
            res.covariance = boot.covariance
            res.details.update(n_boot=THEIL_SEN_BOOT, seed=THEIL_SEN_SEED,
                               covariance="bootstrap", approximate_interval=True,
                               prediction_sd=float(np.sqrt(np.sum(res.residuals ** 2)
                                                           / res.df_resid)))
        return res

    def _core_domain(self):
        if self._domain is None:
            from refit.models.domain import build_domain

            single = self.x_names[0] if len(self.x_names) == 1 else None
            b = self.result.coefficients
            by_power = ([0.0] if self.form.through_origin else []) + list(b)
            role = "climate" if self.direction == "forward" else "the feature"
            self._domain = build_domain(self.ranges, single, self.form.degree,
                                        by_power, self.x[:, 0] if single else None, role)
        return self._domain

    def summary(self):
        """One row per term: coefficient and standard error (pandas DataFrame)."""
        return self.coefficients.to_frame().join(self.std_errors)

    def predict(self, values, level: float = 0.95, interval: str | None = None, *,
                weights=None, seed: int = 0, n_boot: int = 1000, folds: int = 10,
                calib_fraction: float = 0.5):
        """Climate estimate, interval and flags for feature values measured in fossils.

        Parameters
        ----------
        values : scalar, array_like, pandas Series/DataFrame or dict
            The feature(s) as measured [their units]. Several predictors: a DataFrame or dict
            with those columns, or an (m, k) array in predictor order.
        level : float
            Coverage of the interval, 0 < level < 1.
        interval : str, optional
            ``analytic`` (t-based; default, and the only one for the forward direction),
            ``bootstrap-pairs``, ``bootstrap-residual``, ``split-conformal``, ``jackknife+``,
            ``cv+`` (inverse direction; OLS/WLS by closed forms, see
            :mod:`refit.models.intervals`; Huber, Theil-Sen, quantile (its median line)
            and York by refitting with the fit's own estimator, see
            :mod:`refit.models.refitted`),
            ``group-jackknife+``, ``group-cv+`` (a fit made with ``groups=``, any
            estimator but York, inverse direction: whole sources left out, each refit with
            the fit's own estimator; for a soil of an unseen source; see
            :mod:`refit.models.intervals.group_conformal`; with too few groups for the
            level the limits are infinite, flagged ``unbounded``, and the reason is in
            ``result.attrs['cautions']``),
            ``quantile`` (the quantile curves; default for ``estimator='quantile'``) or
            ``none`` (estimate only).
        weights : float or array_like, optional
            Weight ``w0`` of each new observation (variance ``sigma^2 / w0``); default 1.
        seed, n_boot, folds, calib_fraction
            Settings of the resampling intervals (``group-cv+``: ``min(folds, number of
            groups)`` folds of whole groups, shuffled with ``seed``).

        Returns
        -------
        pandas.DataFrame
            ``estimate``, ``lower``, ``upper`` [units of the response] and ``flags`` (';'-
            separated: ``outside-calibration-range`` (the measured feature outside its
            calibration range, both directions), ``beyond-turning-point``,
            ``two-roots``, ``unbounded``, ``two-rays`` (forward line, weak slope: the
            limits are the ray holding the estimate), ``open-below``/``open-above``
            (forward: the limit is the search window's edge), ``truncated-at-bound``
            (forward: the interval ran past a physical bound of the climate, e.g.
            MAP >= 0, and the limit is that bound),
            ``beyond-search-window`` (forward: the estimate lies outside the search
            window, for a line the physical bounds; estimate NaN, the limits the part
            of the set inside, NaN if none, never lower > upper),
            ``approximate-interval`` (Theil-Sen),
            ``missing-value``, ``invalid-value``, ``quantiles-cross``; empty when none;
            see :mod:`refit.models.inversion.classical`). Read the flags as
            ``result["flags"]`` (``DataFrame.flags`` is a pandas attribute). When a
            forward row's set is two rays and the other ray is not empty within the
            physical bounds, the columns ``other_lower``/``other_upper`` hold it (NaN
            for the other rows); when a limit is ``truncated-at-bound``, the columns
            ``lower_untruncated``/``upper_untruncated`` hold it before the cut (NaN on
            the sides and rows not cut). The index is that of ``values`` when it is a Series
            or DataFrame.
        """
        from refit.models.predict import predict_fit

        if interval in (None, "analytic") or self.direction == "forward":
            self._filled()
        if interval is None:
            interval = "quantile" if self.estimator == "quantile" else "analytic"
        _choice(interval, INTERVALS, "interval")
        if interval in GROUP_INTERVALS and "groups" not in self.extras:
            raise UsageError(f"interval {interval!r} leaves out whole groups (sources), but "
                             "this fit was made without groups: refit with groups= (e.g. "
                             "refit.fit(..., groups='source'))")
        if not (isinstance(level, (int, float)) and 0 < level < 1):
            raise UsageError(f"level must be a number between 0 and 1 (e.g. 0.95); got {level!r}")
        return predict_fit(self, values, float(level), interval, weights=weights, seed=seed,
                       n_boot=n_boot, folds=folds, calib_fraction=calib_fraction)


# ----------------------------------------------------------------------------- fit()
def fit(table, response: str, predictors, form: str = "linear", degree: int | None = None,
        estimator: str = "ols", direction: str = "inverse", weights=None,
        through_origin: bool = False, x_sd=None, y_sd=None,
        quantiles=(0.025, 0.975), *, missing: str = "error", groups=None,
        random_slope: bool = False) -> Fit:
    """Fit a transfer function on a calibration table.

    Parameters
    ----------
    table : pandas.DataFrame, refit Table or dict of columns
        Calibration rows (one modern soil profile per row).
    response : str
        The climate column to estimate, e.g. ``map_mm`` [mm/yr].
    predictors : str or list of str
        The feature column(s) measured in fossils, e.g. ``bk_depth_cm`` [cm]. The forward
        direction takes one.
    form : str
        ``linear``, ``quadratic``, ``polynomial`` (with ``degree``) or ``exponential``
        (``ln y = a + b x``, back-transformed with Duan's smearing; Duan 1983, JASA 78:605).
    degree : int, optional
        Degree of a ``polynomial`` form.
    estimator : str
        ``ols``, ``wls`` (needs ``weights``), ``huber`` (M-estimation, Huber 1964),
        ``theil-sen`` (straight line), ``york`` (errors in both variables, straight line;
        needs ``x_sd`` and ``y_sd``), ``quantile`` (lower and upper quantile curves) or
        ``mixed`` (random intercept per group, REML; needs ``groups``; its analytic
        interval is for a soil of a NEW group: see :mod:`refit.models.mixed`).
    direction : str
        ``inverse`` (climate on feature) or ``forward`` (feature on climate, inverted as a
        classical calibration). See the module notes.
    weights : str or array_like, optional
        WLS weights (column name or values), relative inverse variances, all > 0.
    through_origin : bool
        Fit without an intercept (linear and polynomial forms).
    x_sd, y_sd : str, float or array_like, optional
        Measurement standard deviations of the equation's x and y (York): x is the feature
        for ``inverse``, climate for ``forward`` [their units].
    quantiles : (float, float)
        Lower and upper quantile levels for ``estimator='quantile'``.
    missing : str
        ``error`` (default): refuse rows with empty values in the used columns, naming
        them; ``drop``: leave those rows out (counted in ``Fit.n_dropped``).
    groups : str or array_like, optional
        Group (source, region) of each row: a column name or one label per row. Required
        by ``estimator='mixed'`` and by the ``group-jackknife+``/``group-cv+`` intervals;
        kept in ``Fit.extras['groups']`` (the column's name in
        ``Fit.extras['groups_column']``, recorded in coefficient files).
    random_slope : bool
        ``mixed`` only: also a random slope on the single predictor (linear form).

    Returns
    -------
    Fit

    Raises
    ------
    UsageError
        Unknown form, estimator, direction or column (the valid ones are listed), or
        arguments that do not go together.
    InvalidDataError
        Too few rows (says how many are needed), a constant predictor, non-numeric, NaN
        or infinite values, collinear terms, weights <= 0, or y <= 0 for the exponential
        form: the message names the cause and the rows.
    """
    _choice(estimator, ESTIMATORS, "estimator")
    _choice(direction, DIRECTIONS, "direction")
    _choice(missing, ("error", "drop"), "missing-value policy")
    preds = [predictors] if isinstance(predictors, str) else list(predictors)
    if not isinstance(response, str):
        raise UsageError(f"response must be a column name; got {response!r}")
    if direction == "forward" and estimator == "wls-power":
        raise UsageError("estimator 'wls-power' (a spread that grows with the fitted value) "
                         "is fitted in the inverse direction only: the forward inversion "
                         "assumes one spread of the feature; use direction='inverse'")
    if direction == "forward" and len(preds) != 1:
        raise UsageError(f"direction 'forward' inverts one feature; got {len(preds)} "
                         f"predictors {preds}: use direction='inverse' for several")
    x_names, y_name = (preds, response) if direction == "inverse" else ([response], preds[0])
    shape = make_form(form, x_names, degree=degree, through_origin=through_origin)
    _check_estimator_args(estimator, shape, weights, x_sd, y_sd, quantiles)
    _check_group_args(estimator, shape, groups, random_slope)
    cols, labels, kind = fit_columns(table, [*x_names, y_name],
                                     {"weights": weights, "x_sd": x_sd, "y_sd": y_sd})
    group_key, group_labels = _add_groups(cols, table, groups, len(labels))
    cols, labels, n_dropped = _drop_missing(cols, labels, kind, missing)
    codes = None if group_key is None else cols.pop(group_key).astype(int)
    x = np.column_stack([cols[nm] for nm in x_names])
    y = cols[y_name]
    w = cols["weights"]
    if w is not None:
        _check_positive(w, labels, kind, "weights must be > 0 (a zero weight drops a row: "
                        "remove such rows instead)")
    for key in ("x_sd", "y_sd"):
        if cols[key] is not None:
            _check_positive(cols[key], labels, kind, f"{key} must be > 0")
    if shape.log_response:
        _check_positive(y, labels, kind, f"the exponential form takes ln({y_name}), so "
                        f"{y_name!r} must be > 0; it is not")
    _check_rows(shape, len(y), estimator)
    _check_constant(x, x_names, labels)
    X = shape.design(x)
    y_model = shape.to_model_scale(y)
    lsq = solve_lsq(X, y_model, weights=w, intercept=shape.intercept, names=shape.terms,
                    design_dd=lambda: shape.design_dd(x))
    result, extras = _estimate(estimator, X, y_model, shape, w, cols["x_sd"], cols["y_sd"],
                               quantiles, lsq, codes, random_slope)
    if codes is not None:
        extras["groups"] = np.asarray(group_labels, dtype=object)[codes]
        extras["groups_column"] = groups if isinstance(groups, str) else None
    extras["random_slope"] = bool(random_slope)
    if estimator == "york":  # kept so resampling intervals can refit York's line
        extras["measurement_sds"] = tuple(np.broadcast_to(np.asarray(cols[k], float),
                                                          y.shape).copy()
                                          for k in ("x_sd", "y_sd"))
    r2 = (lsq.details["r_squared"] if result is lsq
          else _r_squared(y_model, result.fitted, None, shape.intercept))
    from refit.models.domain import variable_ranges

    ranges = variable_ranges({**{nm: cols[nm] for nm in x_names}, y_name: y})
    smear = 1.0
    if shape.log_response and estimator != "quantile":
        smear = duan_smearing(result.residuals, w)
    extras["quantiles"] = tuple(quantiles)
    return Fit(form=shape, estimator=estimator, direction=direction, response=response,
               predictors=preds, x_names=list(x_names), y_name=y_name, result=result,
               condition_number=float(lsq.details["condition_number"]), r_squared=float(r2),
               x=x, y_model=y_model, weights=w, ranges=ranges, n_dropped=n_dropped,
               smearing=smear, extras=extras)
