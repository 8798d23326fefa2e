"""Attacks on recipes: paths that leave the recipe's folder through links, sizes beyond
refit's limits, huge values in messages.

TOML is read by the standard library's tomllib (TOML 1.0, toml.io/en/v1.0.0); paths are
resolved by os.path.realpath (the operating system's view, links included). Each attack
ends in refit's own UsageError or InvalidDataError naming the recipe's key, never a read
outside the folder, a raw exception or a run that does not end.
"""

from __future__ import annotations

import shutil

import pytest

from _harness import cli, copy_demo_store, recipe_toml
from refit.errors import InvalidDataError, UsageError
from refit.select.dataset import dataset_from_recipe
from refit.select.recipe import MAX_FOLDS, MAX_REPEATS, MAX_SEED, read_recipe
from refit.select.subsets import MAX_ONE_OF
from refit.select.values import MAX_ITEMS


def write(folder, text):
    path = folder / "recipe.toml"
    path.write_text(text, encoding="utf-8")
    return path


@pytest.mark.parametrize("key", ["store", "table"])
def test_a_link_out_of_the_recipe_folder_is_refused(tmp_path, key):
    outside = tmp_path / "outside"
    outside.mkdir()
    target = copy_demo_store(outside / "store") if key == "store" else outside / "t.csv"
    if key == "table":
        target.write_text("profile_id,latitude,longitude,source,map_mm\n")
    folder = tmp_path / "recipes"
    folder.mkdir()
    (folder / "data").symlink_to(target)
    path = write(folder, recipe_toml(data={"store": None, key: "data"}))
    with pytest.raises(UsageError, match="leads outside the recipe's folder") as err:
        read_recipe(path)
    assert str(target) in str(err.value) and "line 3" in str(err.value)
    # /etc/passwd through a link, on the command line too: refused, nothing read
    (folder / "passwd.csv").symlink_to("/etc/passwd")
    path = write(folder, recipe_toml(data={"store": None, "table": "passwd.csv"}))
    code, out = cli("fit", path, "--out", tmp_path / "run")
    assert code == 2 and out.startswith("Error: ") and "/etc/passwd" in out, out
    assert "root:" not in out and not (tmp_path / "run").exists()


def test_a_folder_link_above_the_data_is_refused_too(tmp_path):
    outside = tmp_path / "outside"
    copy_demo_store(outside / "store")
    folder = tmp_path / "recipes"
    folder.mkdir()
    (folder / "shared").symlink_to(outside, target_is_directory=True)
    with pytest.raises(UsageError, match="outside the recipe's folder"):
        read_recipe(write(folder, recipe_toml(data={"store": "shared/store"})))


def test_a_link_inside_the_folder_is_fine(tmp_path):
    copy_demo_store(tmp_path / "real_store")
    (tmp_path / "store").symlink_to(tmp_path / "real_store", target_is_directory=True)
    recipe = read_recipe(write(tmp_path, recipe_toml()))
    assert recipe.store == (tmp_path / "real_store").resolve()


def test_store_files_linked_outside_the_store_are_refused(tmp_path):
    copy_demo_store(tmp_path / "store")
    outside = tmp_path.parent / f"{tmp_path.name}-records.csv"
    shutil.move(tmp_path / "store" / "records.csv", outside)
    (tmp_path / "store" / "records.csv").symlink_to(outside)
    recipe = read_recipe(write(tmp_path, recipe_toml()))
    with pytest.raises(InvalidDataError, match="records.csv is a symbolic link") as err:
        dataset_from_recipe(recipe)
    assert str(outside) in str(err.value)


@pytest.mark.parametrize("section, key, value, limit", [
    ("validation", "seed", 99999999999999999999, f"{MAX_SEED:,}"),
    ("validation", "seed", MAX_SEED + 1, f"{MAX_SEED:,}"),
    ("validation", "repeats", 100_000_000, f"{MAX_REPEATS:,}"),
    ("validation", "folds", 10**9, f"{MAX_FOLDS:,}"),
])
def test_sizes_beyond_the_limits_are_refused_at_once(tmp_path, section, key, value, limit):
    copy_demo_store(tmp_path / "store")
    path = write(tmp_path, recipe_toml(**{section: {key: value}}))
    with pytest.raises(UsageError, match=f"<= {limit} \\(refit's limit\\)"):
        read_recipe(path)
    code, out = cli("fit", path, "--out", tmp_path / "run")
    assert code == 2 and out.startswith("Error: ") and len(out.splitlines()) == 1, out
    assert f"[{section}] {key}" in out


def test_the_limits_themselves_are_accepted(tmp_path):
    copy_demo_store(tmp_path / "store")
    r = read_recipe(write(tmp_path, recipe_toml(validation={"seed": MAX_SEED,
                                                            "repeats": MAX_REPEATS})))
    assert (r.seed, r.repeats) == (MAX_SEED, MAX_REPEATS)


@pytest.mark.parametrize("key", ["forms", "estimators", "directions"])
def test_a_list_repeated_200000_times_gets_a_short_message(tmp_path, key):
    value = {"forms": "linear", "estimators": "ols", "directions": "inverse"}[key]
    path = write(tmp_path, recipe_toml(candidates={key: [value] * 200_000}))
    code, out = cli("fit", path, "--out", tmp_path / "run")
    assert code == 2 and out.startswith("Error: ") and len(out) < 600, out[:800]
    assert f"at most {MAX_ITEMS} items" in out and "200,000" in out


def test_long_predictor_and_subset_lists_are_refused_briefly(tmp_path):
    path = write(tmp_path, recipe_toml(function={"predictors": [f"c{i}" for i in
                                                                range(MAX_ITEMS + 1)]}))
    with pytest.raises(UsageError, match=f"at most {MAX_ITEMS} items") as err:
        read_recipe(path)
    assert len(str(err.value)) < 600
    path = write(tmp_path, recipe_toml(subset={"source": [f"S{i}" for i in
                                                          range(MAX_ONE_OF + 1)]}))
    with pytest.raises(UsageError, match=f"limit is {MAX_ONE_OF:,}") as err:
        read_recipe(path)
    assert len(str(err.value)) < 600


def test_a_wrong_value_is_quoted_short(tmp_path):
    path = write(tmp_path, recipe_toml(validation={"folds": "x" * 100_000}))
    with pytest.raises(UsageError) as err:
        read_recipe(path)
    assert len(str(err.value)) < 600 and "100,002 characters" in str(err.value)


@pytest.mark.parametrize("section, key, value, says", [
    ("candidates", "estimators", False, "estimators must be a non-empty list; got False"),
    ("intervals", "methods", {"a": 1}, "methods must be a non-empty list"),
    ("validation", "scheme", 3, "scheme must be a non-empty text in quotes; got 3"),
])
def test_a_wrongly_typed_value_the_defaults_read_is_refused(tmp_path, section, key, value,
                                                           says):
    # found by the long fuzzing run (hypothesis, 10,000 recipes): `estimators = false`
    # reached the defaults and ended in "unexpected TypeError ... refit bug"
    path = write(tmp_path, recipe_toml(**{section: {key: value}}))
    with pytest.raises(UsageError, match=says):
        read_recipe(path)
