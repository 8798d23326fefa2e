"""The demo: refit's whole job, as far as it exists, on the bundled invented scenario.

Everything is written under one output folder; the bundled ``calib_demo/`` is never
modified (its store is copied first).
"""

from __future__ import annotations

import json
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from refit._resources import demo_dir
from refit.errors import UsageError

MARKER = ".refit-demo"


@dataclass
class DemoResult:
    """What the demo did: labelled output paths, and the admit accounting."""

    outputs: dict[str, Path] = field(default_factory=dict)
    check: object = None   # refit.checks.CheckReport of the incoming table
    admit: object = None   # refit.store.AdmitResult
    run: object = None     # refit.matrix.Run of the demo recipe
    run_dir: Path | None = None


def prepare_out_dir(out: Path) -> None:
    """Create ``out``; replace it only if it holds an earlier demo (never other files)."""
    if out.exists():
        if not out.is_dir():
            raise UsageError(f"--out {out} is a file; give a folder for the demo output.")
        if (out / MARKER).exists():
            shutil.rmtree(out)
        elif any(out.iterdir()):
            raise UsageError(
                f"--out {out} exists and is not an earlier refit demo folder; "
                "give a new or empty folder so nothing of yours is overwritten."
            )
    out.mkdir(parents=True, exist_ok=True)
    (out / MARKER).write_text("written by `refit demo`; safe to delete\n", encoding="utf-8")


def run_demo(out: Path, echo: Callable[[str], None] | None = None, *,
             progress=None, after_admit: Callable | None = None) -> DemoResult:
    """Run check, admit and the recipe's fit matrix on the demo scenario into ``out``.

    Parameters
    ----------
    out : Path
        Output folder (created; an earlier demo output there is replaced).
    echo : callable, optional
        Where to print progress lines (``None``: silent).
    progress : callable, optional
        Progress callback for the fit matrix (see :func:`refit.matrix.run_recipe`).
    after_admit : callable, optional
        Called with the admit result before fitting starts (to print its accounting).
    """
    from refit.checks import check_file, load_vocabularies
    from refit.store import admit

    say = echo or (lambda *_: None)
    src = demo_dir()
    prepare_out_dir(out)
    result = DemoResult()

    store = out / "store"
    shutil.copytree(src / "store", store)
    result.outputs["calibration store"] = store
    incoming = src / "incoming_soils.csv"

    say(f"[bold]1. Check[/bold] the incoming soils: {incoming.name}")
    vocab_files = [p for p in [store / "vocabularies.json"] if p.exists()]
    report = check_file(incoming, vocabularies=load_vocabularies(*vocab_files))
    result.check = report
    check_json = out / "check-incoming.json"
    check_json.write_text(json.dumps(report.to_dict(), indent=2, default=str) + "\n", encoding="utf-8")
    result.outputs["check report (json)"] = check_json
    say(
        f"   {report.n_rows} rows: {len(report.errors)} error(s) in "
        f"{len(report.bad_rows())} row(s), {len(report.warnings)} warning(s) "
        f"(every problem in {check_json.name}; `refit check` prints them)"
    )

    say(f"[bold]2. Admit[/bold] them into a copy of the demo store: {store}")
    result.admit = admit(incoming, store, vocab_files=vocab_files)
    if result.admit.quarantine_file:
        result.outputs["rejected rows (quarantine)"] = store / result.admit.quarantine_file
    result.outputs["store manifest"] = store / "manifest.json"
    if after_admit is not None:
        after_admit(result.admit)

    from refit.matrix import run_recipe
    from refit.recipe import read_recipe
    from refit.runfolder import write_run

    recipe_path = out / "recipe.toml"  # its [data] store = "store" now names the copy
    shutil.copyfile(src / "recipe.toml", recipe_path)
    result.outputs["recipe"] = recipe_path
    say(f"[bold]3. Fit[/bold] the demo recipe on the updated store: {recipe_path}")
    result.run = run_recipe(read_recipe(recipe_path), progress=progress)
    result.run_dir = write_run(result.run, out / "run",
                               argv=["refit", "fit", str(recipe_path), "--out", str(out / "run")])
    result.outputs["fit run (leaderboard, fits)"] = result.run_dir
    return result
