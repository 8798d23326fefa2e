"""Benchmark cases of robust estimators' intervals (registered when ``cases`` is imported).

``theil-sen-jk``
    Theil-Sen jackknife+ (fit + 200 new values) at n = 2,000 (200 with ``--quick``):
    refit's leave-one-out lines from one sorted set of pairwise slopes
    (``refit.models.theil_sen_loo``) beside refitting each leave-one-out line with
    ``scipy.stats.theilslopes``. The naive way would take ~12 minutes at n = 2,000, so it
    times its first 50 refits and scales by n / 50 (said in the note); those 50 slopes
    must equal refit's exactly. Target: at least 100x faster.
``robust-recipe``
    ``refit fit`` (whole process, ``--jobs 1``) on a 20-candidate recipe with robust
    estimators: forms linear and quadratic x estimators ols, huber, theil-sen x
    directions inverse and forward x methods analytic, split-conformal, jackknife+
    (20 valid), 200 invented soils, random 5-fold x 2. No naive way (no other program
    runs this matrix): time alone. Target: under 10 s on 2 cores.
"""

from __future__ import annotations

import json

import numpy as np

import measure
from cases import HERE, CaseResult, Context, Row, Target, case

TS_SPEEDUP = 100.0
ROBUST_LIMIT_S = 10.0
ROBUST_SOILS = 200
NAIVE_REFITS = 50
ROBUST_RECIPE = """\
# 20 candidates with robust estimators on invented soils (benchmarks/robustcases.py)
[data]
table = "soils.csv"

[function]
id = "map_from_bk_depth"
response = "map_mm"
predictors = ["bk_depth_cm"]

[candidates]
forms = ["linear", "quadratic"]
estimators = ["ols", "huber", "theil-sen"]
directions = ["inverse", "forward"]

[validation]
scheme = "kfold"
folds = 5
repeats = 2
seed = 16

[intervals]
level = 0.9
methods = ["analytic", "split-conformal", "jackknife+"]
"""


def _probe(ctx: Context, what: str, n: int):
    out = ctx.data_dir / "scratch" / f"{what}_{n}.npz"
    out.parent.mkdir(parents=True, exist_ok=True)
    run = measure.run_once([ctx.python, str(HERE / "robustprobes.py"), what, str(n),
                            str(ctx.seed), str(out), str(NAIVE_REFITS)])
    if run.returncode != 0:
        return run, {"error": (run.stderr.strip() or run.stdout.strip())[-300:]}, {}
    info = json.loads(run.stdout.strip().splitlines()[-1])
    with np.load(out) as z:
        return run, info, {k: z[k] for k in z.files}


@case("theil-sen-jk", "Theil-Sen jackknife+: leave-one-out lines from one sorted slope set "
                      "vs scipy.stats.theilslopes refits")
def theil_sen_case(ctx: Context) -> CaseResult:
    n = 200 if ctx.quick else 2000
    ctx.log(f"  theil-sen jackknife+ n={n:,} ...")
    ra, a, xa = _probe(ctx, "refit_ts_jackknife", n)
    rb, b, xb = _probe(ctx, "naive_ts_jackknife", n)
    same = bool(xa and xb and np.array_equal(xa["slopes"], xb["slopes"]))
    speed = (b["s"] / a["s"]) if "s" in a and "s" in b else None
    note = (f"naive: first {NAIVE_REFITS} of {n:,} refits timed, x{n / NAIVE_REFITS:g}; "
            f"those slopes {'equal' if same else 'DIFFER from'} refit's bit for bit"
            + ("" if "s" in a else f"; refit: {a.get('error')}")
            + ("" if "s" in b else f"; naive: {b.get('error')}"))
    result = CaseResult()
    result.rows.append(Row("theil-sen-jk", n, "refit.fit(theil-sen) + predict(200, "
                           "jackknife+)", f"{n:,} scipy theilslopes refits (scaled)",
                           a.get("s"), b.get("s"), ra.peak_mb, rb.peak_mb, note,
                           [round(a["s"], 4)] if "s" in a else [],
                           [round(b["s"], 4)] if "s" in b else []))
    result.targets.append(Target(f"Theil-Sen jackknife+ speed-up (n = {n:,})", speed,
                                 TS_SPEEDUP, "x", kind="min"))
    result.targets.append(Target("Theil-Sen leave-one-out slopes equal scipy's",
                                 0.0 if same else None, 0.0, "abs", kind="max"))
    return result


def robust_soils(seed: int, n: int = ROBUST_SOILS):
    """Invented soils (seeded; the grouped case's generator, 10 sources). Not real data."""
    from groupcases import grouped_soils

    return grouped_soils(seed, n=n)


@case("robust-recipe", "refit fit: 20 candidates incl. Huber and Theil-Sen conformal, 200 "
                       "soils, 5-fold x 2 (time alone: no naive way)")
def robust_recipe_case(ctx: Context) -> CaseResult:
    from groupcases import recipe_time_case

    return recipe_time_case(
        ctx, name="robust-recipe", soils=robust_soils(ctx.seed), recipe=ROBUST_RECIPE,
        label="refit fit 20-candidate robust recipe --jobs 1",
        note="20 candidates x 5 folds x 2 repeats, level 0.9",
        target=f"20-candidate robust recipe, {ROBUST_SOILS} soils (--jobs 1)",
        limit_s=ROBUST_LIMIT_S)
