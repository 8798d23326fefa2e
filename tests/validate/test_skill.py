"""Skill measures checked against scikit-learn's metric functions and a hand-worked example."""

from __future__ import annotations

import math

import numpy as np
import pytest
from sklearn import metrics

from refit.validate import skill
from refit.errors import InvalidDataError, UsageError


@pytest.fixture
def pairs():
    rng = np.random.default_rng(7)
    obs = rng.normal(600.0, 150.0, 257)
    pred = obs + rng.normal(12.0, 80.0, 257)
    return obs, pred


def test_point_metrics_match_sklearn(pairs):
    # Reference: sklearn.metrics (mean_squared_error, mean_absolute_error, r2_score)
    obs, pred = pairs
    assert skill.rmsep(obs, pred) == pytest.approx(
        math.sqrt(metrics.mean_squared_error(obs, pred)), rel=1e-12)
    assert skill.mae(obs, pred) == pytest.approx(
        metrics.mean_absolute_error(obs, pred), rel=1e-12)
    assert skill.r2_prediction(obs, pred) == pytest.approx(
        metrics.r2_score(obs, pred), rel=1e-12)


def test_bias_sign_and_value(pairs):
    # Reference: numpy mean of pred - obs (definition); predictions that run high give bias > 0
    obs, pred = pairs
    assert skill.bias(obs, pred) == pytest.approx(np.mean(pred - obs), rel=1e-12)
    assert skill.bias([1.0, 2.0], [2.0, 4.0]) == pytest.approx(1.5)
    assert skill.bias([2.0, 4.0], [1.0, 2.0]) == pytest.approx(-1.5)


def test_r2_prediction_negative_when_worse_than_mean():
    # Reference: sklearn.metrics.r2_score allows negative values for bad predictions
    obs, pred = np.array([1.0, 2.0, 3.0]), np.array([3.0, 2.0, 1.0])
    assert skill.r2_prediction(obs, pred) == pytest.approx(metrics.r2_score(obs, pred))
    assert skill.r2_prediction(obs, pred) == pytest.approx(-3.0)


def test_interval_score_hand_worked():
    # Gneiting & Raftery (2007), JASA 102:359, eq. (43):
    # IS = (u - l) + (2/alpha)(l - y)1{y < l} + (2/alpha)(y - u)1{y > u}.
    # Worked by hand with alpha = 0.1 (90% intervals), l = 2, u = 6, 2/alpha = 20:
    #   y = 4   inside          -> 4
    #   y = 1   1 below l       -> 4 + 20 * 1   = 24
    #   y = 7.5 1.5 above u     -> 4 + 20 * 1.5 = 34
    #   mean = (4 + 24 + 34) / 3 = 62 / 3
    obs = [4.0, 1.0, 7.5]
    lower, upper = [2.0, 2.0, 2.0], [6.0, 6.0, 6.0]
    assert skill.interval_score(obs, lower, upper, 0.1) == pytest.approx(62.0 / 3.0, rel=1e-14)
    assert skill.interval_score([4.0], [2.0], [6.0], 0.1) == pytest.approx(4.0)
    assert skill.interval_score([1.0], [2.0], [6.0], 0.1) == pytest.approx(24.0)
    assert skill.interval_score([7.5], [2.0], [6.0], 0.1) == pytest.approx(34.0)
    # on the limits counts as inside (no penalty)
    assert skill.interval_score([2.0, 6.0], [2.0, 2.0], [6.0, 6.0], 0.1) == pytest.approx(4.0)


def test_interval_score_equals_two_pinball_losses(pairs):
    # Gneiting & Raftery (2007), section on quantile and interval scores (section number
    # from memory): (alpha/2) IS is the sum of the quantile (pinball)
    # losses of l at level alpha/2 and u at 1 - alpha/2. Reference implementation:
    # sklearn.metrics.mean_pinball_loss.
    obs, pred = pairs
    alpha = 0.05
    lower, upper = pred - 120.0, pred + 90.0
    expected = (metrics.mean_pinball_loss(obs, lower, alpha=alpha / 2)
                + metrics.mean_pinball_loss(obs, upper, alpha=1 - alpha / 2)) * 2 / alpha
    assert skill.interval_score(obs, lower, upper, alpha) == pytest.approx(expected, rel=1e-12)


def test_coverage_and_width_hand_worked():
    # By hand: rows 1 and 3 inside (row 3 on its upper limit), row 2 outside -> 2/3;
    # widths 2, 4, 6 -> mean 4
    obs = [1.0, 5.0, 6.0]
    lower, upper = [0.0, 0.0, 0.0], [2.0, 4.0, 6.0]
    assert skill.coverage(obs, lower, upper) == pytest.approx(2.0 / 3.0)
    assert skill.mean_width(lower, upper) == pytest.approx(4.0)


def test_skill_scores_keys_and_values(pairs):
    obs, pred = pairs
    lower, upper = pred - 160.0, pred + 160.0
    out = skill.skill_scores(obs, pred, lower, upper, 0.95)
    assert {"rmsep", "mae", "bias", "r2_prediction", "coverage", "mean_width",
            "interval_score", "n"} <= set(out)
    # Reference: sklearn.metrics for the point measures; definitions for the rest
    assert out["rmsep"] == pytest.approx(math.sqrt(metrics.mean_squared_error(obs, pred)))
    assert out["r2_prediction"] == pytest.approx(metrics.r2_score(obs, pred))
    assert out["coverage"] == pytest.approx(np.mean(np.abs(obs - pred) <= 160.0))
    assert out["mean_width"] == pytest.approx(320.0)
    assert out["n"] == 257 and out["n_no_estimate"] == 0 and out["n_unbounded"] == 0


def test_skill_scores_missing_estimates_and_unbounded_intervals():
    obs = np.array([1.0, 2.0, 3.0, 4.0])
    pred = np.array([1.5, np.nan, 3.0, 4.0])
    lower = np.array([0.0, np.nan, -np.inf, 3.0])
    upper = np.array([2.0, np.nan, np.inf, 5.0])
    out = skill.skill_scores(obs, pred, lower, upper, 0.9)
    # the row without an estimate is left out and counted
    assert out["n"] == 3 and out["n_no_estimate"] == 1
    assert out["rmsep"] == pytest.approx(math.sqrt(0.25 / 3))
    # an unbounded interval covers but makes width and score infinite
    assert out["n_unbounded"] == 1
    assert out["coverage"] == pytest.approx(1.0)
    assert math.isinf(out["mean_width"]) and math.isinf(out["interval_score"])


def test_skill_scores_without_intervals():
    out = skill.skill_scores([1.0, 2.0], [1.0, 3.0], [np.nan] * 2, [np.nan] * 2, 0.95)
    assert out["rmsep"] == pytest.approx(math.sqrt(0.5))
    assert math.isnan(out["coverage"]) and math.isnan(out["interval_score"])


def test_bad_input_messages():
    with pytest.raises(InvalidDataError, match="same rows"):
        skill.rmsep([1.0, 2.0], [1.0])
    with pytest.raises(InvalidDataError, match="no rows"):
        skill.mae([], [])
    with pytest.raises(UsageError, match="alpha"):
        skill.interval_score([1.0], [0.0], [2.0], 1.5)
    with pytest.raises(UsageError, match="level"):
        skill.skill_scores([1.0], [1.0], [0.0], [2.0], 95)


def test_coverage_upper_bound_is_the_exact_one_sided_bound():
    # scipy.stats.binomtest (reference library): the two-sided 90 % Clopper-Pearson interval
    # has the one-sided 95 % upper bound as its upper end
    from scipy.stats import binomtest

    from refit.validate.skill import coverage_upper_bound, least_passing_coverage

    for k, n in ((170, 187), (91, 100), (9, 10), (0, 5)):
        ref = binomtest(k, n).proportion_ci(confidence_level=0.90, method="exact").high
        assert coverage_upper_bound(k, n) == pytest.approx(ref, rel=1e-12)
    assert coverage_upper_bound(50, 50) == 1.0
    # 91 of 100 soils covered is the least whole count that passes 95 % (binomtest in
    # test_candidates.py); the threshold itself lies between 90 and 91 of 100
    assert 0.90 < least_passing_coverage(0.95, 100) <= 0.91
    c = least_passing_coverage(0.95, 187)
    assert coverage_upper_bound(c * 187, 187) == pytest.approx(0.95, abs=1e-9)
    with pytest.raises(InvalidDataError):
        coverage_upper_bound(11, 10)
