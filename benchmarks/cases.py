"""The benchmark cases. A case is one small function registered with ``@case``.

Each case receives a :class:`Context` and returns a :class:`CaseResult`: rows for the table
(refit's figure beside the naive way's, measured in the same run) and the targets it checks.
To add a case (fitting, leave-one-out, bootstrap, ...), write a function here and decorate it::

    @case("loo", "leave-one-out OLS vs explicit statsmodels refits")
    def loo(ctx: Context) -> CaseResult:
        ...

Every command is timed in a fresh process (see ``measure.py``); generated data only, seeded.
"""

from __future__ import annotations

import json
import statistics
import sys
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Callable

import datagen
import measure

HERE = Path(__file__).resolve().parent
REPO = HERE.parent

HELP_LIMIT_S = 0.3
CHECK_RATIO_LIMIT = 2.0
CHECK_PEAK_LIMIT_MB = 2000.0  # 2 GB = 2e9 bytes
TARGET_ROWS = 1_000_000
NAIVE_IMPORTS = "import pandas, pandera.pandas, statsmodels.api, sklearn, matplotlib.pyplot"
NAIVE_LABEL = "import the whole stack at start-up"


@dataclass
class Context:
    """What every case needs: sizes, repeats, where the data goes, the executables."""

    sizes: list[int]
    quick: bool
    seed: int
    data_dir: Path
    python: str
    refit: str
    repeats: int | None = None  # None: chosen per size
    log: Callable[[str], None] = print

    def repeats_for(self, n: int) -> int:
        if self.repeats:
            return self.repeats
        if self.quick:
            return 1
        return 5 if n <= 10_000 else 3


@dataclass
class Row:
    """One line of the table: refit's figure and the naive way's, same run, same machine."""

    case: str
    n: int | None
    refit: str          # what was timed for refit
    naive: str          # what was timed as the naive way
    refit_s: float | None
    naive_s: float | None
    refit_mb: float | None = None
    naive_mb: float | None = None
    note: str = ""
    refit_runs: list[float] = field(default_factory=list)  # every wall time behind the median
    naive_runs: list[float] = field(default_factory=list)

    @property
    def ratio(self) -> float | None:
        if self.refit_s is None or not self.naive_s:
            return None
        return self.refit_s / self.naive_s

    def to_dict(self) -> dict:
        return {**asdict(self), "ratio": self.ratio}


@dataclass
class Target:
    """A target from the issues, with the measured figure and PASS / FAIL / SKIP."""

    name: str
    measured: float | None
    limit: float
    unit: str
    kind: str = "max"    # "max": measured <= limit passes; "below": measured < limit;
    #                      "min": measured >= limit (a speed-up)
    note: str = ""

    @property
    def status(self) -> str:
        if self.measured is None:
            return "SKIP"
        if self.kind == "min":
            return "PASS" if self.measured >= self.limit else "FAIL"
        ok = self.measured <= self.limit if self.kind == "max" else self.measured < self.limit
        return "PASS" if ok else "FAIL"

    def to_dict(self) -> dict:
        return {**asdict(self), "status": self.status}


@dataclass
class CaseResult:
    rows: list[Row] = field(default_factory=list)
    targets: list[Target] = field(default_factory=list)


CASES: list[tuple[str, str, Callable[[Context], CaseResult]]] = []


def case(name: str, title: str):
    """Register a benchmark case under ``name`` (used by ``--cases``)."""

    def register(fn: Callable[[Context], CaseResult]):
        CASES.append((name, title, fn))
        return fn

    return register


# --------------------------------------------------------------------------- start-up


@case("help", "refit --help and refit check --help vs importing the whole stack")
def help_startup(ctx: Context) -> CaseResult:
    repeats = 3 if ctx.quick else 7
    floor = measure.run_repeated([ctx.python, "-c", "pass"], repeats, warmup=1)
    naive_cmd = [ctx.python, "-c", NAIVE_IMPORTS]
    naive = measure.run_repeated(naive_cmd, repeats, warmup=1)
    result = CaseResult()
    for args in (["--help"], ["check", "--help"]):
        label = "refit " + " ".join(args)
        ctx.log(f"  {label} ...")
        got = measure.run_repeated([ctx.refit, *args], repeats, warmup=1)
        bad = [c for c in got.returncodes if c != 0]
        note = (f"median of {repeats}; bare `python -c pass` {floor.wall_s:.3f} s; naive = "
                f"`python -c '{NAIVE_IMPORTS}'`")
        if bad:
            note += f"; exit codes {got.returncodes}: {got.last.stderr.strip()[-200:]}"
        result.rows.append(Row("help", None, label, NAIVE_LABEL,
                               got.wall_s, naive.wall_s, got.peak_mb, naive.peak_mb, note,
                               _walls(got), _walls(naive)))
        result.targets.append(Target(f"`{label}` wall time", None if bad else got.wall_s,
                                     HELP_LIMIT_S, "s"))
    return result


# --------------------------------------------------------------------------- check


def _check_ready() -> str | None:
    """None when ``refit check`` exists, else why not (so the case can say it skipped)."""
    if not (REPO / "refit" / "curate" / "checks.py").is_file():
        return "refit/curate/checks.py does not exist yet"
    cli = (REPO / "refit" / "cli" / "check.py").read_text(encoding="utf-8")
    if "not ready yet" in cli:
        return "refit/cli/check.py is still the placeholder"
    return None


def _probe(ctx: Context, what: str, path: Path) -> tuple[measure.Run, dict]:
    run = measure.run_once([ctx.python, str(HERE / "probes.py"), what, str(path)])
    if run.returncode != 0:
        return run, {"error": run.stderr.strip()[-300:]}
    try:
        return run, json.loads(run.stdout.strip().splitlines()[-1])
    except (ValueError, IndexError):
        return run, {"error": "probe printed no JSON: " + run.stdout[-200:]}


@case("check", "refit check FILE vs a bare pandas.read_csv(FILE)")
def check_table(ctx: Context) -> CaseResult:
    result = CaseResult()
    not_ready = _check_ready()
    for n in ctx.sizes:
        ctx.log(f"  generating {n:,} rows (cached in {ctx.data_dir.name}/) ...")
        path = datagen.ensure_table(ctx.data_dir, n, seed=ctx.seed, schemas_dir=REPO / "schemas")
        path.read_bytes()  # warm the page cache, so neither side pays for the disk
        mb = path.stat().st_size / 1e6
        size = f"{mb:.0f} MB" if mb >= 10 else f"{mb:.1f} MB"
        naive_label = "python -c 'pandas.read_csv(FILE)'"
        naive_cmd = [ctx.python, "-c", f"import pandas; pandas.read_csv({str(path)!r})"]
        if not_ready:
            naive = measure.run_repeated(naive_cmd, ctx.repeats_for(n))
            result.rows.append(Row("check", n, "refit check FILE", naive_label, None,
                                   naive.wall_s, None, naive.peak_mb,
                                   f"skipped: {not_ready}; file {size}"))
            continue
        ctx.log(f"  refit check on {n:,} rows ({size}) x{ctx.repeats_for(n)} ...")
        got = measure.interleaved({"refit": [ctx.refit, "check", str(path)],
                                   "naive": naive_cmd}, ctx.repeats_for(n))
        refit_s, codes = got["refit"], got["refit"].returncodes
        note = f"file {size}; median of {len(codes)}"
        if any(c != 0 for c in codes):
            note += f"; EXIT {codes} (expected 0): {_first_lines(refit_s.last)}"
        result.rows.append(Row("check", n, "refit check FILE", naive_label, refit_s.wall_s,
                               got["naive"].wall_s, refit_s.peak_mb, got["naive"].peak_mb, note,
                               _walls(refit_s), _walls(got["naive"])))
        result.rows.append(_in_process_row(ctx, n, path))
        if n == TARGET_ROWS:
            result.targets += [
                Target(f"`refit check` / read_csv at {n:,} rows", result.rows[-2].ratio,
                       CHECK_RATIO_LIMIT, "x"),
                Target(f"`refit check` peak memory at {n:,} rows", refit_s.peak_mb,
                       CHECK_PEAK_LIMIT_MB, "MB", kind="below"),
            ]
    if TARGET_ROWS not in ctx.sizes or not_ready:
        why = not_ready or f"size {TARGET_ROWS:,} not in --sizes"
        result.targets += [Target("`refit check` / read_csv at 1,000,000 rows", None,
                                  CHECK_RATIO_LIMIT, "x", note=why),
                           Target("`refit check` peak memory at 1,000,000 rows", None,
                                  CHECK_PEAK_LIMIT_MB, "MB", kind="below", note=why)]
    return result


def _in_process_row(ctx: Context, n: int, path: Path) -> Row:
    """check_file vs read_csv inside Python, imports excluded (median of the repeats)."""
    lib, naive = [], []
    for _ in range(ctx.repeats_for(n)):
        lib.append(_probe(ctx, "check_file", path))
        naive.append(_probe(ctx, "read_csv", path))
    lib_ok = [info for _, info in lib if "work_s" in info]
    naive_ok = [info for _, info in naive if "work_s" in info]
    med = lambda xs, key: statistics.median(x[key] for x in xs) if xs else None  # noqa: E731
    note_bits = []
    if lib_ok:
        info = lib_ok[-1]
        note_bits.append(f"imports: refit.curate.checks {med(lib_ok, 'import_s'):.2f} s, "
                         f"pandas {med(naive_ok, 'import_s') or 0:.2f} s")
        note_bits.append(f"errors {info['errors']}, warnings {info['warnings']}"
                         + (f" ({', '.join(info['rules'])})" if info["rules"] else ""))
    else:
        note_bits.append("check_file failed: " + lib[-1][1].get("error", "?"))
    return Row("check (in-process)", n, "refit.curate.checks.check_file(FILE)",
               "pandas.read_csv(FILE)", med(lib_ok, "work_s"), med(naive_ok, "work_s"),
               max(r.peak_mb for r, _ in lib), max(r.peak_mb for r, _ in naive),
               "; ".join(note_bits), [x["work_s"] for x in lib_ok], [x["work_s"] for x in naive_ok])


def _walls(summary: measure.Summary) -> list[float]:
    return [round(r.wall_s, 4) for r in summary.runs]


def _first_lines(run: measure.Run, k: int = 3) -> str:
    text = (run.stderr.strip() or run.stdout.strip()).splitlines()
    return " | ".join(text[:k])[:300]


def python_and_refit() -> tuple[str, str]:
    """The interpreter running the harness and the ``refit`` console script beside it."""
    import shutil

    beside = Path(sys.executable).parent / "refit"
    found = str(beside) if beside.is_file() else shutil.which("refit")
    if not found:
        raise SystemExit("benchmarks: the `refit` console script is not installed in this "
                         "environment; run `python -m pip install -e .` first.")
    return sys.executable, found


import fitcases  # noqa: E402,F401  (registers fit, loo, jackknife+, bootstrap, evaluate, ...)
import groupcases  # noqa: E402,F401  (registers grouped, newsource)
import robustcases  # noqa: E402,F401  (registers theil-sen-jk, robust-recipe)


# --------------------------------------------------------------------------- admit

ADMIT_STORE_ROWS, ADMIT_BATCH_ROWS, ADMIT_LIMIT_S = 100_000, 10_000, 5.0


def _admit_tables(ctx: Context) -> tuple[Path, Path]:
    """A store of 10^5 generated soils (built once, cached) and a batch of 10^4 new ones
    (ids renamed so they are new soils, not duplicate ids)."""
    import os
    import shutil


    store = ctx.data_dir / f"admit_store_{ADMIT_STORE_ROWS}_{ctx.seed}"
    batch = ctx.data_dir / f"admit_batch_{ADMIT_BATCH_ROWS}_{ctx.seed}.csv"
    if not (store / "manifest.json").is_file():
        base = datagen.ensure_table(ctx.data_dir, ADMIT_STORE_ROWS, seed=ctx.seed,
                                    schemas_dir=REPO / "schemas")
        shutil.rmtree(store, ignore_errors=True)
        sys.path.insert(0, str(REPO))
        from refit.curate.store import admit

        admit(base, store, today="2026-12-01")
    if not batch.is_file():
        frame = datagen.generate_frame(ADMIT_BATCH_ROWS, seed=ctx.seed + 1)
        frame["profile_id"] = "NEW" + frame["profile_id"].astype(str)
        frame.to_csv(batch.with_suffix(".part"), index=False)
        os.replace(batch.with_suffix(".part"), batch)
    return store, batch


@case("admit", "refit admit of 10^4 rows into a store of 10^5 (with the consistency test) "
               "vs reading both tables with pandas and writing them back")
def admit_batch(ctx: Context) -> CaseResult:
    import shutil
    import tempfile

    result = CaseResult()
    store, batch = _admit_tables(ctx)
    work = Path(tempfile.mkdtemp(prefix="refit-bench-admit-"))
    walls, naive_walls, codes = [], [], []
    try:
        for k in range(ctx.repeats_for(ADMIT_BATCH_ROWS)):
            copy = work / f"store{k}"
            shutil.copytree(store, copy)
            run = measure.run_once([ctx.refit, "admit", str(batch), "--into", str(copy),
                                    "--format", "json"])
            walls.append(run.wall_s)
            codes.append(run.returncode)
            naive = measure.run_once([ctx.python, "-c", (
                "import pandas as pd; a = pd.read_csv(%r, dtype=str); "
                "b = pd.read_csv(%r, dtype=str); "
                "pd.concat([a, b]).to_csv(%r, index=False)") % (
                str(copy / "records.csv"), str(batch), str(work / "naive.csv"))])
            naive_walls.append(naive.wall_s)
    finally:
        shutil.rmtree(work, ignore_errors=True)
    note = f"median of {len(walls)}" + ("" if all(c == 0 for c in codes) else
                                        f"; EXIT {codes}")
    refit_s, naive_s = statistics.median(walls), statistics.median(naive_walls)
    result.rows.append(Row("admit", ADMIT_BATCH_ROWS, "refit admit BATCH --into STORE(10^5)",
                           "pandas read both + concat + to_csv", refit_s, naive_s, note=note,
                           refit_runs=walls, naive_runs=naive_walls))
    result.targets.append(Target("`refit admit` 10^4 rows into 10^5 (consistency test)",
                                 refit_s, ADMIT_LIMIT_S, "s"))
    return result
