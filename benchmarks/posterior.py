"""Posterior for climate: speed on many fossils, and coverage in a seeded simulation.

Speed: the posterior on a 2,000-point grid for 10^5 fossil values and two proxies (a
straight line and an exponential forward fit, measurement SDs given), beside the naive way
in the same run: a Python loop over fossils, each evaluating scipy.stats.t.logpdf on the
grid and summarising with numpy.cumsum / numpy.interp (timed on a sample and scaled).

Coverage: simulation-based calibration (Talts et al. 2018, arXiv:1804.06788): calibrations
and fossils drawn from a known process, climate from the prior uniform(200, 1200); the
share of 95 % equal-tailed intervals holding the true climate for one proxy each and for
both, and the mean widths (tests/models/test_posterior.py runs the same at a small size).

Run ``python benchmarks/posterior.py`` (``--quick`` for a small pass).
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

if __name__ == "__main__":  # run from a checkout: the worktree's refit
    sys.path.insert(0, str(Path(__file__).resolve().parents[1]))
    sys.path.insert(0, str(Path(__file__).resolve().parents[1] / "tests" / "models"))


def _proxies(seed=1):
    import pandas as pd

    from refit.models.fitting import fit
    from refit.models.posterior import forward_proxy

    rng = np.random.default_rng(seed)
    x = rng.uniform(200, 1200, 40)
    t = pd.DataFrame({"map_mm": x, "bk_depth_cm": 10 + 0.08 * x + rng.normal(0, 8, 40),
                      "cia_k": np.exp(1 + 0.001 * x + rng.normal(0, 0.1, 40))})
    return [forward_proxy(fit(t, "map_mm", ["bk_depth_cm"], direction="forward")),
            forward_proxy(fit(t, "map_mm", ["cia_k"], direction="forward",
                              form="exponential"))]


def _naive(proxies, v, sd, grid, level=0.95):
    """Per-fossil loop with scipy: median and equal-tailed interval."""
    from scipy import stats

    tabs = [p.location_variance(grid) for p in proxies]
    out = np.empty((len(v), 3))
    for i in range(len(v)):
        lp = np.zeros_like(grid)
        for k, (p, (loc, var)) in enumerate(zip(proxies, tabs)):
            y, s = v[i, k], sd[i, k]
            if p.log_response:
                y, s = np.log(y), s / y
            lp += stats.t.logpdf(y, p.df, loc=loc, scale=np.sqrt(var + s * s))
        d = np.exp(lp - lp.max())
        F = np.concatenate([[0], np.cumsum(0.5 * (d[1:] + d[:-1]))])
        out[i] = np.interp(np.array([0.5, (1 - level) / 2, (1 + level) / 2]) * F[-1], F, grid)
    return out


def speed(m: int, naive_rows: int):
    from refit.models.posterior import climate_posterior

    proxies = _proxies()
    rng = np.random.default_rng(7)
    xt = rng.uniform(250, 1150, m)
    v = np.column_stack([10 + 0.08 * xt + rng.normal(0, 8, m),
                         np.exp(1 + 0.001 * xt + rng.normal(0, 0.1, m))])
    sd = np.column_stack([np.full(m, 2.0), np.full(m, 0.1)])
    times = {}
    for hdi in (False, True):
        t0 = time.perf_counter()
        post = climate_posterior(proxies, v, sd, hdi=hdi)
        times[hdi] = time.perf_counter() - t0
    grid = np.linspace(post.grid["low"], post.grid["high"], post.grid["points"])
    t0 = time.perf_counter()
    ref = _naive(proxies, v[:naive_rows], sd[:naive_rows], grid)
    naive = (time.perf_counter() - t0) * m / naive_rows
    err = np.max(np.abs(ref[:, 0] - post.median[:naive_rows]))
    print(f"posterior, {m} fossils x 2 proxies x {post.grid['points']} points: "
          f"{times[False]:.2f} s (median, mode, mean, equal-tailed interval, flags, "
          f"consistency), {times[True]:.2f} s with the HDI; naive per-fossil scipy loop "
          f"{naive:.1f} s (scaled from {naive_rows} rows), ratio {naive / times[True]:.0f}x; "
          f"largest median difference {err:.2g}")


def coverage(n_sims: int):
    from test_posterior import coverage_run

    t0 = time.perf_counter()
    cov, wid, narrower = coverage_run(n_sims, seed=2026)
    print(f"coverage of 95 % intervals over {n_sims} calibrations x 10 fossils "
          f"({time.perf_counter() - t0:.0f} s): one proxy {cov['one']:.3f} / "
          f"{cov['two']:.3f}, two proxies {cov['both']:.3f}; mean width "
          f"{wid['one']:.0f} / {wid['two']:.0f} -> {wid['both']:.0f} mm; two-proxy interval "
          f"narrower than both single ones in {narrower:.1%} of agreeing fossils")


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true")
    args = ap.parse_args(argv)
    speed(10_000 if args.quick else 100_000, 200 if args.quick else 1000)
    coverage(100 if args.quick else 1000)


if __name__ == "__main__":
    main()
