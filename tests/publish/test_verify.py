"""verify: integrity of a coefficient file, and reproduction from the store.

The hash is checked against hashlib (the standard library's SHA-256, FIPS 180-4) over the
canonical content; the refit is compared with the file to 1e-9 as the issue requires.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from _harness import make_fits, recipe_toml
from refit.coefficients import content_sha256, dumps
from refit.publish import registry as reg
from refit._util.resources import demo_dir
from refit.errors import InvalidDataError, RefitError, UnreadableInputError
from refit.publish.verify import verify_bytes, verify_file, verify_registry

RECIPE = recipe_toml(
    subset={"vegetation": ["grassland", "shrubland", "savanna"], "parent_material": "loess",
            "age_ka": {"min": 5}},
    candidates={"estimators": ["ols", "huber"], "directions": ["inverse", "forward"]},
    validation={"scheme": "kfold", "folds": 5, "seed": 20261201},
    intervals={"methods": ["analytic", "split-conformal"]})
LINEAR = "linear__ols__inverse__analytic.json"


def make_run(folder: Path, out: str = "run") -> Path:
    """Run the recipe on ``folder/store`` (copied from the demo if absent); RUN/fits."""
    return make_fits(folder, RECIPE, out)


@pytest.fixture(scope="module")
def scenario(tmp_path_factory):
    """Demo store copy, a run, 1.0.0 published, then a new batch admitted (version 2)."""
    from refit.curate.store import admit, open_store

    root = tmp_path_factory.mktemp("verify")
    fits = make_run(root)
    registry = root / "registry"
    first = reg.publish(fits / LINEAR, registry, create=True)
    v_before = open_store(root / "store").version
    admit(demo_dir() / "incoming_soils.csv", root / "store", today="2026-12-02")
    assert open_store(root / "store").version == v_before + 1
    return {"root": root, "fits": fits, "registry": registry, "published": first.path,
            "store": root / "store", "version": v_before}


# ----------------------------------------------------------------------------- integrity
def test_published_file_passes_integrity(scenario):
    report = verify_file(scenario["published"])
    assert report.ok
    assert [c.name for c in report.checks] == ["sha256", "schema", "bytes"]


def test_every_single_byte_change_is_detected(scenario):
    raw = Path(scenario["published"]).read_bytes()
    assert verify_bytes(raw).ok
    missed = []
    for i in range(len(raw)):
        # flip the lowest bit (a digit becomes its neighbour, a space a '!', '"' a '#'),
        # and turn each line end into a space (a layout-only edit, same content)
        for new in {raw[i] ^ 0x01} | ({0x20} if raw[i] == 0x0A else set()):
            changed = raw[:i] + bytes([new]) + raw[i + 1:]
            try:
                ok = verify_bytes(changed).ok
            except RefitError:
                ok = False
            if ok:
                missed.append((i, new))
    assert missed == []


def test_layout_only_edit_is_named(scenario, tmp_path):
    raw = Path(scenario["published"]).read_bytes()
    edited = tmp_path / "f.json"
    edited.write_bytes(raw.replace(b'\n "function_id"', b'\n  "function_id"', 1))
    report = verify_file(edited)
    assert [(c.name, c.ok) for c in report.checks] == [("sha256", True), ("schema", True),
                                                       ("bytes", False)]
    assert "content hash still matches" in report.checks[2].message
    line = raw[:raw.index(b'\n "function_id"') + 1].count(b"\n") + 1  # where the edit is
    assert f"line {line})" in report.checks[2].message


def test_edited_number_fails_hash_and_names_field(scenario, tmp_path):
    content = json.loads(Path(scenario["published"]).read_text("utf-8"))
    content["coefficients"][1] *= 1.01
    edited = tmp_path / "f.json"
    edited.write_text(dumps(content), encoding="utf-8")
    report = verify_file(edited)
    assert not report.ok and report.checks[0].name == "sha256"
    assert "$.sha256 does not match" in report.checks[0].message


def test_unreadable_file(tmp_path, scenario):
    with pytest.raises(UnreadableInputError, match="no such coefficient file"):
        verify_file(tmp_path / "missing.json")
    cut = tmp_path / "cut.json"
    cut.write_bytes(Path(scenario["published"]).read_bytes()[:500])
    with pytest.raises(InvalidDataError, match="not valid JSON"):   # exists: invalid data
        verify_file(cut)


# ----------------------------------------------------------------------------- reproduce
def test_reproduces_from_recorded_version_after_new_batch(scenario):
    """The store moved on to a new version; the 1.0.0 file still refits from its own."""
    from refit.curate.store import open_store

    content = json.loads(Path(scenario["published"]).read_text("utf-8"))
    assert content["provenance"]["dataset"]["version"] == scenario["version"]
    assert open_store(scenario["store"]).version == scenario["version"] + 1
    report = verify_file(scenario["published"], store=scenario["store"])
    assert report.ok, report.to_dict()
    assert report.checks[-1].name == "reproduce"
    assert f"version {scenario['version']}" in report.checks[-1].message


@pytest.mark.parametrize("name", ["linear__ols__inverse__split-conformal.json",
                                  "quadratic__huber__forward__analytic.json",
                                  "quadratic__ols__inverse__analytic.json"])
def test_reproduces_every_kind_of_candidate(scenario, name):
    report = verify_file(scenario["fits"] / name, store=scenario["store"])
    assert report.ok, report.to_dict()


def test_a_changed_coefficient_with_a_valid_hash_does_not_reproduce(scenario, tmp_path):
    content = json.loads(Path(scenario["published"]).read_text("utf-8"))
    content["coefficients"][0] += 1e-6 * abs(content["coefficients"][0])   # beyond 1e-9
    content["sha256"] = content_sha256(content)
    forged = tmp_path / "forged.json"
    forged.write_text(dumps(content), encoding="utf-8")
    report = verify_file(forged, store=scenario["store"])
    assert [c.ok for c in report.checks] == [True, True, True, False]
    assert "coefficients[0]" in report.checks[-1].message
    # but within the tolerance it is accepted
    content["coefficients"][0] = json.loads(
        Path(scenario["published"]).read_text("utf-8"))["coefficients"][0] * (1 + 1e-12)
    content["sha256"] = content_sha256(content)
    forged.write_text(dumps(content), encoding="utf-8")
    assert verify_file(forged, store=scenario["store"]).ok


def test_other_store_or_edited_store_is_refused(scenario, tmp_path):
    store = tmp_path / "store"
    shutil.copytree(scenario["store"], store)
    records = store / "records.csv"
    lines = records.read_text("utf-8").splitlines(keepends=True)
    lines[5] = lines[5].replace(",loess,", ",loess ,", 1) if ",loess," in lines[5] \
        else lines[5].replace(",", ",x", 1)
    records.write_text("".join(lines), encoding="utf-8")
    report = verify_file(scenario["published"], store=store)
    assert not report.ok
    assert "edited outside refit" in report.checks[-1].message
    with pytest.raises(UnreadableInputError, match="not found"):
        verify_file(scenario["published"], store=tmp_path / "nowhere")


def test_file_without_recipe_cannot_be_refitted(scenario, tmp_path):
    content = json.loads(Path(scenario["published"]).read_text("utf-8"))
    content["provenance"]["recipe"] = None
    content["sha256"] = content_sha256(content)
    f = tmp_path / "f.json"
    f.write_text(dumps(content), encoding="utf-8")
    report = verify_file(f, store=scenario["store"])
    assert not report.ok and "does not record its recipe" in report.checks[-1].message


# ----------------------------------------------------------------------------- registry
def test_verify_registry(scenario, tmp_path):
    r = tmp_path / "registry"
    shutil.copytree(scenario["registry"], r)
    assert verify_registry(r).ok
    index = json.loads((r / "index.json").read_text("utf-8"))
    index["functions"]["map_from_bk_depth"][0]["version"] = "1.0.1"
    (r / "index.json").write_text(json.dumps(index), encoding="utf-8")
    report = verify_registry(r)
    failed = [c.message for c in report.failures()]
    assert any("1.0.0.json is on disk but not in index.json" in m for m in failed)
    assert any("1.0.1.json is missing" in m for m in failed)
    with pytest.raises(UnreadableInputError, match="not found"):
        verify_registry(tmp_path / "none")



# ----------------------------------------------------------------------------- one rebuild
@pytest.fixture(scope="module")
def table_run(tmp_path_factory):
    """A run on a table (invented, seeded soils), with 'leave-one-out' spelled out."""
    from _harness import invented_soils
    from refit.select.recipe import read_recipe
    from refit.validate.candidates import run_recipe
    from refit.validate.runfolder import write_run

    root = tmp_path_factory.mktemp("table")
    invented_soils(30, 11, [0, 40, 80]).to_csv(root / "soils.csv", index=False)
    (root / "recipe.toml").write_text(recipe_toml(
        data={"store": None, "table": "soils.csv"},
        validation={"scheme": "leave-one-out"}), encoding="utf-8")
    run_dir = write_run(run_recipe(read_recipe(root / "recipe.toml")), root / "run")
    return {"root": root, "run": run_dir, "table": root / "soils.csv",
            "file": run_dir / "fits" / LINEAR}


def test_a_table_based_file_is_accepted_by_verify_and_the_report(table_run):
    import pandas as pd
    import statsmodels.api as sm

    from refit.report.inputs import load_run

    report = verify_file(table_run["file"], store=table_run["table"])
    assert report.ok, report.to_dict()
    assert "refitted from table 'soils.csv' (30 rows" in report.checks[-1].message
    for where in (None, table_run["table"]):  # run.json's path, or named
        inputs = load_run(table_run["run"], candidate="linear__ols__inverse__analytic",
                          store=where)
        assert inputs.kept.sum() == 30 and inputs.recipe.scheme == "loo"
    # Reference: statsmodels OLS of map_mm on bk_depth_cm over the same table
    soils = pd.read_csv(table_run["table"])
    ref = sm.OLS(soils["map_mm"], sm.add_constant(soils["bk_depth_cm"])).fit()
    content = json.loads(table_run["file"].read_text("utf-8"))
    assert content["coefficients"] == pytest.approx(list(ref.params), rel=1e-9)
    np_cov = inputs.fit.result.covariance
    assert np_cov == pytest.approx(ref.cov_params().to_numpy(), rel=1e-8)


def test_a_changed_table_gives_the_same_message_in_verify_and_the_report(table_run,
                                                                          tmp_path):
    from refit.errors import InvalidDataError
    from refit.report.inputs import load_run

    changed = tmp_path / "soils.csv"
    text = table_run["table"].read_text("utf-8")
    changed.write_text(text.replace("grassland", "Grassland", 1), encoding="utf-8")
    report = verify_file(table_run["file"], store=changed)
    assert [c.ok for c in report.checks] == [True, True, True, False]
    with pytest.raises(InvalidDataError) as exc:
        load_run(table_run["run"], candidate="linear__ols__inverse__analytic", store=changed)
    assert report.checks[-1].message == str(exc.value)
    assert "not the data it was fitted on" in str(exc.value)
    assert "--store" in str(exc.value)


def test_a_store_given_for_a_table_fit_is_named(table_run, scenario):
    report = verify_file(table_run["file"], store=scenario["store"])
    assert not report.ok
    assert "was made on table 'soils.csv'" in report.checks[-1].message
    assert "is a store" in report.checks[-1].message
