"""The fit matrix: every valid candidate of a recipe, cross-validated and ranked.

A candidate is one form x estimator x direction x interval method. Combinations that
cannot work are reported with the reason and skipped (:func:`impossible_reason`). Each
valid candidate is fitted on the whole subset (in-sample R^2, residual standard error,
AIC and BIC) and cross-validated with :func:`refit.validate.crossval.cross_validate` under the
recipe's scheme and, beside it, under random k-fold with the same folds, repeats and seed,
so the optimism of random cross-validation on clustered soils is visible.

The ranking rule is in :mod:`refit.validate.ranking` (re-exported here).
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field

import numpy as np

from refit.errors import RefitError
from refit.select.recipe import GROUP_METHODS, Recipe, form_degree
from refit.validate.ranking import (NEAR_FRACTION, coverage_tolerance, explain,  # noqa: F401
                                    optimism, rank_candidates)

INTERVAL_ENGINE = {"analytic": "analytic", "bootstrap": "bootstrap-pairs",
                   "split-conformal": "split-conformal", "jackknife+": "jackknife+",
                   "cv+": "cv+", "quantile": "quantile",
                   "group-jackknife+": "group-jackknife+", "group-cv+": "group-cv+"}
RESAMPLING = ("bootstrap", "split-conformal", "jackknife+", "cv+", *GROUP_METHODS)
#: estimators whose conformal and bootstrap intervals refit the estimator itself (OLS
#: by closed forms; the others by :mod:`refit.models.refitted`)
REFITS = ("ols", "huber", "theil-sen", "quantile", "york")
METRICS = ("rmsep", "mae", "bias", "r2_prediction", "coverage", "mean_width",
           "interval_score", "n", "n_unbounded")


#: the separator between the four parts of a candidate's name (safe in file names)
NAME_SEPARATOR = "__"


def candidate_name(form: str, estimator: str, direction: str, method: str) -> str:
    """A candidate's one name: ``linear__ols__inverse__analytic``."""
    return NAME_SEPARATOR.join((form, estimator, direction, method))


def normalise_candidate(text: str) -> str:
    """A candidate name as the user may type it, in its one spelling.

    Accepts the name itself (``linear__ols__inverse__jackknife+``), the parts joined by
    ``/`` (``linear/ols/inverse/jackknife+``), ``-plus`` for ``+`` and a trailing
    ``.json`` (a file name of an older run folder).
    """
    t = str(text).strip().removesuffix(".json")
    parts = t.replace("/", NAME_SEPARATOR).split(NAME_SEPARATOR)
    if len(parts) != 4:
        return t
    method = parts[3]
    if method.endswith("-plus"):
        method = method[: -len("-plus")] + "+"
    return candidate_name(*parts[:3], method)


@dataclass(frozen=True)
class Spec:
    """One candidate of the matrix, in the recipe's words.

    ``form_label`` is the recipe's form name (``cubic``), ``form``/``degree`` the engine's;
    ``method`` the recipe's interval method (``bootstrap``), :attr:`interval` the engine's.
    """

    form_label: str
    form: str
    degree: int | None
    estimator: str
    direction: str
    method: str
    n_params: int

    @property
    def label(self) -> str:
        """The candidate's one name, ``form__estimator__direction__method`` (e.g.
        ``quadratic__ols__inverse__jackknife+``): the same on screen, in the leaderboard,
        in JSON, as the file name ``fits/<name>.json`` and after ``--candidate``."""
        return candidate_name(self.form_label, self.estimator, self.direction, self.method)

    @property
    def interval(self) -> str:
        """The fitting engine's name of the interval method."""
        return INTERVAL_ENGINE[self.method]


# ----------------------------------------------------------------------------- the grid
def impossible_reason(form: str, estimator: str, direction: str, method: str,
                      n_predictors: int, *, groups: str | None = None,
                      weights: str | None = None, sds: bool = False,
                      random_slope: bool = False) -> str | None:
    """Why a combination cannot be fitted or given an interval (None when it can).

    ``groups``, ``weights``, ``sds`` (both ``x_sd`` and ``y_sd`` named) and
    ``random_slope`` are what the recipe names beside the combination.
    """
    if estimator == "wls" and weights is None:
        return ("estimator 'wls' needs a weights column: name it in [function] weights = "
                "\"<column>\"")
    if estimator == "york" and not sds:
        return ("estimator 'york' needs measurement standard deviations of x and y: name "
                "their columns in [function] x_sd and y_sd")
    if estimator in ("mixed",) and groups is None:
        return "estimator 'mixed' needs [validation] groups (each soil's source)"
    if method in GROUP_METHODS and groups is None:
        return f"interval {method!r} leaves out whole groups: it needs [validation] groups"
    if direction == "forward" and estimator == "wls-power":
        return ("estimator 'wls-power' is fitted in the inverse direction only (the forward "
                "inversion assumes one spread of the feature)")
    if direction == "forward" and n_predictors != 1:
        return (f"the forward direction inverts one feature; the function has "
                f"{n_predictors} predictors")
    if estimator in ("theil-sen", "york") and (form != "linear" or n_predictors != 1):
        return f"estimator {estimator!r} fits straight lines with one predictor only"
    if estimator == "mixed" and random_slope and (form != "linear" or n_predictors != 1):
        return "random_slope takes a straight line on one predictor (form 'linear')"
    if direction == "forward" and method != "analytic":
        return ("the forward direction's interval is the classical-calibration band "
                f"('analytic'); {method!r} does not apply")
    if method == "quantile" and estimator != "quantile":
        return "interval 'quantile' comes from quantile curves: only with estimator 'quantile'"
    if method == "analytic" and estimator == "quantile":
        return ("estimator 'quantile' gives its own interval from the quantile curves; use "
                "interval 'quantile'")
    if method in GROUP_METHODS and estimator == "mixed":
        return (f"the mixed fit's analytic interval is already the one for a soil of a new "
                f"source; {method!r} would refit the mixed model without each source in "
                "every fold (slow, and no more honest): use it with 'ols' or a robust "
                "estimator")
    if method in GROUP_METHODS and estimator == "york":
        return (f"interval {method!r} refits the line without each source, and a York fit "
                "keeps no measurement SDs to refit with")
    if method in RESAMPLING and method not in GROUP_METHODS and estimator not in REFITS:
        return (f"interval {method!r} refits the estimator on resampled rows; estimator "
                f"{estimator!r} goes with 'analytic'"
                + (" (its new-source interval)" if estimator == "mixed" else
                   " or a group-level interval"))
    return None


def candidate_grid(recipe: Recipe) -> tuple[list[Spec], list[dict]]:
    """All valid candidates of a recipe, and the skipped combinations with their reasons."""
    from refit.models.forms import make_form

    specs, skipped = [], []
    k = len(recipe.predictors)
    for form_label in recipe.forms:
        form, degree = form_degree(form_label)
        for direction in recipe.directions:
            x_names = list(recipe.predictors) if direction == "inverse" else [recipe.response]
            n_params = make_form(form, x_names, degree=degree).n_params
            for estimator in recipe.estimators:
                for method in recipe.methods:
                    spec = Spec(form_label, form, degree, estimator, direction, method,
                                n_params)
                    why = impossible_reason(
                        form, estimator, direction, method, k, groups=recipe.groups,
                        weights=recipe.weights, sds=bool(recipe.x_sd and recipe.y_sd),
                        random_slope=recipe.random_slope)
                    if why is None:
                        specs.append(spec)
                    else:
                        skipped.append({"candidate": spec.label, "reason": why})
    return specs, skipped


# ----------------------------------------------------------------------------- in-sample
def information_criteria(residuals, n_params: int) -> tuple[float, float]:
    """Gaussian AIC and BIC from residuals on the fitting scale.

    ``llf = -n/2 (ln(2 pi) + ln(RSS/n) + 1)``, ``AIC = -2 llf + 2 p``,
    ``BIC = -2 llf + p ln(n)`` with p the number of coefficients: the convention of
    statsmodels' OLS results (``aic``, ``bic``). For robust fits the same formula is
    applied to their residuals (a descriptive figure). Comparable only between
    candidates with the same response on the same scale (same direction, not mixing the
    exponential form's log scale with the others).
    """
    e = np.asarray(residuals, dtype=float)
    n = e.size
    rss = float(e @ e)
    if n == 0 or rss <= 0:
        return float("nan"), float("nan")
    llf = -0.5 * n * (math.log(2 * math.pi) + math.log(rss / n) + 1.0)
    return -2 * llf + 2 * n_params, -2 * llf + n_params * math.log(n)


def fit_arguments(recipe: Recipe, spec: Spec) -> dict:
    """What :func:`refit.fit` takes beside the form: the weights (``wls``), the
    measurement SDs (``york``; the recipe's ``x_sd`` is the feature's, ``y_sd`` the
    climate column's, so the forward direction, whose equation has climate as x, swaps
    them) and the groups and random slope (``mixed``)."""
    kw = {}
    if spec.estimator == "wls":
        kw["weights"] = recipe.weights
    if spec.estimator == "york":
        pair = (recipe.x_sd, recipe.y_sd)
        kw["x_sd"], kw["y_sd"] = pair if spec.direction == "inverse" else pair[::-1]
    if spec.estimator == "mixed":
        kw.update(groups=recipe.groups, random_slope=recipe.random_slope)
    elif spec.interval in GROUP_METHODS:
        kw["groups"] = recipe.groups   # the group-level interval leaves out whole sources
    return kw


def fit_whole(frame, recipe: Recipe, spec: Spec):
    """The candidate fitted on the whole subset, and its in-sample figures."""
    from refit.models.fitting import fit

    f = fit(frame, recipe.response, list(recipe.predictors), form=spec.form,
            degree=spec.degree, estimator=spec.estimator, direction=spec.direction,
            **fit_arguments(recipe, spec))
    aic, bic = information_criteria(f.result.residuals, spec.n_params)
    return f, {"r2_in_sample": f.r_squared, "residual_se": f.residual_std_error,
               "aic": aic, "bic": bic}


# ----------------------------------------------------------------------------- running
@dataclass
class MatrixResult:
    """Everything one run of the matrix produced (see :func:`run_matrix`)."""

    specs: list
    skipped: list
    leaderboard: object          # pandas DataFrame, ranked
    predictions: object          # pandas DataFrame, every out-of-fold prediction
    fits: dict                   # label -> refit.models.fitting.Fit (whole subset)
    cv: dict                     # label -> {"main": CVResult, "kfold": CVResult | None}
    verdict: dict
    schemes: dict                # "main"/"kfold" -> Scheme (kfold None if main is kfold)
    split_details: dict          # "main"/"kfold" -> the splits' details (groups, blocks)
    tolerance: float
    n: int
    timings: dict = field(default_factory=dict)


def schemes_for(recipe: Recipe, n: int):
    """The recipe's scheme and the random k-fold beside it (None when it is k-fold)."""
    from refit.validate.crossval import Scheme

    main = Scheme(name=recipe.scheme, folds=recipe.folds, repeats=recipe.repeats,
                  groups=recipe.groups if recipe.scheme != "spatial-block" else None,
                  seed=recipe.seed, block_km=recipe.block_km)
    if recipe.scheme == "kfold":
        return main, None
    folds = min(recipe.folds, n)
    return main, Scheme(name="kfold", folds=folds, repeats=recipe.repeats, seed=recipe.seed)


def _candidate(recipe: Recipe, spec: Spec):
    from refit.validate.crossval import Candidate

    return Candidate(response=recipe.response, predictors=tuple(recipe.predictors),
                     form=spec.form, degree=spec.degree, estimator=spec.estimator,
                     direction=spec.direction, interval=spec.interval,
                     groups=recipe.groups, **{k: v for k, v in fit_arguments(recipe, spec)
                                             .items() if k != "groups"})


def _make_splits(frame, scheme, recipe: Recipe):
    """Make the splits once (every candidate sees the same folds); scheme errors stop the
    run with the recipe's line."""
    from refit.validate.crossval import make_splits

    try:
        return make_splits(frame, scheme)
    except RefitError as exc:
        raise type(exc)(f"{recipe.where('validation.scheme')}: [validation] {exc}") from None


def _row(spec: Spec, main, kfold, insample: dict) -> dict:
    row = {"candidate": spec.label, "form": spec.form_label, "estimator": spec.estimator,
           "direction": spec.direction, "interval_method": spec.method,
           "n_params": spec.n_params, "scheme": main.scheme.name}
    row.update({m: main.metrics.get(m) for m in METRICS})
    for m in ("rmsep", "bias", "coverage", "mean_width", "interval_score"):
        row[f"kfold_{m}"] = None if kfold is None else kfold.metrics.get(m)
    row["rmsep_ratio"] = (None if kfold is None or not kfold.metrics.get("rmsep")
                          else main.metrics["rmsep"] / kfold.metrics["rmsep"])
    row["unbounded_reason"] = main.details.get("unbounded_reason")
    row.update(insample)
    return row


def _oof(res, spec: Spec):
    p = res.predictions.copy()
    p.insert(0, "candidate", spec.label)
    p.insert(1, "scheme", res.scheme.name)
    return p


def _one(frame, recipe, spec, schemes, splits, n_jobs, tick):
    """Fit, cross-validate (both schemes); returns (fit, results) or raises RefitError."""
    from refit.validate.crossval import cross_validate

    f, insample = fit_whole(frame, recipe, spec)
    cand = _candidate(recipe, spec)
    out = {}
    for key, scheme in schemes.items():
        if scheme is None:
            out[key] = None
            continue
        out[key] = cross_validate(frame, cand, scheme, level=recipe.level, seed=recipe.seed,
                                  n_jobs=n_jobs, splits=splits[key])
        tick(f"{spec.label} ({scheme.name})")
    return f, insample, out


def _candidate_job(frame, recipe, spec, schemes, splits, n_jobs):
    """One candidate, run alike in this process or a worker: BLAS on one thread (so the
    bits do not depend on where it ran), failures returned as text, not raised."""
    from refit.validate.spatial import _blas

    t = time.perf_counter()
    try:
        with _blas().limit(limits=1, user_api="blas"):
            f, insample, res = _one(frame, recipe, spec, schemes, splits, n_jobs,
                                    lambda label: None)
    except RefitError as exc:
        return spec, None, f"failed: {exc}", 0.0
    return spec, (f, insample, res), None, round(time.perf_counter() - t, 4)


def _candidate_results(frame, recipe, specs, schemes, splits, n_jobs, progress_one):
    """Yield each candidate's outcome in the order of ``specs``.

    Serial (``n_jobs == 1``, or a single candidate: then its folds get the workers): in
    this process. Otherwise the candidates are spread over ``n_jobs`` worker processes
    (joblib's loky backend) and their folds run serially inside each worker, so no two
    levels compete for the cores. Each candidate's numbers depend only on the recipe's
    seed (folds and interval seeds are fixed before it starts), so the results are
    identical bit for bit to the serial run's.
    """
    if n_jobs == 1 or len(specs) < 2:
        for spec in specs:
            out = _candidate_job(frame, recipe, spec, schemes, splits, n_jobs)
            progress_one(out)
            yield out
        return
    from joblib import Parallel, delayed, effective_n_jobs

    workers = min(effective_n_jobs(n_jobs), len(specs))
    jobs = Parallel(n_jobs=workers, return_as="generator")(
        delayed(_candidate_job)(frame, recipe, spec, schemes, splits, 1) for spec in specs)
    for out in jobs:
        progress_one(out)
        yield out


def run_matrix(frame, recipe: Recipe, *, n_jobs: int = 1, progress=None) -> MatrixResult:
    """Cross-validate every valid candidate of a recipe on a subset and rank them.

    Parameters
    ----------
    frame : pandas.DataFrame
        The subset: rows with the response and predictors present.
    recipe : Recipe
    n_jobs : int
        Worker processes (1: serial; -1: all cores). With several candidates they are
        spread over the workers (each candidate's folds run serially in its worker); with
        one candidate its folds are. Results are identical to the serial run's, bit for
        bit, for the same recipe and seed.
    progress : callable, optional
        ``progress(total=...)`` once, then ``progress(advance=1, label=...)`` per
        cross-validation run (per candidate and scheme, as each candidate finishes).

    Returns
    -------
    MatrixResult
    """
    import pandas as pd

    t0 = time.perf_counter()
    frame = frame.reset_index(drop=True)
    specs, skipped = candidate_grid(recipe)
    main, kfold = schemes_for(recipe, len(frame))
    schemes = {"main": main, "kfold": kfold}
    splits = {k: None if s is None else _make_splits(frame, s, recipe)
              for k, s in schemes.items()}
    per = sum(s is not None for s in schemes.values())
    if progress:
        progress(total=len(specs) * per)

    def progress_one(out):
        if not progress:
            return
        spec, done, failed, _ = out
        for key, scheme in schemes.items():
            if scheme is not None:
                progress(advance=1, label=f"{spec.label} "
                         + ("(failed)" if failed else f"({scheme.name})"))

    rows, preds, fits, cvs, valid, times = [], [], {}, {}, [], {}
    for spec, done, failed, seconds in _candidate_results(frame, recipe, specs, schemes,
                                                          splits, n_jobs, progress_one):
        if failed:
            skipped.append({"candidate": spec.label, "reason": failed})
            continue
        f, insample, res = done
        times[spec.label] = seconds
        valid.append(spec)
        fits[spec.label], cvs[spec.label] = f, res
        rows.append(_row(spec, res["main"], res["kfold"], insample))
        preds += [_oof(r, spec) for r in res.values() if r is not None]
    board, tol = rank_candidates(pd.DataFrame(rows), recipe.level, len(frame))
    verdict = explain(board, recipe.level, tol, main.name, unit=response_unit(recipe.response))
    verdict["optimism"] = optimism(board)
    predictions = pd.concat(preds, ignore_index=True) if preds else pd.DataFrame()
    times["total"] = round(time.perf_counter() - t0, 4)
    details = {k: None if v is None else dict(v.details) for k, v in splits.items()}
    return MatrixResult(valid, skipped, board, predictions, fits, cvs, verdict, schemes,
                        details, tol, len(frame), times)


def response_unit(response: str) -> str:
    """The unit of a canonical response column as printed (``mm``, ``°C``); "" for a
    column the schema does not know or an index without a unit."""
    from refit.coefficients.build import column_units
    from refit.curate.schema import unit_notation

    unit = column_units().get(response)
    return unit_notation(unit) if unit else ""


# ----------------------------------------------------------------------------- a recipe
@dataclass
class Run:
    """A recipe run: the data's provenance, the subset and the matrix."""

    recipe: Recipe
    data: dict
    subset: object      # refit.select.subsets.SubsetResult
    matrix: MatrixResult
    timings: dict
    #: the random k-fold warning of :func:`refit.validate.sources.source_flattery`, or None
    source_check: dict | None = None

    @property
    def warnings(self) -> list[str]:
        """Warnings about the recipe's choices on these data (printed and kept)."""
        return [self.source_check["message"]] if self.source_check else []

    @property
    def defaults(self) -> list[str]:
        """The defaults applied to what the recipe leaves out (one sentence each)."""
        return list(self.recipe.defaults)


def _enough_rows(recipe: Recipe, specs: list, sub) -> None:
    from refit.select.subsets import check_enough, rows_needed

    if not specs:
        return
    hungry = max(specs, key=lambda s: rows_needed(s.n_params, s.estimator))
    need = rows_needed(hungry.n_params, hungry.estimator)
    what = (f"form {hungry.form_label!r} ({hungry.n_params} coefficients) with estimator "
            f"{hungry.estimator!r}")
    check_enough(len(sub.frame), need, what, sub, where=recipe.where("subset"))


def run_recipe(recipe: Recipe, *, n_jobs: int = 1, progress=None) -> Run:
    """Load a recipe's data, select the subset, and run the fit matrix on it.

    Raises
    ------
    UsageError
        Every combination of the recipe is impossible (the reasons are listed).
    InvalidDataError
        A column the recipe names is missing, the subset keeps too few rows (how many are
        needed is said), or the validation scheme cannot split the subset.
    """
    from refit.errors import UsageError
    from refit.select.dataset import dataset_from_recipe
    from refit.validate.sources import source_flattery

    t0 = time.perf_counter()
    ds = dataset_from_recipe(recipe)
    t1 = time.perf_counter()
    data, sub = ds.source.to_dict(), ds.subset
    specs, skipped = candidate_grid(recipe)
    if not specs:
        raise UsageError(f"{recipe.where('candidates')}: no combination of the recipe's "
                         "candidates and interval methods can be fitted: "
                         + "; ".join(f"{s['candidate']}: {s['reason']}" for s in skipped))
    _enough_rows(recipe, specs, sub)
    result = run_matrix(sub.frame, recipe, n_jobs=n_jobs, progress=progress)
    t2 = time.perf_counter()
    check = source_flattery(sub.frame, recipe)
    timings = {"load_s": round(t1 - t0, 4), "matrix_s": result.timings["total"],
               "source_check_s": round(time.perf_counter() - t2, 4),
               "total_s": round(time.perf_counter() - t0, 4)}
    return Run(recipe, data, sub, result, timings, check)
