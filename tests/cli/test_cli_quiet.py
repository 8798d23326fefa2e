"""-q/--quiet prints nothing but errors on every command: each verb run with -q on a
valid input leaves stdout and stderr empty and still writes its files; a failure under
-q is one ``Error:`` line on stderr and the usual exit code (common practice for a quiet
flag, e.g. POSIX ``grep -q`` prints nothing and answers by its exit status)."""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest
from _harness import LINEAR, QUADRATIC, make_fits
from click.testing import CliRunner

from refit.cli import main

ROOT = Path(__file__).resolve().parents[2]
DEMO = ROOT / "calib_demo"
RETALLACK = ROOT / "refit" / "published" / "map_from_bk_depth.retallack1994.json"


def quiet(*args):
    """Run ``refit ARGS -q``; returns the result (stdout and stderr apart)."""
    return CliRunner().invoke(main, [str(a) for a in args] + ["-q"])


def silent(res) -> None:
    assert (res.exit_code, res.stdout, res.stderr) == (0, "", ""), res.output


@pytest.fixture(scope="module")
def work(tmp_path_factory):
    """A small run (two candidates) on a copy of the demo store, one published file."""
    root = tmp_path_factory.mktemp("quiet")
    fits = make_fits(root)
    silent(quiet("publish", fits / LINEAR, "--to", root / "registry", "--init"))
    (published,) = (root / "registry").rglob("1.0.0.json")
    return root, fits, published


def test_every_verb_prints_nothing_with_q(work, tmp_path):
    root, fits, published = work
    silent(quiet("check", DEMO / "guide" / "my_soils.csv"))
    shutil.copytree(root / "store", tmp_path / "store")
    silent(quiet("admit", DEMO / "guide" / "my_soils.csv", "--into", tmp_path / "store"))
    before = json.loads((root / "store" / "manifest.json").read_text("utf-8"))
    after = json.loads((tmp_path / "store" / "manifest.json").read_text("utf-8"))
    assert after["version"] == before["version"] + 1       # the admit was written
    silent(quiet("admit", "--repair-manifest", tmp_path / "store"))
    shutil.copy(DEMO / "guide" / "my_soils.csv", tmp_path / "my_soils.csv")
    silent(quiet("init", tmp_path / "my_soils.csv", "--out", tmp_path / "first.toml"))
    assert (tmp_path / "first.toml").is_file()
    silent(quiet("fit", root / "recipe.toml", "--out", tmp_path / "run"))
    assert (tmp_path / "run" / "leaderboard.csv").is_file()
    silent(quiet("publish", fits / QUADRATIC, "--to", tmp_path / "registry", "--init"))
    silent(quiet("verify", published, "--store", root / "store"))
    silent(quiet("verify", root / "registry"))
    silent(quiet("diff", fits / LINEAR, fits / QUADRATIC))
    silent(quiet("keygen", tmp_path / "lab.key"))
    assert (tmp_path / "lab.key.pub").is_file()
    fossils = DEMO / "fossils.csv"
    # the fossils are buried and not decompacted here: a warning without -q, none with it
    silent(quiet("apply", published, RETALLACK, "--fossils", fossils, "--out",
                 tmp_path / "est.csv"))
    assert (tmp_path / "est.csv").stat().st_size > 0
    silent(quiet("compare", published, RETALLACK, "--fossils", fossils, "--out",
                 tmp_path / "cmp"))
    silent(quiet("section", published, RETALLACK, "--fossils", fossils, "--out",
                 tmp_path / "sec"))
    assert (tmp_path / "sec" / "section-murrenhal-bluff.png").is_file()
    silent(quiet("report", root / "run", "--out", tmp_path / "r.html", "--compare",
                 tmp_path / "cmp", "--section", tmp_path / "sec"))
    assert (tmp_path / "r.html").stat().st_size > 0
    # the same apply without -q does print (so the check above can fail)
    loud = CliRunner().invoke(main, ["apply", str(published), "--fossils", str(fossils)])
    assert loud.exit_code == 0 and "Estimates" in loud.stdout and "Warning:" in loud.stdout


def test_machine_output_asked_for_still_prints(work):
    _, _, published = work
    res = quiet("apply", published, "--fossils", DEMO / "fossils.csv", "--format", "csv")
    assert res.exit_code == 0 and res.stderr == ""
    assert res.stdout.splitlines()[0].startswith("paleosol_id,row,coefficient_file")


def test_a_failure_under_q_is_one_error_line(work, tmp_path):
    _, fits, published = work
    res = quiet("check", DEMO / "incoming_soils.csv")
    assert res.exit_code == 1 and res.stdout == ""
    assert res.stderr.startswith("Error: ") and res.stderr.count("\n") == 1
    assert "without -q lists them" in res.stderr
    # a file the fossils cannot feed: apply writes what it can, exit 1, one line
    fossils = tmp_path / "f.csv"
    fossils.write_text("paleosol_id,level_m\nP1,1.0\n", encoding="utf-8")
    res = quiet("apply", published, "--fossils", fossils)
    assert res.exit_code == 1 and res.stdout == ""
    assert res.stderr.startswith("Error: 1 problem:") and res.stderr.count("\n") == 1
    # an unreadable input: the usual error, exit 2
    res = quiet("report", tmp_path / "no-such-run")
    assert res.exit_code == 2 and res.stdout == "" and res.stderr.startswith("Error: ")
    res = quiet("verify", fits / "no.json")
    assert res.exit_code == 2 and res.stderr.startswith("Error: ")
