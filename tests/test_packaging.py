"""The wheel ships what the installed CLI needs: schemas and the demo scenario.

Checked against pyproject.toml's package-data patterns (globbed like setuptools does: '*' stays in one folder), so a new
file under schemas/ or calib_demo/ that the patterns miss fails here, not on a user's machine.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def _shipped(package: str, folder: str) -> tuple[list[str], list[str]]:
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    patterns = config["tool"]["setuptools"]["package-data"][package]
    files = [p.relative_to(ROOT / folder).as_posix() for p in (ROOT / folder).rglob("*")
             if p.is_file() and "__pycache__" not in p.parts and p.name != ".lock"]
    matched = {m.relative_to(ROOT / folder).as_posix()
               for pat in patterns for m in (ROOT / folder).glob(pat)}
    missing = [f for f in files if f not in matched]
    return files, missing


def test_every_schema_file_is_shipped():
    files, missing = _shipped("refit.schemas", "schemas")
    assert "calibration.table.json" in files
    assert missing == []


def test_every_demo_file_is_shipped():
    files, missing = _shipped("refit.calib_demo", "calib_demo")
    assert {"incoming_soils.csv", "recipe.toml", "store/records.csv",
            "store/manifest.json", "guide/README.md", "guide/my_soils.csv"} <= set(files)
    assert missing == []


def test_the_distribution_name_is_free_and_the_command_stays_refit():
    # the name 'refit' on the public package index belongs to an unrelated project
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    assert config["project"]["name"] == "paleosol-refit"
    assert config["project"]["scripts"] == {"refit": "refit.cli:main"}
    assert "python -m pip install paleosol-refit" in (ROOT / "README.md").read_text("utf-8")


def test_package_dirs_point_at_the_top_level_folders():
    config = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))
    assert config["tool"]["setuptools"]["package-dir"] == {
        "refit.schemas": "schemas", "refit.calib_demo": "calib_demo"}
    assert config["project"]["scripts"]["refit"] == "refit.cli:main"


def test_published_equations_and_report_template_are_shipped():
    files, missing = _shipped("refit.published", "refit/published")
    assert any(f.endswith(".json") for f in files)
    assert [f for f in missing if not f.endswith(".py")] == []
    files, missing = _shipped("refit.report", "refit/report")
    templates = [f for f in files if f.startswith("templates/")]
    assert templates and not [f for f in missing if f.startswith("templates/")]
