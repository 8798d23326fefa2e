"""Group-level jackknife+ and CV+ against a brute-force leave-one-group-out implementation
written plainly here (numpy.linalg.lstsq refits; weighted quantiles by sorting), following
Barber, Candes, Ramdas & Tibshirani (2021, Ann. Statist. 49:486) for the jackknife+ limits
and Dunn, Wasserman & Ramdas (2023, JASA) for the two-layer weights (each group the same
total weight 1/(G + 1), shared by its soils). Data: seeded invented clustered sets.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np
import pytest

from refit.errors import InvalidDataError, UsageError
from refit.models.intervals.group_conformal import group_cv_plus, group_jackknife_plus


def clustered(seed, n_groups=25, sizes=(3, 9)):
    rng = np.random.default_rng(seed)
    m = rng.integers(sizes[0], sizes[1] + 1, n_groups)
    g = np.repeat(np.arange(n_groups), m)
    x = rng.uniform(0, 100, g.size)
    y = 200 + 4 * x + rng.normal(0, 30, n_groups)[g] + rng.normal(0, 25, g.size)
    return np.column_stack([np.ones_like(x), x]), y, np.array([f"g{v}" for v in g])


def brute(X, y, groups, x0, alpha, fold_of=None):
    labels = np.unique(groups)
    G = labels.size
    fold_of = fold_of if fold_of is not None else {lab: i for i, lab in enumerate(labels)}
    hi_vals, lo_vals, w = [], [], []
    for lab in labels:
        rows = groups == lab
        out = np.array([fold_of[v] == fold_of[lab] for v in groups])
        b = np.linalg.lstsq(X[~out], y[~out], rcond=None)[0]
        r = np.abs(y[rows] - X[rows] @ b)
        for ri in r:
            hi_vals.append(x0 @ b + ri)
            lo_vals.append(x0 @ b - ri)
            w.append(1.0 / ((G + 1) * rows.sum()))
    hi_vals, lo_vals, w = np.array(hi_vals).T, np.array(lo_vals).T, np.array(w)
    upper, lower = [], []
    for j in range(x0.shape[0]):
        o = np.argsort(hi_vals[j])
        c = np.cumsum(w[o])
        k = np.nonzero(c >= 1 - alpha - 1e-12)[0]
        upper.append(hi_vals[j][o][k[0]] if k.size else np.inf)
        o = np.argsort(-lo_vals[j])            # largest first
        c = np.cumsum(w[o])
        k = np.nonzero(c >= 1 - alpha - 1e-12)[0]
        lower.append(lo_vals[j][o][k[0]] if k.size else -np.inf)
    return np.array(lower), np.array(upper)


@pytest.mark.parametrize("seed,level", [(1, 0.95), (2, 0.9), (3, 0.8)])
def test_group_jackknife_plus_matches_brute_force(seed, level):
    X, y, g = clustered(seed)
    x0 = np.column_stack([np.ones(5), [0.0, 20.0, 50.0, 90.0, 130.0]])
    pi = group_jackknife_plus(X, y, g, x0, level=level)
    lo, hi = brute(X, y, g, x0, 1 - level)
    np.testing.assert_allclose(pi.lower, lo, rtol=0, atol=1e-10 * np.abs(lo).max())
    np.testing.assert_allclose(pi.upper, hi, rtol=0, atol=1e-10 * np.abs(hi).max())
    assert not pi.details["unbounded"] and pi.details["reason"] is None
    assert np.all(pi.lower < pi.estimate) and np.all(pi.estimate < pi.upper)


def test_group_jackknife_plus_any_fit_callable_matches_brute_force():
    X, y, g = clustered(4)
    x0 = np.column_stack([np.ones(3), [10.0, 50.0, 95.0]])
    lstsq = lambda A, b: np.linalg.lstsq(A, b, rcond=None)[0]  # noqa: E731
    pi = group_jackknife_plus(X, y, g, x0, level=0.9, fit=lstsq)
    fast = group_jackknife_plus(X, y, g, x0, level=0.9)
    lo, hi = brute(X, y, g, x0, 0.1)
    np.testing.assert_allclose(pi.lower, lo, atol=1e-10 * np.abs(lo).max(), rtol=0)
    np.testing.assert_allclose(fast.upper, hi, atol=1e-10 * np.abs(hi).max(), rtol=0)


def test_group_cv_plus_matches_brute_force():
    X, y, g = clustered(5)
    x0 = np.column_stack([np.ones(3), [5.0, 45.0, 99.0]])
    pi = group_cv_plus(X, y, g, x0, level=0.9, folds=5, seed=3)
    labels = np.unique(g)
    fold_of = dict(zip(labels, pi.details["fold_of_group"]))
    lo, hi = brute(X, y, g, x0, 0.1, fold_of=fold_of)
    np.testing.assert_allclose(pi.lower, lo, atol=1e-10 * np.abs(lo).max(), rtol=0)
    np.testing.assert_allclose(pi.upper, hi, atol=1e-10 * np.abs(hi).max(), rtol=0)
    sizes = np.bincount(pi.details["fold_of_group"])
    assert sizes.max() - sizes.min() <= 1


def test_one_soil_per_group_is_ordinary_jackknife_plus():
    # with singleton groups the two-layer weights reduce to the jackknife+ ranks
    # (Barber et al. 2021); refit's own jackknife_plus is checked elsewhere by brute force
    from refit.models.intervals import jackknife_plus

    rng = np.random.default_rng(8)
    x = rng.uniform(0, 10, 40)
    X = np.column_stack([np.ones_like(x), x])
    y = 1 + 2 * x + rng.normal(0, 1, 40)
    x0 = np.column_stack([np.ones(3), [1.0, 5.0, 9.0]])
    a = group_jackknife_plus(X, y, np.arange(40), x0, level=0.9)
    b = jackknife_plus(X, y, x0, level=0.9)
    np.testing.assert_allclose(a.lower, b.lower, rtol=1e-10)
    np.testing.assert_allclose(a.upper, b.upper, rtol=1e-10)


@pytest.mark.parametrize("n_groups", [5, 10, 18])
def test_too_few_groups_for_95_percent_is_unbounded_with_reason(n_groups):
    # 95 %: the finite weights G/(G+1) must reach 0.95, so G >= 19 (ceil(0.95/0.05))
    X, y, g = clustered(6, n_groups=n_groups)
    x0 = np.column_stack([np.ones(2), [20.0, 80.0]])
    pi = group_jackknife_plus(X, y, g, x0, level=0.95)
    assert np.all(np.isinf(pi.lower)) and np.all(np.isinf(pi.upper))
    assert pi.details["unbounded"]
    assert f"{n_groups} groups are too few" in pi.details["reason"]
    assert "at least 19" in pi.details["reason"]
    pi = group_cv_plus(X, y, g, x0, level=0.95, folds=5)
    assert pi.details["unbounded"] and np.all(np.isinf(pi.upper))
    assert np.all(np.isfinite(group_jackknife_plus(X, y, g, x0, level=0.8).upper))


def test_bad_groups():
    X, y, g = clustered(7)
    x0 = np.array([[1.0, 50.0]])
    with pytest.raises(InvalidDataError, match="at least 2 groups"):
        group_jackknife_plus(X, y, np.zeros(len(y)), x0)
    g2 = g.astype(object)
    g2[3] = None
    with pytest.raises(InvalidDataError, match="no group label"):
        group_jackknife_plus(X, y, g2, x0)
    with pytest.raises(UsageError, match="folds"):
        group_cv_plus(X, y, g, x0, folds=1)


def test_group_whose_removal_leaves_a_rank_deficient_design():
    # one group holds every soil with x != 0: leaving it out leaves no slope
    x = np.r_[np.zeros(10), np.linspace(1, 5, 5)]
    X = np.column_stack([np.ones_like(x), x])
    y = np.r_[np.arange(10.0), np.arange(5.0)]
    g = np.r_[np.repeat(np.arange(5), 2), np.full(5, 9)]
    with pytest.raises(InvalidDataError, match="rank-deficient"):
        group_jackknife_plus(X, y, g, np.array([[1.0, 2.0]]))


def test_coverage_for_soils_of_unseen_groups_reaches_nominal():
    # seeded simulation (invented process of benchmarks/newsource.py, 25 sources so that a
    # 90 % group-level interval is bounded): coverage of soils of NEW sources, computed
    # exactly from the known predictive distribution, averaged over calibration draws
    sys.path.insert(0, str(Path(__file__).resolve().parents[2] / "benchmarks"))
    import newsource as ns

    rng = np.random.default_rng(20251)
    cover = []
    for _ in range(40):
        x, y, codes = ns.draw_sources(rng, 25)
        x0 = ns.new_source_depths(rng)
        X = np.column_stack([np.ones_like(x), x])
        pi = group_jackknife_plus(X, y, codes, np.column_stack([np.ones_like(x0), x0]),
                                  level=0.9)
        cover.append(ns.exact_coverage(pi.lower, pi.upper, x0))
    assert np.mean(cover) >= 0.90
