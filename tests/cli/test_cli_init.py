"""`refit init` through click's test runner: exit code first, then the recipe written, then
`refit fit` on it, end to end.

Data: the guide's invented table (calib_demo/guide/my_soils.csv) and the demo's invented
store (calib_demo/store), copied into temporary folders. The refitted line is checked against
statsmodels OLS on the same rows.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from refit.cli import main

DEMO = Path(__file__).resolve().parents[2] / "calib_demo"


def _run(*args):
    return CliRunner().invoke(main, list(args))


def test_init_on_the_guide_table_then_fit(tmp_path, monkeypatch):
    import statsmodels.api as sm

    shutil.copy(DEMO / "guide" / "my_soils.csv", tmp_path)
    monkeypatch.chdir(tmp_path)
    res = _run("init", "my_soils.csv")
    assert res.exit_code == 0, res.output
    assert "Wrote recipe.toml: map_mm from bk_depth_cm on 40 of 40 records, groups " \
           "'source'" in res.output
    res = _run("fit", "recipe.toml", "--out", "run", "-q")
    assert res.exit_code == 0, res.output
    board = pd.read_csv(tmp_path / "run" / "leaderboard.csv")
    assert "linear__ols__inverse__analytic" in set(board["candidate"])
    rec = json.loads((tmp_path / "run" / "fits" / "linear__ols__inverse__analytic.json")
                     .read_text(encoding="utf-8"))
    soils = pd.read_csv(tmp_path / "my_soils.csv")  # no subset: all 40 soils
    ref = sm.OLS(soils["map_mm"], sm.add_constant(soils["bk_depth_cm"])).fit().params
    assert rec["coefficients"] == pytest.approx(list(ref), rel=1e-9)


def test_init_on_the_demo_store_then_fit(tmp_path, monkeypatch):
    shutil.copytree(DEMO / "store", tmp_path / "store")
    (tmp_path / "store" / ".lock").unlink(missing_ok=True)
    monkeypatch.chdir(tmp_path)
    res = _run("init", "store", "--out", "first.toml")
    assert res.exit_code == 0, res.output
    text = (tmp_path / "first.toml").read_text(encoding="utf-8")
    assert 'store = "store"' in text and "Columns that map to no canonical name" in text
    records = pd.read_csv(tmp_path / "store" / "records.csv", low_memory=False)
    usable = records[records["map_mm"].notna() & records["bk_depth_cm"].notna()]
    for value, n in usable["parent_material"].value_counts().items():  # pandas' counts
        assert f'# parent_material = "{value}"   # {n} soil' in text
    res = _run("fit", "first.toml", "--out", "run", "-q")
    assert res.exit_code == 0, res.output
    run = json.loads((tmp_path / "run" / "run.json").read_text(encoding="utf-8"))
    assert run["subset"]["rows_after"] == len(usable)


def test_an_existing_recipe_is_kept_unless_force(tmp_path, monkeypatch):
    shutil.copy(DEMO / "guide" / "my_soils.csv", tmp_path)
    monkeypatch.chdir(tmp_path)
    (tmp_path / "recipe.toml").write_text("# mine\n", encoding="utf-8")
    res = _run("init", "my_soils.csv")
    assert res.exit_code == 2
    assert "recipe.toml already exists; pass --force" in res.output
    assert (tmp_path / "recipe.toml").read_text(encoding="utf-8") == "# mine\n"
    res = _run("init", "my_soils.csv", "--force", "-q")
    assert res.exit_code == 0 and res.output == ""  # -q: nothing but errors
    assert (tmp_path / "recipe.toml").read_text(encoding="utf-8").startswith("# A first recipe")
    assert not list(tmp_path.glob("*.tmp*"))  # the atomic write left no temporary file


def test_bad_input_exit_codes_and_nothing_written(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    res = _run("init", "missing.csv")
    assert res.exit_code == 2 and "missing.csv: no such file or folder" in res.output
    (tmp_path / "folder").mkdir()
    res = _run("init", "folder")
    assert res.exit_code == 2 and "not a refit store (no manifest.json)" in res.output
    (tmp_path / "t.csv").write_text("profile_id,latitude,longitude,source,bk_depth_cm\n"
                                    "A,-30,140,S1,50\n", encoding="utf-8")
    res = _run("init", "t.csv")
    assert res.exit_code == 1 and "no climate column (map_mm, mat_c, mar_mm)" in res.output
    res = _run("init", "t.csv", "--out", "folder")
    assert res.exit_code == 2 and "'folder' is a directory" in res.output
    assert not (tmp_path / "recipe.toml").exists()
    assert "Traceback" not in res.output


def test_a_store_outside_the_recipe_folder_is_named_on_the_command_line(tmp_path, monkeypatch):
    shutil.copytree(DEMO / "store", tmp_path / "store")
    (tmp_path / "store" / ".lock").unlink(missing_ok=True)
    (tmp_path / "recipes").mkdir()
    monkeypatch.chdir(tmp_path)
    res = _run("init", "store", "--out", "recipes/r.toml")
    assert res.exit_code == 0, res.output
    assert "refit fit recipes/r.toml --store store --out run" in res.output
