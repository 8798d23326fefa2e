"""Child process of the robust benchmark cases (benchmarks/robustcases.py).

``python robustprobes.py WHAT N SEED OUT [K]`` times one piece of work after the imports
and prints one JSON line ``{"s": seconds, ...}``; the numbers go to OUT (.npz) so the
parent can compare refit's with the naive way's.

``refit_ts_jackknife``
    ``refit.fit(estimator='theil-sen')`` + ``predict(200 values, interval='jackknife+')``
    on a seeded line of N soils: the n leave-one-out lines from one sorted set of
    pairwise slopes.
``naive_ts_jackknife``
    the same jackknife+ with each leave-one-out line refitted by
    ``scipy.stats.theilslopes``. At N = 2,000 that is ~12 minutes, so only the first K
    refits run (timed) and the time is scaled by N / K (stated in the output); their
    slopes are saved for the exact comparison.
"""

from __future__ import annotations

import json
import sys
import time

import numpy as np


def line(n: int, seed: int):
    """Invented soils (seeded): MAP [mm] on Bk depth [cm] with Student-t(3) scatter."""
    rng = np.random.default_rng(seed)
    x = rng.uniform(5, 290, n).round(1)
    return x, (200 + 2.0 * x + 40 * rng.standard_t(3, n)).round(1)


def main(what: str, n: int, seed: int, out: str, k: int = 50) -> None:
    import pandas as pd
    from scipy import stats

    import refit

    x, y = line(n, seed)
    x0 = np.linspace(10, 280, 200)
    if what == "refit_ts_jackknife":
        table = pd.DataFrame({"bk_depth_cm": x, "map_mm": y})
        small = table.iloc[:50]
        refit.fit(small, "map_mm", "bk_depth_cm", estimator="theil-sen").predict(
            x0[:2], interval="jackknife+")                      # warm-up (imports)
        t = time.perf_counter()
        f = refit.fit(table, "map_mm", "bk_depth_cm", estimator="theil-sen")
        p = f.predict(x0, interval="jackknife+")
        s = time.perf_counter() - t
        from refit.models.refitted import loo_coefficients_of

        np.savez(out, slopes=loo_coefficients_of(f)[:k, 1], lower=p.lower.to_numpy(),
                 upper=p.upper.to_numpy())
        print(json.dumps({"s": s}))
        return
    stats.theilslopes(y[:50], x[:50])                            # warm-up
    t = time.perf_counter()
    slopes = [stats.theilslopes(np.delete(y, i), np.delete(x, i)).slope for i in range(k)]
    s = (time.perf_counter() - t) * n / k
    np.savez(out, slopes=np.array(slopes))
    print(json.dumps({"s": s, "timed_refits": k, "scaled_by": n / k}))


if __name__ == "__main__":
    main(sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), sys.argv[4],
         *(int(a) for a in sys.argv[5:6]))
