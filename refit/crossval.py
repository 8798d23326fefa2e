"""Cross-validation of transfer functions: splitters and the driver.

``make_splits(frame, scheme)`` turns a :class:`Scheme` into train/test index pairs with
scikit-learn's splitters (``KFold``/``RepeatedKFold``, ``LeaveOneOut``, ``GroupKFold``,
``LeaveOneGroupOut``); spatial blocks are groups made from the coordinates (a grid of
``block_km`` or k-means clusters) and then split like groups. ``cross_validate(frame,
candidate, scheme)`` fits the candidate on each training part with :func:`refit.fit`,
predicts the held-out rows with the candidate's interval method (so every interval is built
from the training rows only) and scores the out-of-fold predictions with
:func:`refit.skill.skill_scores`.

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

import functools
import math
from dataclasses import dataclass, field

import numpy as np

from .errors import InvalidDataError, RefitError, UsageError

SCHEMES = ("kfold", "loo", "group-kfold", "leave-one-group-out", "spatial-block")
GROUPED = ("group-kfold", "leave-one-group-out", "spatial-block")
#: mean Earth radius [km] (IUGG value, from memory)
EARTH_RADIUS_KM = 6371.0088
#: k-means blocks per fold when no block size is given (common practice: several blocks
#: per fold so folds can be balanced)
BLOCKS_PER_FOLD = 5
_INTERVAL_ALIASES = {"bootstrap": "bootstrap-pairs"}
_CONFORMAL = ("split-conformal", "jackknife+", "cv+")
_KMEANS_SITES = 10_000  # k-means runs on at most this many distinct sites (seeded sample)


# ----------------------------------------------------------------------------- schemes
def _whole(value, name: str, least: int) -> int:
    if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < least:
        raise UsageError(f"{name} must be a whole number of at least {least}; got {value!r}")
    return int(value)


@dataclass(frozen=True)
class Scheme:
    """How to split the rows.

    Attributes
    ----------
    name : str
        ``kfold`` (random, repeated with ``repeats``), ``loo`` (leave one row out),
        ``group-kfold`` (whole groups of ``groups`` held out), ``leave-one-group-out`` or
        ``spatial-block`` (groups made from ``latitude``/``longitude``).
    folds : int
        Number of folds (ignored by ``loo`` and ``leave-one-group-out``).
    repeats : int
        Repetitions with fresh random folds (``kfold``, ``group-kfold``, ``spatial-block``).
    groups : str or None
        The grouping column (``group-kfold``, ``leave-one-group-out``).
    seed : int
        Seed of every random step of the split.
    block_km : float or None
        Side of the square grid cells of ``spatial-block`` [km]; None: k-means blocks
        (``BLOCKS_PER_FOLD`` per fold) whose size is reported.
    """

    name: str
    folds: int = 5
    repeats: int = 1
    groups: str | None = None
    seed: int = 0
    block_km: float | None = None

    def __post_init__(self):
        if self.name not in SCHEMES:
            raise UsageError(f"unknown validation scheme {self.name!r}; choose one of: "
                             + ", ".join(SCHEMES))
        _whole(self.folds, "folds", 2)
        _whole(self.repeats, "repeats", 1)
        _whole(self.seed, "seed", 0)
        if self.name in ("group-kfold", "leave-one-group-out") and not self.groups:
            raise UsageError(f"scheme {self.name!r} needs groups = a column name (e.g. "
                             "'source' or a region column)")
        if self.block_km is not None and not (
                isinstance(self.block_km, (int, float)) and not isinstance(self.block_km, bool)
                and math.isfinite(self.block_km) and self.block_km > 0):
            raise UsageError(f"block_km must be a positive number of kilometres; got "
                             f"{self.block_km!r}")


@dataclass(frozen=True, eq=False)
class Split:
    """One train/test pair: positional row indices into the frame."""

    repeat: int
    fold: int
    train_idx: np.ndarray
    test_idx: np.ndarray


class Splits(list):
    """A list of :class:`Split` with ``details`` (scheme, counts, block size)."""

    def __init__(self, items=(), details=None):
        super().__init__(items)
        self.details = dict(details or {})


# ----------------------------------------------------------------------------- groups
def _frame_of(table):
    import pandas as pd

    if hasattr(table, "frame") and isinstance(table.frame, pd.DataFrame):
        rows = getattr(table, "source_rows", None)
        labels = np.asarray(rows) if rows is not None else np.asarray(table.frame.index)
        return table.frame, labels, "file row"
    if isinstance(table, pd.DataFrame):
        return table, np.asarray(table.index), "row"
    raise UsageError(f"the table must be a pandas DataFrame or a refit Table; got "
                     f"{type(table).__name__}")


def _where(labels, mask, kind) -> str:
    bad = [str(v) for v in np.asarray(labels)[mask][:10]]
    more = int(mask.sum()) - len(bad)
    return f"{kind}s " + ", ".join(bad) + (f" and {more} more" if more > 0 else "")


def group_codes(frame, column: str, labels=None, kind: str = "row"):
    """Integer group codes (0..g-1, in sorted order of the names) and the group names."""
    import pandas as pd

    if column not in frame.columns:
        raise UsageError(f"group column {column!r} is not in the table; available columns: "
                         + ", ".join(map(str, frame.columns)))
    col = frame[column]
    try:
        codes, names = pd.factorize(col, sort=True)
    except TypeError:  # mixed types cannot be sorted: group by their text
        codes, names = pd.factorize(col.astype(str), sort=True)
    missing = codes < 0
    if missing.any():
        labels = np.arange(len(frame)) if labels is None else labels
        raise InvalidDataError(f"group column {column!r} is empty at "
                               f"{_where(labels, missing, kind)}; every row needs a group: "
                               "fill those cells or leave the rows out")
    return np.asarray(codes), list(names)


def _check_groups(n_groups: int, folds: int | None, what: str, scheme: str):
    if n_groups < 2:
        raise InvalidDataError(f"{what} holds a single group, so nothing is left to train on "
                               f"when it is held out; scheme {scheme!r} needs at least two "
                               "groups: choose another group column or scheme 'kfold'")
    if folds is not None and folds > n_groups:
        raise InvalidDataError(f"scheme {scheme!r} with {folds} folds needs at least {folds} "
                               f"groups; {what} holds {n_groups}: use folds = {n_groups} or "
                               "fewer, or scheme 'leave-one-group-out'")


# ----------------------------------------------------------------------------- spatial
def project_km(latitude, longitude) -> np.ndarray:
    """Sinusoidal equal-area projection about the mean longitude, [km] east and north.

    ``x = R (lon - lon0) cos(lat)``, ``y = R lat`` (angles in radians, R the mean Earth
    radius). Areas are true; shapes stretch away from the central meridian, which matters
    little for blocks of a study region (a grid across the date line is not supported).
    """
    lat = np.radians(np.asarray(latitude, dtype=float))
    lon = np.asarray(longitude, dtype=float)
    lon0 = np.mean(lon)
    return np.column_stack([EARTH_RADIUS_KM * np.radians(lon - lon0) * np.cos(lat),
                            EARTH_RADIUS_KM * lat])


def _coordinates(frame, labels, kind):
    out = []
    for name, limit in (("latitude", 90.0), ("longitude", 180.0)):
        if name not in frame.columns:
            raise UsageError(f"scheme 'spatial-block' needs the column {name!r} (decimal "
                             "degrees); it is not in the table")
        import pandas as pd

        v = pd.to_numeric(frame[name], errors="coerce").to_numpy(dtype=float, na_value=np.nan)
        bad = ~(np.abs(v) <= limit)
        if bad.any():
            raise InvalidDataError(f"column {name!r} is empty, not a number or beyond "
                                   f"+-{limit:g} degrees at {_where(labels, bad, kind)}; "
                                   "spatial blocks need every row's coordinates")
        out.append(v)
    return out


def spatial_blocks(latitude, longitude, *, block_km=None, n_blocks=25, seed=0):
    """Group rows into spatial blocks: grid cells of ``block_km`` or k-means clusters.

    Parameters
    ----------
    latitude, longitude : array_like
        Coordinates [decimal degrees].
    block_km : float, optional
        Side of the square grid cells in the projected plane [km] (:func:`project_km`).
    n_blocks : int
        Number of k-means clusters when ``block_km`` is None (at most the number of
        distinct locations; clustered on a seeded sample of 10,000 sites when there are
        more, then every row joins its nearest centre).
    seed : int
        Seed of k-means.

    Returns
    -------
    codes : ndarray of int
        Block of each row (0..b-1).
    info : dict
        ``block_method`` (``grid`` or ``kmeans``), ``n_blocks``, ``block_km`` (the grid
        side, or for k-means the median block diameter: twice the largest distance of a
        block's rows from its centre) [km], ``block_km_range`` (smallest and largest).
    """
    xy = project_km(latitude, longitude)
    if block_km is not None:
        cells = np.floor((xy - xy.min(axis=0)) / float(block_km)).astype(np.int64)
        _, codes = np.unique(cells, axis=0, return_inverse=True)
        codes = codes.ravel()
        return codes, {"block_method": "grid", "n_blocks": int(codes.max() + 1),
                       "block_km": float(block_km)}
    from sklearn.cluster import KMeans

    sites = np.unique(xy, axis=0)
    k = min(int(n_blocks), len(sites))
    if k < 2:
        return np.zeros(len(xy), dtype=int), {"block_method": "kmeans", "n_blocks": 1,
                                              "block_km": 0.0}
    if len(sites) > _KMEANS_SITES:  # cluster a seeded sample of sites, assign every row
        pick = np.random.default_rng(seed).choice(len(sites), _KMEANS_SITES, replace=False)
        sites = sites[np.sort(pick)]
    with _blas().limit(limits=1):  # small problem: threads only wait on a busy machine
        km = KMeans(n_clusters=k, random_state=seed, n_init=10).fit(sites)
        raw = km.predict(xy)
    dist = np.linalg.norm(xy - km.cluster_centers_[raw], axis=1)
    _, codes = np.unique(raw, return_inverse=True)  # a cluster may get no rows
    k = int(codes.max() + 1)
    diam = np.zeros(k)
    np.maximum.at(diam, codes, 2.0 * dist)
    return codes, {"block_method": "kmeans", "n_blocks": int(k),
                   "block_km": float(np.median(diam)),
                   "block_km_range": [float(diam.min()), float(diam.max())]}


# ----------------------------------------------------------------------------- make_splits
def _collect(iterator, folds_per_repeat: int | None) -> list[Split]:
    out = []
    for i, (train, test) in enumerate(iterator):
        r, k = (0, i) if folds_per_repeat is None else divmod(i, folds_per_repeat)
        out.append(Split(r, k, np.asarray(train, dtype=np.int64),
                         np.asarray(test, dtype=np.int64)))
    return out


def _grouped_kfold(codes, folds, repeats, seed) -> list[Split]:
    """GroupKFold with shuffled groups, repeated as RepeatedKFold repeats KFold."""
    from sklearn.model_selection import GroupKFold

    rng = np.random.RandomState(seed)  # as RepeatedKFold: one generator across repeats
    dummy = np.zeros((len(codes), 1))
    out = []
    for r in range(repeats):
        splitter = GroupKFold(n_splits=folds, shuffle=True, random_state=rng)
        out += [Split(r, k, tr.astype(np.int64), te.astype(np.int64))
                for k, (tr, te) in enumerate(splitter.split(dummy, groups=codes))]
    return out


def _loo_details(n: int, s: Scheme) -> dict:
    out = {"scheme": s.name, "n_rows": n, "split_seed": s.seed, "folds": n, "repeats": 1}
    if s.repeats > 1:
        out["note"] = "repeats ignored: leave-one-out gives the same folds every time"
    return out


def make_splits(frame, scheme: Scheme) -> Splits:
    """Train/test splits of a table's rows under a scheme.

    Parameters
    ----------
    frame : pandas.DataFrame or refit Table
        The rows to split (groups and coordinates are read from its columns).
    scheme : Scheme

    Returns
    -------
    Splits
        A list of :class:`Split` (positional indices; every row tested exactly once per
        repeat) with ``details``: ``scheme``, ``n_rows``, ``folds``, ``repeats``, and for
        grouped schemes ``n_groups`` (and the block size for spatial blocks).

    Raises
    ------
    UsageError
        Unknown group column, missing coordinates.
    InvalidDataError
        Empty group cells, a single group, more folds than groups or rows.
    """
    from sklearn.model_selection import LeaveOneGroupOut, LeaveOneOut, RepeatedKFold

    if not isinstance(scheme, Scheme):
        raise UsageError(f"scheme must be a refit.crossval.Scheme; got {type(scheme).__name__}")
    frame, labels, kind = _frame_of(frame)
    n, s = len(frame), scheme
    details = {"scheme": s.name, "n_rows": n, "split_seed": s.seed}
    dummy = np.zeros((n, 1))
    need = {"kfold": s.folds, "loo": 3}.get(s.name, 0)
    if n < need:
        raise InvalidDataError(f"scheme {s.name!r}" + (f" with {s.folds} folds" if
                               s.name == "kfold" else "") + f" needs at least {need} rows; "
                               f"the table has {n}")
    if s.name == "kfold":
        it = RepeatedKFold(n_splits=s.folds, n_repeats=s.repeats, random_state=s.seed)
        details.update(folds=s.folds, repeats=s.repeats)
        return Splits(_collect(it.split(dummy), s.folds), details)
    if s.name == "loo":
        return Splits(_collect(LeaveOneOut().split(dummy), None), _loo_details(n, s))
    if s.name == "spatial-block":
        lat, lon = _coordinates(frame, labels, kind)
        codes, info = spatial_blocks(lat, lon, block_km=s.block_km,
                                     n_blocks=BLOCKS_PER_FOLD * s.folds, seed=s.seed)
        details.update(info)
        what = (f"a grid of {s.block_km:g} km" if s.block_km is not None
                else "the coordinates (k-means blocks)")
        _check_groups(info["n_blocks"], s.folds, what, s.name)
    else:
        codes, names = group_codes(frame, s.groups, labels, kind)
        _check_groups(len(names), None if s.name == "leave-one-group-out" else s.folds,
                      f"group column {s.groups!r}", s.name)
        details["groups"] = s.groups
    details["n_groups"] = int(codes.max() + 1)
    if s.name == "leave-one-group-out":
        details.update(folds=details["n_groups"], repeats=1)
        if s.repeats > 1:
            details["note"] = "repeats ignored: leave-one-group-out gives the same folds"
        return Splits(_collect(LeaveOneGroupOut().split(dummy, groups=codes), None), details)
    details.update(folds=s.folds, repeats=s.repeats)
    return Splits(_grouped_kfold(codes, s.folds, s.repeats, s.seed), details)


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
        from .fitting import DIRECTIONS, ESTIMATORS, INTERVALS
        from .forms import FORMS

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
        :func:`refit.skill.skill_scores` over all out-of-fold predictions.
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
@functools.cache
def _blas():
    from threadpoolctl import ThreadpoolController  # a scikit-learn dependency

    return ThreadpoolController()


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

    from .fitting import fit

    tr, te = split.train_idx, split.test_idx
    train = pd.DataFrame({k: v[tr] for k, v in arrays.items()}, index=labels[tr], copy=False)
    try:
        f = fit(train, c.response, list(c.predictors), **_fit_kwargs(c, level))
        out = f.predict(pd.DataFrame({p: arrays[p][te] for p in c.predictors}), level=level,
                        interval=c.interval, seed=_fold_seed(seed, split.repeat, split.fold))
    except RefitError as err:
        raise type(err)(f"{c.label}, repeat {split.repeat + 1} fold {split.fold + 1} "
                        f"({len(tr)} training rows): {err}") from err
    return (out["estimate"].to_numpy(float), out["lower"].to_numpy(float),
            out["upper"].to_numpy(float), np.asarray(out["flags"], dtype=object))


def _run_batch(arrays, labels, c, batch, level, seed):
    with _blas().limit(limits=1, user_api="blas"):  # the same bits in any process
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
    form : refit.forms.Form
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
    from scipy import stats

    from .lsq import leverages, solve_lsq

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
        half = stats.t.ppf(0.5 + level / 2.0, df - 1.0) * np.sqrt(s2_del / (1.0 - h))
        lower, upper = est - half, est + half
    masks = {"outside-calibration-range": _outside_others(x)}
    if form.degree == 2 and x.shape[1] == 1:
        masks["beyond-turning-point"] = _beyond_turning_loo(x[:, 0], X, res, loo, form)
    return est, lower, upper, _flag_text(masks)


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
    """Leave-one-out version of refit.domain.beyond_turning_mask for a quadratic."""
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
    from .fitting import _column

    arrays = {nm: _column(frame, nm, labels, kind) for nm in c.columns()}
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
        raise UsageError(f"candidate must be a refit.crossval.Candidate; got "
                         f"{type(candidate).__name__}")
    if not isinstance(scheme, Scheme):
        raise UsageError(f"scheme must be a refit.crossval.Scheme; got {type(scheme).__name__}")
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

    from .skill import skill_scores

    _check(frame, candidate, scheme, level, n_jobs)
    frame, labels, kind = _frame_of(frame)
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
    else:
        rows = np.concatenate([s.test_idx for s in folds])
        repeat = np.concatenate([np.full(len(s.test_idx), s.repeat) for s in folds])
        fold = np.concatenate([np.full(len(s.test_idx), s.fold) for s in folds])
    est, lo, hi, flags = (np.concatenate(p) for p in zip(*parts))
    ids = (frame["profile_id"].to_numpy()[rows] if "profile_id" in frame.columns
           else labels[rows])
    obs = arrays[candidate.response][rows]
    pred = pd.DataFrame({"row": rows, "profile_id": ids, "repeat": repeat, "fold": fold,
                         "observed": obs, "estimate": est, "lower": lo, "upper": hi,
                         "flags": pd.Categorical(flags)})
    if candidate.interval in _CONFORMAL:
        details["cautions"] = [
            f"{candidate.interval} intervals assume exchangeable rows; soils clustered by "
            "region or source are not, so their coverage on new regions can fall short of "
            "the nominal level: judge it under a grouped or spatial scheme"]
    metrics = skill_scores(obs, est, lo, hi, level) if len(rows) else {}
    reps = np.unique(repeat)
    details["by_repeat"] = [metrics] if len(reps) == 1 else [
        skill_scores(obs[repeat == r], est[repeat == r], lo[repeat == r], hi[repeat == r],
                     level) for r in reps]
    return CVResult(candidate, scheme, pred, metrics, details)


def _loo_part(arrays, usable, c: Candidate, level):
    from .forms import make_form

    form = make_form(c.form, list(c.predictors), degree=c.degree)
    x = np.column_stack([arrays[p][usable] for p in c.predictors])
    y = arrays[c.response][usable]
    if len(y) < form.min_rows + 1:
        raise InvalidDataError(f"{c.label}, leave-one-out: each fit leaves out one of "
                               f"{len(y)} rows; form {form.name!r} has {form.n_params} "
                               f"coefficient(s) and needs at least {form.min_rows + 1} rows "
                               "with values")
    try:
        return [loo_ols(x, y, form, level, c.interval)]
    except RefitError as err:
        raise type(err)(f"{c.label}, leave-one-out: {err}") from err
