"""The demo: refit's whole job on the bundled invented scenario (``calib_demo/``).

Steps: check the incoming soils, admit them into a copy of the demo store, run the demo
recipe's fit matrix, publish the winning fit into a demo registry, apply it and the
published equations to the demo fossils (decompacted for burial with the demo's constants
file), compare the intervals, draw the climate up each section, and write the HTML report.
Everything is written under one output folder; the bundled ``calib_demo/`` is never
modified (its store and recipe are copied first).
"""

from __future__ import annotations

import json
import shutil
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

from refit._util.resources import demo_dir
from refit.errors import UsageError

MARKER = ".refit-demo"
CONSTANTS = "compaction_constants.csv"  # invented compaction constants of the demo
SEED = 20261201  # Monte Carlo draws of the apply step


@dataclass
class DemoResult:
    """What the demo did: labelled output paths and each step's result object."""

    outputs: dict[str, Path] = field(default_factory=dict)
    check: object = None      # refit.curate.checks.CheckReport of the incoming table
    admit: object = None      # refit.curate.store.AdmitResult
    run: object = None        # refit.validate.candidates.Run of the demo recipe
    run_dir: Path | None = None
    published: object = None  # refit.publish.registry.PublishResult
    applied: object = None    # refit.apply.estimates.ApplyResult
    comparison: object = None  # pandas.DataFrame from refit.apply.compare
    section: object = None     # refit.apply.section.SectionResult
    forward: list = field(default_factory=list)  # forward coefficient files (posterior)


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


def published_equations() -> list[Path]:
    """The published literature equations shipped with refit (``refit/published``)."""
    return sorted((Path(__file__).resolve().parent / "published").glob("*.json"))


def run_demo(out: Path, echo: Callable[[str], None] | None = None, *,
             progress=None, show: Callable[[str, DemoResult], None] | None = None
             ) -> DemoResult:
    """Run the whole job on the demo scenario into ``out``.

    Parameters
    ----------
    out : Path
        Output folder (created; an earlier demo output there is replaced).
    echo : callable, optional
        Where to print progress lines (``None``: silent).
    progress : callable, optional
        Progress callback for the fit matrix (see :func:`refit.validate.candidates.run_recipe`).
    show : callable, optional
        Called as ``show(step, result)`` after the steps "admit", "fit" and "compare", so a
        caller can print their results in order.
    """
    say = echo or (lambda *_: None)
    shown = show or (lambda *_: None)
    prepare_out_dir(out)
    result = DemoResult()
    _check_and_admit(out, result, say)
    shown("admit", result)
    _fit(out, result, say, progress)
    shown("fit", result)
    _publish(out, result, say)
    _forward_fits(out, result, say)
    _apply_and_compare(out, result, say)
    shown("compare", result)
    _section(out, result, say)
    _report(out, result, say)
    return result


#: the demo's input tables, copied into the output folder beside the store and the recipe
INPUTS = ("incoming_soils.csv", "fossils.csv", "age_model.csv", "compaction_constants.csv",
          "compaction_constants.json")
#: how "where everything went" names each input, one line each (the JSON constants file
#: holds the same numbers as the CSV one)
INPUT_LABELS = {"incoming soils (input)": "incoming_soils.csv",
                "fossils (input)": "fossils.csv", "age model (input)": "age_model.csv",
                "compaction constants (input)": "compaction_constants.csv"}


def _check_and_admit(out: Path, result: DemoResult, say) -> None:
    from refit.curate.checks import check_file, load_vocabularies
    from refit.curate.store import admit

    src = demo_dir()
    store = out / "store"
    shutil.copytree(src / "store", store)
    result.outputs["calibration store"] = store
    for name in INPUTS:  # the inputs too, so every --help example runs from this folder
        shutil.copyfile(src / name, out / name)
    for label, name in INPUT_LABELS.items():
        result.outputs[label] = out / name
    incoming = out / "incoming_soils.csv"
    say(f"[bold]1. Check[/bold] the incoming soils: {incoming.name}")
    vocab_files = [p for p in [store / "vocabularies.json"] if p.exists()]
    report = check_file(incoming, vocabularies=load_vocabularies(*vocab_files))
    result.check = report
    check_json = out / "check-incoming.json"
    check_json.write_text(json.dumps(report.to_dict(), indent=2, default=str) + "\n",
                          encoding="utf-8")
    result.outputs["check report (json)"] = check_json
    say(f"   {report.n_rows} rows: {len(report.errors)} error(s) in "
        f"{len(report.bad_rows())} row(s), {len(report.warnings)} warning(s) "
        f"(every problem in {check_json.name}; `refit check` prints them)")
    say(f"[bold]2. Admit[/bold] them into a copy of the demo store: {store}")
    result.admit = admit(incoming, store, vocab_files=vocab_files)
    if result.admit.quarantine_file:
        result.outputs["rejected rows (quarantine)"] = store / result.admit.quarantine_file
    result.outputs["store manifest"] = store / "manifest.json"


def _fit(out: Path, result: DemoResult, say, progress) -> None:
    from refit.select.recipe import read_recipe
    from refit.validate.candidates import run_recipe
    from refit.validate.runfolder import write_run

    recipe_path = out / "recipe.toml"  # its [data] store = "store" now names the copy
    shutil.copyfile(demo_dir() / "recipe.toml", recipe_path)
    result.outputs["recipe"] = recipe_path
    say(f"[bold]3. Fit[/bold] the demo recipe on the updated store: {recipe_path}")
    result.run = run_recipe(read_recipe(recipe_path), progress=progress)
    result.run_dir = write_run(result.run, out / "run",
                               argv=["refit", "fit", str(recipe_path), "--out",
                                     str(out / "run")])
    result.outputs["fit run (leaderboard, fits)"] = result.run_dir


def winning_fit(run_dir: Path, leaderboard) -> Path:
    """The coefficient file of the leaderboard's top candidate."""
    from refit.validate.runfolder import fit_filename

    return run_dir / "fits" / fit_filename(str(leaderboard.iloc[0]["candidate"]))


def _publish(out: Path, result: DemoResult, say) -> None:
    from refit.publish.registry import publish

    best = winning_fit(result.run_dir, result.run.matrix.leaderboard)
    say(f"[bold]4. Publish[/bold] the top candidate ({best.stem}) into a demo registry")
    result.published = publish(best, out / "registry", create=True)
    say(f"   {result.published.function_id} {result.published.version} -> "
        f"{result.published.path}")
    result.outputs["registry (published fit)"] = result.published.path


FORWARD_RECIPES = ("forward_bk_depth.toml", "forward_cia_k.toml")


def _forward_fits(out: Path, result: DemoResult, say) -> None:
    """Forward fits of two proxies (depth to Bk, CIA-K) on the updated store, for the
    posterior of the fossils measured by both."""
    import pandas as pd

    from refit._util.atomic import write_text_atomic
    from refit.select.recipe import read_recipe
    from refit.soil.indices import derive_indices
    from refit.validate.candidates import run_recipe
    from refit.validate.runfolder import write_run

    folder = out / "forward"
    say("[bold]4b. Forward fits[/bold] of two proxies (depth to Bk, CIA-K on MAP) for the "
        "posterior")
    soils = derive_indices(pd.read_csv(out / "store" / "records.csv", low_memory=False))
    write_text_atomic(folder / "soils_with_indices.csv", soils.to_csv(index=False))
    for name in FORWARD_RECIPES:
        recipe = folder / name
        shutil.copyfile(demo_dir() / name, recipe)
        run = run_recipe(read_recipe(recipe))
        run_dir = write_run(run, folder / f"run_{recipe.stem}",
                            argv=["refit", "fit", str(recipe)])
        result.forward.append(winning_fit(run_dir, run.matrix.leaderboard))
    for path in result.forward:  # both files are named after their candidate: say where
        say(f"   {path}")
    result.outputs["forward fits (posterior)"] = folder


def _apply_and_compare(out: Path, result: DemoResult, say) -> None:
    from refit._util.atomic import write_text_atomic
    from refit.apply.compare import comparison_table, write_comparison

    files = [result.published.path, *result.forward, *published_equations()]
    fossils = out / "fossils.csv"
    constants = out / CONSTANTS
    say(f"[bold]5. Apply[/bold] the published fit, {len(result.forward)} forward fits and "
        f"{len(files) - 1 - len(result.forward)} published equations "
        f"to the demo fossils ({fossils.name})")
    say(f"   depths decompacted for burial (constants: {constants.name}, invented for the "
        "demo); measurement and burial SDs propagated by Monte Carlo")
    say("   the posterior for MAP from the two forward fits, 95% interval, where a paleosol "
        "has both proxies:")
    from refit.apply.estimates import apply_files
    from refit.apply.posterior import posterior_record

    result.applied = apply_files([str(f) for f in files], fossils, seed=SEED,
                                 decompact=True, constants_file=constants, posterior=True)
    estimates = out / "estimates.csv"
    write_text_atomic(estimates, result.applied.results.to_csv(index=False))
    write_text_atomic(out / "estimates.csv.posterior.json",
                      json.dumps(posterior_record(result.applied.posteriors, 0.95),
                                 indent=2) + "\n")
    _say_posterior(result.applied.results, say)
    result.outputs["fossil estimates"] = estimates
    say("[bold]6. Compare[/bold] the intervals fit by fit")
    result.comparison = comparison_table(result.applied.results)
    folder = out / "compare"
    pages = write_comparison(result.comparison, folder)
    say(f"   every paleosol drawn: {len(pages)} figure file(s) in {folder}")
    result.outputs["interval comparison (csv, png)"] = folder


def _say_posterior(results, say) -> None:
    """One line per paleosol with two proxies: the combined posterior and the test."""
    from refit._util.numbers import reading_texts

    both = results[results["function_id"] == "posterior"]
    for r in both.itertuples(index=False):
        verdict = "DISAGREE" if "proxies-disagree" in str(r.flags) else "agree"
        med, lo, hi = reading_texts(r.posterior_median, r.posterior_lower, r.posterior_upper)
        say(f"   {r.paleosol_id}: posterior median {med} mm [{lo}, {hi}]; "
            f"consistency chi2 {r.proxy_chi2:.2f}, p {r.proxy_chi2_p:.2f}: {verdict}")


#: the literature equations the demo's section figure draws beside refit's own fit
SECTION_LITERATURE = ("map_from_bk_depth.retallack1994.json",
                      "mat_from_salinization.sheldon2002.json")


def section_rows(results, published):
    """The rows the demo's section figure draws: eleven fits at every paleosol would hide
    each other, so the published fit, :data:`SECTION_LITERATURE` and the posterior of all
    proxies together."""
    from pathlib import Path as _P

    names = _P(str(published)).name, *SECTION_LITERATURE
    keep = (results["function_id"].eq("posterior")
            | results["coefficient_file"].map(lambda f: str(f) == str(published)
                                              or _P(str(f)).name in names[1:]))
    return results[keep]


def _section(out: Path, result: DemoResult, say) -> None:
    from refit.apply.section import (
        SectionResult,
        layout_notes,
        resolution_notes,
        section_table,
    )
    from refit.report.section_plot import write_section

    say("[bold]7. Section[/bold]: the climate up each section from the published fit, the "
        "literature depth-to-Bk and salinization equations, and the posterior of both "
        "proxies together (every fit's numbers stay in estimates.csv)")
    applied = result.applied
    table = section_table(section_rows(applied.results, result.published.path),
                          applied.fossils)
    notes = layout_notes(table, applied.fossils, "level_m") + resolution_notes(table)
    result.section = SectionResult(table, "level_m", "level [m]", notes, applied)
    written = write_section(result.section, out / "section")
    say(f"   {len(written) - 2} section figure(s), section.csv and notes.txt -> "
        f"{out / 'section'}")
    result.outputs["sections (csv, png)"] = out / "section"


def _report(out: Path, result: DemoResult, say) -> None:
    from refit.report import write_report

    say("[bold]8. Report[/bold]: figures, the fits compared, the sections and the "
        "self-contained HTML page")
    target = out / "report.html"
    compared = out / "compare"   # the comparison figure and table go into the report too
    write_report(result.run_dir, target, compare=compared, section=out / "section",
                 command=["refit", "report", str(result.run_dir), "--compare",
                          str(compared), "--out", str(target)])
    result.outputs["report (open in a browser)"] = target
