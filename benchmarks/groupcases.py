"""Benchmark cases of soils from new sources: a grouped recipe with mixed and group-level
conformal candidates, and the coverage simulation of ``newsource.py``.

Registered into :data:`cases.CASES` when ``cases`` is imported.

``grouped``
    ``refit fit`` (whole process, ``--jobs 1``) on a 12-candidate recipe: forms linear
    and quadratic x estimators ``ols`` and ``mixed`` x directions inverse and forward x
    interval methods ``analytic``, ``group-jackknife+``, ``group-cv+`` (12 valid), on 250
    invented soils in 10 sources (seeded; each source with its own MAP offset), group
    5-fold x 2 repeats by source and random k-fold beside it. Level 0.8, so the
    group-level intervals are finite with the 8 training sources of a fold (a 95 % one
    needs 19). No other program runs this matrix, so there is no naive way: the time is
    shown alone. Target: under 10 s on 2 cores (issue 14).
``newsource``
    ``python benchmarks/newsource.py`` (``--quick`` with ``--quick``): coverage and width
    of pooled OLS, the mixed model and group jackknife+ for soils of new sources, by
    simulation. Its figures are coverage, not speed: the row gives its time alone and the
    figures in the note; no target.
"""

from __future__ import annotations

import numpy as np

import measure
from cases import HERE, CaseResult, Context, Row, Target, case

GROUPED_LIMIT_S = 10.0
GROUPED_SOILS, GROUPED_SOURCES = 250, 10
GROUPED_RECIPE = """\
# 12 candidates on invented soils from 10 sources (benchmarks/groupcases.py)
[data]
table = "soils.csv"

[function]
id = "map_from_bk_depth"
response = "map_mm"
predictors = ["bk_depth_cm"]

[candidates]
forms = ["linear", "quadratic"]
estimators = ["ols", "mixed"]
directions = ["inverse", "forward"]

[validation]
scheme = "group-kfold"
groups = "source"
folds = 5
repeats = 2
seed = 14

[intervals]
level = 0.8
methods = ["analytic", "group-jackknife+", "group-cv+"]
"""


def grouped_soils(seed: int, n: int = GROUPED_SOILS, n_sources: int = GROUPED_SOURCES):
    """Invented soils (seeded): MAP [mm] rises with Bk depth [cm]; each source covers a
    slice of the depth range and carries its own offset (between-source SD 60 mm,
    within-source SD 60 mm). Not real data."""
    import pandas as pd

    rng = np.random.default_rng(seed)
    src = np.arange(n) % n_sources
    centre = rng.uniform(40, 130, n_sources)[src]
    bk = np.clip(centre + rng.uniform(-25, 25, n), 5, None)
    offset = rng.normal(0, 60, n_sources)[src]
    return pd.DataFrame({
        "profile_id": [f"G{i:04d}" for i in range(n)],
        "latitude": -35 + rng.uniform(0, 2, n), "longitude": 140 + rng.uniform(0, 2, n),
        "source": [f"SRC-{s:02d}" for s in src],
        "map_mm": (150 + 4.5 * bk + offset + rng.normal(0, 60, n)).round(1),
        "bk_depth_cm": bk.round(1), "bk_thickness_cm": (20 + bk / 4).round(1),
        "vegetation": "grassland", "parent_material": "loess"})


def recipe_time_case(ctx: Context, *, name: str, soils, recipe: str, label: str,
                     note: str, target: str, limit_s: float) -> CaseResult:
    """Time ``refit fit`` of a recipe on invented soils as a whole process (``--jobs 1``;
    3 runs, 1 with --quick): one row beside no naive way, and a below-``limit_s`` target."""
    folder = ctx.data_dir / name
    folder.mkdir(parents=True, exist_ok=True)
    soils.to_csv(folder / "soils.csv", index=False)
    (folder / "recipe.toml").write_text(recipe, encoding="utf-8")
    reps = 1 if ctx.quick else 3
    ctx.log(f"  refit fit {name} recipe ({len(soils)} soils) x{reps} ...")
    got = measure.run_repeated([ctx.refit, "fit", str(folder / "recipe.toml"), "--out",
                                str(folder / "run"), "--overwrite", "--quiet", "--jobs", "1"],
                               reps)
    failed = any(got.returncodes)
    note = f"{note}; no naive way: time alone; exit codes {got.returncodes}"
    if failed:
        note += ": " + (got.last.stderr.strip() or got.last.stdout.strip())[-300:]
    result = CaseResult()
    result.rows.append(Row(name, len(soils), label, "– (none)", got.wall_s, None,
                           got.peak_mb, None, note, [round(r.wall_s, 4) for r in got.runs],
                           []))
    result.targets.append(Target(target, None if failed else got.wall_s, limit_s, "s",
                                 kind="below"))
    return result


@case("grouped", "refit fit: 12 candidates incl. mixed and group-conformal, 250 soils in 10 "
                 "sources, group 5-fold x 2 (time alone: no naive way)")
def grouped_case(ctx: Context) -> CaseResult:
    return recipe_time_case(
        ctx, name="grouped", soils=grouped_soils(ctx.seed), recipe=GROUPED_RECIPE,
        label="refit fit grouped 12-candidate recipe --jobs 1",
        note="12 candidates x 2 schemes x 5 folds x 2 repeats, level 0.8",
        target=f"grouped 12-candidate recipe, {GROUPED_SOILS} soils in {GROUPED_SOURCES} "
               "sources (--jobs 1)", limit_s=GROUPED_LIMIT_S)


@case("newsource", "coverage of soils from new sources by simulation (time alone; figures "
                   "in the note)")
def newsource_case(ctx: Context) -> CaseResult:
    cmd = [ctx.python, str(HERE / "newsource.py")] + (["--quick"] if ctx.quick else [])
    ctx.log("  " + " ".join(cmd[1:]) + " ...")
    run = measure.run_once(cmd)
    lines = [ln.strip() for ln in run.stdout.splitlines() if "coverage mean" in ln
             or "sources," in ln]
    note = ("coverage simulation, not a speed comparison: time alone; "
            + (" | ".join(lines) if run.returncode == 0
               else f"exit {run.returncode}: {run.stderr.strip()[-300:]}"))
    return CaseResult(rows=[Row("newsource", None, "python benchmarks/newsource.py"
                                + (" --quick" if ctx.quick else ""), "– (none)",
                                run.wall_s, None, run.peak_mb, None, note,
                                [round(run.wall_s, 4)], [])])
