"""The guide calib_demo/guide/README.md: every `refit` command it shows runs, in order, in a
copy of its folder, and what it writes is re-opened and checked.

Data: the guide's invented table (a seeded generator, no real soils). The fitted slope is
checked against statsmodels OLS on the same subset (loess soils under grassland or savanna).
"""

from __future__ import annotations

import json
import re
import shlex
import shutil
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from refit.cli import main

GUIDE = Path(__file__).resolve().parents[2] / "calib_demo" / "guide"


def guide_commands() -> list[str]:
    text = (GUIDE / "README.md").read_text(encoding="utf-8")
    blocks = re.findall(r"```bash\n(.*?)\n```", text, flags=re.S)
    return [line.strip() for b in blocks for line in b.splitlines()
            if line.strip().startswith("refit ")]


def test_the_guide_links_resolve():
    text = (GUIDE / "README.md").read_text(encoding="utf-8")
    readme = (GUIDE.parents[1] / "README.md").read_text(encoding="utf-8")
    assert "## Recipe reference" in readme and "## Coefficient files" in readme
    assert "calib_demo/guide/README.md" in readme
    for name in re.findall(r"`(my_[a-z_]+\.(?:csv|toml))`", text):
        if name in ("my_check.json", "my_draft.toml"):
            continue
        assert (GUIDE / name).is_file() or name.startswith(("my_estimates", "my_leaderboard")), name


def read_recipe_file(path):
    from refit.select.recipe import read_recipe

    return read_recipe(path)


def test_every_guide_command_runs_in_order(tmp_path, monkeypatch):
    import statsmodels.api as sm

    work = tmp_path / "my-work"
    shutil.copytree(GUIDE, work)
    monkeypatch.chdir(work)
    commands = guide_commands()
    assert len(commands) >= 10
    for command in commands:
        words = shlex.split(command)
        target = None
        if ">" in words:
            target, words = words[words.index(">") + 1], words[: words.index(">")]
        res = CliRunner().invoke(main, words[1:])
        assert res.exit_code == 0, f"{command}\n{res.output}"
        if target:
            (work / target).write_text(res.stdout, encoding="utf-8")
    # re-open what the guide wrote
    assert json.loads((work / "my_check.json").read_text())["n_rows"] == 40
    manifest = json.loads((work / "my_store" / "manifest.json").read_text())
    assert manifest["version"] == 1 and manifest["row_count"] == 40
    board = pd.read_csv(work / "my_leaderboard.csv")
    assert set(board["candidate"]) >= {"linear__ols__inverse__analytic",
                                       "linear__ols__forward__analytic"}
    rec = json.loads((work / "my_registry" / "map_from_bk_depth" / "1.0.0.json").read_text())
    soils = pd.read_csv(work / "my_soils.csv")
    sub = soils[(soils["parent_material"] == "loess")
                & soils["vegetation"].isin(["grassland", "savanna"])]
    ref = sm.OLS(sub["map_mm"], sm.add_constant(sub["bk_depth_cm"])).fit().params
    assert rec["coefficients"] == pytest.approx(list(ref), rel=1e-9)
    est = pd.read_csv(work / "my_estimates.csv")
    assert len(est) == 3 and est["estimate"].notna().all()
    assert not est["flags"].fillna("").str.contains("not-decompacted").any()
    assert (work / "my_compare" / "comparison.png").is_file()
    # step 8: the section, one row per paleosol and fit, against the table's levels
    section = pd.read_csv(work / "my_section" / "section.csv")
    fossils = pd.read_csv(work / "my_fossils.csv")
    assert len(section) == 2 * len(fossils) == 6
    assert sorted(set(section["level_m"])) == sorted(fossils["level_m"])
    assert (work / "my_section" / "section-invented-creek.png").is_file()
    # step 3: the edits the page lists turn the draft into my_recipe.toml
    text = (GUIDE / "README.md").read_text(encoding="utf-8")
    mine = read_recipe_file(work / "my_recipe.toml")
    for key in ("forms", "estimators", "directions", "methods"):
        assert f"`{key} = {json.dumps(list(getattr(mine, key)))}`" in " ".join(text.split()), key
    assert f"`level = {mine.level:g}`" in text and f"`seed = {mine.seed}`" in text
    recipe_text = (work / "my_recipe.toml").read_text(encoding="utf-8")
    for line in ('parent_material = "loess"', 'vegetation = ["grassland", "savanna"]'):
        assert line in recipe_text and f"`{line}`" in " ".join(text.split())
    assert (work / "my_report.html").read_text(encoding="utf-8").count("map_mm =") >= 1
    # the draft `refit init` wrote loads, with the choices the guide's text names
    from refit.select.recipe import read_recipe

    draft = read_recipe(work / "my_draft.toml")
    assert (draft.response, draft.predictors, draft.groups) == ("map_mm", ("bk_depth_cm",),
                                                                "source")
    assert draft.scheme == "leave-one-group-out" and draft.store == (work / "my_store").resolve()
    assert '# parent_material = "loess"   # 32 soils' in (work / "my_draft.toml").read_text()
    assert int((soils["parent_material"] == "loess").sum()) == 32  # pandas' count
