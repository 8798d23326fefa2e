"""Benchmark cases of the fitting engine, coefficient files and the fit matrix.

Registered into :data:`cases.CASES` when ``cases`` is imported. Every figure comes from a
fresh process (``measure.run_once``); refit's and the naive way's runs take turns. For the
in-process cases (fit, loo, jackknife+, bootstrap, evaluate) the child prints the time of
the work itself (``fitprobes.py``: imports and a warm-up on a small problem first) and saves
its numbers, which this module compares between refit and the naive way.
"""

from __future__ import annotations

import json
import shutil
import statistics
from pathlib import Path

import numpy as np

import datagen
import measure
from cases import HERE, REPO, CaseResult, Context, Row, Target, case

FIT_LIMIT_S = 0.05
LOO_SPEEDUP = 1000.0
JACKKNIFE_SPEEDUP = 500.0
SAME_NUMBERS = 1e-9
BOOT_LIMIT_S = 0.5
EVAL_LIMIT_S = 0.5
CONSUMER_LIMIT_S = 0.5
DEMO_FIT_LIMIT_S = 10.0
DEMO_LIMIT_S = 30.0
SCALE_LIMIT_S = 60.0
DEMO_RECIPE = REPO / "calib_demo" / "recipe.toml"


# --------------------------------------------------------------------------- helpers
def _scratch(ctx: Context) -> Path:
    path = ctx.data_dir / "scratch"
    path.mkdir(parents=True, exist_ok=True)
    return path


def _probe(ctx: Context, what: str, n: int, extra=()) -> tuple[measure.Run, dict, dict]:
    out = _scratch(ctx) / f"{what}_{n}.npz"
    run = measure.run_once([ctx.python, str(HERE / "fitprobes.py"), what, str(n),
                            str(ctx.seed), str(out), *map(str, extra)])
    if run.returncode != 0:
        return run, {"error": (run.stderr.strip() or run.stdout.strip())[-300:]}, {}
    info = json.loads(run.stdout.strip().splitlines()[-1])
    with np.load(out) as z:
        arrays = {k: z[k] for k in z.files}
    return run, info, arrays


def _pair(ctx: Context, refit_what: str, naive_what: str, n: int, repeats: int, extra=()):
    """Interleaved refit / naive probes; medians, peaks and the largest difference."""
    got = {refit_what: [], naive_what: []}
    for _ in range(max(1, repeats)):
        for what in (refit_what, naive_what):
            got[what].append(_probe(ctx, what, n, extra))
    return _summary(got[refit_what]), _summary(got[naive_what])


def _summary(runs):
    ok = [(r, i, a) for r, i, a in runs if "work_s" in i]
    if not ok:
        return {"error": runs[-1][1].get("error", "?"), "peak": max(r.peak_mb for r, _, _ in runs)}
    return {"s": statistics.median(i["work_s"] for _, i, _ in ok),
            "runs": [round(i["work_s"], 6) for _, i, _ in ok],
            "first": ok[-1][1].get("first_s"), "peak": max(r.peak_mb for r, _, _ in runs),
            "arrays": ok[-1][2], "inner": len(ok[-1][1].get("runs", [1]))}


def _diff(a: dict, b: dict) -> float | None:
    if "arrays" not in a or "arrays" not in b:
        return None
    worst = 0.0
    for k in a["arrays"]:
        x, y = a["arrays"][k], b["arrays"][k]
        both = np.isfinite(x) & np.isfinite(y)
        if not np.array_equal(np.isfinite(x), np.isfinite(y)):
            return float("inf")
        worst = max(worst, float(np.max(np.abs(x[both] - y[both]), initial=0.0)))
    return worst


def _row(case_name, n, label, naive_label, a, b, note="") -> Row:
    bits = [note] if note else []
    if "error" in a:
        bits.append("refit failed: " + a["error"])
    if "error" in b:
        bits.append("naive failed: " + b["error"])
    if "inner" in a:
        bits.append(f"in-process median of {a['inner']} call(s) after a warm-up, "
                    f"{len(a['runs'])} process(es); first call {a['first']:.4f} s")
    return Row(case_name, n, label, naive_label, a.get("s"), b.get("s"), a.get("peak"),
               b.get("peak"), "; ".join(bits), a.get("runs", []), b.get("runs", []))


def _speedup(row: Row) -> float | None:
    return None if not row.refit_s or row.naive_s is None else row.naive_s / row.refit_s


# --------------------------------------------------------------------------- fit
@case("fit", "quadratic OLS fit + analytic intervals vs statsmodels OLS + get_prediction")
def fit_case(ctx: Context) -> CaseResult:
    result = CaseResult()
    for n in ctx.sizes:
        ctx.log(f"  fit n={n:,} ...")
        a, b = _pair(ctx, "refit_fit", "naive_fit", n, ctx.repeats_for(n))
        d = _diff(a, b)
        result.rows.append(_row("fit", n, "refit.fit(quadratic) + predict(200 values)",
                                "sm.OLS().fit() + get_prediction", a, b,
                                f"max |refit - statsmodels| {d:.1e}" if d is not None else ""))
        if n == 100_000:
            result.targets.append(Target("quadratic OLS fit + analytic intervals, 100,000 rows",
                                         a.get("s"), FIT_LIMIT_S, "s", kind="below"))
    if 100_000 not in ctx.sizes:
        result.targets.append(Target("quadratic OLS fit + analytic intervals, 100,000 rows",
                                     None, FIT_LIMIT_S, "s", kind="below",
                                     note="size 100,000 not in --sizes"))
    return result


# --------------------------------------------------------------------------- loo, jackknife+
def _loo_n(ctx: Context) -> int:
    return 200 if ctx.quick else 2000


@case("loo", "leave-one-out, quadratic OLS: closed form vs n explicit statsmodels refits")
def loo_case(ctx: Context) -> CaseResult:
    n = _loo_n(ctx)
    reps = 1 if ctx.quick else 3
    ctx.log(f"  loo n={n:,} ...")
    closed, naive = _pair(ctx, "refit_loo_closed", "naive_loo", n, reps)
    full = _summary([_probe(ctx, "refit_loo", n) for _ in range(reps)])
    result = CaseResult()
    label = f"{n:,} statsmodels refits + get_prediction"
    for name, got, what in (("refit.validate.crossval.loo_ols (closed form)", closed, "closed"),
                            ("cross_validate(scheme loo)", full, "whole")):
        d = _diff(got, naive)
        row = _row("loo", n, name, label, got, naive,
                   f"max |refit - statsmodels| {d:.1e}" if d is not None else "")
        result.rows.append(row)
        result.targets.append(Target(f"LOO speed-up, {what} (n = {n:,})", _speedup(row),
                                     LOO_SPEEDUP, "x", kind="min"))
        result.targets.append(Target(f"LOO same numbers as statsmodels, {what}", d,
                                     SAME_NUMBERS, "abs"))
    return result


@case("jackknife+", "jackknife+ quadratic OLS: closed form vs n explicit statsmodels refits")
def jackknife_case(ctx: Context) -> CaseResult:
    n = _loo_n(ctx)
    reps = 1 if ctx.quick else 3
    result = CaseResult()
    for m in (1, 200):
        ctx.log(f"  jackknife+ n={n:,}, {m} new value(s) ...")
        extra = [f"--m={m}"]
        closed, naive = _pair(ctx, "refit_jackknife_plus_closed", "naive_jackknife_plus", n,
                              reps, extra)
        full = _summary([_probe(ctx, "refit_jackknife_plus", n, extra) for _ in range(reps)])
        label = f"{n:,} statsmodels refits, {m} new value(s)"
        for name, got, what in (("refit.models.intervals.jackknife_plus", closed, "closed form"),
                                ("refit.fit + predict(jackknife+)", full, "fit + predict")):
            d = _diff(got, naive)
            row = _row("jackknife+", n, f"{name}, m={m}", label, got, naive,
                       f"max |refit - statsmodels| {d:.1e}" if d is not None else "")
            result.rows.append(row)
            result.targets.append(Target(f"jackknife+ speed-up, {what}, {m} new value(s)",
                                         _speedup(row), JACKKNIFE_SPEEDUP, "x", kind="min"))
            if what == "closed form":
                result.targets.append(Target(f"jackknife+ same numbers, {m} new value(s)", d,
                                             SAME_NUMBERS, "abs"))
    return result


# --------------------------------------------------------------------------- bootstrap
@case("bootstrap", "1,000 case-resampled refits of a quadratic vs a statsmodels loop")
def bootstrap_case(ctx: Context) -> CaseResult:
    result = CaseResult()
    sizes = [n for n in ctx.sizes if n <= 100_000] or [min(ctx.sizes)]
    for n in sizes:
        ctx.log(f"  bootstrap n={n:,} ...")
        reps = 1 if n >= 100_000 else min(3, ctx.repeats_for(n))
        a, b = _pair(ctx, "refit_bootstrap", "naive_bootstrap", n, reps)
        d = _diff(a, b)
        result.rows.append(_row("bootstrap", n, "fit + predict(bootstrap-pairs), B = 1,000",
                                "1,000 sm.OLS fits in a loop (same draws)", a, b,
                                f"max |refit - statsmodels| {d:.1e}" if d is not None else ""))
        if n == 10_000:
            result.targets.append(Target("1,000 bootstrap refits, 10,000 rows", a.get("s"),
                                         BOOT_LIMIT_S, "s", kind="below"))
    if 10_000 not in sizes:
        result.targets.append(Target("1,000 bootstrap refits, 10,000 rows", None,
                                     BOOT_LIMIT_S, "s", kind="below",
                                     note="size 10,000 not in --sizes"))
    return result


# --------------------------------------------------------------------------- coefficient files
def demo_run(ctx: Context) -> Path | None:
    """A run folder of the demo recipe (its fits/ are the coefficient files), made once."""
    out = ctx.data_dir / "demo_run"
    if (out / "fits").is_dir():
        return out
    run = measure.run_once([ctx.refit, "fit", str(DEMO_RECIPE), "--out", str(out),
                            "--overwrite", "--quiet"])
    return out if run.returncode == 0 else None


@case("evaluate", "a coefficient file with intervals on many values vs pandas apply")
def evaluate_case(ctx: Context) -> CaseResult:
    result = CaseResult()
    run = demo_run(ctx)
    files = {"inverse": "quadratic__ols__inverse__analytic.json",
             "forward": "quadratic__ols__forward__analytic.json",
             "jackknife+": "quadratic__ols__inverse__jackknife-plus.json"}
    if run is None:
        result.targets.append(Target("coefficient file on 1,000,000 values", None,
                                     EVAL_LIMIT_S, "s", kind="below",
                                     note="the demo recipe run failed"))
        return result
    for n in ctx.sizes:
        ctx.log(f"  evaluate n={n:,} ...")
        reps = 1 if n >= 1_000_000 else min(3, ctx.repeats_for(n))
        path = run / "fits" / files["inverse"]
        a, b = _pair(ctx, "refit_evaluate", "naive_evaluate", n, reps, [path])
        d = _diff(a, b)
        result.rows.append(_row("evaluate", n, "Equation.predict, inverse quadratic",
                                "Series.apply(formula per value)", a, b,
                                f"max |refit - apply| {d:.1e}" if d is not None else ""))
        extra_rows = {}
        for kind in ("forward", "jackknife+"):
            got = _summary([_probe(ctx, "refit_evaluate", n, [run / "fits" / files[kind]])
                            for _ in range(reps)])
            extra_rows[kind] = got
            result.rows.append(_row("evaluate", n, f"Equation.predict, {kind} quadratic",
                                    "–", got, {}, "no naive counterpart timed"))
        if n == 1_000_000:
            for kind in ("forward", "jackknife+"):
                got = _summary([_probe(ctx, "refit_evaluate_distinct", n,
                                       [run / "fits" / files[kind]]) for _ in range(reps)])
                result.rows.append(_row("evaluate", n,
                                        f"Equation.predict, {kind} quadratic, all distinct",
                                        "–", got, {}, "every value different (no repeats "
                                        "to share): no target, shown for comparison"))
            result.targets += [
                Target("coefficient file (inverse) on 1,000,000 values", a.get("s"),
                       EVAL_LIMIT_S, "s", kind="below"),
                Target("coefficient file (forward quadratic) on 1,000,000 values",
                       extra_rows["forward"].get("s"), EVAL_LIMIT_S, "s", kind="below"),
                Target("coefficient file (jackknife+ quadratic) on 1,000,000 values",
                       extra_rows["jackknife+"].get("s"), EVAL_LIMIT_S, "s", kind="below")]
    return result


CONSUMER = ("import refit.coefficients as c; e = c.load({path!r}); "
            "p = e.predict([35.0, 80.0, 120.0]); assert p.estimate.shape == (3,)")
NAIVE_CONSUMER = ("import pickle, numpy as np, statsmodels.api as sm; "
                  "r = pickle.load(open({path!r}, 'rb')); x = np.array([35.0, 80.0, 120.0]); "
                  "r.get_prediction(np.column_stack([x**0, x, x*x])).summary_frame(alpha=0.05)")


def _pickled_fit(ctx: Context) -> Path:
    path = _scratch(ctx) / "statsmodels_quadratic.pickle"
    if not path.is_file():
        code = ("import sys, pickle, numpy as np, statsmodels.api as sm; "
                f"sys.path.insert(0, {str(HERE)!r}); import datagen; "
                "x, y = datagen.fit_data(113); "
                "r = sm.OLS(y, np.column_stack([x**0, x, x*x])).fit(); "
                f"pickle.dump(r, open({str(path)!r}, 'wb'))")
        measure.run_once([ctx.python, "-c", code])
    return path


@case("consumer", "import refit.coefficients + load + predict in a fresh process")
def consumer_case(ctx: Context) -> CaseResult:
    result = CaseResult()
    run = demo_run(ctx)
    if run is None:
        return result
    path = str(run / "fits" / "quadratic__ols__inverse__analytic.json")
    reps = 3 if ctx.quick else 7
    got = measure.interleaved({
        "refit": [ctx.python, "-c", CONSUMER.format(path=path)],
        "naive": [ctx.python, "-c", NAIVE_CONSUMER.format(path=str(_pickled_fit(ctx)))]},
        reps)
    bad = [c for c in got["refit"].returncodes if c]
    note = f"median of {reps} fresh processes"
    if bad:
        note += "; refit failed: " + got["refit"].last.stderr.strip()[-200:]
    result.rows.append(Row("consumer", None, "python -c 'import refit.coefficients; load; "
                           "predict'", "unpickle a statsmodels fit + get_prediction",
                           got["refit"].wall_s, got["naive"].wall_s, got["refit"].peak_mb,
                           got["naive"].peak_mb, note, _walls(got["refit"]),
                           _walls(got["naive"])))
    result.targets.append(Target("import + load + predict, fresh process",
                                 None if bad else got["refit"].wall_s, CONSUMER_LIMIT_S, "s",
                                 kind="below"))
    return result


def _walls(summary: measure.Summary) -> list[float]:
    return [round(r.wall_s, 4) for r in summary.runs]


# --------------------------------------------------------------------------- matrix, demo
@case("matrix", "refit fit on the demo recipe (--jobs 1 and 2) and refit demo")
def matrix_case(ctx: Context) -> CaseResult:
    result = CaseResult()
    out = _scratch(ctx)
    reps = 1 if ctx.quick else 3
    cmds = {j: [ctx.refit, "fit", str(DEMO_RECIPE), "--out", str(out / f"fit_jobs{j}"),
                "--overwrite", "--quiet", "--jobs", str(j)] for j in (1, 2)}
    ctx.log("  refit fit calib_demo/recipe.toml --jobs 1 / 2 ...")
    got = measure.interleaved({"1": cmds[1], "2": cmds[2]}, reps)
    one, two = got["1"], got["2"]
    same = _same_run(out / "fit_jobs1", out / "fit_jobs2")
    result.rows.append(Row("matrix", 113, "refit fit calib_demo/recipe.toml --jobs 1", "–",
                           one.wall_s, None, one.peak_mb, None,
                           f"12 candidates x 2 schemes x 5 folds x 10 repeats; exit codes "
                           f"{one.returncodes}", _walls(one), []))
    result.rows.append(Row("matrix", 113, "refit fit calib_demo/recipe.toml --jobs 2",
                           "the same with --jobs 1", two.wall_s, one.wall_s, two.peak_mb,
                           one.peak_mb, f"peak of the parent process only; outputs identical "
                           f"to --jobs 1: {same}", _walls(two), _walls(one)))
    result.targets.append(Target("refit fit calib_demo/recipe.toml (--jobs 1)",
                                 one.wall_s if not any(one.returncodes) else None,
                                 DEMO_FIT_LIMIT_S, "s", kind="below"))
    ctx.log("  refit demo ...")
    demo = measure.run_repeated([ctx.refit, "demo", "--out", str(out / "demo"), "--quiet"],
                                1 if ctx.quick else 2)
    result.rows.append(Row("matrix", None, "refit demo", "–", demo.wall_s, None, demo.peak_mb,
                           None, f"check, admit, fit, publish, apply, compare, report; exit "
                           f"codes {demo.returncodes}", _walls(demo), []))
    result.targets.append(Target("refit demo", None if any(demo.returncodes) else demo.wall_s,
                                 DEMO_LIMIT_S, "s", kind="below"))
    return result


def _same_run(a: Path, b: Path) -> bool:
    try:
        return ((a / "oof_predictions.csv").read_bytes() == (b / "oof_predictions.csv").read_bytes()
                and (a / "leaderboard.csv").read_bytes() == (b / "leaderboard.csv").read_bytes())
    except OSError:
        return False


SCALE_RECIPE = """# generated by benchmarks/fitcases.py: 6 candidates, grouped 5-fold
[data]
table = "{table}"

[function]
id = "map_from_bk_depth_scale"
response = "map_mm"
predictors = ["bk_depth_cm"]

[candidates]
forms = ["linear", "quadratic", "cubic"]
estimators = ["ols"]
directions = ["inverse", "forward"]

[validation]
scheme = "group-kfold"
folds = 5
repeats = 1
groups = "source"
seed = {seed}

[intervals]
level = 0.95
methods = ["analytic"]
"""


@case("scale", "a generated table through a 6-candidate recipe, grouped 5-fold")
def scale_case(ctx: Context) -> CaseResult:
    result = CaseResult()
    sizes = [n for n in ctx.sizes if 10_000 <= n <= 100_000] or [min(ctx.sizes)]
    for n in sizes:
        table = datagen.ensure_table(ctx.data_dir, n, seed=ctx.seed, schemas_dir=REPO / "schemas")
        recipe = ctx.data_dir / f"recipe_scale_n{n}.toml"
        recipe.write_text(SCALE_RECIPE.format(table=table.name, seed=ctx.seed),
                          encoding="utf-8")
        out = _scratch(ctx) / f"scale_{n}"
        ctx.log(f"  scale n={n:,} ...")
        got = measure.interleaved({
            "refit": [ctx.refit, "fit", str(recipe), "--out", str(out), "--overwrite",
                      "--quiet"],
            "naive": [ctx.python, str(HERE / "naive_scale.py"), str(table), "5",
                      str(ctx.seed)]}, 1)
        r, nv = got["refit"], got["naive"]
        used = ""
        try:
            used = f"{json.loads(nv.last.stdout.strip().splitlines()[-1])['n']:,} rows with " \
                   "a Bk depth used; "
        except (ValueError, IndexError, KeyError):
            pass
        note = (f"{used}refit: 6 candidates (3 forms x inverse/forward) under group-kfold "
                "and random k-fold, run folder written; naive: the 3 inverse candidates only, "
                f"same two schemes; exit codes refit {r.returncodes}, naive {nv.returncodes}")
        if r.returncodes[-1]:
            note += "; refit: " + r.last.stderr.strip()[-200:]
        result.rows.append(Row("scale", n, "refit fit RECIPE (6 candidates)",
                               "cross_val_predict x 3 candidates x 2 schemes", r.wall_s,
                               nv.wall_s, r.peak_mb, nv.peak_mb, note, _walls(r), _walls(nv)))
        if n == 100_000:
            result.targets.append(Target("100,000-row table, 6 candidates, grouped 5-fold",
                                         None if r.returncodes[-1] else r.wall_s,
                                         SCALE_LIMIT_S, "s", kind="below"))
        shutil.rmtree(out, ignore_errors=True)
    return result
