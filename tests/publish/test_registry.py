"""Registry: semver bump rules, publishing, immutability and the index.

The bump rules follow Semantic Versioning 2.0.0 (https://semver.org, items 6-8: a patch,
minor or major increment resets the lower fields to 0) read for equations as the issue
states: major when the model changed (form, predictors, response, direction, estimator,
interval method, groups); minor when the same model is refitted (data, its version, the
subset, the interval level, any fitted number); patch for metadata only. Each variant of a
function is its own chain (tests/publish/test_variants.py).
"""

from __future__ import annotations

import copy
import hashlib
import json
import os
import shutil
import stat
from pathlib import Path

import pytest

from _harness import make_fits, recipe_toml
from refit.publish import registry as reg
from refit.errors import InvalidDataError, UnreadableInputError

RECIPE = recipe_toml(subset={"parent_material": "loess"},
                     validation={"scheme": "kfold", "folds": 5, "seed": 7})


def make_run(folder: Path, recipe_text: str = RECIPE, out: str = "run") -> Path:
    """Copy the demo store, write the recipe beside it, run it; returns RUN/fits."""
    return make_fits(folder, recipe_text, out)


@pytest.fixture(scope="module")
def fits(tmp_path_factory) -> Path:
    return make_run(tmp_path_factory.mktemp("registry"))


LINEAR = "linear__ols__inverse__analytic.json"
QUADRATIC = "quadratic__ols__inverse__analytic.json"


# ----------------------------------------------------------------------------- rules
BASE = {
    "function_id": "map_from_bk_depth", "version": "1.0.0", "status": "published",
    "created": "2026-01-01", "response": {"name": "map_mm", "unit": "mm"},
    "predictors": [{"name": "bk_depth_cm", "unit": "cm", "valid_min": 5.0, "valid_max": 290.0}],
    "direction": "inverse", "form": "linear", "degree": 1, "estimator": "ols",
    "equation": {"y": "map_mm", "x": ["bk_depth_cm"], "scale": "linear", "smearing": None},
    "terms": ["intercept", "bk_depth_cm"], "coefficients": [400.0, 2.2],
    "covariance": [[250.0, -2.0], [-2.0, 0.03]], "residual_std_error": 100.0,
    "df_resid": 111.0, "n": 113, "r_squared": 0.6,
    "interval": {"method": "analytic", "level": 0.95},
    "cv": {"scheme": "kfold", "rmsep": 105.0}, "domain": {"turning_point": None},
    "provenance": {"dataset": {"name": "demo", "version": 1, "sha256": "a" * 64,
                               "path": "store"},
                   "subset": {"filters": [{"column": "parent_material", "kind": "equals",
                                           "value": "loess"}], "rows_after": 113},
                   "recipe_sha256": "b" * 64, "software": {"refit": "0.1.0"}},
    "cautions": ["research use"], "sha256": "c" * 64,
}


def changed(path: str, value) -> dict:
    """BASE with one dotted field set (``predictors.0.unit`` indexes a list)."""
    out = copy.deepcopy(BASE)
    *head, last = path.split(".")
    node = out
    for part in head:
        node = node[int(part)] if part.isdigit() else node[part]
    node[int(last) if last.isdigit() else last] = value
    return out


@pytest.mark.parametrize("path, value, want", [
    ("form", "quadratic", "major"),
    ("terms", ["intercept", "bk_depth_cm", "bk_depth_cm^2"], "major"),
    ("predictors.0.name", "by_depth_cm", "major"),
    ("predictors.0.unit", "m", "major"),
    ("response", {"name": "mat_c", "unit": "degC"}, "major"),
    ("response.unit", "in", "major"),
    ("direction", "forward", "major"),
    ("equation.scale", "log", "major"),
    ("provenance.dataset.version", 2, "minor"),
    ("provenance.dataset.sha256", "d" * 64, "minor"),
    ("provenance.dataset.name", "other", "minor"),
    ("provenance.subset.filters", [], "minor"),
    ("coefficients", [401.0, 2.2], "minor"),
    ("estimator", "huber", "major"),              # another model: major within a chain
    ("estimator", "mixed", "major"),
    ("interval.method", "split-conformal", "major"),
    ("provenance.groups", "source", "major"),
    ("interval.level", 0.9, "minor"),
    ("predictors.0.valid_max", 300.0, "minor"),
    ("cautions", ["research use", "another caution"], "patch"),
    ("provenance.software.refit", "0.2.0", "patch"),
    ("provenance.recipe_sha256", "e" * 64, "patch"),
])
def test_required_bump_by_field(path, value, want):
    bump, changes = reg.required_bump(BASE, changed(path, value))
    assert bump == want
    assert changes[want], changes


def test_largest_change_wins_and_all_are_listed():
    new = changed("form", "quadratic")
    new["provenance"]["dataset"]["version"] = 2
    new["cautions"] = ["x"]
    bump, changes = reg.required_bump(BASE, new)
    assert bump == "major"
    assert changes == {"major": ["form"], "minor": ["provenance.dataset.version"],
                       "patch": ["cautions"]}


@pytest.mark.parametrize("path, value", [
    ("created", "2027-05-05"), ("version", "9.9.9"), ("sha256", "f" * 64),
    ("status", "candidate"), ("provenance.dataset.path", "elsewhere/store")])
def test_ignored_fields_are_no_change(path, value):
    assert reg.required_bump(BASE, changed(path, value)) == (None, {})


@pytest.mark.parametrize("version, bump, want", [
    # semver.org 2.0.0 items 6-8: lower fields reset to 0
    ("1.4.2", "patch", "1.4.3"), ("1.4.2", "minor", "1.5.0"), ("1.4.2", "major", "2.0.0"),
    ("0.9.9", "minor", "0.10.0"), ("9.0.0", "major", "10.0.0")])
def test_bumped(version, bump, want):
    assert reg.bumped(version, bump) == want


@pytest.mark.parametrize("text", ["1.0", "01.0.0", "1.0.0-candidate", "v1.0.0", "1.0.0.0"])
def test_parse_version_refuses_non_release_versions(text):
    with pytest.raises(InvalidDataError, match="MAJOR.MINOR.PATCH"):
        reg.parse_version(text)


def test_plan_version_proposes_and_refuses_too_small():
    minor = changed("provenance.dataset.version", 2)
    assert reg.plan_version(BASE, "1.3.1", minor, None)[:2] == ("1.4.0", "minor")
    assert reg.plan_version(BASE, "1.3.1", minor, "major")[0] == "2.0.0"   # larger is fine
    with pytest.raises(InvalidDataError, match=r"--bump patch is too small.*"
                       r"provenance.dataset.version.*minor bump \(version 1.4.0\)"):
        reg.plan_version(BASE, "1.3.1", minor, "patch")
    with pytest.raises(InvalidDataError, match="identical to the published version 1.3.1"):
        reg.plan_version(BASE, "1.3.1", changed("created", "2030-01-01"), None)
    assert reg.plan_version(None, None, BASE, None)[0] == "1.0.0"


# ----------------------------------------------------------------------------- publishing
def _sha_file(path: Path) -> str:
    return hashlib.sha256(path.read_bytes()).hexdigest()


def test_publish_first_version_and_major_bump(fits, tmp_path):
    r = tmp_path / "registry"
    first = reg.publish(fits / LINEAR, r, create=True, now="2026-12-01T00:00:00+00:00")
    assert (first.version, first.previous, first.bump) == ("1.0.0", None, None)
    path = r / "map_from_bk_depth" / "1.0.0.json"
    content = json.loads(path.read_text("utf-8"))
    assert content["version"] == "1.0.0" and content["status"] == "published"
    candidate = json.loads((fits / LINEAR).read_text("utf-8"))
    assert content["coefficients"] == candidate["coefficients"]
    # the hash is recomputed over the new content (hashlib on the canonical form: keys
    # sorted, compact separators, UTF-8, without the sha256 key)
    body = {k: v for k, v in content.items() if k != "sha256"}
    canon = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert content["sha256"] == hashlib.sha256(canon.encode("utf-8")).hexdigest()
    assert content["sha256"] != candidate["sha256"]
    # read-only on disk
    assert not os.stat(path).st_mode & (stat.S_IWUSR | stat.S_IWGRP | stat.S_IWOTH)

    second = reg.publish(fits / QUADRATIC, r)
    assert (second.version, second.required, second.bump) == ("2.0.0", "major", "major")
    assert "form" in second.changes["major"] and "terms" in second.changes["major"]


def test_publish_refuses_too_small_bump_and_writes_nothing(fits, tmp_path):
    r = tmp_path / "registry"
    reg.publish(fits / LINEAR, r, create=True)
    before = (r / "index.json").read_bytes()
    with pytest.raises(InvalidDataError, match="--bump minor is too small.*major"):
        reg.publish(fits / QUADRATIC, r, bump="minor")
    assert (r / "index.json").read_bytes() == before
    assert sorted(p.name for p in (r / "map_from_bk_depth").iterdir()) == ["1.0.0.json"]


def test_published_version_is_immutable(fits, tmp_path):
    r = tmp_path / "registry"
    reg.publish(fits / LINEAR, r, create=True)
    path = r / "map_from_bk_depth" / "1.0.0.json"
    digest = _sha_file(path)
    # the same candidate again: nothing new, refused
    with pytest.raises(InvalidDataError, match="identical to the published version 1.0.0"):
        reg.publish(fits / LINEAR, r)
    # a file already at the next version's place (e.g. copied in by hand) is never replaced
    reg.publish(fits / QUADRATIC, r, dry_run=True)            # would be 2.0.0
    squatter = r / "map_from_bk_depth" / "2.0.0.json"
    squatter.write_text("{}", encoding="utf-8")
    with pytest.raises(InvalidDataError, match="2.0.0.json is on disk but not in index.json"):
        reg.publish(fits / QUADRATIC, r)
    assert squatter.read_text("utf-8") == "{}"
    assert _sha_file(path) == digest


def test_dry_run_writes_nothing(fits, tmp_path):
    r = tmp_path / "registry"
    res = reg.publish(fits / LINEAR, r, create=True, dry_run=True)
    assert res.version == "1.0.0" and res.dry_run
    assert not r.exists()


def test_missing_registry_and_bad_candidate(fits, tmp_path):
    with pytest.raises(UnreadableInputError, match="not found.*--init"):
        reg.publish(fits / LINEAR, tmp_path / "nowhere")
    (tmp_path / "stuff").mkdir()
    (tmp_path / "stuff" / "notes.txt").write_text("x")
    with pytest.raises(UnreadableInputError, match="not a refit registry"):
        reg.publish(fits / LINEAR, tmp_path / "stuff", create=True)
    edited = tmp_path / "edited.json"
    edited.write_text((fits / LINEAR).read_text("utf-8").replace('"ols"', '"huber"', 1))
    with pytest.raises(InvalidDataError, match="sha256"):
        reg.publish(edited, tmp_path / "r2", create=True)
    assert not (tmp_path / "r2").exists()


# ----------------------------------------------------------------------------- the index
def test_index_agrees_with_files(fits, tmp_path):
    r = tmp_path / "registry"
    reg.publish(fits / LINEAR, r, create=True, now="2026-12-01T00:00:00+00:00")
    reg.publish(fits / QUADRATIC, r, now="2026-12-02T00:00:00+00:00")
    index = json.loads((r / "index.json").read_text("utf-8"))
    entries = index["functions"]["map_from_bk_depth"]
    assert [e["version"] for e in entries] == ["1.0.0", "2.0.0"]
    assert [e["published"][:10] for e in entries] == ["2026-12-01", "2026-12-02"]
    for e in entries:
        path = r / e["file"]
        assert e["file_sha256"] == _sha_file(path)
        assert e["sha256"] == json.loads(path.read_text("utf-8"))["sha256"]
    assert reg.registry_problems(r) == []
    assert reg.open_registry(r).latest("map_from_bk_depth")["version"] == "2.0.0"


def test_disagreeing_index_is_reported(fits, tmp_path):
    r = tmp_path / "registry"
    reg.publish(fits / LINEAR, r, create=True)
    reg.publish(fits / QUADRATIC, r)
    index = json.loads((r / "index.json").read_text("utf-8"))
    index["functions"]["map_from_bk_depth"][0]["sha256"] = "0" * 64
    index["functions"]["map_from_bk_depth"].append(
        {"version": "3.0.0", "file": "map_from_bk_depth/3.0.0.json", "sha256": "1" * 64})
    (r / "index.json").write_text(json.dumps(index))
    stray = r / "map_from_bk_depth" / "0.9.0.json"
    shutil.copy(r / "map_from_bk_depth" / "1.0.0.json", stray)
    problems = reg.registry_problems(r)
    assert len(problems) == 3, problems
    assert any("0.9.0.json is on disk but not in index.json" in p for p in problems)
    assert any("lists map_from_bk_depth 3.0.0 but map_from_bk_depth/3.0.0.json is missing"
               in p for p in problems)
    assert any("1.0.0.json: its 'sha256' field" in p and "differs" in p for p in problems)
    with pytest.raises(InvalidDataError, match="index disagrees"):
        reg.publish(fits / LINEAR, r, bump="major")
