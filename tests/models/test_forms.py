"""Forms: term names, design matrices and argument checks."""

from __future__ import annotations

import numpy as np
import pytest

from refit.errors import UsageError
from refit.models.forms import FORMS, duan_smearing, make_form


def test_term_names_follow_the_coefficient_file_contract():
    # DESIGN.md coefficient-file contract: intercept, bk_depth_cm, bk_depth_cm^2
    assert make_form("quadratic", "bk_depth_cm").terms == [
        "intercept", "bk_depth_cm", "bk_depth_cm^2"]
    assert make_form("linear", ["a", "b"]).terms == ["intercept", "a", "b"]
    assert make_form("linear", "a", through_origin=True).terms == ["a"]
    assert make_form("polynomial", ["a", "b"], degree=3).terms == [
        "intercept", "a", "a^2", "a^3", "b", "b^2", "b^3"]
    assert make_form("exponential", "a").log_response


def test_design_matches_numpy_vander():
    # numpy.vander (general-purpose reference) gives the same powers, increasing order
    x = np.array([0.5, 1.0, 2.0, 3.5])
    X = make_form("polynomial", "x", degree=4).design(x)
    np.testing.assert_array_equal(X, np.vander(x, 5, increasing=True))
    Xo = make_form("quadratic", "x", through_origin=True).design(x)
    np.testing.assert_array_equal(Xo, np.vander(x, 3, increasing=True)[:, 1:])


def test_two_predictors_quadratic_has_powers_per_predictor():
    x = np.array([[1.0, 10.0], [2.0, 20.0], [3.0, 30.0]])
    X = make_form("quadratic", ["a", "b"]).design(x)
    np.testing.assert_array_equal(X[1], [1.0, 2.0, 4.0, 20.0, 400.0])
    assert make_form("quadratic", ["a", "b"]).min_rows == 6


@pytest.mark.parametrize("kwargs, pattern", [
    ({"form": "cubic"}, "choose one of: " + ", ".join(FORMS)),
    ({"form": "polynomial"}, "needs degree"),
    ({"form": "polynomial", "degree": 0}, "needs degree"),
    ({"form": "quadratic", "degree": 3}, "use form='polynomial'"),
    ({"form": "exponential", "through_origin": True}, "not to the exponential"),
])
def test_bad_form_arguments_are_usage_errors(kwargs, pattern):
    form = kwargs.pop("form")
    with pytest.raises(UsageError, match=pattern):
        make_form(form, "x", **kwargs)
    assert issubclass(UsageError, ValueError)


def test_duan_smearing_is_the_mean_of_exponentiated_residuals():
    # Duan (1983, JASA 78:605) smearing: mean(exp(e)); for normal residuals it tends to
    # exp(sigma^2 / 2) (lognormal mean, standard result). Seeded draw, 200,000 values:
    # the Monte Carlo standard error of the mean is about 0.0003 here.
    rng = np.random.default_rng(20240501)
    e = rng.normal(0.0, 0.3, 200_000)
    assert duan_smearing(e) == pytest.approx(np.exp(0.3 ** 2 / 2), abs=0.0015)
    assert duan_smearing(np.zeros(5)) == 1.0
