"""The README's Python example runs as printed, and its quick start has exactly two commands."""

from __future__ import annotations

import re
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
README = (ROOT / "README.md").read_text(encoding="utf-8")


def test_python_examples_run(monkeypatch):
    blocks = re.findall(r"```python\n(.*?)```", README, flags=re.S)
    assert blocks, "README shows no Python example"
    monkeypatch.chdir(ROOT)
    for code in blocks:
        namespace: dict = {}
        exec(compile(code, "README.md", "exec"), namespace)  # our own README, not user data
    fit = namespace["fit"]
    table = fit.predict([45, 120], level=0.95)
    assert list(table.columns[:3]) == ["estimate", "lower", "upper"]
    assert (table["lower"] < table["estimate"]).all() and (table["estimate"] < table["upper"]).all()


def test_quick_start_has_the_two_commands():
    quick = README.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    commands = re.findall(r"```bash\n(.*?)\n```", quick, flags=re.S)
    assert commands == ['python -m pip install . && refit demo',
                        'python -m pip install ".[test]" && python -m pytest']
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8")
    assert 'python -m pip install \\".[test]\\"' in ci or "README.md" in ci
