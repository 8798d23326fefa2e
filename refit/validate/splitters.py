"""Cross-validation splitters: which rows train and which test.

Every scheme is an object in the scikit-learn splitter protocol: settings in the
constructor, ``split(X, y=None, groups=None)`` yielding ``(train_idx, test_idx)``
(positional row indices) and ``get_n_splits(X=None, y=None, groups=None)``, so they are
interchangeable with ``sklearn.model_selection`` splitters (and built on them):

- ``kfold`` (repeated): :class:`KFoldSplitter`, scikit-learn's ``RepeatedKFold``;
- ``loo`` (alias ``leave-one-out``): :class:`LeaveOneOutSplitter`, ``LeaveOneOut``;
- ``group-kfold``: :class:`GroupKFoldSplitter`, ``GroupKFold(shuffle=True)`` per repeat;
- ``leave-one-group-out``: :class:`LeaveOneGroupOutSplitter`, ``LeaveOneGroupOut``;
- ``spatial-block``: :class:`SpatialBlockSplitter`, blocks from the coordinates
  (:mod:`refit.validate.spatial`) split as by :class:`GroupKFoldSplitter`.

The names live in :mod:`refit.select.schemes` (shared with recipes). A :class:`Scheme`
holds a scheme's settings as a recipe gives them; :func:`splitter_for` makes its splitter
and :func:`make_splits` runs it on a table, naming rows and columns in its errors. The
driver that fits and scores each fold is :mod:`refit.validate.crossval` (which re-exports
these names).

Calibration soils cluster by region and source, so random k-fold flatters a fit that has
learnt the clusters: grouped or spatially blocked folds estimate the error on a region the
fit has never seen (Roberts et al. 2017, Ecography 40:913).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from refit.models.inputs import as_frame, rows_text
from refit.errors import InvalidDataError, UsageError

from refit.select.schemes import (GROUPED, NEEDS_GROUP_COLUMN, SCHEMES,  # noqa: F401
                                  canonical_scheme)
from refit.validate.spatial import (BLOCKS_PER_FOLD, EARTH_RADIUS_KM,  # noqa: F401
                                   coordinates, project_km, spatial_blocks)


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
        object.__setattr__(self, "name", canonical_scheme(self.name))
        if self.name not in SCHEMES:
            raise UsageError(f"unknown validation scheme {self.name!r}; choose one of: "
                             + ", ".join(SCHEMES))
        _whole(self.folds, "folds", 2)
        _whole(self.repeats, "repeats", 1)
        _whole(self.seed, "seed", 0)
        if self.name in NEEDS_GROUP_COLUMN and not self.groups:
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


# ----------------------------------------------------------------------------- splitters
def _n_rows(X) -> int:
    if X is None:
        raise UsageError("X is needed to count the rows (a table or an array of rows)")
    shape = getattr(X, "shape", None)
    return int(shape[0]) if shape else len(X)


def _dummy(X) -> np.ndarray:
    return np.zeros((_n_rows(X), 1))


def _need_groups(groups, who: str) -> np.ndarray:
    if groups is None:
        raise UsageError(f"{who}.split needs groups = one group label per row")
    return np.asarray(groups)


class _Splitter:
    """The scikit-learn splitter protocol: settings in the constructor, then
    ``split(X, y=None, groups=None)`` yields ``(train_idx, test_idx)`` (positional row
    indices) and ``get_n_splits(X=None, y=None, groups=None)`` counts them."""

    _params: tuple = ()

    def __repr__(self) -> str:
        args = ", ".join(f"{k}={getattr(self, k)!r}" for k in self._params)
        return f"{type(self).__name__}({args})"


class KFoldSplitter(_Splitter):
    """Random k-fold, repeated with fresh folds: scikit-learn's ``RepeatedKFold``.

    Parameters
    ----------
    n_splits : int
        Folds per repeat (at least 2).
    n_repeats : int
        Repeats (at least 1); ``n_repeats=1`` gives the folds of
        ``KFold(n_splits, shuffle=True, random_state=random_state)``.
    random_state : int
        Seed; one generator runs across the repeats.
    """

    _params = ("n_splits", "n_repeats", "random_state")

    def __init__(self, n_splits: int = 5, *, n_repeats: int = 1, random_state: int = 0):
        self.n_splits = _whole(n_splits, "n_splits", 2)
        self.n_repeats = _whole(n_repeats, "n_repeats", 1)
        self.random_state = _whole(random_state, "random_state", 0)

    def split(self, X, y=None, groups=None):
        from sklearn.model_selection import RepeatedKFold

        it = RepeatedKFold(n_splits=self.n_splits, n_repeats=self.n_repeats,
                           random_state=self.random_state)
        yield from it.split(_dummy(X))

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        return self.n_splits * self.n_repeats


class LeaveOneOutSplitter(_Splitter):
    """Each row is the test set once: scikit-learn's ``LeaveOneOut``."""

    def split(self, X, y=None, groups=None):
        from sklearn.model_selection import LeaveOneOut

        yield from LeaveOneOut().split(_dummy(X))

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        return _n_rows(X)


class GroupKFoldSplitter(_Splitter):
    """Whole groups held out, groups shuffled into folds, repeated with fresh folds.

    Each repeat is scikit-learn's ``GroupKFold(n_splits, shuffle=True)`` drawing from one
    ``numpy.random.RandomState(random_state)`` across the repeats (as ``RepeatedKFold``
    repeats ``KFold``); ``n_repeats=1`` gives the folds of
    ``GroupKFold(n_splits, shuffle=True, random_state=random_state)``.
    """

    _params = ("n_splits", "n_repeats", "random_state")

    def __init__(self, n_splits: int = 5, *, n_repeats: int = 1, random_state: int = 0):
        self.n_splits = _whole(n_splits, "n_splits", 2)
        self.n_repeats = _whole(n_repeats, "n_repeats", 1)
        self.random_state = _whole(random_state, "random_state", 0)

    def split(self, X, y=None, groups=None):
        from sklearn.model_selection import GroupKFold

        groups = _need_groups(groups, type(self).__name__)
        rng = np.random.RandomState(self.random_state)
        dummy = _dummy(X)
        for _ in range(self.n_repeats):
            splitter = GroupKFold(n_splits=self.n_splits, shuffle=True, random_state=rng)
            yield from splitter.split(dummy, groups=groups)

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        return self.n_splits * self.n_repeats


class LeaveOneGroupOutSplitter(_Splitter):
    """Each group is the test set once: scikit-learn's ``LeaveOneGroupOut``."""

    def split(self, X, y=None, groups=None):
        from sklearn.model_selection import LeaveOneGroupOut

        groups = _need_groups(groups, type(self).__name__)
        yield from LeaveOneGroupOut().split(_dummy(X), groups=groups)

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        return int(len(np.unique(_need_groups(groups, type(self).__name__))))


class SpatialBlockSplitter(_Splitter):
    """Spatial blocks held out whole: blocks from the coordinates, then group k-fold.

    Parameters
    ----------
    n_splits, n_repeats, random_state
        As :class:`GroupKFoldSplitter`, which splits the blocks.
    block_km : float, optional
        Side of square grid cells [km]; None: k-means blocks
        (:data:`BLOCKS_PER_FOLD` per fold), see :func:`spatial_blocks`.

    Notes
    -----
    ``X`` is a table with ``latitude`` and ``longitude`` columns [decimal degrees] or an
    array of rows ``(latitude, longitude)``. ``groups``, when given, are taken as the
    blocks (e.g. the codes :meth:`blocks` returned, so k-means runs once).
    """

    _params = ("n_splits", "n_repeats", "block_km", "random_state")

    def __init__(self, n_splits: int = 5, *, n_repeats: int = 1, block_km=None,
                 random_state: int = 0):
        self.n_splits = _whole(n_splits, "n_splits", 2)
        self.n_repeats = _whole(n_repeats, "n_repeats", 1)
        self.random_state = _whole(random_state, "random_state", 0)
        self.block_km = block_km

    def blocks(self, X):
        """Block codes of the rows and the blocks' description (see :func:`spatial_blocks`)."""
        if hasattr(X, "columns"):
            lat, lon = X["latitude"], X["longitude"]
        else:
            xy = np.asarray(X, dtype=float)
            lat, lon = xy[:, 0], xy[:, 1]
        return spatial_blocks(lat, lon, block_km=self.block_km,
                              n_blocks=BLOCKS_PER_FOLD * self.n_splits,
                              seed=self.random_state)

    def split(self, X, y=None, groups=None):
        codes = self.blocks(X)[0] if groups is None else groups
        yield from GroupKFoldSplitter(self.n_splits, n_repeats=self.n_repeats,
                                      random_state=self.random_state).split(X, groups=codes)

    def get_n_splits(self, X=None, y=None, groups=None) -> int:
        return self.n_splits * self.n_repeats


def splitter_for(scheme: Scheme) -> _Splitter:
    """The splitter object of a :class:`Scheme` (its settings; no data)."""
    s = scheme
    if s.name == "kfold":
        return KFoldSplitter(s.folds, n_repeats=s.repeats, random_state=s.seed)
    if s.name == "loo":
        return LeaveOneOutSplitter()
    if s.name == "group-kfold":
        return GroupKFoldSplitter(s.folds, n_repeats=s.repeats, random_state=s.seed)
    if s.name == "leave-one-group-out":
        return LeaveOneGroupOutSplitter()
    return SpatialBlockSplitter(s.folds, n_repeats=s.repeats, block_km=s.block_km,
                                random_state=s.seed)


# ----------------------------------------------------------------------------- make_splits
def _collect(pairs, folds_per_repeat: int | None) -> list[Split]:
    out = []
    for i, (train, test) in enumerate(pairs):
        r, k = (0, i) if folds_per_repeat is None else divmod(i, folds_per_repeat)
        out.append(Split(r, k, np.asarray(train, dtype=np.int64),
                         np.asarray(test, dtype=np.int64)))
    return out


def _loo_details(n: int, s: Scheme) -> dict:
    out = {"scheme": s.name, "n_rows": n, "split_seed": s.seed, "folds": n, "repeats": 1}
    if s.repeats > 1:
        out["note"] = "repeats ignored: leave-one-out gives the same folds every time"
    return out


def _group_codes_for(frame, s: Scheme, splitter, labels, kind, details: dict):
    """Group codes of the rows (a column's groups or spatial blocks), checked."""
    if s.name == "spatial-block":
        lat, lon = coordinates(frame, labels, kind)
        codes, info = splitter.blocks(np.column_stack([lat, lon]))
        details.update(info)
        what = (f"a grid of {s.block_km:g} km" if s.block_km is not None
                else "the coordinates (k-means blocks)")
        _check_groups(info["n_blocks"], s.folds, what, s.name)
        return codes
    codes, names = group_codes(frame, s.groups, labels, kind)
    _check_groups(len(names), None if s.name == "leave-one-group-out" else s.folds,
                  f"group column {s.groups!r}", s.name)
    details["groups"] = s.groups
    return codes


def make_splits(frame, scheme: Scheme) -> Splits:
    """Train/test splits of a table's rows under a scheme.

    The scheme's splitter (:func:`splitter_for`) is run through the scikit-learn protocol
    (``split(X, y, groups)``); this function adds the checks that name rows and columns
    and numbers each split by repeat and fold.

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
    if not isinstance(scheme, Scheme):
        raise UsageError(f"scheme must be a refit.validate.crossval.Scheme; got "
                         f"{type(scheme).__name__}")
    frame, labels, kind = as_frame(frame, dicts=False)
    n, s = len(frame), scheme
    details = {"scheme": s.name, "n_rows": n, "split_seed": s.seed}
    dummy = np.zeros((n, 1))
    need = {"kfold": s.folds, "loo": 3}.get(s.name, 0)
    if n < need:
        raise InvalidDataError(f"scheme {s.name!r}" + (f" with {s.folds} folds" if
                               s.name == "kfold" else "") + f" needs at least {need} rows; "
                               f"the table has {n}")
    splitter = splitter_for(s)
    if s.name == "kfold":
        details.update(folds=s.folds, repeats=s.repeats)
        return Splits(_collect(splitter.split(dummy), s.folds), details)
    if s.name == "loo":
        return Splits(_collect(splitter.split(dummy), None), _loo_details(n, s))
    codes = _group_codes_for(frame, s, splitter, labels, kind, details)
    details["n_groups"] = int(codes.max() + 1)
    if s.name == "leave-one-group-out":
        details.update(folds=details["n_groups"], repeats=1)
        if s.repeats > 1:
            details["note"] = "repeats ignored: leave-one-group-out gives the same folds"
        return Splits(_collect(splitter.split(dummy, groups=codes), None), details)
    details.update(folds=s.folds, repeats=s.repeats)
    return Splits(_collect(splitter.split(dummy, groups=codes), s.folds), details)
