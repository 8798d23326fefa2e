"""refit publish / verify / diff through click's runner: exit codes first, then the files."""

from __future__ import annotations

import json
from pathlib import Path

import pytest
from click.testing import CliRunner

from _harness import make_fits, recipe_toml
from refit.cli.diff import diff
from refit.cli.publish import publish
from refit.cli.verify import verify

# no scheme, directions or [intervals]: the reader's defaults apply
RECIPE = recipe_toml(subset={"parent_material": "loess"},
                     candidates={"directions": None}, validation={"folds": 5, "seed": 11},
                     intervals=None)
LINEAR = "linear__ols__inverse__analytic.json"
QUADRATIC = "quadratic__ols__inverse__analytic.json"


@pytest.fixture(scope="module")
def world(tmp_path_factory):
    root = tmp_path_factory.mktemp("cli_registry")
    return root, make_fits(root, RECIPE)


def invoke(cmd, *args):
    return CliRunner().invoke(cmd, [str(a) for a in args])


def test_publish_verify_diff(world, tmp_path):
    root, fits = world
    r = tmp_path / "registry"
    res = invoke(publish, fits / LINEAR, "--to", r)
    assert res.exit_code == 2 and "--init" in res.output             # missing registry
    res = invoke(publish, fits / LINEAR, "--to", r, "--init")
    assert res.exit_code == 0, res.output
    assert "Published map_from_bk_depth 1.0.0" in res.output
    res = invoke(publish, fits / QUADRATIC, "--to", r, "--bump", "patch")
    assert res.exit_code == 1 and "too small" in res.output and "2.0.0" in res.output
    res = invoke(publish, fits / QUADRATIC, "--to", r, "--format", "json")
    assert res.exit_code == 0, res.output
    out = json.loads(res.output)
    assert (out["version"], out["previous"], out["bump"]) == ("2.0.0", "1.0.0", "major")
    assert Path(out["path"]).is_file()
    res = invoke(publish, fits / LINEAR, "--to", r, "--bump", "nope")
    assert res.exit_code == 2                                         # click usage error

    one = r / "map_from_bk_depth" / "1.0.0.json"
    res = invoke(verify, one, "--store", root / "store")
    assert res.exit_code == 0, res.output
    assert "ok   reproduce" in res.output and "verified" in res.output
    res = invoke(verify, r, "--format", "json")
    assert res.exit_code == 0 and json.loads(res.output)["ok"] is True

    res = invoke(diff, one, r / "map_from_bk_depth" / "2.0.0.json")
    assert res.exit_code == 0, res.output
    assert "major version bump" in res.output and "bk_depth_cm^2" in res.output
    res = invoke(diff, one, r / "map_from_bk_depth" / "2.0.0.json", "--format", "json",
                 "--at", "100")
    assert res.exit_code == 0
    d = json.loads(res.output)
    assert [row["bk_depth_cm"] for row in d["at_reference"]] == [100.0]


def test_verify_exit_codes(world, tmp_path):
    _, fits = world
    res = invoke(verify, tmp_path / "none.json")
    assert res.exit_code == 2 and "no such coefficient file" in res.output
    edited = tmp_path / "edited.json"
    edited.write_text((fits / LINEAR).read_text("utf-8").replace('"n": ', '"n": 1', 1))
    res = invoke(verify, edited)
    assert res.exit_code == 1 and "FAIL sha256" in res.output
    res = invoke(verify, fits / LINEAR, "--store", tmp_path / "nostore")
    assert res.exit_code == 2 and "not found" in res.output


def test_verify_reports_a_disagreeing_index(world, tmp_path):
    _, fits = world
    r = tmp_path / "registry"
    assert invoke(publish, fits / LINEAR, "--to", r, "--init").exit_code == 0
    (r / "map_from_bk_depth" / "1.0.0.json").chmod(0o644)
    (r / "map_from_bk_depth" / "1.0.0.json").unlink()
    res = invoke(verify, r)
    assert res.exit_code == 1
    assert "index.json lists map_from_bk_depth 1.0.0 but map_from_bk_depth/1.0.0.json is " \
           "missing" in res.output


def test_diff_exit_codes(world, tmp_path):
    _, fits = world
    res = invoke(diff, fits / LINEAR, tmp_path / "none.json")
    assert res.exit_code == 2
    bad = tmp_path / "bad.json"
    bad.write_text((fits / LINEAR).read_text("utf-8").replace('"ols"', '"wls"', 1))
    res = invoke(diff, fits / LINEAR, bad)
    assert res.exit_code == 1 and "sha256" in res.output


def test_variants_publish_diff_verify(world, tmp_path):
    # two models of one function side by side: the quadratic in a variant of its own
    # starts at 1.0.0 instead of bumping the linear line to 2.0.0
    _, fits = world
    r = tmp_path / "registry"
    assert invoke(publish, fits / LINEAR, "--to", r, "--init").exit_code == 0
    res = invoke(publish, fits / QUADRATIC, "--to", r, "--variant", "quadratic")
    assert res.exit_code == 0, res.output
    assert res.output.splitlines()[:3] == [
        ("Published map_from_bk_depth/quadratic 1.0.0 -> "
         f"{r / 'map_from_bk_depth' / 'quadratic' / '1.0.0.json'}"),
        "  first version of variant quadratic of map_from_bk_depth",
        "  other variants of map_from_bk_depth: default"]
    res = invoke(publish, fits / QUADRATIC, "--to", r, "--variant", "Quadratic")
    assert res.exit_code == 2 and "not a variant name" in res.output
    # in the default chain the quadratic would be another model: major, and said so
    res = invoke(publish, fits / QUADRATIC, "--to", r, "--dry-run")
    assert res.exit_code == 0 and "Would publish map_from_bk_depth 2.0.0" in res.output
    assert "the model changed: form linear (intercept + bk_depth_cm) -> quadratic" in res.output
    assert "--variant NAME" in res.output

    res = invoke(diff, "map_from_bk_depth", "1.0.0", "1.0.0", "--registry", r,
                 "--variant", "default", "--variant", "quadratic")
    assert res.exit_code == 0, res.output
    lines = res.output.splitlines()
    assert lines[0].startswith("Not like with like: A and B are different variants of "
                               "map_from_bk_depth (default and quadratic)")
    assert lines[1].startswith("They differ in: variant (default / quadratic); form (linear")
    assert "The numbers below compare two models side by side, not two versions." in lines
    assert "call for a" not in res.output and "bk_depth_cm^2" in res.output
    res = invoke(diff, "map_from_bk_depth", "1.0.0", "--registry", r, "--variant",
                 "quadratic", "--format", "json")
    assert res.exit_code == 0, res.output
    out = json.loads(res.output)
    assert out["comparison"]["kind"] == "same-model" and out["bump"] is None
    assert out["a"]["path"] == out["b"]["path"] == \
        str(r / "map_from_bk_depth" / "quadratic" / "1.0.0.json")
    res = invoke(diff, "map_from_bk_depth", "2.0.0", "--registry", r, "--variant",
                 "quadratic")
    assert res.exit_code == 2 and "no version 2.0.0 of map_from_bk_depth/quadratic; its " \
                                  "versions: 1.0.0" in res.output
    res = invoke(diff, "map_from_bk_depth", "1.0.0", "--variant", "quadratic")
    assert res.exit_code == 2 and "--registry" in res.output

    res = invoke(verify, r)
    assert res.exit_code == 0, res.output
    assert "map_from_bk_depth/quadratic/1.0.0.json" in res.output
