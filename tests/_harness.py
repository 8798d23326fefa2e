"""Shared test helpers: recipe text, small runs on the demo store, invented soils, NIST
StRD data, and running refit in real processes (kill and concurrency tests).

A child process imports refit and its heavy libraries first, prints ``ready`` and only then
runs the command, so a kill moment drawn after ``ready`` falls inside the command's own
work (reading, checking, staging, committing), not inside ``import pandas``.
"""

from __future__ import annotations

import json
import os
import re
import shutil
import signal
import subprocess
import sys
import time
from pathlib import Path

from refit._util.resources import demo_dir

NIST = Path(__file__).parent / "data" / "nist"

#: Number of kill moments per test: a handful in CI, >= 100 with REFIT_LONG=1.
LONG = os.environ.get("REFIT_LONG", "") not in ("", "0")

LAUNCH = """
import sys
import numpy, pandas, filelock, jsonschema  # noqa: F401  heavy imports before 'ready'
import refit.curate.store, refit.publish.registry, refit.curate.checks, refit.curate.tables, refit.curate.units  # noqa: F401
import refit.coefficients, refit.publish.verify  # noqa: F401
from refit.cli import main
sys.stdout.write("ready\\n")
sys.stdout.flush()
if len(sys.argv) > 1 and sys.argv[1] == "--gate":  # wait for "go" on stdin
    sys.stdin.readline()
    sys.argv.pop(1)
main(args=sys.argv[1:], prog_name="refit")
"""

#: Sections every test recipe starts from; ``recipe_toml`` merges a test's own keys on top.
RECIPE_DEFAULTS = {
    "data": {"store": "store"},
    "subset": {},
    "function": {"id": "map_from_bk_depth", "response": "map_mm",
                 "predictors": ["bk_depth_cm"]},
    "candidates": {"forms": ["linear", "quadratic"], "estimators": ["ols"],
                   "directions": ["inverse"]},
    "validation": {},
    "intervals": {"level": 0.95, "methods": ["analytic"]},
}


def toml_value(value) -> str:
    """A TOML 1.0 literal (toml.io/en/v1.0.0) for a str, bool, number, list or inline table."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    if isinstance(value, dict):
        return "{ " + ", ".join(f"{k} = {toml_value(v)}" for k, v in value.items()) + " }"
    return repr(value)


def recipe_toml(**sections) -> str:
    """Recipe text: ``RECIPE_DEFAULTS`` with each given section's keys merged on top.

    A section given as ``None`` is left out, a key given as ``None`` is dropped, and an
    empty section is not written (so the reader's own defaults apply)."""
    lines: list[str] = []
    for name, default in RECIPE_DEFAULTS.items():
        given = sections.pop(name, {})
        if given is None:
            continue
        keys = {k: v for k, v in {**default, **given}.items() if v is not None}
        if keys:
            lines += ["", f"[{name}]", *(f"{k} = {toml_value(v)}" for k, v in keys.items())]
    assert not sections, f"unknown recipe sections {sorted(sections)}"
    return "\n".join(lines) + "\n"


#: The small two-candidate recipe most run-folder tests fit on a copy of the demo store.
RECIPE = recipe_toml(subset={"parent_material": "loess"},
                     validation={"scheme": "kfold", "folds": 3, "seed": 20261209})
LINEAR = "linear__ols__inverse__analytic.json"
QUADRATIC = "quadratic__ols__inverse__analytic.json"


def n_runs(ci: int, long: int = 100) -> int:
    """How many kill moments: ``ci`` normally, ``long`` with REFIT_LONG=1."""
    return long if LONG else ci


def refit_args(*args) -> list[str]:
    return [sys.executable, "-c", LAUNCH, *map(str, args)]


def start(*args, cwd=None, gate: bool = False) -> subprocess.Popen:
    """Start ``refit ARGS`` in a child process; return once it has said ``ready``.

    With ``gate`` the child then waits for a line on its stdin before it runs the command
    (so several children can be released at the same moment)."""
    env = {**os.environ, "PYTHONHASHSEED": "0", "COLUMNS": "200"}
    args = ("--gate", *args) if gate else args
    proc = subprocess.Popen(refit_args(*args), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            stdin=subprocess.PIPE if gate else subprocess.DEVNULL,
                            text=True, cwd=cwd, env=env)
    line = proc.stdout.readline()
    if line.strip() != "ready":
        out, err = proc.communicate(timeout=60)
        raise AssertionError(f"child did not start: {line}{out}{err}")
    return proc


def run(*args, cwd=None, timeout: float = 120) -> tuple[int, str, str]:
    """Run ``refit ARGS`` to the end: (exit code, stdout, stderr)."""
    proc = start(*args, cwd=cwd)
    out, err = proc.communicate(timeout=timeout)
    return proc.returncode, out, err


def run_killed(*args, delay: float, cwd=None) -> tuple[int, str, str]:
    """Run ``refit ARGS`` and SIGKILL it ``delay`` s after ``ready`` (if still running)."""
    proc = start(*args, cwd=cwd)
    deadline = time.monotonic() + delay
    while time.monotonic() < deadline and proc.poll() is None:
        time.sleep(min(0.002, max(0.0, deadline - time.monotonic())))
    if proc.poll() is None:
        proc.send_signal(signal.SIGKILL)
    out, err = proc.communicate(timeout=60)
    return proc.returncode, out, err


def timed_run(*args, cwd=None) -> float:
    """Seconds from ``ready`` to exit of a full run (must succeed)."""
    proc = start(*args, cwd=cwd)
    t0 = time.monotonic()
    out, err = proc.communicate(timeout=120)
    assert proc.returncode == 0, out + err
    return time.monotonic() - t0


def snapshot(folder: Path) -> dict[str, bytes]:
    """Every file under ``folder`` (relative POSIX path -> bytes), except the lock file."""
    folder = Path(folder)
    return {p.relative_to(folder).as_posix(): p.read_bytes()
            for p in sorted(folder.rglob("*")) if p.is_file() and p.name != ".lock"}


def visible(snap: dict[str, bytes]) -> dict[str, bytes]:
    """The entries a reader sees: no path component starts with '.' (no temporary files)."""
    return {k: v for k, v in snap.items() if not any(s.startswith(".") for s in k.split("/"))}


def copy_demo_store(dest: Path) -> Path:
    shutil.copytree(demo_dir() / "store", dest)
    return dest


def make_fits(root: Path, recipe: str = RECIPE, out: str = "run") -> Path:
    """Run ``recipe`` (default: a small run, 2 candidates) on ``root/store`` (a copy of the
    demo store unless one is there already); returns RUN/fits."""
    from refit.select.recipe import read_recipe
    from refit.validate.candidates import run_recipe
    from refit.validate.runfolder import write_run

    if not (root / "store").exists():
        copy_demo_store(root / "store")
    (root / "recipe.toml").write_text(recipe, encoding="utf-8")
    run_ = run_recipe(read_recipe(root / "recipe.toml"))
    return write_run(run_, root / out, overwrite=True) / "fits"


def publish_all(fits: Path, registry: Path, *names: str) -> Path:
    """Publish ``fits/NAME`` for each name in turn, creating ``registry`` with the first."""
    from refit.publish.registry import publish

    for i, name in enumerate(names):
        publish(fits / name, registry, create=i == 0)
    return registry


def invented_soils(n: int, seed: int, offsets, *, forest_every: int | None = None):
    """Invented soils (seeded): MAP rises with Bk depth, source ``i % len(offsets)`` shifted
    by ``offsets[i % len(offsets)]`` [mm]; vegetation grassland, or forest on every
    ``forest_every``-th row. Demo-style data for the run tests, not a reference."""
    import numpy as np
    import pandas as pd

    rng = np.random.default_rng(seed)
    src = np.arange(n) % len(offsets)
    bk = rng.uniform(20, 150, n)
    offset = np.asarray(offsets)[src]
    vegetation = ("grassland" if forest_every is None
                  else np.where(np.arange(n) % forest_every == 0, "forest", "grassland"))
    return pd.DataFrame({
        "profile_id": [f"P{i:03d}" for i in range(n)],
        "latitude": -40 + rng.uniform(0, 1, n), "longitude": 53 + rng.uniform(0, 1, n),
        "source": [f"SRC-{chr(65 + s)}" for s in src],
        "map_mm": (200 + 4 * bk + offset + rng.normal(0, 40, n)).round(1),
        "bk_depth_cm": bk.round(1), "bk_thickness_cm": (20 + bk / 4).round(1),
        "vegetation": vegetation, "parent_material": "loess",
        "age_ka": rng.uniform(1, 50, n).round(1)})


#: the columns of the invented soils of a workbook sheet
SHEET_HEADER = ["profile_id", "latitude", "longitude", "source", "map_mm", "bk_depth_cm"]


def sheet_soils(n: int, seed: int, *, prefix: str, source: str, where=(-31.0, 141.0),
                depth=(20.0, 150.0), line=(140.0, 3.1), sd: float = 55.0,
                sources: int = 4) -> list[list]:
    """Rows (under :data:`SHEET_HEADER`) of ``n`` invented soils of an invented basin for a
    workbook sheet: Bk depth uniform in ``depth`` [cm], MAP = line[0] + line[1] x depth plus
    normal noise of SD ``sd`` [mm], rounded as typed; ids ``PREFIX-001``...; ``sources``
    sources named ``SOURCE-k``; coordinates within 2 degrees of ``where``."""
    import numpy as np

    rng = np.random.default_rng(seed)
    d = rng.uniform(*depth, n).round(1)
    mapmm = (line[0] + line[1] * d + rng.normal(0.0, sd, n)).round(1)
    return [[f"{prefix}-{i + 1:03d}", round(where[0] - rng.uniform(0, 2), 4),
             round(where[1] + rng.uniform(0, 2), 4), f"{source}-{i % sources}",
             float(mapmm[i]), float(d[i])] for i in range(n)]


def write_workbook(path, sheets: dict) -> None:
    """An xlsx file (openpyxl) with one worksheet per item of ``sheets``: title -> rows of
    cells, in order."""
    from openpyxl import Workbook

    book = Workbook()
    book.remove(book.active)
    for title, rows in sheets.items():
        ws = book.create_sheet(title)
        for row in rows:
            ws.append(row)
    book.save(path)


def nist_strd(name: str):
    """Data block of a NIST StRD file in tests/data/nist (y first, then x...), read via the
    line range its header states."""
    import pandas as pd

    lines = (NIST / f"{name}.dat").read_text().splitlines()
    first, last = map(int, re.search(r"Data\s+\(lines (\d+) to (\d+)\)",
                                     "\n".join(lines[:10])).groups())
    names = lines[first - 2].split()[1:]
    rows = [[float(v) for v in ln.split()] for ln in lines[first - 1:last]]
    return pd.DataFrame(rows, columns=names)


def cli(*args) -> tuple[int, str]:
    """Run ``refit ARGS`` in-process (click's CliRunner): (exit code, stdout + stderr)."""
    from click.testing import CliRunner

    from refit.cli import main

    result = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=False)
    return result.exit_code, result.output


def forward_files(tmp_path) -> list[str]:
    """Two forward fits (depth and thickness of the Bk horizon on MAP) from a seeded
    simulation (a test input, not demo data), written as coefficient files."""
    import numpy as np
    import pandas as pd

    from refit.coefficients import fit_record, write_record
    from refit.models.fitting import fit

    rng = np.random.default_rng(5)
    x = rng.uniform(200, 1200, 60)
    t = pd.DataFrame({"map_mm": x, "bk_depth_cm": 10 + 0.1 * x + rng.normal(0, 8, 60),
                      "bk_thickness_cm": 20 + 0.05 * x + rng.normal(0, 6, 60)})
    prov = {"dataset": {"name": "t", "version": 1, "sha256": "0" * 64}, "subset": {},
            "recipe": None, "recipe_sha256": None}
    files = []
    for p in ("bk_depth_cm", "bk_thickness_cm"):
        rec = fit_record(fit(t, "map_mm", [p], direction="forward"),
                         function_id=f"map_from_{p}", cv=None, level=0.95,
                         interval_method="analytic", provenance=prov)
        files.append(str(write_record(rec, tmp_path / f"{p}.json")))
    return files


def fieller_set(x, y, y0, level: float = 0.95):
    """The classical-calibration (Fieller) set of a straight line fitted by statsmodels
    OLS, solved independently of refit: ``{x : (y0 - b0 - b1 x)^2 <= t^2 (s^2 + V00 +
    2 x V01 + x^2 V11)}``, i.e. ``A x^2 - 2 B x + C <= 0`` (Fieller 1954, JRSS B 16:175;
    Draper & Smith, Applied Regression Analysis, section 3.2; from memory), with
    numpy.roots and t from scipy.stats.t.

    Returns
    -------
    (coef, roots, estimate, res)
        ``[A, -2B, C]``; the real parts of the roots, sorted; the point estimate
        ``(y0 - b0) / b1``; the statsmodels results.
    """
    import numpy as np
    import statsmodels.api as sm
    from scipy import stats

    res = sm.OLS(y, sm.add_constant(x)).fit()
    (b0, b1), V, s2 = res.params, res.cov_params(), res.scale
    t = stats.t.ppf(0.5 + level / 2, len(x) - 2)
    d = y0 - b0
    coef = [b1 * b1 - t * t * V[1, 1], -2 * (b1 * d + t * t * V[0, 1]),
            d * d - t * t * (s2 + V[0, 0])]
    return coef, np.sort(np.roots(coef).real), d / b1, res
