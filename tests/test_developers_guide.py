"""DEVELOPERS.md's glossary lists every column of the calibration schema, with its unit."""

from __future__ import annotations

import json
import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent


def test_glossary_names_every_schema_column():
    guide = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    glossary = guide.split("## Glossary", 1)[1].split("\n## ", 1)[0]
    named = set(re.findall(r"`([a-z0-9_]+)`", glossary))
    descriptor = json.loads((ROOT / "schemas" / "calibration.table.json").read_text())
    columns = {f["name"] for f in descriptor["fields"]}
    assert columns - named == set()


def test_every_module_in_the_architecture_table_exists():
    guide = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    table = guide.split("## Architecture in a page", 1)[1].split("## Glossary", 1)[0]
    for path in re.findall(r"`(refit/[A-Za-z0-9_/]+(?:\.py)?)`", table):
        assert (ROOT / path).exists(), path


def test_the_architecture_table_has_a_row_per_stage_and_names_the_never_directions():
    guide = (ROOT / "DEVELOPERS.md").read_text(encoding="utf-8")
    table = guide.split("## Architecture in a page", 1)[1].split("## Glossary", 1)[0]
    stages = sorted(p.parent.name for p in (ROOT / "refit").glob("*/__init__.py"))
    for name in stages:
        assert f"| `refit/{name}/` |" in table, name
    assert "### Directions that never exist" in table and "lint-imports" in table
