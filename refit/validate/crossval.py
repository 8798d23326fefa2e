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
from refit.validate.loo import loo_part, loo_ols  # noqa: F401
from refit.validate.splitters import (  # noqa: F401
    BLOCKS_PER_FOLD, EARTH_RADIUS_KM, GROUPED, SCHEMES, GroupKFoldSplitter, KFoldSplitter,
    LeaveOneGroupOutSplitter, LeaveOneOutSplitter, Scheme, SpatialBlockSplitter, Split, Splits,
    _loo_details, group_codes, make_splits, project_km, spatial_blocks, splitter_for)

_INTERVAL_ALIASES = {"bootstrap": "bootstrap-pairs"}
_CONFORMAL = ("split-conformal", "jackknife+", "cv+")
#: whole groups left out (refit.models.intervals.group_conformal), computed here on each
#: training fold; they need the candidate's ``groups``
from refit.models.intervals.group_conformal import GROUP_INTERVALS  # noqa: E402
#: folds of group-cv+ inside a training fold (at most its number of groups)
GROUP_CV_FOLDS = 5
#: columns of CVResult.predictions
PREDICTION_COLUMNS = ("row", "profile_id", "repeat", "fold", "observed", "estimate", "lower",
                      "upper", "flags")


# ----------------------------------------------------------------------------- candidates
@dataclass(frozen=True)
class Candidate:
    """One transfer function to validate: what :func:`refit.fit` and ``Fit.predict`` need.

    ``interval`` is a method of ``Fit.predict`` (``analytic``, ``bootstrap-pairs``,
    ``bootstrap-residual``, ``split-conformal``, ``jackknife+``, ``cv+``, ``quantile``,
    ``none``; ``bootstrap`` means ``bootstrap-pairs``) or a group-level conformal method
    (``group-jackknife+``, ``group-cv+``: whole groups of the training fold left out, see
    :mod:`refit.models.intervals.group_conformal`). ``weights``, ``x_sd`` and ``y_sd``
    are passed to :func:`refit.fit` (column names or values) for WLS and York fits;
    ``groups`` (a column) and ``random_slope`` to the mixed fit, each fold's fit getting
    the groups of its training soils only.
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
    groups: str | None = None
    random_slope: bool = False

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
        if interval not in INTERVALS + GROUP_INTERVALS:
            raise UsageError(f"unknown interval method {self.interval!r}; choose one of: "
                             + ", ".join(INTERVALS + GROUP_INTERVALS
                                         + tuple(_INTERVAL_ALIASES)))
        if (interval in GROUP_INTERVALS or self.estimator == "mixed") and not self.groups:
            raise UsageError(f"{interval if interval in GROUP_INTERVALS else 'mixed'!r} "
                             "needs groups= (the column naming each soil's source)")
        object.__setattr__(self, "interval", interval)

    @property
    def label(self) -> str:
        """``form__estimator__direction__interval``, e.g.
        ``quadratic__ols__inverse__jackknife+`` (the spelling of
        :func:`refit.validate.candidates.candidate_name`)."""
        form = f"polynomial{self.degree}" if self.form == "polynomial" else self.form
        return "__".join((form, self.estimator, self.direction, self.interval))

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
    if c.estimator == "mixed":
        kw["random_slope"] = c.random_slope
    if c.estimator == "quantile":
        kw["quantiles"] = ((1.0 - level) / 2.0, (1.0 + level) / 2.0)
    return kw


def _one_fold(arrays, labels, c: Candidate, split: Split, level: float, seed: int,
              groups=None):
    """Fit on the training rows, predict the test rows: (estimate, lower, upper, flags)."""
    import pandas as pd

    from refit.models.fitting import fit

    tr, te = split.train_idx, split.test_idx
    kwargs = _fit_kwargs(c, level)
    if groups is not None and (c.estimator == "mixed" or c.interval in GROUP_INTERVALS):
        kwargs["groups"] = groups[tr]   # the training fold's sources only
    test = np.column_stack([arrays[p][te] for p in c.predictors])
    fold_seed = _fold_seed(seed, split.repeat, split.fold)
    try:  # plain arrays: no table per fold (the same numbers as through a DataFrame)
        f = fit({k: v[tr] for k, v in arrays.items()}, c.response, list(c.predictors),
                **kwargs)
        out = f.predict(test, level=level, interval=c.interval, seed=fold_seed,
                        folds=GROUP_CV_FOLDS)
    except RefitError as err:
        # again through a table indexed by the records' labels, so the message names them
        train = pd.DataFrame({k: v[tr] for k, v in arrays.items()}, index=labels[tr],
                             copy=False)
        try:
            f = fit(train, c.response, list(c.predictors), **kwargs)
            f.predict(test, level=level, interval=c.interval, seed=fold_seed,
                      folds=GROUP_CV_FOLDS)
        except RefitError as again:
            raise type(again)(f"{c.label}, repeat {split.repeat + 1} fold {split.fold + 1} "
                              f"({len(tr)} training rows): {again}") from again
        raise err
    return (out["estimate"].to_numpy(float), out["lower"].to_numpy(float),
            out["upper"].to_numpy(float), np.asarray(out["flags"], dtype=object))


def _run_batch(arrays, labels, c, batch, level, seed, groups=None):
    from refit.models.linalg import one_blas_thread

    with one_blas_thread():  # the same bits in any process
        return [_one_fold(arrays, labels, c, s, level, seed, groups) for s in batch]


def _run_folds(arrays, labels, c, splits, level, seed, n_jobs, groups=None):
    if n_jobs == 1 or len(splits) < 2:
        return _run_batch(arrays, labels, c, splits, level, seed, groups)
    from joblib import Parallel, delayed, effective_n_jobs

    workers = effective_n_jobs(n_jobs)
    n_batches = min(len(splits), 4 * workers)
    bounds = np.linspace(0, len(splits), n_batches + 1).astype(int)
    batches = [splits[a:b] for a, b in zip(bounds[:-1], bounds[1:]) if b > a]
    parts = Parallel(n_jobs=workers)(delayed(_run_batch)(arrays, labels, c, b, level, seed,
                                                         groups) for b in batches)
    return [r for part in parts for r in part]


def _closed_form_applies(c: Candidate, scheme: Scheme) -> bool:
    return (scheme.name == "loo" and c.estimator == "ols" and c.direction == "inverse"
            and c.interval not in GROUP_INTERVALS
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
    groups = None
    if c.groups is not None and (c.estimator == "mixed" or c.interval in GROUP_INTERVALS):
        from refit.models.inputs import group_codes_column

        codes, names = group_codes_column(frame, c.groups, len(frame))
        usable &= ~np.isnan(codes)
        groups = np.asarray(names + ["?"], dtype=object)[np.nan_to_num(codes, nan=-1)
                                                          .astype(int)]
    return arrays, usable, groups


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
    arrays, usable, groups = _used_columns(frame, labels, kind, candidate)
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
        parts, folds = loo_part(arrays, usable, candidate, level), None
        details["method"] = "closed-form"
    else:
        folds = [s for s in _restrict(splits, usable) if len(s.test_idx)]
        parts = _run_folds(arrays, labels, candidate, folds, level, seed, n_jobs, groups)
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
    if candidate.interval in GROUP_INTERVALS and folds:
        details.update(_unbounded_details(groups, folds, lo, hi, level))
    metrics = skill_scores(obs, est, lo, hi, level) if len(rows) else {}
    reps = np.unique(repeat) if folds is not None else (0,)  # closed form: one repeat
    details["by_repeat"] = [metrics] if len(reps) == 1 else [
        skill_scores(obs[repeat == r], est[repeat == r], lo[repeat == r], hi[repeat == r],
                     level) for r in reps]
    return CVResult(candidate, scheme, pred, metrics, details)


def _unbounded_details(groups, folds, lo, hi, level) -> dict:
    """How many training groups the folds had and, when a limit is infinite, why."""
    from refit.models.intervals.group_conformal import too_few_groups

    n_train = [len(np.unique(groups[s.train_idx])) for s in folds]
    out = {"training_groups": [int(min(n_train)), int(max(n_train))]}
    if not np.all(np.isfinite(lo) & np.isfinite(hi)):
        out["unbounded_reason"] = too_few_groups(int(min(n_train)), 1.0 - level)
    return out
