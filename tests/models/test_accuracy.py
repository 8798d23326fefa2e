"""Accuracy table: refit's public fitting engine against certified and exact answers.

Two kinds of reference, both outside the project:

* NIST Statistical Reference Datasets, linear least squares (public domain),
  https://www.itl.nist.gov/div898/strd/lls/lls.shtml -- every StRD linear-regression file in
  tests/data/nist/ (Norris, Pontius, NoInt1, Longley, and the polynomial sets Filip --
  degree 10, "higher difficulty" -- and Wampler1-5, degree 5). The certified values are
  parsed from each file's own header, never retyped. (The Filip and Wampler files are
  copies of NIST's; their bytes were checked by refitting each in exact rational
  arithmetic, which reproduces every certified value to 15 digits.)
* An exact rational-arithmetic least-squares fit (Python's ``fractions`` module, the
  normal equations solved without rounding) of an ill-conditioned quadratic: depths to the
  Bk horizon offset by 10^4 cm, so the raw design [1, x, x^2] has a condition number near
  10^13 (numpy.linalg.cond).

Accuracy is the log relative error LRE = -log10(|estimate - reference| / |reference|)
(McCullough 1998, "Assessing the reliability of statistical software", The American
Statistician 52:358-366), capped at 15 when the two agree to the last bit. The issue asks
for LRE >= 10 for every coefficient, standard deviation, residual SD and R^2.

Run ``python tests/models/test_accuracy.py`` to print the table (Markdown) for the README.
"""

from __future__ import annotations

import math
import re
import sys
from fractions import Fraction
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

if __name__ == "__main__":  # run as a script: this checkout's refit, not an installed one
    sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import refit  # noqa: E402

NIST = Path(__file__).resolve().parents[1] / "data" / "nist"
MIN_LRE = 10.0
CAP = 15.0


def lre(estimate: float, reference: float) -> float:
    """Log relative error (McCullough 1998), capped at 15."""
    estimate, reference = float(estimate), float(reference)
    if estimate == reference:
        return CAP
    if reference == 0.0:  # McCullough (1998): the log absolute error when the value is 0
        return min(CAP, -math.log10(abs(estimate)))
    return min(CAP, -math.log10(abs(estimate - reference) / abs(reference)))


# ----------------------------------------------------------------------------- NIST StRD
def read_strd(name: str) -> dict:
    """Data and certified values of one StRD file, parsed from its header."""
    lines = (NIST / f"{name}.dat").read_text().splitlines()
    head = "\n".join(lines[:60])
    first, last = map(int, re.search(r"Data\s+\(lines (\d+) to (\d+)\)", head).groups())
    coef, sd = {}, {}
    out = {}
    for line in lines[:first - 1]:
        if m := re.match(r"\s+B(\d+)\s+(\S+)\s+(\S+)\s*$", line):
            coef[int(m[1])], sd[int(m[1])] = float(m[2]), float(m[3])
        elif m := re.match(r"\s+Residual\s+Standard Deviation\s+(\S+)\s*$", line) or \
                re.match(r"\s+Standard Deviation\s+(\S+)\s*$", line):
            out["resid_sd"] = float(m[1])
        elif m := re.match(r"\s+R-Squared\s+(\S+)\s*$", line):
            out["r2"] = float(m[1])
    data = np.array([[float(v) for v in ln.split()] for ln in lines[first - 1:last]])
    assert data.shape[0] == int(re.search(r"(\d+) Observations", head)[1])
    return {"y": data[:, 0], "x": data[:, 1:], "coef": coef, "sd": sd, **out}


#: the StRD polynomial sets and their degrees (from each file's "Model" line)
POLYNOMIAL = {"Filip": 10, "Wampler1": 5, "Wampler2": 5, "Wampler3": 5, "Wampler4": 5,
              "Wampler5": 5}


def fit_strd(name: str, d: dict):
    """Fit the StRD model with refit.fit (the public API)."""
    if name == "Longley":   # y = B0 + B1 x1 + ... + B6 x6
        cols = {f"x{j + 1}": d["x"][:, j] for j in range(d["x"].shape[1])}
        return refit.fit(pd.DataFrame({"y": d["y"], **cols}), "y", list(cols))
    frame = pd.DataFrame({"y": d["y"], "x": d["x"][:, 0]})
    if name == "Pontius":   # y = B0 + B1 x + B2 x^2
        return refit.fit(frame, "y", "x", form="quadratic")
    if name in POLYNOMIAL:  # y = B0 + B1 x + ... + Bk x^k
        return refit.fit(frame, "y", "x", form="polynomial", degree=POLYNOMIAL[name])
    if name == "NoInt1":    # y = B1 x (through the origin; R^2 uncentred, StRD notes)
        return refit.fit(frame, "y", "x", through_origin=True)
    return refit.fit(frame, "y", "x")  # Norris: y = B0 + B1 x


def strd_lres(name: str) -> dict[str, float]:
    d = read_strd(name)
    f = fit_strd(name, d)
    res = f.result
    out = {}
    for j, k in enumerate(sorted(d["coef"])):
        out[f"B{k}"] = lre(res.coefficients[j], d["coef"][k])
        out[f"sd(B{k})"] = lre(math.sqrt(res.covariance[j, j]), d["sd"][k])
    out["residual SD"] = lre(res.residual_std_error, d["resid_sd"])
    out["R^2"] = lre(f.r_squared, d["r2"])
    return out


STRD = ["Norris", "Pontius", "NoInt1", "Longley", "Filip", "Wampler1", "Wampler2",
        "Wampler3", "Wampler4", "Wampler5"]


@pytest.mark.parametrize("name", STRD)
def test_strd_every_certified_value_to_ten_digits(name):
    # NIST StRD certified values (from the file header); LRE >= 10 (issue 9)
    got = strd_lres(name)
    d = read_strd(name)
    assert len(got) == 2 * len(d["coef"]) + 2
    low = {k: round(v, 2) for k, v in got.items() if v < MIN_LRE}
    assert low == {}, f"{name}: LRE below {MIN_LRE}: {low} (all: {got})"


def test_filip_needs_the_refinement(monkeypatch):
    # NIST StRD Filip (certified values from the file): the double-precision QR alone keeps
    # fewer than 8 significant digits of the coefficients (condition number of the centred,
    # scaled design ~3.8e9); the refinement of refit.models.refine restores >= 10
    from refit.models import refine

    d = read_strd("Filip")
    f = fit_strd("Filip", d)
    assert f.result.details["refined"] >= 1
    assert f.condition_number == pytest.approx(3.8e9, rel=0.1)
    monkeypatch.setattr(refine, "REFINE_ABOVE", np.inf)
    plain = fit_strd("Filip", d).result
    assert "refined" not in plain.details
    assert min(lre(plain.coefficients[j], d["coef"][j]) for j in range(11)) < 8.0


def test_stalled_refinement_refuses_with_the_condition_number(monkeypatch):
    # when the refinement cannot converge, refit refuses rather than return digits it
    # cannot vouch for; forced here by allowing a single step and no tolerance
    from refit.errors import InvalidDataError
    from refit.models import refine

    monkeypatch.setattr(refine, "MAX_STEPS", 1)
    monkeypatch.setattr(refine, "ACCEPTED", 0.0)
    with pytest.raises(InvalidDataError, match=r"condition number 3\.8\de\+09"):
        fit_strd("Filip", read_strd("Filip"))


def test_lre_definition_can_fail():
    # McCullough's LRE: 1.0 vs 1.0000000001 agree to 10 digits, vs 1.0000001 to 7
    assert lre(1.0000000001, 1.0) == pytest.approx(10.0, abs=0.01)
    assert lre(1.0000001, 1.0) < MIN_LRE
    assert lre(2.0, 2.0) == CAP
    assert lre(1e-12, 0.0) == pytest.approx(12.0)  # log absolute error at 0


# ----------------------------------------------------------------------------- exact quadratic
OFFSET_CM = 1e4


def offset_quadratic_data():
    """Bk depths 10..126 cm offset by 10^4 cm and MAP-like responses (seeded)."""
    rng = np.random.default_rng(20261209)
    depth = np.arange(10.0, 130.0, 4.0)
    y = np.round(180 + 6.5 * depth - 0.02 * depth ** 2 + rng.normal(0, 25, depth.size), 1)
    return OFFSET_CM + depth, y


def solve_exact(rows: list[list[Fraction]], b: list[Fraction]) -> list[Fraction]:
    """Gauss-Jordan elimination in exact rational arithmetic."""
    a = [list(r) + [v] for r, v in zip(rows, b)]
    p = len(a)
    for c in range(p):
        piv = next(r for r in range(c, p) if a[r][c] != 0)
        a[c], a[piv] = a[piv], a[c]
        for r in range(p):
            if r != c and a[r][c] != 0:
                f = a[r][c] / a[c][c]
                a[r] = [u - f * w for u, w in zip(a[r], a[c])]
    return [a[i][p] / a[i][i] for i in range(p)]


def exact_polyfit(x, y, degree: int) -> dict:
    """Exact OLS of the float data (each float converted exactly to a Fraction)."""
    X = [[Fraction(float(v)) ** k for k in range(degree + 1)] for v in x]
    Y = [Fraction(float(v)) for v in y]
    p, n = degree + 1, len(Y)
    xtx = [[sum(r[i] * r[j] for r in X) for j in range(p)] for i in range(p)]
    xty = [sum(r[i] * v for r, v in zip(X, Y)) for i in range(p)]
    beta = solve_exact(xtx, xty)
    resid = [v - sum(b * c for b, c in zip(beta, r)) for r, v in zip(X, Y)]
    rss = sum(e * e for e in resid)
    s2 = rss / (n - p)
    inv_diag = [solve_exact(xtx, [Fraction(int(i == j)) for i in range(p)])[j]
                for j in range(p)]
    ybar = sum(Y) / n
    tss = sum((v - ybar) ** 2 for v in Y)
    return {"coef": [float(b) for b in beta],
            # sqrt of an exact rational, correctly rounded: float() rounds once, sqrt once
            "sd": [math.sqrt(float(s2 * q)) for q in inv_diag],
            "resid_sd": math.sqrt(float(s2)), "r2": float(1 - rss / tss)}


def offset_quadratic_lres() -> dict[str, float]:
    x, y = offset_quadratic_data()
    ref = exact_polyfit(x, y, 2)
    f = refit.fit(pd.DataFrame({"map_mm": y, "bk_depth_cm": x}), "map_mm", "bk_depth_cm",
                  form="quadratic")
    res = f.result
    out = {}
    for j in range(3):
        out[f"B{j}"] = lre(res.coefficients[j], ref["coef"][j])
        out[f"sd(B{j})"] = lre(math.sqrt(res.covariance[j, j]), ref["sd"][j])
    out["residual SD"] = lre(res.residual_std_error, ref["resid_sd"])
    out["R^2"] = lre(f.r_squared, ref["r2"])
    return out


def test_offset_design_is_ill_conditioned():
    # the raw design's 2-norm condition number (numpy.linalg.cond) is ~1e13: a naive
    # normal-equations solve in double precision would keep about 3 digits
    x, _ = offset_quadratic_data()
    assert np.linalg.cond(np.column_stack([np.ones_like(x), x, x ** 2])) > 1e12


def test_offset_quadratic_matches_exact_rational_fit():
    got = offset_quadratic_lres()
    low = {k: round(v, 2) for k, v in got.items() if v < MIN_LRE}
    assert low == {}, f"LRE below {MIN_LRE}: {low} (all: {got})"


def test_exact_solver_reproduces_a_known_line():
    # y = 1 + 2x exactly: the rational fit returns 1 and 2 with zero residual SD
    ref = exact_polyfit([0.0, 1.0, 2.0, 3.0], [1.0, 3.0, 5.0, 7.0], 1)
    assert ref["coef"] == [1.0, 2.0] and ref["resid_sd"] == 0.0 and ref["r2"] == 1.0


# ----------------------------------------------------------------------------- the table
def table() -> str:
    """The LRE table (Markdown) for the README: worst LRE per quantity kind."""
    rows = [(n, strd_lres(n)) for n in STRD]
    rows.append(("quadratic, depth + 10^4 cm (exact)", offset_quadratic_lres()))
    out = ["| data set | coefficients (min) | their SDs (min) | residual SD | R^2 |",
           "|---|---|---|---|---|"]
    for name, got in rows:
        b = min(v for k, v in got.items() if k.startswith("B"))
        s = min(v for k, v in got.items() if k.startswith("sd("))
        out.append(f"| {name} | {b:.1f} | {s:.1f} | {got['residual SD']:.1f} | "
                   f"{got['R^2']:.1f} |")
    return "\n".join(out)


if __name__ == "__main__":
    print(table())
