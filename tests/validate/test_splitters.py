"""Splitters in the scikit-learn protocol: properties every splitter must have, the same
folds as the scikit-learn splitter each one wraps, and use by scikit-learn itself.

References: scikit-learn's ``sklearn.model_selection`` splitters (``KFold``,
``RepeatedKFold``, ``LeaveOneOut``, ``GroupKFold``, ``LeaveOneGroupOut``) computed in the
test; the properties are those scikit-learn's own splitter tests check (no overlap, every
row tested once, no group on both sides, reproducible with a seed). Rows are seeded
synthetic data (a test fixture, not real soils).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn import model_selection as ms

from refit.errors import UsageError
from refit.validate.spatial import project_km
from refit.validate.splitters import (GroupKFoldSplitter, KFoldSplitter,
                                      LeaveOneGroupOutSplitter, LeaveOneOutSplitter, Scheme,
                                      SpatialBlockSplitter, make_splits, splitter_for)


def _rows(n, seed, n_groups=8):
    rng = np.random.default_rng(seed)
    groups = rng.integers(0, n_groups, n)
    groups[:n_groups] = np.arange(n_groups)  # every group present
    return pd.DataFrame({"g": groups, "latitude": rng.uniform(30.0, 42.0, n),
                         "longitude": rng.uniform(-112.0, -98.0, n),
                         "x": rng.uniform(10, 150, n), "y": rng.normal(size=n)})


def _pairs(splitter, X, groups=None):
    return [(np.asarray(tr), np.asarray(te)) for tr, te in splitter.split(X, groups=groups)]


def _check(pairs, n, per_repeat, groups=None):
    """No overlap, train + test = every row, each row tested once per repeat, no group on
    both sides."""
    for r in range(0, len(pairs), per_repeat):
        tested = np.concatenate([te for _, te in pairs[r:r + per_repeat]])
        assert np.array_equal(np.sort(tested), np.arange(n))
    for tr, te in pairs:
        assert len(np.intersect1d(tr, te)) == 0 and len(tr) + len(te) == n
        if groups is not None:
            assert not set(groups[tr]) & set(groups[te])


@settings(max_examples=30, deadline=None)
@given(n=st.integers(10, 60), folds=st.integers(2, 5), repeats=st.integers(1, 3),
       seed=st.integers(0, 2**31 - 1))
def test_every_splitter_keeps_the_protocol_properties(n, folds, repeats, seed):
    X = _rows(n, seed % 1000)
    g = X["g"].to_numpy()
    for splitter, per_repeat, groups in (
            (KFoldSplitter(folds, n_repeats=repeats, random_state=seed), folds, None),
            (LeaveOneOutSplitter(), n, None),
            (GroupKFoldSplitter(folds, n_repeats=repeats, random_state=seed), folds, g),
            (LeaveOneGroupOutSplitter(), len(np.unique(g)), g)):
        pairs = _pairs(splitter, X, groups)
        assert len(pairs) == splitter.get_n_splits(X, groups=groups)
        _check(pairs, n, per_repeat, groups)
        again = _pairs(splitter, X, groups)  # reproducible with the seed
        assert all(np.array_equal(a[1], b[1]) for a, b in zip(pairs, again))


@pytest.mark.parametrize("seed", [0, 7, 20261201])
def test_the_same_folds_as_scikit_learn(seed):
    X = _rows(50, seed)
    g = X["g"].to_numpy()
    same = [  # (refit splitter, the scikit-learn splitter it equals, groups)
        (KFoldSplitter(5, random_state=seed), ms.KFold(5, shuffle=True, random_state=seed),
         None),
        (KFoldSplitter(4, n_repeats=3, random_state=seed),
         ms.RepeatedKFold(n_splits=4, n_repeats=3, random_state=seed), None),
        (LeaveOneOutSplitter(), ms.LeaveOneOut(), None),
        (GroupKFoldSplitter(4, random_state=seed),
         ms.GroupKFold(4, shuffle=True, random_state=seed), g),
        (LeaveOneGroupOutSplitter(), ms.LeaveOneGroupOut(), g)]
    for ours, ref, groups in same:
        got, want = _pairs(ours, X, groups), list(ref.split(X, groups=groups))
        assert len(got) == len(want) == ref.get_n_splits(X, groups=groups), ours
        for (a_tr, a_te), (b_tr, b_te) in zip(got, want):
            assert np.array_equal(a_tr, b_tr) and np.array_equal(a_te, b_te), ours


def test_repeated_group_kfold_draws_fresh_folds_from_one_generator():
    # Reference: GroupKFold(shuffle=True) with one numpy RandomState across the repeats,
    # the way scikit-learn's RepeatedKFold repeats KFold
    X = _rows(60, 3, n_groups=12)
    g = X["g"].to_numpy()
    got = _pairs(GroupKFoldSplitter(3, n_repeats=2, random_state=5), X, g)
    rng = np.random.RandomState(5)
    want = [p for _ in range(2)
            for p in ms.GroupKFold(3, shuffle=True, random_state=rng).split(X, groups=g)]
    assert all(np.array_equal(a[1], b[1]) for a, b in zip(got, want))
    assert {frozenset(te) for _, te in got[:3]} != {frozenset(te) for _, te in got[3:]}


def test_spatial_blocks_split_as_groups_of_grid_cells():
    # The grid cells are recomputed here from the projection; the folds must equal
    # scikit-learn's GroupKFold(shuffle=True) on those cells
    X = _rows(200, 4)
    xy = project_km(X["latitude"], X["longitude"])
    cells = np.floor((xy - xy.min(axis=0)) / 250.0)
    cell_id = np.unique(cells, axis=0, return_inverse=True)[1].ravel()
    sp = SpatialBlockSplitter(4, block_km=250.0, random_state=2)
    got = _pairs(sp, X)
    want = list(ms.GroupKFold(4, shuffle=True, random_state=2).split(X, groups=cell_id))
    assert len(got) == sp.get_n_splits() == 4
    assert all(np.array_equal(a[1], b[1]) for a, b in zip(got, want))
    _check(got, 200, 4, cell_id)
    # an array of (latitude, longitude) rows gives the same folds
    arr = X[["latitude", "longitude"]].to_numpy()
    assert all(np.array_equal(a[1], b[1]) for a, b in zip(_pairs(sp, arr), got))


def test_scikit_learn_uses_the_splitters_as_its_own():
    # sklearn.model_selection.cross_val_score accepts any object with split/get_n_splits:
    # with our splitter it must give the scores it gives with the splitter we wrap
    from sklearn.linear_model import LinearRegression

    X = _rows(40, 1)
    feats, y, g = X[["x"]], X["y"], X["g"]
    for ours, ref, groups in ((KFoldSplitter(5, n_repeats=2, random_state=3),
                               ms.RepeatedKFold(n_splits=5, n_repeats=2, random_state=3), None),
                              (LeaveOneGroupOutSplitter(), ms.LeaveOneGroupOut(), g)):
        a = ms.cross_val_score(LinearRegression(), feats, y, cv=ours, groups=groups)
        b = ms.cross_val_score(LinearRegression(), feats, y, cv=ref, groups=groups)
        np.testing.assert_array_equal(a, b)


def test_make_splits_runs_the_schemes_splitter():
    X = _rows(45, 2)
    scheme = Scheme("group-kfold", folds=3, repeats=2, groups="g", seed=11)
    assert repr(splitter_for(scheme)) == \
        "GroupKFoldSplitter(n_splits=3, n_repeats=2, random_state=11)"
    splits = make_splits(X, scheme)
    pairs = _pairs(splitter_for(scheme), X, X["g"].to_numpy())
    assert [(s.repeat, s.fold) for s in splits] == [(r, k) for r in range(2) for k in range(3)]
    assert all(np.array_equal(s.test_idx, te) for s, (_, te) in zip(splits, pairs))
    assert isinstance(splitter_for(Scheme("leave-one-out")), LeaveOneOutSplitter)
    assert Scheme("leave-one-out").name == "loo"


@pytest.mark.parametrize("make, words", [
    (lambda: KFoldSplitter(1), "n_splits must be a whole number of at least 2"),
    (lambda: GroupKFoldSplitter(3, n_repeats=0), "n_repeats must be"),
    (lambda: KFoldSplitter(3, random_state=-1), "random_state must be"),
    (lambda: list(GroupKFoldSplitter(2).split(np.zeros((6, 1)))), "needs groups"),
    (lambda: LeaveOneGroupOutSplitter().get_n_splits(), "needs groups"),
    (lambda: LeaveOneOutSplitter().get_n_splits(), "X is needed"),
])
def test_bad_settings_are_usage_errors(make, words):
    with pytest.raises(UsageError, match=words):
        make()
