"""The benchmark command in its smoke size: it runs, writes its JSON, and refit's numbers
equal the naive way's. Timings are reported, never asserted (a busy machine must not fail a
test); the full-size table is made on demand (benchmarks/README.md).

Outside references: the naive side of each case is statsmodels (explicit leave-one-out and
jackknife+ refits, an OLS loop for the bootstrap) or a pandas ``Series.apply`` of the
equation, computed by the benchmark itself in the same run.
"""

from __future__ import annotations

import json
import re
import subprocess
import sys
from pathlib import Path

import pytest

BENCH = Path(__file__).resolve().parents[1] / "benchmarks" / "run.py"
#: "max |refit - statsmodels| 7.8e-11" in a row's note
DIFF = re.compile(r"max \|refit - [^|]+\| ([0-9.eE+-]+)")
CASES = ["help", "check", "fit", "loo", "jackknife+", "bootstrap", "evaluate", "consumer"]

pytestmark = pytest.mark.skipif(not BENCH.is_file(), reason="benchmarks/ not in this tree")


@pytest.fixture(scope="module")
def smoke(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("bench")
    out = tmp / "quick.json"
    run = subprocess.run(
        [sys.executable, str(BENCH), "--quick", "--repeats", "1", "--cases", ",".join(CASES),
         "--data-dir", str(tmp / "data"), "--json", str(out)],
        capture_output=True, text=True, timeout=900)
    return run, out


def test_smoke_run_writes_every_case(smoke):
    run, out = smoke
    assert run.returncode == 0, run.stderr[-2000:]
    result = json.loads(out.read_text())
    assert result["quick"] is True and result["sizes"] == [1000]
    assert {r["case"] for r in result["rows"]} == set(CASES) | {"check (in-process)"}
    for row in result["rows"]:  # every figure was measured (a positive wall time)
        assert row["refit_s"] is None or row["refit_s"] > 0, row
    assert "Results written to" in run.stdout + run.stderr


def test_refit_gives_the_naive_numbers(smoke):
    # The "same numbers" targets compare refit's leave-one-out and jackknife+ results with
    # explicit statsmodels refits at 1e-9; the bootstrap and file evaluation rows carry the
    # largest difference in their notes.
    run, out = smoke
    result = json.loads(out.read_text())
    same = [t for t in result["targets"] if "same numbers" in t["name"]]
    assert len(same) == 4
    for t in same:
        assert t["status"] == "PASS" and t["measured"] <= 1e-9, t
    found = [(row, float(m.group(1))) for row in result["rows"]
             if (m := DIFF.search(row.get("note") or ""))]
    assert {row["case"] for row, _ in found} >= {"fit", "loo", "jackknife+", "bootstrap",
                                                  "evaluate"}
    for row, value in found:
        assert value <= 1e-8, row
