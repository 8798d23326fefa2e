"""Cross-validation schemes and splitters: which rows train and which test.

``make_splits(frame, scheme)`` turns a :class:`Scheme` into train/test index pairs with
scikit-learn's splitters (``KFold``/``RepeatedKFold``, ``LeaveOneOut``, ``GroupKFold``,
``LeaveOneGroupOut``); spatial blocks are groups made from the coordinates (a grid of
``block_km`` or k-means clusters, :func:`spatial_blocks` on the equal-area plane of
:func:`project_km`) and then split like groups. The driver that fits and scores each
fold is :mod:`refit.validate.crossval` (which re-exports these names).

Calibration soils cluster by region and source, so random k-fold flatters a fit that has
learnt the clusters: grouped or spatially blocked folds estimate the error on a region the
fit has never seen (Roberts et al. 2017, Ecography 40:913).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np

from refit.models.inputs import as_frame, rows_text
from refit.errors import InvalidDataError, UsageError

SCHEMES = ("kfold", "loo", "group-kfold", "leave-one-group-out", "spatial-block")
GROUPED = ("group-kfold", "leave-one-group-out", "spatial-block")
#: mean Earth radius [km] (IUGG value, from memory)
EARTH_RADIUS_KM = 6371.0088
#: k-means blocks per fold when no block size is given (common practice: several blocks
#: per fold so folds can be balanced)
BLOCKS_PER_FOLD = 5
_KMEANS_SITES = 10_000  # k-means runs on at most this many distinct sites (seeded sample)


@functools.cache
def _blas():
    from threadpoolctl import ThreadpoolController  # a scikit-learn dependency

    return ThreadpoolController()



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
                               f"{rows_text(labels, missing, kind)}; every row needs a group: "
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
                                   f"+-{limit:g} degrees at {rows_text(labels, bad, kind)}; "
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
        raise UsageError(f"scheme must be a refit.validate.crossval.Scheme; got {type(scheme).__name__}")
    frame, labels, kind = as_frame(frame, dicts=False)
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
