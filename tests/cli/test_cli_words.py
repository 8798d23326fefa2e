"""What refit says, word for word: each message a first-time user found misleading, in its
new wording.

Data: the guide's invented table and fossils (calib_demo/guide/), small invented fossil
tables and the shipped literature files (whose citations are the files' own text).
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path
from types import SimpleNamespace

import pandas as pd
import pytest
from click.testing import CliRunner

import refit
from refit.cli import main

GUIDE = Path(__file__).resolve().parents[2] / "calib_demo" / "guide"
PUBLISHED = Path(refit.__file__).parent / "published"
RETALLACK = PUBLISHED / "map_from_bk_depth.retallack1994.json"


def _run(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


@pytest.fixture(scope="module")
def guide_run(tmp_path_factory):
    """The guide's table and recipe fitted once (a table, so no store is needed)."""
    work = tmp_path_factory.mktemp("guide")
    for name in ("my_soils.csv", "my_fossils.csv", "my_constants.csv"):
        shutil.copy(GUIDE / name, work)
    text = (GUIDE / "my_recipe.toml").read_text(encoding="utf-8")
    (work / "recipe.toml").write_text(text.replace('store = "my_store"',
                                                   'table = "my_soils.csv"'), encoding="utf-8")
    res = _run("fit", work / "recipe.toml", "--out", work / "run")
    assert res.exit_code == 0, res.output
    return work, res.output


def test_the_coverage_tolerance_is_in_percentage_points(guide_run):
    _, out = guide_run
    rule = next(line for line in out.splitlines() if line.startswith("Rule:"))
    assert "percentage points below nominal at most" in rule
    assert "% of the nominal" not in out and "within" not in rule


def test_fit_quiet_prints_nothing_but_errors(guide_run):
    work, _ = guide_run
    res = _run("fit", work / "recipe.toml", "--out", work / "quiet", "-q")
    assert res.exit_code == 0 and res.output == ""
    assert (work / "quiet" / "leaderboard.csv").is_file()  # the results are all written
    res = _run("fit", work / "missing.toml", "-q")
    assert res.exit_code == 2 and res.output.startswith("Error: ")


def _fake_run(coverage_ok: list[bool]):
    n = len(coverage_ok)
    board = pd.DataFrame({"rank": range(1, n + 1), "candidate": [f"c{i}" for i in range(n)],
                          "coverage_ok": coverage_ok, **{k: [1.0] * n for k in (
                              "rmsep", "bias", "coverage", "mean_width", "interval_score",
                              "kfold_rmsep", "kfold_interval_score", "r2_in_sample", "aic")}})
    scheme = SimpleNamespace(name="kfold", folds=5, repeats=1, groups=None, seed=0)
    matrix = SimpleNamespace(
        schemes={"main": scheme, "kfold": None}, split_details={"main": {}}, specs=[1] * n,
        skipped=[], leaderboard=board, tolerance=0.03,
        verdict={"rule": "r", "why": "w", "winner": None, "simpler_why": None})
    return SimpleNamespace(
        data={"kind": "table", "name": "t.csv", "path": "t.csv", "sha256": "0"},
        subset=SimpleNamespace(n_start=n, steps=[], notes=[]), matrix=matrix,
        recipe=SimpleNamespace(level=0.95, function_id="f", response="map_mm"))


@pytest.mark.parametrize("short_at, footnote", [(None, False), (2, True), (22, False)])
def test_the_coverage_footnote_only_under_a_starred_row(short_at, footnote):
    from rich.console import Console

    from refit.cli.common import LEADERBOARD_SHOWN, print_run

    ok = [True] * 25
    if short_at is not None:
        ok[short_at] = False  # row 22 is past the rows shown: no star on screen
    console = Console(record=True, width=200)
    print_run(_fake_run(ok), None, console=console)
    text = console.export_text()
    assert (" *" in text.split("Leaderboard")[1].split("R² in, AIC")[0]) == footnote
    assert ("* coverage below 92.0% falls short of 95%" in text) == footnote
    assert LEADERBOARD_SHOWN == 20


BAD_FOSSILS = ("paleosol_id,section,level_m,bk_depth_cm,burial_depth_km,soil_order\n"
               "P1,A,1,100,0.5,\n"
               "P2,A,2,110,0.5,Mollisols\n"
               "P2,A,3,120,0.5,Mollisols\n"
               ",A,4,90,0.5,Mollisols\n"
               "P3,A,5,-5,0.5,Mollisols\n")


def test_fossil_rows_are_paleosols_and_missing_constants_are_said_plainly(tmp_path):
    (tmp_path / "f.csv").write_text(BAD_FOSSILS, encoding="utf-8")
    shutil.copy(GUIDE / "my_constants.csv", tmp_path)
    res = _run("apply", RETALLACK, "--fossils", tmp_path / "f.csv", "--decompact",
               "--compaction-constants", tmp_path / "my_constants.csv",
               "--out", tmp_path / "e.csv")
    out = " ".join(res.output.split())
    assert "paleosol P2 (row 3): rejected by the checks" in out
    assert "a paleosol without an id (row 5): rejected" in out
    assert "every paleosol needs its own id" in out and "every profile" not in out
    est = pd.read_csv(tmp_path / "e.csv", keep_default_na=False)
    p1 = est[est["paleosol_id"] == "P1"].iloc[0]
    assert ("neither soil_order nor lithology is given, so no compaction constants can be "
            "looked up (constants are known for: Aridisols, Mollisols)") in p1["problem"]
    assert "for no soil_order" not in res.output
    res = _run("check", tmp_path / "f.csv", "--kind", "fossil", "--format", "json")
    problems = json.loads(res.stdout)["problems"]
    assert all("paleosol_id" in p and "profile_id" not in p for p in problems)
    res = _run("check", tmp_path / "f.csv", "--kind", "fossil")
    assert "[range] bk_depth_cm = '-5': 1 row 6 (paleosol P3)" in " ".join(res.output.split())


def test_compare_names_the_predictor_the_fits_expect(tmp_path):
    res = _run("compare", RETALLACK, PUBLISHED / "map_from_cia_k.sheldon2002.json",
               "--at", "bk_depth=40", "--out", tmp_path / "c")
    assert res.exit_code == 2
    text = " ".join(res.output.split())
    assert ("the fits expect bk_depth_cm (map_from_bk_depth); cia_k (map_from_cia_k), and "
            "--at gives bk_depth; name the predictor as the fit does (e.g. --at "
            "bk_depth_cm=100)") in text
    assert not (tmp_path / "c").exists()


def test_the_general_caution_is_said_once(guide_run, tmp_path):
    from refit.apply.estimates import CAUTIONS
    from refit.coefficients import CAUTION

    work, _ = guide_run
    fit = work / "run" / "fits" / "linear__ols__inverse__analytic.json"
    assert CAUTION in json.loads(fit.read_text(encoding="utf-8"))["cautions"]
    for verb in ("apply", "compare"):
        args = [verb, fit, "--fossils", work / "my_fossils.csv", "--out",
                tmp_path / (verb + ".csv" if verb == "apply" else verb)]
        out = " ".join(_run(*args).output.split())
        assert out.count(CAUTIONS[0]) == 1, verb
        assert CAUTION not in out, verb


@pytest.mark.parametrize("name, unit, shown", [
    ("map_mm", "mm", "MAP [mm]"), ("mat_c", "degC", "MAT [°C]"), ("mar_mm", None, "MAR [mm]"),
    ("bk_depth_cm", "cm", "Depth to Bk [cm]"), ("cia_k", "", "CIA-K"),
    ("sio2_wt", None, "SiO2 [wt%]")])
def test_axes_name_the_quantity_in_the_schema_notation(name, unit, shown):
    from refit.curate.schema import notation
    from refit.report.assemble import axis_label

    assert notation(name, unit) == shown
    record = {"response": {"name": name, "unit": unit or ""}, "predictors": []}
    assert axis_label(record, name) == notation(name, unit or "")


def test_literature_equations_are_shown_by_short_citation():
    from refit.apply.compare import compare_files
    from refit.coefficients.citation import short_citation

    # the files' own citation text: "Retallack, G.J. (1994). ..." and
    # "Sheldon, N.D., Retallack, G.J. & Tanaka, S. (2002). ..."
    cites = {p.stem: short_citation(json.loads(p.read_text(encoding="utf-8")))
             for p in PUBLISHED.glob("*.json")}
    assert cites["map_from_bk_depth.retallack1994"] == "Retallack 1994"
    assert cites["map_from_cia_k.sheldon2002"] == "Sheldon et al. 2002"
    assert short_citation({"provenance": {"kind": "refit", "citation": "X, A. (2000)."}}) == ""
    assert short_citation({"provenance": {"kind": "literature",
                                          "citation": "Sheldon, N.D. & Tabor, N.J. (2009). "
                                                      "Quantitative ..."}}) == \
        "Sheldon & Tabor 2009"
    table, _ = compare_files([RETALLACK, PUBLISHED / "map_from_cia_k.sheldon2002.json"],
                             at=["bk_depth_cm=100", "cia_k=60"])
    assert list(table["fit"]) == ["Retallack 1994, from bk_depth",
                                  "Sheldon et al. 2002, from cia_k"]
    assert "published" not in " ".join(table["fit"])


def test_the_report_explains_grey_rows_only_when_there_are_some():
    from refit.report.context import leaderboard

    board = pd.DataFrame({"rank": [1, 2], "candidate": ["a", "b"], "coverage_ok": [True, True]})
    assert leaderboard(board, "a")["any_short"] is False
    board.loc[1, "coverage_ok"] = False
    assert leaderboard(board, "a")["any_short"] is True
    template = (Path(refit.__file__).parent / "report" / "templates" / "report.html.j2"
                ).read_text(encoding="utf-8")
    note = template.split("{% if leaderboard.any_short %}")[1].split("{% endif %}")[0]
    assert "shown to fall short of the nominal level" in note
    assert "outside the tolerance" not in template


def test_temperatures_are_printed_in_degrees_celsius_not_the_unit_code(tmp_path):
    # a MAT equation's file records the unit code "degC"; people read "°C" (the schema's
    # notation, schemas/calibration.table.json x-refit-notation)
    sal = PUBLISHED / "mat_from_salinization.sheldon2002.json"
    r = _run("compare", sal, "--fossils", "calib_demo/fossils.csv", "--paleosol", "MB-P01",
             "--out", tmp_path / "c")
    assert r.exit_code == 0, r.output
    line = next(s for s in r.output.splitlines() if "from salinization" in s)
    assert "] °C;" in line and "degC" not in line
    r = _run("apply", sal, "--fossils", "calib_demo/fossils.csv")
    assert r.exit_code == 0, r.output
    assert "°C" in r.output and "degC" not in r.output
    from refit.report.comparison import read_comparison, rows

    assert {row[6] for row in rows(read_comparison(tmp_path / "c"))} == {"°C"}   # unit column
