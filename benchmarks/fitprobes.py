"""In-process timings of the fitting engine beside the naive way, each in a fresh child.

``python fitprobes.py WHAT N SEED OUT.npz [EXTRA]`` imports what WHAT needs, warms it up on
a small problem (so lazily imported helpers, e.g. scipy's t quantile, are paid before the
clock starts, on both sides alike), times the work (repeated while the runs take under a
second in all, at most 7 times; the median is the figure, the first run is kept too), saves the numbers it produced to
OUT.npz (the harness compares refit's and the naive way's to 1e-9) and prints one JSON
object ``{"import_s": ..., "work_s": ..., ...}``.

The naive side is what a researcher writes with statsmodels: explicit refits in a Python
loop, ``get_prediction(...).summary_frame()`` for intervals, ``Series.apply`` for
evaluating an equation value by value. It uses the same resample draws as refit where
refit draws at random, so both sides compute the same numbers the slow way and the fast
way. Data: :func:`datagen.fit_data` (seeded, invented).
"""

from __future__ import annotations

import json
import math
import sys
import time
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parent))

import numpy as np  # noqa: E402

import datagen  # noqa: E402

LEVEL = 0.95
ALPHA = 1.0 - LEVEL
N_NEW = 200            # new feature values predicted in the fit / jackknife+ / bootstrap cases
N_BOOT = 1000
CHUNK_ELEMENTS = 1_000_000  # refit.models.linalg.CHUNK_ELEMENTS: resamples are drawn in batches of
#                             CHUNK_ELEMENTS // n rows, which the naive loop reproduces


def _design(x):
    return np.column_stack([np.ones_like(x), x, x * x])


def _new_values(x):
    return np.linspace(np.quantile(x, 0.02), np.quantile(x, 0.98), N_NEW)


def _set_new_values(extra: list[str]) -> list[str]:
    """``--m=K`` among the extra arguments sets how many new values are predicted."""
    global N_NEW
    rest = []
    for arg in extra:
        if arg.startswith("--m="):
            N_NEW = int(arg[4:])
        else:
            rest.append(arg)
    return rest


def _timed(work, warm, budget_s: float = 1.0, most: int = 7):
    """Warm up, then run ``work`` until ``budget_s`` is spent (at most ``most`` times, at
    least once); returns the wall times of the runs [s] and the last run's output."""
    warm()
    times, spent = [], 0.0
    while not times or (spent < budget_s and len(times) < most):
        t = time.perf_counter()
        out = work()
        times.append(time.perf_counter() - t)
        spent += times[-1]
    return times, out


# --------------------------------------------------------------------------- refit side
def refit_fit(n, seed):
    from refit.models.fitting import fit

    x, y = datagen.fit_data(n, seed)
    x0 = _new_values(x)

    def work(x=x, y=y):
        f = fit({"bk_depth_cm": x, "map_mm": y}, "map_mm", ["bk_depth_cm"], form="quadratic")
        p = f.predict(x0, interval="analytic", level=LEVEL)
        return p["estimate"].to_numpy(), p["lower"].to_numpy(), p["upper"].to_numpy()

    xs, ys = datagen.fit_data(50, seed + 1)
    return _timed(work, lambda: work(xs, ys))


def refit_loo(n, seed):
    import pandas as pd

    from refit.validate.crossval import Candidate, Scheme, cross_validate

    x, y = datagen.fit_data(n, seed)
    cand = Candidate("map_mm", ("bk_depth_cm",), form="quadratic", interval="analytic")

    def work(x=x, y=y):
        frame = pd.DataFrame({"bk_depth_cm": x, "map_mm": y})
        res = cross_validate(frame, cand, Scheme(name="loo"), level=LEVEL)
        p = res.predictions.sort_values("row")
        return p["estimate"].to_numpy(), p["lower"].to_numpy(), p["upper"].to_numpy()

    xs, ys = datagen.fit_data(50, seed + 1)
    return _timed(work, lambda: work(xs, ys))


def refit_loo_closed(n, seed):
    """The closed form alone: ``refit.validate.crossval.loo_ols`` on the arrays (no table, no skill
    scores)."""
    from refit.validate.crossval import loo_ols
    from refit.models.forms import make_form

    x, y = datagen.fit_data(n, seed)
    form = make_form("quadratic", ["bk_depth_cm"])

    def work(x=x, y=y):
        est, lo, hi, _ = loo_ols(x, y, form, LEVEL)
        return est, lo, hi

    xs, ys = datagen.fit_data(50, seed + 1)
    return _timed(work, lambda: work(xs, ys))


def refit_jackknife_plus_closed(n, seed):
    """The closed form alone: ``refit.models.intervals.jackknife_plus`` on the design arrays."""
    from refit.models.intervals import jackknife_plus

    x, y = datagen.fit_data(n, seed)
    X0 = _design(_new_values(x))

    def work(x=x, y=y):
        pi = jackknife_plus(_design(x), y, X0, level=LEVEL)
        return pi.estimate, pi.lower, pi.upper

    xs, ys = datagen.fit_data(60, seed + 1)
    return _timed(work, lambda: work(xs, ys))


def refit_resampled(interval):
    def probe(n, seed):
        from refit.models.fitting import fit

        x, y = datagen.fit_data(n, seed)
        x0 = _new_values(x)

        def work(x=x, y=y):
            f = fit({"bk_depth_cm": x, "map_mm": y}, "map_mm", ["bk_depth_cm"],
                    form="quadratic")
            p = f.predict(x0, interval=interval, level=LEVEL, seed=seed)
            return p["estimate"].to_numpy(), p["lower"].to_numpy(), p["upper"].to_numpy()

        xs, ys = datagen.fit_data(200, seed + 1)
        return _timed(work, lambda: work(xs, ys))
    return probe


def refit_evaluate(n, seed, file, distinct=False):
    """Equation.predict on n values: depths recorded to 0.1 cm (many repeats, as measured
    data have), or with ``distinct`` every value different (no rounding)."""
    from refit.coefficients import load

    eq = load(file)
    v = datagen.feature_values(n, seed, decimals=None if distinct else 1)

    def work(v=v):
        p = eq.predict(v)
        return p.estimate, p.lower, p.upper

    return _timed(work, lambda: work(v[:100]))


# --------------------------------------------------------------------------- naive side
def naive_fit(n, seed):
    import statsmodels.api as sm

    x, y = datagen.fit_data(n, seed)
    X0 = _design(_new_values(x))

    def work(x=x, y=y):
        res = sm.OLS(y, _design(x)).fit()
        sf = res.get_prediction(X0).summary_frame(alpha=ALPHA)
        return sf["mean"].to_numpy(), sf["obs_ci_lower"].to_numpy(), sf["obs_ci_upper"].to_numpy()

    xs, ys = datagen.fit_data(50, seed + 1)
    return _timed(work, lambda: work(xs, ys))


def naive_loo(n, seed):
    """n explicit refits without row i, each predicting row i with its 95% interval."""
    import statsmodels.api as sm

    x, y = datagen.fit_data(n, seed)

    def work(x=x, y=y):
        X = _design(x)
        out = np.empty((3, len(y)))
        keep = np.ones(len(y), dtype=bool)
        for i in range(len(y)):
            keep[i] = False
            res = sm.OLS(y[keep], X[keep]).fit()
            keep[i] = True
            sf = res.get_prediction(X[i:i + 1]).summary_frame(alpha=ALPHA)
            out[:, i] = sf[["mean", "obs_ci_lower", "obs_ci_upper"]].to_numpy()[0]
        return out[0], out[1], out[2]

    xs, ys = datagen.fit_data(50, seed + 1)
    return _timed(work, lambda: work(xs, ys))


def naive_jackknife_plus(n, seed):
    """Jackknife+ (Barber et al. 2021, Ann. Stat. 49:486) from n explicit statsmodels
    leave-one-out refits: the floor(alpha(n+1))-th smallest of mu_-i(x0) - R_i and the
    ceil((1-alpha)(n+1))-th smallest of mu_-i(x0) + R_i."""
    import statsmodels.api as sm

    x, y = datagen.fit_data(n, seed)
    X0 = _design(_new_values(x))

    def work(x=x, y=y):
        X = _design(x)
        n_ = len(y)
        mu = np.empty((X0.shape[0], n_))
        r = np.empty(n_)
        keep = np.ones(n_, dtype=bool)
        for i in range(n_):
            keep[i] = False
            res = sm.OLS(y[keep], X[keep]).fit()
            keep[i] = True
            mu[:, i] = res.predict(X0)
            r[i] = abs(y[i] - res.predict(X[i:i + 1])[0])
        k_lo = math.floor(ALPHA * (n_ + 1) + 1e-9)
        k_hi = math.ceil((1 - ALPHA) * (n_ + 1) - 1e-9)
        lower = np.sort(mu - r, axis=1)[:, k_lo - 1]
        upper = np.sort(mu + r, axis=1)[:, k_hi - 1]
        est = X0 @ sm.OLS(y, X).fit().params
        return est, lower, upper

    xs, ys = datagen.fit_data(60, seed + 1)
    return _timed(work, lambda: work(xs, ys))


def naive_bootstrap(n, seed):
    """1,000 case-resampled statsmodels refits in a loop, prediction error with resampled
    modified residuals (Davison & Hinkley 1997, Algorithm 6.4), percentile limits. Draws
    the same resamples as refit (same generator, same batches) so the numbers agree."""
    import statsmodels.api as sm

    x, y = datagen.fit_data(n, seed)
    X0 = _design(_new_values(x))

    def work(x=x, y=y):
        X = _design(x)
        n_ = len(y)
        rng = np.random.default_rng(seed)
        full = sm.OLS(y, X).fit()
        h = full.get_influence().hat_matrix_diag
        pool = full.resid / np.sqrt(np.clip(1.0 - h, 1e-12, None))
        pool = pool - pool.mean()
        per = max(1, CHUNK_ELEMENTS // n_)
        dtype = np.int32 if n_ * min(N_BOOT, per + 1) < 2**31 - 1 else np.int64
        coefs = []
        for start in range(0, N_BOOT, per):
            idx = rng.integers(0, n_, size=(min(per, N_BOOT - start), n_), dtype=dtype)
            for row in idx:
                coefs.append(sm.OLS(y[row], X[row]).fit().params)
        coefs = np.array(coefs)
        y0 = X0 @ full.params
        noise = rng.choice(pool, size=(N_BOOT, X0.shape[0]))
        delta = coefs @ X0.T - (y0 + noise)
        lo_q, hi_q = np.quantile(delta, [ALPHA / 2, 1 - ALPHA / 2], axis=0)
        return y0, y0 - hi_q, y0 - lo_q

    xs, ys = datagen.fit_data(200, seed + 1)
    return _timed(work, lambda: work(xs, ys))


def naive_evaluate(n, seed, file):
    """What a researcher writes from the published numbers: the equation and its interval
    value by value with ``pandas.Series.apply`` (inverse direction, analytic band
    estimate -+ t sqrt(s^2 + x0' V x0))."""
    import pandas as pd

    rec = json.loads(Path(file).read_text(encoding="utf-8"))
    b = np.asarray(rec["coefficients"], float)
    V = np.asarray(rec["covariance"], float)
    s2 = float(rec["residual_std_error"]) ** 2
    t = float(rec["interval"]["t_quantile"])
    v = datagen.feature_values(n, seed)

    def one(value):
        x0 = np.array([1.0, value, value * value])
        est = float(x0 @ b)
        half = t * math.sqrt(s2 + float(x0 @ V @ x0))
        return est, est - half, est + half

    def work(v=v):
        out = pd.Series(v).apply(one)
        arr = np.array(out.tolist())
        return arr[:, 0], arr[:, 1], arr[:, 2]

    return _timed(work, lambda: work(v[:100]))


PROBES = {
    "refit_fit": refit_fit, "naive_fit": naive_fit,
    "refit_loo": refit_loo, "naive_loo": naive_loo, "refit_loo_closed": refit_loo_closed,
    "refit_jackknife_plus_closed": refit_jackknife_plus_closed,
    "refit_jackknife_plus": refit_resampled("jackknife+"),
    "naive_jackknife_plus": naive_jackknife_plus,
    "refit_bootstrap": refit_resampled("bootstrap-pairs"), "naive_bootstrap": naive_bootstrap,
    "refit_evaluate": refit_evaluate, "naive_evaluate": naive_evaluate,
    "refit_evaluate_distinct": lambda n, seed, file: refit_evaluate(n, seed, file, True),
}


def main(argv):
    what, n, seed, out = argv[0], int(argv[1]), int(argv[2]), argv[3]
    extra = _set_new_values(argv[4:])
    t0 = time.perf_counter()
    times, arrays = PROBES[what](n, seed, *extra)
    total = time.perf_counter() - t0
    np.savez(out, *[np.asarray(a, float) for a in arrays])
    print(json.dumps({"work_s": float(np.median(times)), "first_s": times[0], "runs": times,
                      "setup_s": total - sum(times), "n": n}))


if __name__ == "__main__":
    main(sys.argv[1:])
