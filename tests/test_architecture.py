"""The house shows the pipeline: import directions, no circles, no borrowed private names.

The directions are import-linter contracts in ``pyproject.toml`` (``lint-imports`` runs
them); this file runs them in CI, proves they bite on a deliberately wrong import, and
checks what import-linter has no contract for: module-level import circles and one stage
importing another stage's underscore names. The graph is grimp's (import-linter's own
static import graph), so the check reads the source, not what happens to be imported.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

grimp = pytest.importorskip("grimp")

ROOT = Path(__file__).resolve().parents[1]
STAGES = ("_util", "curate", "soil", "models", "coefficients", "select", "validate",
          "publish", "apply", "report", "cli", "published")


def _lint(cwd: Path) -> subprocess.CompletedProcess:
    code = ("import sys; from importlinter.cli import lint_imports; "
            "sys.exit(lint_imports(no_cache=True, no_logo=True))")
    env = {**os.environ, "PYTHONPATH": str(cwd)}
    return subprocess.run([sys.executable, "-c", code], cwd=cwd, env=env,
                          capture_output=True, text=True, timeout=300)


@pytest.fixture(scope="module")
def graph():
    return grimp.build_graph("refit", cache_dir=None)


def stage(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else ""


def test_import_linter_contracts_are_kept():
    run = _lint(ROOT)
    assert run.returncode == 0, run.stdout[-4000:] + run.stderr[-2000:]
    assert re.search(r"Contracts: \d+ kept, 0 broken", run.stdout), run.stdout[-2000:]


def test_a_wrong_import_breaks_the_contracts(tmp_path):
    # a copy of the package with one forbidden line: the models stage reading the store
    shutil.copytree(ROOT / "refit", tmp_path / "refit",
                    ignore=shutil.ignore_patterns("__pycache__"))
    shutil.copy(ROOT / "pyproject.toml", tmp_path / "pyproject.toml")
    forms = tmp_path / "refit" / "models" / "forms.py"
    forms.write_text(forms.read_text() + "\nfrom refit.curate.store import open_store  # wrong\n")
    run = _lint(tmp_path)
    assert run.returncode == 1
    assert "refit.models.forms -> refit.curate.store" in run.stdout
    assert "BROKEN" in run.stdout


def _cycles(graph) -> list[list[str]]:
    """Strongly connected components of more than one module (Tarjan, iterative)."""
    index, low, on, stack, out, counter = {}, {}, set(), [], [], [0]
    for start in sorted(graph.modules):
        if start in index:
            continue
        work = [(start, iter(sorted(graph.find_modules_directly_imported_by(start))))]
        index[start] = low[start] = counter[0]
        counter[0] += 1
        stack.append(start)
        on.add(start)
        while work:
            node, children = work[-1]
            for child in children:
                if child not in index:
                    index[child] = low[child] = counter[0]
                    counter[0] += 1
                    stack.append(child)
                    on.add(child)
                    work.append((child, iter(sorted(graph.find_modules_directly_imported_by(child)))))
                    break
                if child in on:
                    low[node] = min(low[node], index[child])
            else:
                work.pop()
                if work:
                    low[work[-1][0]] = min(low[work[-1][0]], low[node])
                if low[node] == index[node]:
                    comp = []
                    while True:
                        m = stack.pop()
                        on.discard(m)
                        comp.append(m)
                        if m == node:
                            break
                    if len(comp) > 1:
                        out.append(sorted(comp))
    return out


def test_no_import_circles(graph):
    assert _cycles(graph) == []


def test_the_circle_finder_finds_a_circle(graph):
    # the check above must be able to fail: add one back edge and it reports the circle
    g = graph.copy() if hasattr(graph, "copy") else grimp.build_graph("refit", cache_dir=None)
    g.add_import(importer="refit.errors", imported="refit.models.forms")
    assert any({"refit.errors", "refit.models.forms"} <= set(c) for c in _cycles(g))


def _private_borrowings(graph) -> list[str]:
    found = []
    for importer in sorted(graph.modules):
        for imported in graph.find_modules_directly_imported_by(importer):
            a, b = stage(importer), stage(imported)
            if not b or a == b or b == "_util":
                continue  # same stage, the package root, or the shared utilities
            for detail in graph.get_import_details(importer=importer, imported=imported):
                line = detail["line_contents"].split("#")[0]
                names = line.split(" import ", 1)[1] if " import " in line else ""
                # the imported names (an alias such as ``load as _load`` is the importer's own)
                imported_names = [part.split()[0] for part in names.strip("() ").split(",")
                                  if part.split()]
                private = [n for n in imported_names if n.startswith("_") and not n.startswith("__")]
                if private or re.search(r"\.\_[a-z]", imported):
                    found.append(f"{importer} -> {imported}: {line.strip()}")
    return found


def test_no_stage_borrows_another_stages_private_names(graph):
    assert _private_borrowings(graph) == []


def test_every_stage_says_what_it_owns():
    for name in STAGES:
        init = ROOT / "refit" / name / "__init__.py"
        assert init.is_file(), name
        doc = init.read_text(encoding="utf-8").lstrip()
        assert doc.startswith('"""') and len(doc.split('"""')[1].split()) >= 12, name
