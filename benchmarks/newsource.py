"""Coverage of soils from NEW sources: pooled OLS, the mixed model, group jackknife+.

A seeded simulation with a known generating process (invented numbers, MAP-like response on
a Bk-depth-like predictor)::

    map_mm = 150 + 5 * bk_depth_cm + u_source + e,   u ~ N(0, 70^2),  e ~ N(0, 70^2)

Each source covers only a 40 cm slice of the depth range (its centre uniform on 30-120 cm)
with 10-25 soils. For each calibration draw the intervals are evaluated on soils of new
sources drawn from the same process; the coverage of an interval [L, U] at x0 is computed
exactly, Phi((U - mu(x0)) / sigma) - Phi((L - mu(x0)) / sigma) with
sigma = sqrt(70^2 + 70^2) the true predictive SD of a new soil of a new source, so the only
Monte Carlo noise is that of the calibration draws. The oracle 95 % width is
2 * 1.96 * sigma.

Run ``python benchmarks/newsource.py`` (full size; ``--quick`` for a small pass). The test
``tests/models/test_new_source_simulation.py`` runs :func:`simulate` at a small size.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

if __name__ == "__main__":  # run from a checkout: the worktree's refit
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

INTERCEPT, SLOPE = 150.0, 5.0          # mm, mm per cm (invented)
SD_SOURCE, SD_SOIL = 70.0, 70.0        # mm (invented; between-source SD = within-source SD)
SIGMA_NEW = float(np.hypot(SD_SOURCE, SD_SOIL))
DEPTH_CENTRES = (30.0, 120.0)          # cm, range of a source's centre
HALF_SLICE = 20.0                      # cm, half-width of the depth slice a source covers
SOILS = (10, 25)                       # soils per source (inclusive)


def draw_sources(rng, n_sources: int):
    """Depths [cm], MAP [mm] and source codes of one calibration draw."""
    sizes = rng.integers(SOILS[0], SOILS[1] + 1, n_sources)
    centres = rng.uniform(*DEPTH_CENTRES, n_sources)
    codes = np.repeat(np.arange(n_sources), sizes)
    x = centres[codes] + rng.uniform(-HALF_SLICE, HALF_SLICE, codes.size)
    y = (INTERCEPT + SLOPE * x + rng.normal(0, SD_SOURCE, n_sources)[codes]
         + rng.normal(0, SD_SOIL, codes.size))
    return x, y, codes


def new_source_depths(rng, n_new: int = 40, per_source: int = 5):
    """Depths [cm] of soils of new sources (the same process as the calibration)."""
    centres = rng.uniform(*DEPTH_CENTRES, n_new)
    return (np.repeat(centres, per_source)
            + rng.uniform(-HALF_SLICE, HALF_SLICE, n_new * per_source))


def exact_coverage(lower, upper, x0) -> float:
    """Mean probability that a new soil of a new source at x0 falls in [lower, upper]."""
    from scipy.stats import norm

    mu = INTERCEPT + SLOPE * x0
    return float(np.mean(norm.cdf((upper - mu) / SIGMA_NEW) - norm.cdf((lower - mu) / SIGMA_NEW)))


def _pooled(X, y, X0, level):
    from scipy.stats import t

    from refit.models.lsq import solve_lsq

    res = solve_lsq(X, y)
    est = X0 @ res.coefficients
    half = t.ppf(0.5 + level / 2, res.df_resid) * np.sqrt(
        res.residual_std_error ** 2 + np.einsum("ij,jk,ik->i", X0, res.covariance, X0))
    return est - half, est + half


def one_draw(rng, n_sources: int, level: float = 0.95, df_method: str = "satterthwaite"):
    """Coverage and mean width of each method for one calibration draw."""
    from refit.errors import InvalidDataError
    from refit.models.intervals.group_conformal import group_jackknife_plus
    from refit.models.mixed import fit_mixed, new_source_interval

    x, y, codes = draw_sources(rng, n_sources)
    x0 = new_source_depths(rng)
    X = np.column_stack([np.ones_like(x), x])
    X0 = np.column_stack([np.ones_like(x0), x0])
    out = {}
    lo, hi = _pooled(X, y, X0, level)
    out["pooled"] = (exact_coverage(lo, hi, x0), float(np.mean(hi - lo)))
    try:
        res = fit_mixed(X, y, codes, df_method=df_method)
    except InvalidDataError:  # counted: a refused fit is no interval at all
        return None
    _, lo, hi = new_source_interval(res, X0, level)
    out["mixed"] = (exact_coverage(lo, hi, x0), float(np.mean(hi - lo)))
    out["mixed_fallback"] = res.details["fallback"] is not None
    pi = group_jackknife_plus(X, y, codes, X0, level=level)
    out["gjk_unbounded"] = bool(pi.details["unbounded"])
    pi80 = group_jackknife_plus(X, y, codes, X0, level=0.80)
    out["gjk80"] = (exact_coverage(pi80.lower, pi80.upper, x0),
                    float(np.mean(pi80.upper - pi80.lower)))
    return out


def simulate(n_draws: int, n_sources: int, *, seed: int = 20250, level: float = 0.95,
             df_method: str = "satterthwaite") -> dict:
    """Summary over ``n_draws`` seeded calibration draws (see the module notes)."""
    rng = np.random.default_rng([seed, n_sources])
    every = [one_draw(rng, n_sources, level, df_method) for _ in range(n_draws)]
    draws = [d for d in every if d is not None]
    oracle = 2 * 1.959963984540054 * SIGMA_NEW
    summary = {"n_draws": n_draws, "n_sources": n_sources, "oracle_width": oracle}
    for key in ("pooled", "mixed", "gjk80"):
        cov = np.array([d[key][0] for d in draws])
        width = np.array([d[key][1] for d in draws])
        summary[key] = {"coverage_mean": float(cov.mean()), "coverage_worst": float(cov.min()),
                        "width_ratio": float(width.mean() / oracle)}
    summary["gjk80"]["width_ratio_80"] = float(
        np.mean([d["gjk80"][1] for d in draws]) / (2 * 1.2815515655446004 * SIGMA_NEW))
    summary["mixed_fallbacks"] = int(sum(d["mixed_fallback"] for d in draws))
    summary["mixed_refused"] = n_draws - len(draws)
    summary["gjk95_unbounded_share"] = float(np.mean([d["gjk_unbounded"] for d in draws]))
    return summary


def _print(s: dict) -> None:
    print(f"{s['n_sources']:>3} sources, {s['n_draws']} draws (oracle 95% width "
          f"{s['oracle_width']:.1f} mm):")
    for key, label in (("pooled", "pooled OLS 95%"), ("mixed", "mixed 95%"),
                       ("gjk80", "group jackknife+ 80%")):
        r = s[key]
        ratio = r.get("width_ratio_80", r["width_ratio"])
        print(f"    {label:<22} coverage mean {100 * r['coverage_mean']:5.1f}%  worst "
              f"{100 * r['coverage_worst']:5.1f}%  width / oracle {ratio:.3f}")
    print(f"    mixed refused (did not converge) in {s['mixed_refused']} draws, fell back to "
          f"pooled OLS in {s['mixed_fallbacks']}; group "
          f"jackknife+ 95% unbounded in {100 * s['gjk95_unbounded_share']:.0f}% of draws")


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="small sizes")
    ap.add_argument("--df-method", default="satterthwaite", choices=("satterthwaite", "groups"))
    args = ap.parse_args(argv)
    n_draws = 60 if args.quick else 400
    for n_sources in (6, 10, 15):
        t0 = time.perf_counter()
        _print(simulate(n_draws, n_sources, df_method=args.df_method))
        print(f"    ({time.perf_counter() - t0:.1f} s)")


if __name__ == "__main__":
    main()
