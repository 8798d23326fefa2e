"""Cross-validation of transfer functions: the driver.

The schemes and splitters (:class:`Scheme`, :func:`make_splits`, :func:`spatial_blocks`,
...) live in :mod:`refit.validate.splitters` and are re-exported here. ``cross_validate(frame,
candidate, scheme)`` fits the candidate on each training part with :func:`refit.fit`,
predicts the held-out rows with the candidate's interval method (so every interval is built
from the training rows only) and scores the out-of-fold predictions with
:func:`refit.validate.skill.skill_scores`.

Calibration soils cluster by region and source, so random k-fold flatters a fit that has
learnt the clusters: grouped or spatially blocked folds estimate the error on a region the
fit has never seen (Roberts et al. 2017).

References
----------
.. [1] Roberts, D. R. et al. (2017). Cross-validation strategies for data with temporal,
   spatial, hierarchical, or phylogenetic structure. Ecography 40:913-929.
.. [2] Allen, D. M. (1974). Technometrics 16:125-127 (PRESS: leave-one-out in closed form).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from refit.models.inputs import as_frame
from refit.errors import InvalidDataError, RefitError, UsageError
from refit.validate.splitters import (  # noqa: F401
    BLOCKS_PER_FOLD, EARTH_RADIUS_KM, GROUPED, SCHEMES, GroupKFoldSplitter, KFoldSplitter,
    LeaveOneGroupOutSplitter, LeaveOneOutSplitter, Scheme, SpatialBlockSplitter, Split, Splits,
    _loo_details, group_codes, make_splits, project_km, spatial_blocks, splitter_for)

_INTERVAL_ALIASES = {"bootstrap": "bootstrap-pairs"}
_CONFORMAL = ("split-conformal", "jackknife+", "cv+")
#: columns of CVResult.predictions
PREDICTION_COLUMNS = ("row", "profile_id", "repeat", "fold", "observed", "estimate", "lower",
                      "upper", "flags")


# ----------------------------------------------------------------------------- candidates
@dataclass(frozen=True)
class Candidate:
    """One transfer function to validate: what :func:`refit.fit` and ``Fit.predict`` need.

    ``interval`` is a method of ``Fit.predict`` (``analytic``, ``bootstrap-pairs``,
    ``bootstrap-residual``, ``split-conformal``, ``jackknife+``, ``cv+``, ``quantile``,
    ``none``; ``bootstrap`` means ``bootstrap-pairs``). ``weights``, ``x_sd`` and ``y_sd``
    are passed to :func:`refit.fit` (column names or values) for WLS and York fits.
    """

    response: str
    predictors: tuple[str, ...]
    form: str = "linear"
    degree: int | None = None
    estimator: str = "ols"
    direction: str = "inverse"
    interval: str = "analytic"
    weights: str | None = None
    x_sd: str | float | None = None
    y_sd: str | float | None = None

    def __post_init__(self):
        from refit.models.fitting import DIRECTIONS, ESTIMATORS, INTERVALS
        from refit.models.forms import FORMS

        preds = (self.predictors,) if isinstance(self.predictors, str) else self.predictors
        object.__setattr__(self, "predictors", tuple(preds))
        for value, valid, what in ((self.form, FORMS, "form"),
                                   (self.estimator, ESTIMATORS, "estimator"),
                                   (self.direction, DIRECTIONS, "direction")):
            if value not in valid:
                raise UsageError(f"unknown {what} {value!r}; choose one of: "
                                 + ", ".join(valid))
        interval = _INTERVAL_ALIASES.get(self.interval, self.interval)
        if interval not in INTERVALS:
            raise UsageError(f"unknown interval method {self.interval!r}; choose one of: "
                             + ", ".join(INTERVALS + tuple(_INTERVAL_ALIASES)))
        object.__setattr__(self, "interval", interval)

    @property
    def label(self) -> str:
        """``form/estimator/direction/interval``, e.g. ``quadratic/ols/inverse/jackknife+``."""
        form = f"polynomial{self.degree}" if self.form == "polynomial" else self.form
        return f"{form}/{self.estimator}/{self.direction}/{self.interval}"

    def columns(self) -> list[str]:
        """The table columns the candidate reads."""
        extra = [v for v in (self.weights, self.x_sd, self.y_sd) if isinstance(v, str)]
        return list(dict.fromkeys([self.response, *self.predictors, *extra]))


@dataclass
class CVResult:
    """Out-of-fold predictions of one candidate under one scheme, and their skill.

    Attributes
    ----------
    predictions : pandas.DataFrame
        One row per held-out row and repeat: ``row`` (position in the frame),
        ``profile_id``, ``repeat``, ``fold``, ``observed``, ``estimate``, ``lower``,
        ``upper`` [units of the response] and ``flags`` (as ``Fit.predict``).
    metrics : dict
        :func:`refit.validate.skill.skill_scores` over all out-of-fold predictions.
    details : dict
        The split's details (folds, groups, block size), ``method`` (``closed-form`` or
        ``refits``), ``n_rows_used``, ``n_rows_missing`` (rows without a value in a used
        column, left out of every fold), ``level``, ``split_seed``, ``interval_seed``,
        ``by_repeat`` (the metrics of each repeat, to show their spread) and, for
        conformal intervals, ``cautions``.
    """

    candidate: Candidate
    scheme: Scheme
    predictions: object
    metrics: dict
    details: dict = field(default_factory=dict)


# ----------------------------------------------------------------------------- one fold
def _fold_seed(seed: int, repeat: int, fold: int) -> int:
    """Seed of a fold's resampling interval, fixed by (seed, repeat, fold)."""
    return int(np.random.SeedSequence([seed, repeat, fold]).generate_state(1)[0])


def _fit_kwargs(c: Candidate, level: float) -> dict:
    kw = dict(form=c.form, degree=c.degree, estimator=c.estimator, direction=c.direction,
              weights=c.weights, x_sd=c.x_sd, y_sd=c.y_sd)
    if c.estimator == "quantile":
        kw["quantiles"] = ((1.0 - level) / 2.0, (1.0 + level) / 2.0)
    return kw


def _one_fold(arrays, labels, c: Candidate, split: Split, level: float, seed: int):
    """Fit on the training rows, predict the test rows: (estimate, lower, upper, flags)."""
    import pandas as pd

    from refit.models.fitting import fit

    tr, te = split.train_idx, split.test_idx
    kwargs = _fit_kwargs(c, level)
    test = np.column_stack([arrays[p][te] for p in c.predictors])
    try:  # plain arrays: no table per fold (the same numbers as through a DataFrame)
        f = fit({k: v[tr] for k, v in arrays.items()}, c.response, list(c.predictors),
                **kwargs)
        out = f.predict(test, level=level, interval=c.interval,
                        seed=_fold_seed(seed, split.repeat, split.fold))
    except RefitError:
        # again through a table indexed by the records' labels, so the message names them
        train = pd.DataFrame({k: v[tr] for k, v in arrays.items()}, index=labels[tr],
                             copy=False)
        try:
            f = fit(train, c.response, list(c.predictors), **kwargs)
            f.predict(test, level=level, interval=c.interval,
                      seed=_fold_seed(seed, split.repeat, split.fold))
        except RefitError as err:
            raise type(err)(f"{c.label}, repeat {split.repeat + 1} fold {split.fold + 1} "
                            f"({len(tr)} training rows): {err}") from err
        raise
    return (out["estimate"].to_numpy(float), out["lower"].to_numpy(float),
            out["upper"].to_numpy(float), np.asarray(out["flags"], dtype=object))


def _run_batch(arrays, labels, c, batch, level, seed):
    from refit.models.linalg import one_blas_thread

    with one_blas_thread():  # the same bits in any process
        return [_one_fold(arrays, labels, c, s, level, seed) for s in batch]


def _run_folds(arrays, labels, c, splits, level, seed, n_jobs):
    if n_jobs == 1 or len(splits) < 2:
        return _run_batch(arrays, labels, c, splits, level, seed)
    from joblib import Parallel, delayed, effective_n_jobs

    workers = effective_n_jobs(n_jobs)
    n_batches = min(len(splits), 4 * workers)
    bounds = np.linspace(0, len(splits), n_batches + 1).astype(int)
    batches = [splits[a:b] for a, b in zip(bounds[:-1], bounds[1:]) if b > a]
    parts = Parallel(n_jobs=workers)(delayed(_run_batch)(arrays, labels, c, b, level, seed)
                                     for b in batches)
    return [r for part in parts for r in part]


# ----------------------------------------------------------------------------- LOO closed form
def loo_ols(x, y, form, level: float = 0.95, interval: str = "analytic"):
    """Leave-one-out predictions of an OLS transfer function, without refitting.

    Parameters
    ----------
    x : ndarray, shape (n, k)
        Predictor values [their units].
    y : ndarray, shape (n,)
        Response [its unit].
    form : refit.models.forms.Form
        A form linear in y (not exponential).
    level : float
        Level of the analytic prediction interval.
    interval : str
        ``analytic`` or ``none``.

    Returns
    -------
    estimate, lower, upper : ndarray, shape (n,)
        ``yhat_(-i) = y_i - e_i / (1 - h_ii)``; limits ``yhat_(-i) -+ t(n - p - 1)
        s_(-i) / sqrt(1 - h_ii)`` [units of y]: the analytic interval of the fit without
        row i, evaluated at row i.
    flags : ndarray of str
        As ``Fit.predict``: ``outside-calibration-range`` when row i lies outside the range
        of the other rows, ``beyond-turning-point`` (single-predictor quadratics) when it
        lies past the turning point of the fit without it, on the far side from most data.

    Notes
    -----
    With the leverages h_ii and residuals e_i of the full fit, Sherman-Morrison gives the
    left-out residual e_i/(1 - h_ii) (PRESS, [2]_), the deleted variance
    s_(-i)^2 = ((n - p) s^2 - e_i^2/(1 - h_ii)) / (n - p - 1), the variance factor
    x_i'(X_(-i)'X_(-i))^-1 x_i = h_ii/(1 - h_ii) and the coefficients
    b_(-i) = b - (X'X)^-1 x_i e_i/(1 - h_ii). Cost O(n p^2): one QR.
    """
    est, lower, upper, masks = _loo_ols_masks(x, y, form, level, interval)
    return est, lower, upper, _flag_text(masks)


def _loo_ols_masks(x, y, form, level, interval):
    """:func:`loo_ols` with the flags as named boolean masks (row by row)."""
    from scipy.special import stdtrit

    from refit.models.lsq import leverages, solve_lsq

    x = np.asarray(x, dtype=float).reshape(len(y), -1)
    X = form.design(x)
    res = solve_lsq(X, y, intercept=form.intercept, names=form.terms)
    h = leverages(res)
    if (h > 1.0 - 1e-10).any():
        raise InvalidDataError(f"row {int(np.argmax(h)) + 1} alone determines the fit "
                               "(leverage 1): its leave-one-out fit does not exist; add rows "
                               "near it or use a simpler form")
    e, df = res.residuals, res.df_resid
    loo = e / (1.0 - h)
    est = y - loo
    if interval == "none":
        lower = upper = np.full_like(est, np.nan)
    else:
        s2_del = (df * res.residual_std_error ** 2 - e * loo) / (df - 1.0)
        # stdtrit is what scipy.stats.t.ppf evaluates, without its argument handling
        half = float(stdtrit(df - 1.0, 0.5 + level / 2.0)) * np.sqrt(s2_del / (1.0 - h))
        lower, upper = est - half, est + half
    masks = {"outside-calibration-range": _outside_others(x)}
    if form.degree == 2 and x.shape[1] == 1:
        masks["beyond-turning-point"] = _beyond_turning_loo(x[:, 0], X, res, loo, form)
    return est, lower, upper, masks


def _flag_text(masks: dict) -> np.ndarray:
    """';'-joined names of the true masks per row (through bit codes: no per-row loop)."""
    names = list(masks)
    codes = sum(np.asarray(m, dtype=np.int64) << i for i, m in enumerate(masks.values()))
    table = np.array([";".join(nm for i, nm in enumerate(names) if c >> i & 1)
                      for c in range(1 << len(names))], dtype=object)
    return table[codes]


def _outside_others(x: np.ndarray) -> np.ndarray:
    """True where a row holds the unique minimum or maximum of a column (so it lies
    outside the range of the other rows)."""
    out = np.zeros(x.shape[0], dtype=bool)
    for col in x.T:
        for extreme in (col.min(), col.max()):
            at = col == extreme
            if at.sum() == 1:
                out |= at
    return out


def _beyond_turning_loo(x, X, res, loo, form) -> np.ndarray:
    """Leave-one-out version of refit.models.domain.beyond_turning_mask for a quadratic."""
    s2 = res.residual_std_error ** 2
    if not s2 > 0:
        return np.zeros(len(x), dtype=bool)
    xtx_inv = res.covariance / s2
    b = res.coefficients[None, :] - (X @ xtx_inv) * loo[:, None]   # b_(-i), one row each
    if not form.intercept:
        b = np.column_stack([np.zeros(len(x)), b])
    b1, b2 = b[:, 1], b[:, 2]
    with np.errstate(divide="ignore", invalid="ignore"):
        tp = -b1 / (2.0 * b2)
    ok = (b2 != 0) & np.isfinite(b2) & np.isfinite(tp)
    xs = np.sort(x)
    above = len(x) - np.searchsorted(xs, tp, side="right") - (x > tp)
    below = np.searchsorted(xs, tp, side="left") - (x < tp)
    side = np.where(above > below, 1, -1)
    return ok & ((x - tp) * side < 0)


def _closed_form_applies(c: Candidate, scheme: Scheme) -> bool:
    return (scheme.name == "loo" and c.estimator == "ols" and c.direction == "inverse"
            and c.form != "exponential" and c.interval in ("analytic", "none")
            and c.weights is None)


# ----------------------------------------------------------------------------- the driver
def _used_columns(frame, labels, kind, c: Candidate):
    """Used columns as float arrays (non-numbers refused) and the rows that have them all."""
    from refit.models.inputs import numeric_column

    arrays = {nm: numeric_column(frame, nm, labels, kind) for nm in c.columns()}
    usable = np.ones(len(frame), dtype=bool)
    for v in arrays.values():
        usable &= ~np.isnan(v)
    return arrays, usable


def _restrict(splits, usable) -> list[Split]:
    """Drop rows without values from both sides of every split."""
    if usable.all():
        return list(splits)
    return [Split(s.repeat, s.fold, s.train_idx[usable[s.train_idx]],
                  s.test_idx[usable[s.test_idx]]) for s in splits]


def _check(frame, candidate, scheme, level, n_jobs):
    if not isinstance(candidate, Candidate):
        raise UsageError(f"candidate must be a refit.validate.crossval.Candidate; got "
                         f"{type(candidate).__name__}")
    if not isinstance(scheme, Scheme):
        raise UsageError(f"scheme must be a refit.validate.crossval.Scheme; got {type(scheme).__name__}")
    if isinstance(level, bool) or not isinstance(level, (int, float)) or not 0 < level < 1:
        raise UsageError(f"level must be a number between 0 and 1 (e.g. 0.95); got {level!r}")
    if isinstance(n_jobs, bool) or not isinstance(n_jobs, (int, np.integer)) or n_jobs == 0:
        raise UsageError(f"n_jobs must be a whole number: 1 (serial), k > 1 workers or -1 "
                         f"(all cores); got {n_jobs!r}")


def cross_validate(frame, candidate: Candidate, scheme: Scheme, *, level: float = 0.95,
                   seed: int = 0, n_jobs: int = 1, splits=None) -> CVResult:
    """Out-of-fold predictions and skill of one candidate under one scheme.

    Parameters
    ----------
    frame : pandas.DataFrame or refit Table
        Calibration rows (after any subset).
    candidate : Candidate
    scheme : Scheme
    level : float
        Level of the prediction intervals, e.g. 0.95.
    seed : int
        Seed of the resampling intervals; each fold uses its own seed derived from
        (seed, repeat, fold), so results do not depend on the order folds run in.
    n_jobs : int
        1: serial; k > 1 or -1 (all cores): folds run in parallel with joblib, with
        results identical to the serial run bit for bit.
    splits : Splits, optional
        Splits from :func:`make_splits` on the same frame (to reuse them across
        candidates); by default made here from ``scheme``.

    Returns
    -------
    CVResult

    Notes
    -----
    Each fold fits the candidate with :func:`refit.fit` on its training rows and predicts
    its test rows with ``Fit.predict(interval=candidate.interval)``: the interval (its
    residual scale, conformal scores, bootstrap resamples) comes from the training rows
    only. Rows with an empty value in a used column take part in no fold (counted in
    ``details['n_rows_missing']``); the folds are made on the whole frame first, so every
    candidate of a run sees the same folds. Leave-one-out with an OLS fit of a form linear
    in the response, analytic or no interval, uses the closed form :func:`loo_ols`,
    equal to explicit refits (to rounding) at the cost of one fit.
    """
    import pandas as pd

    from refit.models.predict import result_frame
    from refit.validate.skill import skill_scores

    _check(frame, candidate, scheme, level, n_jobs)
    frame, labels, kind = as_frame(frame, dicts=False)
    arrays, usable = _used_columns(frame, labels, kind, candidate)
    fast = _closed_form_applies(candidate, scheme)
    if splits is None:
        splits = Splits([], _loo_details(len(frame), scheme)) if fast \
            else make_splits(frame, scheme)
    details = dict(getattr(splits, "details", {}))
    details.update(level=float(level), interval_seed=int(seed),
                   n_rows_used=int(usable.sum()), n_rows_missing=int((~usable).sum()))
    if not usable.any():
        raise InvalidDataError(f"{candidate.label}: no row has values in all of "
                               + ", ".join(map(repr, candidate.columns()))
                               + "; fill them or choose other columns")
    if fast:
        parts, folds = _loo_part(arrays, usable, candidate, level), None
        details["method"] = "closed-form"
    else:
        folds = [s for s in _restrict(splits, usable) if len(s.test_idx)]
        parts = _run_folds(arrays, labels, candidate, folds, level, seed, n_jobs)
        details["method"] = "refits"
    if folds is None:
        rows = np.flatnonzero(usable)
        repeat, fold = np.zeros(len(rows), dtype=np.int64), rows.copy()
        est, lo, hi, flags = parts
    else:
        rows = np.concatenate([s.test_idx for s in folds])
        repeat = np.concatenate([np.full(len(s.test_idx), s.repeat) for s in folds])
        fold = np.concatenate([np.full(len(s.test_idx), s.fold) for s in folds])
        est, lo, hi, flags = (np.concatenate(p) for p in zip(*parts))
        flags = pd.Categorical(flags)
    ids = (frame["profile_id"].to_numpy()[rows] if "profile_id" in frame.columns
           else labels[rows])
    obs = arrays[candidate.response][rows]
    pred = result_frame(PREDICTION_COLUMNS,
                        (rows, ids, repeat, fold, obs, est, lo, hi, flags))
    if candidate.interval in _CONFORMAL:
        details["cautions"] = [
            f"{candidate.interval} intervals assume exchangeable rows; soils clustered by "
            "region or source are not, so their coverage on new regions can fall short of "
            "the nominal level: judge it under a grouped or spatial scheme"]
    metrics = skill_scores(obs, est, lo, hi, level) if len(rows) else {}
    reps = np.unique(repeat) if folds is not None else (0,)  # closed form: one repeat
    details["by_repeat"] = [metrics] if len(reps) == 1 else [
        skill_scores(obs[repeat == r], est[repeat == r], lo[repeat == r], hi[repeat == r],
                     level) for r in reps]
    return CVResult(candidate, scheme, pred, metrics, details)


def _loo_part(arrays, usable, c: Candidate, level):
    """Closed-form leave-one-out of the usable rows: estimate, lower, upper and the flags
    as a Categorical (categories sorted, as ``pandas.Categorical`` of the texts)."""
    from refit.models.predict import flag_categorical
    from refit.models.forms import make_form

    form = make_form(c.form, list(c.predictors), degree=c.degree)
    x = np.column_stack([arrays[p][usable] for p in c.predictors])
    y = arrays[c.response][usable]
    if len(y) < form.min_rows + 1:
        raise InvalidDataError(f"{c.label}, leave-one-out: each fit leaves out one of "
                               f"{len(y)} rows; form {form.name!r} has {form.n_params} "
                               f"coefficient(s) and needs at least {form.min_rows + 1} rows "
                               "with values")
    try:
        est, lo, hi, masks = _loo_ols_masks(x, y, form, level, c.interval)
    except RefitError as err:
        raise type(err)(f"{c.label}, leave-one-out: {err}") from err
    return est, lo, hi, flag_categorical(masks, len(y), sort=True)
