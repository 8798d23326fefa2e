"""One rebuild of a data set: from a recipe or a coefficient record's provenance.

Store versions are checked against records.csv read directly with pandas (version k is
the first n_k rows, the store's documented layout) and the recorded hash against
hashlib's SHA-256 (FIPS 180-4)."""

from __future__ import annotations

import hashlib
import json

import pandas as pd
import pytest

from _harness import copy_demo_store, recipe_toml
from refit._util.resources import demo_dir
from refit.errors import InvalidDataError, UnreadableInputError
from refit.select.dataset import (WHERE_HINT, dataset_from_recipe, dataset_from_record,
                                  open_recorded_data)
from refit.select.recipe import read_recipe


@pytest.fixture(scope="module")
def two_versions(tmp_path_factory):
    """A demo store copy at version v, then one more batch admitted (version v + 1)."""
    from refit.curate.store import admit, open_store

    root = tmp_path_factory.mktemp("dataset")
    store = copy_demo_store(root / "store")
    v = open_store(store).version
    admit(demo_dir() / "incoming_soils.csv", store, today="2026-12-02")
    return root, store, v


def _recorded(store, version) -> dict:
    manifest = json.loads((store / "manifest.json").read_text("utf-8"))
    entry = next(e for e in manifest["changelog"] if e["version"] == version)
    return {"kind": "store", "name": manifest["name"], "version": version,
            "sha256": entry["records_sha256"]}, entry


def test_store_version_k_is_the_first_n_k_rows(two_versions):
    _, store, v = two_versions
    ds, entry = _recorded(store, v)
    frame, source = open_recorded_data(ds, store)
    raw = pd.read_csv(store / "records.csv", dtype=str, keep_default_na=False)
    assert len(raw) > entry["row_count_after"] == len(frame) == source.rows
    assert list(frame["profile_id"]) == list(raw["profile_id"][: entry["row_count_after"]])
    assert source.describe() == f"store {ds['name']!r} (version {v})"


def test_recipe_and_record_rebuild_the_same_rows(two_versions):
    root, store, v = two_versions
    (root / "recipe.toml").write_text(recipe_toml(subset={"parent_material": "loess"}),
                                      encoding="utf-8")
    made = dataset_from_recipe(read_recipe(root / "recipe.toml"))
    assert made.source.version == v + 1 and made.source.kind == "store"
    record = {"provenance": {"dataset": made.source.to_dict(),
                             "recipe": made.recipe.to_dict(),
                             "subset": made.subset.to_dict()}}
    again = dataset_from_record(record)  # the recorded path
    assert list(again.frame["profile_id"]) == list(made.frame["profile_id"])
    assert again.source == made.source
    record["provenance"]["subset"]["rows_after"] += 1
    with pytest.raises(InvalidDataError, match=r"recorded subset kept \d+ rows, rebuilding"):
        dataset_from_record(record)


def test_table_sha_is_checked_against_hashlib(tmp_path):
    from _harness import invented_soils

    table = tmp_path / "soils.csv"
    invented_soils(12, 2, [0, 30]).to_csv(table, index=False)
    sha = hashlib.sha256(table.read_bytes()).hexdigest()
    frame, source = open_recorded_data({"kind": "table", "name": "soils.csv",
                                        "sha256": sha}, table)
    assert source.sha256 == sha and len(frame) == 12 and source.version is None
    with pytest.raises(InvalidDataError) as e:
        open_recorded_data({"kind": "table", "name": "soils.csv", "sha256": "0" * 64}, table)
    assert f"has sha256 {sha[:12]}..., but the fit was made on data with sha256 " \
        f"{'0' * 12}..." in str(e.value)


@pytest.mark.parametrize("ds, error, words", [
    ({}, InvalidDataError, "does not record its data set"),
    ({"kind": "store", "name": "x", "version": 1}, InvalidDataError, "no dataset sha256"),
    ({"kind": "archive", "sha256": "a"}, InvalidDataError, "'store' or 'table'"),
    ({"kind": "store", "name": "x", "version": 1, "sha256": "a"}, UnreadableInputError,
     "does not say where"),
])
def test_provenance_without_what_a_rebuild_needs(ds, error, words):
    with pytest.raises(error, match=words):
        open_recorded_data(ds)


def test_a_missing_store_names_the_option(tmp_path):
    with pytest.raises(UnreadableInputError) as e:
        open_recorded_data({"kind": "store", "name": "x", "version": 1, "sha256": "a"},
                           tmp_path / "gone")
    assert "not found" in str(e.value) and WHERE_HINT in str(e.value)


def test_recipe_data_version_is_the_first_n_k_rows(two_versions):
    # records.csv read with pandas: store version k is its first n_k rows (the store's
    # documented layout), n_k from the manifest's changelog
    root, store, v = two_versions
    text = recipe_toml(data={"version": v})
    (root / "pinned.toml").write_text(text, encoding="utf-8")
    made = dataset_from_recipe(read_recipe(root / "pinned.toml"))
    raw = pd.read_csv(store / "records.csv", dtype=str, keep_default_na=False)
    ds, entry = _recorded(store, v)
    assert len(raw) > entry["row_count_after"] == len(made.records) == made.source.rows
    assert list(made.records["profile_id"]) == list(raw["profile_id"][: entry["row_count_after"]])
    assert made.source.version == v and made.source.sha256 == ds["sha256"]
    assert made.recipe.to_dict()["data"]["version"] == v
    latest = root / "latest.toml"
    latest.write_text(recipe_toml(data={"version": "latest"}), encoding="utf-8")
    assert dataset_from_recipe(read_recipe(latest)).source.version == v + 1


def test_recipe_data_version_that_does_not_exist(two_versions):
    from refit.errors import UsageError

    root, store, v = two_versions
    (root / "v9.toml").write_text(recipe_toml(data={"version": v + 7}), encoding="utf-8")
    with pytest.raises(InvalidDataError, match=rf"line \d+: \[data\] version = {v + 7}, but "
                                               rf"store .* has versions 1 to {v + 1}"):
        dataset_from_recipe(read_recipe(root / "v9.toml"))
    (root / "v0.toml").write_text(recipe_toml(data={"version": 0}), encoding="utf-8")
    with pytest.raises(UsageError, match=r"\[data\] version must be a whole number >= 1"):
        read_recipe(root / "v0.toml")
    (root / "tv.toml").write_text(recipe_toml(data={"store": None, "table": "t.csv",
                                                    "version": 1}), encoding="utf-8")
    with pytest.raises(UsageError, match="a table has no versions"):
        read_recipe(root / "tv.toml")
