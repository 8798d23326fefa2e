"""The least-squares solver against the NIST StRD linear regression datasets.

Source of every certified number: NIST Statistical Reference Datasets, linear least
squares (public domain), https://www.itl.nist.gov/div898/strd/lls/lls.shtml; the files in
tests/data/nist/ are byte copies with their certified headers. The certified values are
parsed from each file's header here (never retyped). Accuracy is judged by the log relative
error LRE = -log10(|estimate - certified| / |certified|) (McCullough 1998, "Assessing the
reliability of statistical software", The American Statistician 52:358); we require at
least 10 digits, as the issue asks.
"""

from __future__ import annotations

import re
from pathlib import Path

import numpy as np
import pytest

from refit.errors import InvalidDataError
from refit.models.lsq import leverages, solve_lsq

NIST = Path(__file__).resolve().parents[1] / "data" / "nist"
MIN_LRE = 10.0


def parse_strd(name: str) -> dict:
    """Certified values and data of one StRD file, read from its own header."""
    lines = (NIST / f"{name}.dat").read_text().splitlines()
    first, last = map(int, re.search(r"Data\s+\(lines (\d+) to (\d+)\)",
                                     "\n".join(lines[:10])).groups())
    cert = {"coef": {}, "sd": {}}
    for line in lines[:first - 1]:
        m = re.match(r"\s+B(\d+)\s+(\S+)\s+(\S+)\s*$", line)
        if m:
            cert["coef"][int(m[1])] = float(m[2])
            cert["sd"][int(m[1])] = float(m[3])
        m = re.match(r"\s+Standard Deviation\s+(\S+)\s*$", line)
        if m:
            cert["resid_sd"] = float(m[1])
        m = re.match(r"\s+R-Squared\s+(\S+)\s*$", line)
        if m:
            cert["r2"] = float(m[1])
    data = np.array([[float(v) for v in ln.split()] for ln in lines[first - 1:last]])
    n_obs = int(re.search(r"(\d+) Observations", "\n".join(lines[:30]))[1])
    assert data.shape[0] == n_obs
    return {"y": data[:, 0], "x": data[:, 1:], **cert}


def lre(est: float, cert: float) -> float:
    """Log relative error (McCullough 1998); 15+ when the two agree to the last bit."""
    if est == cert:
        return 15.0
    return float(-np.log10(abs(est - cert) / abs(cert)))


def design(name: str, d: dict) -> tuple[np.ndarray, bool]:
    x = d["x"]
    if name == "Pontius":  # model: y = B0 + B1 x + B2 x^2
        cols = [np.ones(len(x)), x[:, 0], x[:, 0] ** 2]
    elif name == "NoInt1":  # model: y = B1 x (no intercept)
        return x[:, :1].copy(), False
    else:  # Norris: B0 + B1 x; Longley: B0 + B1 x1 + ... + B6 x6
        cols = [np.ones(len(x))] + [x[:, j] for j in range(x.shape[1])]
    return np.column_stack(cols), True


def lres(name: str) -> dict[str, float]:
    d = parse_strd(name)
    X, intercept = design(name, d)
    res = solve_lsq(X, d["y"], intercept=intercept)
    keys = sorted(d["coef"])
    out = {}
    for j, k in enumerate(keys):
        out[f"B{k}"] = lre(res.coefficients[j], d["coef"][k])
        out[f"sd(B{k})"] = lre(np.sqrt(res.covariance[j, j]), d["sd"][k])
    out["residual_sd"] = lre(res.residual_std_error, d["resid_sd"])
    # NoInt1: NIST's R^2 is uncentred (1 - RSS / sum y^2); solve_lsq uses that convention
    # for through-origin fits (data-set notes of the StRD page).
    out["r_squared"] = lre(res.details["r_squared"], d["r2"])
    return out


@pytest.mark.parametrize("name", ["Norris", "Pontius", "NoInt1", "Longley"])
def test_strd_certified_values_to_ten_digits(name):
    # NIST StRD certified values (parsed from the file header); LRE >= 10 (issue 3)
    got = lres(name)
    worst = min(got, key=got.get)
    assert got[worst] >= MIN_LRE, f"{name}: {worst} has LRE {got[worst]:.2f}: {got}"


def test_longley_condition_number_is_reported_for_the_scaled_design():
    # Longley is "higher difficulty" (NIST). The raw design's condition number is huge
    # (numpy.linalg.cond, general-purpose reference); centring and scaling shrink it,
    # and the reported number is that of the design the solver actually factors.
    d = parse_strd("Longley")
    X, _ = design("Longley", d)
    res = solve_lsq(X, d["y"])
    zc = X[:, 1:] - X[:, 1:].mean(axis=0)
    zc /= np.linalg.norm(zc, axis=0)
    assert res.details["condition_number"] == pytest.approx(np.linalg.cond(zc), rel=1e-8)
    assert np.linalg.cond(X) > 1e3 * res.details["condition_number"]


def test_leverages_match_the_hat_matrix_diagonal():
    # h_ii = diag(X (X'X)^-1 X') computed directly with numpy (pinv) on Norris.
    d = parse_strd("Norris")
    X, _ = design("Norris", d)
    res = solve_lsq(X, d["y"])
    H = X @ np.linalg.pinv(X.T @ X) @ X.T
    np.testing.assert_allclose(leverages(res), np.diag(H), rtol=1e-10)
    assert leverages(res).sum() == pytest.approx(2.0, rel=1e-12)  # trace H = p


def test_quad_form_matches_covariance():
    # x0' V x0 / s^2 from the factor equals the same quadratic form of the covariance.
    d = parse_strd("Pontius")
    X, _ = design("Pontius", d)
    res = solve_lsq(X, d["y"])
    x0 = X[[0, 7, 39]]
    direct = np.einsum("ij,jk,ik->i", x0, res.covariance, x0) / res.residual_std_error ** 2
    fast = res.details["factor"].quad_form(x0)
    np.testing.assert_allclose(fast, direct, rtol=1e-9)
    # Reference file (calibration-statistics.md section 1.2(iii)), COMPUTED, not published:
    # g'(X'X)^-1 g = 0.0556436548481 at the calibration root for the new deflection
    # 1.239722 (load/1e6 = 1.70510557 from the certified coefficients).
    b = [d["coef"][k] for k in range(3)]
    xhat = min(np.roots([b[2], b[1], b[0] - 1.239722])) / 1e6
    xs = d["x"][:, 0] / 1e6
    Xs = np.column_stack([np.ones_like(xs), xs, xs ** 2])
    g = np.array([[1.0, xhat, xhat ** 2]])
    q = solve_lsq(Xs, d["y"]).details["factor"].quad_form(g)[0]
    assert q == pytest.approx(0.0556436548481, rel=1e-10)


def test_wls_matches_unweighted_solve_of_the_scaled_problem():
    # WLS = OLS on rows multiplied by sqrt(w) (definition); compare with numpy lstsq.
    d = parse_strd("Norris")
    X, _ = design("Norris", d)
    w = np.linspace(0.5, 2.0, len(d["y"]))
    res = solve_lsq(X, d["y"], weights=w)
    ref, *_ = np.linalg.lstsq(X * np.sqrt(w)[:, None], d["y"] * np.sqrt(w), rcond=None)
    np.testing.assert_allclose(res.coefficients, ref, rtol=1e-10)


def test_rank_deficient_design_is_refused_with_the_terms_named():
    x = np.arange(10.0)
    X = np.column_stack([np.ones(10), x, 2.54 * x])
    with pytest.raises(InvalidDataError, match=r"'a'.*'b'|rank-deficient"):
        solve_lsq(X, x ** 2, names=["intercept", "a", "b"])
    with pytest.raises(InvalidDataError, match="'a' is constant"):
        solve_lsq(np.column_stack([np.ones(10), np.full(10, 3.0)]), x,
                  names=["intercept", "a"])


def test_wls_leverages_match_statsmodels_influence():
    # statsmodels OLS influence (general-purpose reference) on the whitened problem
    # sqrt(w) X, sqrt(w) y, which is WLS by definition; Longley with seeded weights:
    # h_ii = w_i x_i'(X'WX)^-1 x_i.
    import statsmodels.api as sm

    d = parse_strd("Longley")
    X, _ = design("Longley", d)
    w = np.random.default_rng(8).uniform(0.5, 2.0, len(d["y"]))
    res = solve_lsq(X, d["y"], weights=w)
    sw = np.sqrt(w)
    ref = sm.OLS(d["y"] * sw, X * sw[:, None]).fit().get_influence().hat_matrix_diag
    np.testing.assert_allclose(leverages(res, w), ref, rtol=1e-7)
