"""Recipe files: every rule, each error naming the file, line and key.

TOML syntax and positions follow the TOML 1.0 specification (toml.io/en/v1.0.0), read by
the standard library's tomllib."""

from __future__ import annotations

import pytest

from refit.errors import InvalidDataError, UnreadableInputError, UsageError
from refit.select.dataset import check_columns
from refit.select.recipe import form_degree, key_lines, read_recipe

GOOD = """\
# a comment line
[data]
store = "store"

[subset]
vegetation = ["grassland", "savanna"]
parent_material = "loess"
age_ka = { min = 5 }

[function]
id = "map_from_bk_depth"
response = "map_mm"
predictors = ["bk_depth_cm"]

[candidates]
forms = ["linear", "quadratic", "cubic"]
estimators = ["ols", "huber"]
directions = ["inverse", "forward"]

[validation]
scheme = "group-kfold"
folds = 4
repeats = 3
groups = "source"
seed = 42

[intervals]
level = 0.9
methods = ["analytic", "jackknife+"]
"""


def write(tmp_path, text, name="recipe.toml"):
    p = tmp_path / name
    p.write_text(text, encoding="utf-8")
    return p


def edit(old, new, text=GOOD):
    assert old in text
    return text.replace(old, new)


def test_good_recipe_is_read_in_full(tmp_path):
    r = read_recipe(write(tmp_path, GOOD))
    assert r.store == (tmp_path / "store").resolve() and r.table is None
    assert [f.describe() for f in r.subset] == [
        "vegetation in ['grassland', 'savanna']", "parent_material = 'loess'", "age_ka >= 5"]
    assert (r.function_id, r.response, r.predictors) == ("map_from_bk_depth", "map_mm",
                                                         ("bk_depth_cm",))
    assert r.forms == ("linear", "quadratic", "cubic")
    assert (r.scheme, r.folds, r.repeats, r.groups, r.seed) == ("group-kfold", 4, 3,
                                                                "source", 42)
    assert r.level == 0.9 and r.methods == ("analytic", "jackknife+")
    assert len(r.sha256) == 64
    assert r.where("validation.seed").endswith("recipe.toml, line 25")


def test_defaults_for_optional_sections(tmp_path):
    text = '[data]\ntable = "t.csv"\n[function]\nid = "f"\nresponse = "map_mm"\n' \
           'predictors = "bk_depth_cm"\n'
    r = read_recipe(write(tmp_path, text))
    assert r.table == (tmp_path / "t.csv").resolve() and r.predictors == ("bk_depth_cm",)
    assert (r.forms, r.estimators, r.directions) == (("linear",), ("ols",), ("inverse",))
    assert (r.scheme, r.folds, r.repeats, r.seed, r.level, r.methods) == (
        "kfold", 5, 1, 0, 0.95, ("analytic",))


def test_paths_relative_to_the_recipe_not_the_working_folder(tmp_path, monkeypatch):
    sub = tmp_path / "project"
    elsewhere = tmp_path / "elsewhere"
    sub.mkdir()
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    r = read_recipe(write(sub, edit('store = "store"', 'store = "stores/main"')))
    assert r.store == (sub / "stores" / "main").resolve()


def test_invalid_toml_names_line_and_column(tmp_path):
    # an unquoted string value is not TOML (TOML 1.0: strings are quoted)
    path = write(tmp_path, edit('scheme = "group-kfold"', "scheme = group-kfold"))
    with pytest.raises(UnreadableInputError) as e:
        read_recipe(path)
    msg = str(e.value)
    assert "recipe.toml" in msg and "not valid TOML" in msg
    assert "line 21" in msg and "column" in msg


def test_duplicate_key_is_invalid_toml(tmp_path):
    with pytest.raises(UnreadableInputError, match=r"line 26"):
        read_recipe(write(tmp_path, edit("seed = 42", "seed = 42\nseed = 43")))


@pytest.mark.parametrize("old, new, line, key", [
    ("seed = 42", "sead = 42", 25, "'sead'"),
    ("[intervals]", "[interval]", 27, "[interval]"),
    ('response = "map_mm"', 'response = "map_mm"\nweight = "w"', 13,
     "'weight' in [function] (did you mean 'weights'?)"),
])
def test_unknown_key_or_section_names_its_line(tmp_path, old, new, line, key):
    with pytest.raises(UsageError) as e:
        read_recipe(write(tmp_path, edit(old, new)))
    msg = str(e.value)
    assert f"recipe.toml, line {line}:" in msg and key in msg
    assert e.value.exit_code == 2


def test_unknown_key_suggests_the_close_one(tmp_path):
    with pytest.raises(UsageError, match=r"did you mean 'seed'"):
        read_recipe(write(tmp_path, edit("seed = 42", "sead = 42")))


@pytest.mark.parametrize("old, new, line, fragment", [
    ('folds = 4', 'folds = 1', 22, "folds must be a whole number >= 2"),
    ('folds = 4', 'folds = 4.5', 22, "folds must be a whole number"),
    ('folds = 4', 'folds = true', 22, "folds must be a whole number"),
    ('repeats = 3', 'repeats = 0', 23, "repeats must be a whole number >= 1"),
    ('seed = 42', 'seed = -1', 25, "seed must be a whole number >= 0"),
    ('level = 0.9', 'level = 95', 28, "coverage between 0.5 and 1"),
    ('level = 0.9', 'level = "0.95"', 28, "coverage between 0.5 and 1"),
    ('scheme = "group-kfold"', 'scheme = "grouped"', 21, "one of 'kfold'"),
    ('"linear", "quadratic"', '"linear", "quartic"', 16, "'quartic' is not one of them"),
    ('"linear", "quadratic"', '"linear", "polynomial-9"', 16, "polynomial-N"),
    ('["ols", "huber"]', '["ols", "lasso"]', 17, "'lasso' is not one of them"),
    ('["ols", "huber"]', '["ols", "ols"]', 17, "without repeats"),
    ('["inverse", "forward"]', '[]', 18, "a non-empty list"),
    ('["analytic", "jackknife+"]', '["conformal"]', 29, "'conformal' is not one of them"),
    ('id = "map_from_bk_depth"', 'id = "MAP from Bk"', 11, "lower case letters"),
    ('predictors = ["bk_depth_cm"]', 'predictors = ["map_mm"]', 13, "also a predictor"),
    ('predictors = ["bk_depth_cm"]', 'predictors = [1]', 13, "non-empty text"),
    ('groups = "source"', '', 21, "needs groups"),
    ('store = "store"', 'store = 3', 3, "must be a path"),
    ('store = "store"', 'store = "store"\ntable = "t.csv"', 2, "both of 'table' and 'store'"),
])
def test_bad_values_name_line_and_key(tmp_path, old, new, line, fragment):
    with pytest.raises(UsageError) as e:
        read_recipe(write(tmp_path, edit(old, new)))
    msg = str(e.value)
    assert f"line {line}:" in msg, msg
    assert fragment in msg, msg


def test_groups_with_an_ungrouped_scheme_is_refused(tmp_path):
    with pytest.raises(UsageError, match=r"line 24: groups = 'source' has no effect"):
        read_recipe(write(tmp_path, edit('scheme = "group-kfold"', 'scheme = "kfold"')))


@pytest.mark.parametrize("old, new, line, fragment", [
    ('age_ka = { min = 5 }', 'age_ka = { min = 5, mx = 9 }', 8, "unknown key 'mx'"),
    ('age_ka = { min = 5 }', 'age_ka = { min = 50, max = 9 }', 8, "larger than max"),
    ('age_ka = { min = 5 }', 'age_ka = { min = "old" }', 8, "min must be a number"),
    ('age_ka = { min = 5 }', 'age_ka = {}', 8, "neither min nor max"),
    ('parent_material = "loess"', 'parent_material = []', 7, "at least one"),
    ('parent_material = "loess"', 'parent_material = 1979-05-27', 7, "a value"),
])
def test_bad_subset_filters_name_line(tmp_path, old, new, line, fragment):
    with pytest.raises(UsageError) as e:
        read_recipe(write(tmp_path, edit(old, new)))
    assert f"line {line}:" in str(e.value) and fragment in str(e.value)


def test_missing_required_parts(tmp_path):
    with pytest.raises(UsageError, match=r"needs a \[data\] section"):
        read_recipe(write(tmp_path, '[function]\nid = "f"\n'))
    with pytest.raises(UsageError, match=r"line 10: \[function\] needs 'response'"):
        read_recipe(write(tmp_path, edit('response = "map_mm"\n', "")))


def test_unreadable_recipe_files(tmp_path):
    with pytest.raises(UnreadableInputError, match="not found"):
        read_recipe(tmp_path / "nope.toml")
    p = tmp_path / "latin1.toml"
    p.write_bytes('[data]\ntable = "b\xe9.csv"\n'.encode("latin-1"))
    with pytest.raises(UnreadableInputError, match="not UTF-8"):
        read_recipe(p)


def test_response_or_predictor_missing_from_the_data(tmp_path):
    r = read_recipe(write(tmp_path, GOOD))
    with pytest.raises(InvalidDataError) as e:
        check_columns(r, ["map_mm", "bk_depth", "source"], source="table 't.csv'")
    msg = str(e.value)
    assert "line 13" in msg and "'bk_depth_cm'" in msg and "did you mean 'bk_depth'" in msg
    with pytest.raises(InvalidDataError, match=r"line 12: \[function\] response"):
        check_columns(r, ["bk_depth_cm", "source"], source="the data")
    with pytest.raises(InvalidDataError, match=r"line 24: \[validation\] groups"):
        check_columns(r, ["bk_depth_cm", "map_mm"], source="the data")


def test_key_lines_follow_headers_and_quoted_keys():
    text = '[a]\n"x y" = 1\n  z = 2\n\n[ b ]  # c\nk.l = 3\n'
    assert key_lines(text) == {"a": 1, "a.x y": 2, "a.z": 3, "b": 5, "b.k": 6}


def test_form_names():
    assert form_degree("linear") == ("linear", None)
    assert form_degree("cubic") == ("polynomial", 3)
    assert form_degree("polynomial-5") == ("polynomial", 5)
    with pytest.raises(ValueError):
        form_degree("polynomial-1")


def test_demo_recipe_parses():
    r = read_recipe("calib_demo/recipe.toml")
    assert r.function_id == "map_from_bk_depth" and r.scheme == "group-kfold"
    assert r.store.name == "store" and len(r.subset) == 3


def test_leave_one_out_is_read_as_loo(tmp_path):
    # 'leave-one-out' is the usual name of the scheme (Allen 1974, Technometrics 16:125)
    text = edit('scheme = "group-kfold"', 'scheme = "leave-one-out"').replace(
        'groups = "source"\n', "")
    r = read_recipe(write(tmp_path, text))
    assert r.scheme == "loo"
    assert r.to_dict()["validation"]["scheme"] == "loo"


@pytest.mark.parametrize("alias, name", [("k-fold", "kfold"), ("group-k-fold", "group-kfold"),
                                         ("logo", "leave-one-group-out"),
                                         ("spatial-blocks", "spatial-block")])
def test_other_spellings_of_a_scheme(alias, name):
    # the spellings of scikit-learn's splitters (KFold, GroupKFold, LeaveOneGroupOut)
    from refit.select.schemes import canonical_scheme

    assert canonical_scheme(alias) == name


def test_scheme_names_are_shared_with_the_splitters():
    from refit.select.schemes import ALIASES, GROUPED, NEEDS_GROUP_COLUMN, SCHEMES
    from refit.validate import splitters

    assert splitters.SCHEMES is SCHEMES and splitters.GROUPED is GROUPED
    assert set(NEEDS_GROUP_COLUMN) < set(GROUPED) <= set(SCHEMES)
    assert set(ALIASES.values()) <= set(SCHEMES)
    assert not set(ALIASES) & set(SCHEMES)


def test_unknown_scheme_lists_the_alias(tmp_path):
    with pytest.raises(UsageError, match=r"one of 'kfold', .*'leave-one-out'.*did you mean"):
        read_recipe(write(tmp_path, edit('scheme = "group-kfold"', 'scheme = "leave-one-ou"')))


def test_new_keys_are_read(tmp_path):
    text = (edit('predictors = ["bk_depth_cm"]', 'predictors = ["bk_depth_cm"]\nweights = "w"\n'
                 'x_sd = "bk_sd"\ny_sd = "map_sd"')
            .replace('estimators = ["ols", "huber"]', 'estimators = ["ols", "mixed", "wls"]\n'
                     'random_slope = true')
            .replace('methods = ["analytic", "jackknife+"]',
                     'methods = ["analytic", "group-jackknife+", "group-cv+"]')
            .replace('store = "store"', 'store = "store"\nversion = 3'))
    r = read_recipe(write(tmp_path, text))
    assert (r.weights, r.x_sd, r.y_sd, r.random_slope, r.version) == ("w", "bk_sd", "map_sd",
                                                                     True, 3)
    assert r.estimators == ("ols", "mixed", "wls") and r.methods[1:] == ("group-jackknife+",
                                                                          "group-cv+")
    d = r.to_dict()
    assert d["function"]["weights"] == "w" and d["candidates"]["random_slope"] is True
    from refit.select.recipe import recipe_from_dict

    back = recipe_from_dict(d)
    assert (back.weights, back.random_slope, back.version, back.methods) == (
        "w", True, 3, r.methods)


@pytest.mark.parametrize("old, new, fragment", [
    ('estimators = ["ols", "huber"]', 'estimators = ["mixed"]\nrandom_slope = "yes"',
     "random_slope must be true or false"),
    ('groups = "source"\n', 'block_km = 50\n', "needs groups"),
    ('scheme = "group-kfold"', 'scheme = "spatial-block"\nblock_km = -3',
     "block_km must be a positive number"),
    ('seed = 42', 'seed = 42\nblock_km = 50', "block_km sets the size of spatial blocks"),
])
def test_bad_new_keys(tmp_path, old, new, fragment):
    with pytest.raises(UsageError, match=fragment):
        read_recipe(write(tmp_path, edit(old, new)))


def test_mixed_and_group_methods_need_groups(tmp_path):
    text = edit('scheme = "group-kfold"', 'scheme = "kfold"').replace('groups = "source"\n', "")
    with pytest.raises(UsageError, match=r"line 17: 'mixed' needs the groups"):
        read_recipe(write(tmp_path, text.replace('["ols", "huber"]', '["ols", "mixed"]')))
    with pytest.raises(UsageError, match=r"line 28: 'group-cv\+' needs the groups"):
        read_recipe(write(tmp_path, text.replace('["analytic", "jackknife+"]',
                                                 '["analytic", "group-cv+"]')))


def test_spatial_blocks_with_groups_and_block_km(tmp_path):
    r = read_recipe(write(tmp_path, edit('scheme = "group-kfold"',
                                         'scheme = "spatial-block"\nblock_km = 40')))
    assert (r.scheme, r.groups, r.block_km) == ("spatial-block", "source", 40.0)


def test_readme_recipe_reference_example_parses(tmp_path):
    # the README's "Recipe reference" example is a valid recipe, read as documented
    import re
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text("utf-8")
    section = readme.split("## Recipe reference", 1)[1].split("\n## ", 1)[0]
    (block,) = re.findall(r"```toml\n(.*?)```", section, flags=re.S)
    r = read_recipe(write(tmp_path, block))
    assert (r.version, r.weights, r.x_sd, r.y_sd) == (3, "bk_weight", "bk_depth_sd_cm",
                                                      "map_sd_mm")
    assert r.methods == ("analytic", "group-jackknife+", "group-cv+") and r.defaults == ()
    for key in ("version", "weights", "x_sd", "random_slope", "block_km", "groups", "methods",
                "leave-one-out", "{ min = 5 }"):
        assert key in section, key
