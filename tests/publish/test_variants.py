"""Variants: alternative models of one function published side by side, each its own chain.

The bump rule is Semantic Versioning 2.0.0 (https://semver.org, items 6-8: a minor bump
resets the patch to 0, a major bump resets minor and patch) read for equations: the same
model refitted on new data is a minor bump, another model within one variant a major
bump. Hashes are checked with the standard library's hashlib (SHA-256, FIPS 180-4) on
the canonical content (keys sorted, compact separators, UTF-8, without ``sha256``), the
recipe the README states; standard errors in diffs are square roots of the covariance
diagonal. ``tests/data/registry_v1`` is a registry written by refit before variants
existed (linear OLS 1.0.0, quadratic OLS 2.0.0 signed by ``tests/data/registry_v1.key.pub``),
fitted on the demo store's version 1.
"""

from __future__ import annotations

import hashlib
import json
import math
import shutil
from pathlib import Path

import pytest
from _harness import make_fits, recipe_toml

from refit._util.resources import demo_dir
from refit.coefficients import read_record, variant_name, variant_of
from refit.errors import InvalidDataError, UnreadableInputError, UsageError
from refit.publish import registry as reg
from refit.publish import registry_commit
from refit.publish.diff import comparison, diff_files
from refit.publish.verify import trusted_keys, verify_registry

DATA = Path(__file__).parents[1] / "data"
OLD = DATA / "registry_v1"
FID = "map_from_bk_depth"
RECIPE = recipe_toml(subset={"parent_material": "loess"},
                     candidates={"estimators": ["ols", "mixed"],
                                 "forms": ["linear", "quadratic"]},
                     validation={"scheme": "group-kfold", "folds": 5, "groups": "source",
                                 "seed": 5})
OLS = "linear__ols__inverse__analytic.json"
MIXED = "linear__mixed__inverse__analytic.json"
QUAD = "quadratic__ols__inverse__analytic.json"


@pytest.fixture(scope="module")
def runs(tmp_path_factory):
    """The same recipe on the demo store (dataset version 1), then after the incoming batch
    was admitted (version 2): two runs of the same models on new data."""
    from refit.curate.store import admit

    root = tmp_path_factory.mktemp("variants")
    first = make_fits(root, RECIPE, "run1")
    admit(demo_dir() / "incoming_soils.csv", root / "store", today="2026-12-02")
    second = make_fits(root, RECIPE, "run2")
    return root, first, second


@pytest.fixture
def two_variants(runs, tmp_path):
    """OLS in the default variant, the mixed fit in variant 'mixed', then each refitted."""
    _, first, second = runs
    r = tmp_path / "registry"
    done = [reg.publish(first / OLS, r, create=True, now="2026-12-01T00:00:00+00:00"),
            reg.publish(first / MIXED, r, variant="mixed", now="2026-12-01T00:00:01+00:00"),
            reg.publish(second / OLS, r, now="2026-12-02T00:00:00+00:00"),
            reg.publish(second / MIXED, r, variant="mixed", now="2026-12-02T00:00:01+00:00")]
    return r, done


def canonical_sha(content: dict) -> str:
    body = {k: v for k, v in content.items() if k != "sha256"}
    text = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def load(path: Path) -> dict:
    return json.loads(path.read_text("utf-8"))


# ----------------------------------------------------------------------------- publishing
def test_two_variants_each_with_its_own_version_chain(runs, two_variants):
    _, _, second = runs
    r, (ols1, mixed1, ols2, mixed2) = two_variants
    # the mixed fit is not a major bump against the OLS line: it starts its own chain
    assert [(p.chain, p.version, p.previous, p.bump) for p in (ols1, mixed1, ols2, mixed2)] \
        == [(FID, "1.0.0", None, None), (f"{FID}/mixed", "1.0.0", None, None),
            (FID, "1.1.0", "1.0.0", "minor"), (f"{FID}/mixed", "1.1.0", "1.0.0", "minor")]
    # a refit of the same model on new data: minor, for the data, never for the model
    for res in (ols2, mixed2):
        assert res.required == "minor" and "major" not in res.changes
        assert "provenance.dataset.version" in res.changes["minor"]
        assert res.model_changes == []
    assert mixed1.others == ["default"] and ols2.others == ["mixed"]
    files = sorted(p.relative_to(r).as_posix() for p in r.rglob("*.json"))
    assert files == ["index.json", f"{FID}/1.0.0.json", f"{FID}/1.1.0.json",
                     f"{FID}/mixed/1.0.0.json", f"{FID}/mixed/1.1.0.json"]
    for rel, source, variant in ((f"{FID}/1.1.0.json", second / OLS, None),
                                 (f"{FID}/mixed/1.1.0.json", second / MIXED, "mixed")):
        content, candidate = load(r / rel), load(source)
        assert content.get("variant") == variant
        assert content["coefficients"] == candidate["coefficients"]
        assert content["sha256"] == canonical_sha(content)          # hashlib, FIPS 180-4
    assert load(r / f"{FID}/mixed/1.0.0.json")["schema_version"] == "1.3.0"
    assert "variant" not in load(r / f"{FID}/1.0.0.json")           # default: as before


def test_index_lists_variants_and_agrees_with_the_files(two_variants):
    r, _ = two_variants
    index = load(r / "index.json")
    assert index["format"] == "refit-registry/1.1"
    assert [e["version"] for e in index["functions"][FID]] == ["1.0.0", "1.1.0"]
    chain = index["variants"][FID]["mixed"]
    assert [(e["version"], e["variant"], e["file"], e["previous"]) for e in chain] == [
        ("1.0.0", "mixed", f"{FID}/mixed/1.0.0.json", None),
        ("1.1.0", "mixed", f"{FID}/mixed/1.1.0.json", "1.0.0")]
    for e in chain:
        assert e["file_sha256"] == hashlib.sha256((r / e["file"]).read_bytes()).hexdigest()
    assert reg.registry_problems(r) == []
    _valid_index(index)


def test_list_and_resolve_by_variant(two_variants):
    r, _ = two_variants
    opened = reg.open_registry(r)
    assert opened.chains() == [(FID, None), (FID, "mixed")]
    assert opened.variants(FID) == ["mixed"]
    assert [e["version"] for e in opened.versions(FID, "mixed")] == ["1.0.0", "1.1.0"]
    assert opened.latest(FID, "default")["version"] == "1.1.0"
    assert reg.resolve(r, FID) == r / FID / "1.1.0.json"
    assert reg.resolve(r, FID, "1.0.0", "mixed") == r / FID / "mixed" / "1.0.0.json"
    assert reg.resolve(r, FID, variant="mixed") == r / FID / "mixed" / "1.1.0.json"
    assert read_record(reg.resolve(r, FID, "1.0.0", "mixed"))["estimator"] == "mixed"
    with pytest.raises(UnreadableInputError, match="no variant 'huber' of map_from_bk_depth; "
                       "its variants: default, mixed"):
        reg.resolve(r, FID, variant="huber")
    with pytest.raises(UnreadableInputError, match=r"no version 2.0.0 of map_from_bk_depth/"
                       r"mixed; its versions: 1.0.0, 1.1.0"):
        reg.resolve(r, FID, "2.0.0", "mixed")
    with pytest.raises(UnreadableInputError, match="no function 'mat_from_cia_k'"):
        reg.resolve(r, "mat_from_cia_k")
    with pytest.raises(UsageError, match="MAJOR.MINOR.PATCH"):
        reg.resolve(r, FID, "latest")


def test_a_changed_model_within_a_variant_is_a_major_bump(runs, tmp_path):
    _, first, _ = runs
    r = tmp_path / "registry"
    reg.publish(first / OLS, r, create=True)
    quad = reg.publish(first / QUAD, r, dry_run=True)
    assert (quad.version, quad.required) == ("2.0.0", "major")
    assert [i for i, _, _ in quad.model_changes] == ["form"]
    mixed = reg.publish(first / MIXED, r, dry_run=True)
    assert (mixed.version, mixed.required) == ("2.0.0", "major")
    items = {i: (a, b) for i, a, b in mixed.model_changes}
    assert items["estimator"] == ("ols", "mixed") and items["groups"] == (None, "source")
    assert "estimator" in mixed.changes["major"]
    with pytest.raises(InvalidDataError, match="--bump minor is too small.*estimator"):
        reg.publish(first / MIXED, r, bump="minor")
    # the same model side by side in a variant of its own: a first version, no bump
    assert reg.publish(first / MIXED, r, variant="mixed").version == "1.0.0"


def test_the_candidate_keeps_its_own_variant_unless_told(two_variants, tmp_path):
    r, _ = two_variants
    published = r / FID / "mixed" / "1.1.0.json"
    other = tmp_path / "other"
    assert reg.publish(published, other, create=True).chain == f"{FID}/mixed"
    again = reg.publish(published, other, variant="default")
    assert (again.chain, again.version) == (FID, "1.0.0")
    assert "variant" not in load(other / FID / "1.0.0.json")


@pytest.mark.parametrize("name", ["Mixed", "1mixed", "mixed/ols", "..", "a" * 41, "-x",
                                  "mixed ols"])
def test_bad_variant_names_are_refused_before_anything_is_written(runs, tmp_path, name):
    _, first, _ = runs
    with pytest.raises(UsageError, match="not a variant name"):
        reg.publish(first / MIXED, tmp_path / "r", create=True, variant=name)
    assert not (tmp_path / "r").exists()


@pytest.mark.parametrize("name, want", [(None, None), ("", None), ("default", None),
                                        ("mixed", "mixed"), ("ols-by-source", "ols-by-source"),
                                        ("a" * 40, "a" * 40)])
def test_variant_names(name, want):
    assert variant_name(name) == want


def test_variant_of_a_file():
    assert variant_of({"status": "published"}) == "default"
    assert variant_of({"status": "published", "variant": "mixed"}) == "mixed"
    assert variant_of({"status": "candidate"}) is None     # chosen when it is published


# ----------------------------------------------------------------------------- diff
def test_diff_across_variants_says_so_and_shows_the_numbers(two_variants):
    r, _ = two_variants
    a, b = r / FID / "1.0.0.json", r / FID / "mixed" / "1.0.0.json"
    d = diff_files(a, b)
    like = d["comparison"]
    assert like["kind"] == "different-variants" and not like["like_with_like"]
    assert like["statement"].startswith("Not like with like: A and B are different variants "
                                        "of map_from_bk_depth (default and mixed)")
    items = {x["item"]: (x["a"], x["b"]) for x in like["differences"]}
    assert items["variant"] == ("default", "mixed")
    assert items["estimator"] == ("ols", "mixed")
    assert "form" not in items and "data version" not in items
    assert d["bump"] is None and d["changes"] == {}
    assert (d["a"]["variant"], d["b"]["variant"]) == ("default", "mixed")
    ca, cb = load(a), load(b)
    rows = {row["term"]: row for row in d["coefficients"]}
    for i, term in enumerate(ca["terms"]):
        assert rows[term]["change"] == pytest.approx(
            cb["coefficients"][i] - ca["coefficients"][i], rel=1e-12)
        assert rows[term]["se_b"] == pytest.approx(math.sqrt(cb["covariance"][i][i]),
                                                   rel=1e-12)
    assert len(d["at_reference"]) == 5


def test_diff_within_a_variant_is_like_with_like(two_variants):
    r, _ = two_variants
    d = diff_files(r / FID / "mixed" / "1.0.0.json", r / FID / "mixed" / "1.1.0.json")
    like = d["comparison"]
    assert like["kind"] == "same-model" and like["like_with_like"]
    assert like["statement"] == ("Like with like: the same model of map_from_bk_depth "
                                 "(linear/mixed/inverse/analytic on bk_depth_cm), fitted on "
                                 "other data. Variant: mixed.")
    items = {x["item"]: (x["a"], x["b"]) for x in like["differences"]}
    assert items == {"data version": (1, 2)}
    assert d["bump"] == "minor" and "provenance.dataset.version" in d["changes"]["minor"]


def test_diff_of_other_models_and_other_functions(runs):
    _, first, _ = runs
    d = diff_files(first / OLS, first / QUAD)
    assert d["comparison"]["kind"] == "different-models" and d["bump"] == "major"
    assert [x["item"] for x in d["comparison"]["differences"]] == ["form"]
    a, b = load(first / OLS), load(first / OLS)
    b["function_id"] = "map_from_bk_thickness"
    like = comparison(a, b)
    assert like["kind"] == "different-functions" and not like["same_chain"]
    # a candidate has no variant yet: it is compared with the published file's chain
    pub = dict(a, status="published", variant="mixed")
    assert comparison(a, pub)["kind"] == "same-model"


# ----------------------------------------------------------------------------- verify
def test_verify_checks_every_variant_and_names_a_damaged_file(runs, tmp_path):
    from refit.publish.signing import new_key_pair

    _, first, second = runs
    key, pub, _ = new_key_pair(tmp_path / "keys" / "lab.key")
    r = tmp_path / "registry"
    reg.publish(first / OLS, r, create=True, sign=key)
    reg.publish(first / MIXED, r, variant="mixed", sign=key)
    reg.publish(second / MIXED, r, variant="mixed", sign=key)
    assert (r / FID / "mixed" / "1.1.0.json.sig").is_file()
    report = verify_registry(r, trust=trusted_keys([pub]))
    assert report.ok, [c.message for c in report.failures()]
    sigs = [c for c in report.checks if c.name == "signature"]
    assert len(sigs) == 3 and all(c.ok for c in sigs)
    assert "(map_from_bk_depth 1.0.0; map_from_bk_depth/mixed 1.0.0 .. 1.1.0 (2 versions))" \
        in report.checks[0].message
    damaged = r / FID / "mixed" / "1.0.0.json"
    damaged.chmod(0o644)
    damaged.write_text(damaged.read_text("utf-8").replace('"n": ', '"n": 1', 1))
    report = verify_registry(r)
    bad = report.failures()
    assert any("map_from_bk_depth/mixed/1.0.0.json: its bytes no longer match" in c.message
               for c in bad)
    assert any(c.name == "sha256" and c.file.endswith("mixed/1.0.0.json") for c in bad)


def test_index_and_files_that_disagree_within_a_variant(two_variants):
    r, _ = two_variants
    stray = r / FID / "mixed" / "0.9.0.json"
    shutil.copy(r / FID / "mixed" / "1.0.0.json", stray)
    moved = r / FID / "huber"
    moved.mkdir()
    shutil.copy(r / FID / "1.0.0.json", moved / "1.0.0.json")
    problems = reg.registry_problems(r)
    assert "map_from_bk_depth/mixed/0.9.0.json is on disk but not in index.json" in problems
    assert "map_from_bk_depth/huber/1.0.0.json is on disk but not in index.json" in problems
    index = load(r / "index.json")
    index["variants"][FID]["mixed"][0]["variant"] = "other"
    (r / "index.json").write_text(json.dumps(index))
    with pytest.raises(UnreadableInputError, match=r"variants.map_from_bk_depth.mixed\[0\]."
                       "variant' is 'other'"):
        reg.open_registry(r)


def test_a_file_whose_variant_field_disagrees_with_its_folder(two_variants):
    r, _ = two_variants
    index = load(r / "index.json")
    entry = index["functions"][FID][0]
    (r / FID / "mixed" / "0.1.0.json").write_bytes((r / FID / "1.0.0.json").read_bytes())
    index["variants"][FID]["mixed"].insert(0, dict(entry, version="0.1.0", variant="mixed"))
    (r / "index.json").write_text(json.dumps(index))
    problems = reg.registry_problems(r)
    assert "map_from_bk_depth/mixed/0.1.0.json: field 'version' is '1.0.0', the index says " \
           "'0.1.0'" in problems
    assert "map_from_bk_depth/mixed/0.1.0.json: field 'variant' is None, the index says " \
           "'mixed'" in problems


# ----------------------------------------------------------------------------- crash safety
class Died(Exception):
    """Stands for a process killed at that moment."""


def test_a_variant_publish_stopped_before_its_index_entry_is_completed(runs, tmp_path,
                                                                       monkeypatch):
    _, first, _ = runs
    r = tmp_path / "registry"
    reg.publish(first / OLS, r, create=True)

    def die(_reg):
        raise Died

    with monkeypatch.context() as m:
        m.setattr(registry_commit, "write_index", die)
        with pytest.raises(Died):
            reg.publish(first / MIXED, r, variant="mixed")
    assert (r / FID / "mixed" / "1.0.0.json").is_file()
    assert "variants" not in load(r / "index.json")
    opened = reg.open_registry(r)
    assert opened.recovered == [("recovered an interrupted publish of map_from_bk_depth/mixed "
                                 "1.0.0: its file had landed, so it was added to index.json")]
    assert [e["version"] for e in opened.versions(FID, "mixed")] == ["1.0.0"]
    assert reg.registry_problems(r) == []


def test_a_signed_variant_publish_stopped_before_its_file_is_undone(runs, tmp_path,
                                                                    monkeypatch):
    from refit.publish.signing import new_key_pair

    _, first, _ = runs
    key, _, _ = new_key_pair(tmp_path / "keys" / "lab.key")
    r = tmp_path / "registry"
    reg.publish(first / OLS, r, create=True)
    before = (r / "index.json").read_bytes()
    real = registry_commit.write_text_atomic

    def write(path, text):
        real(path, text)
        if str(path).endswith(".sig"):
            raise Died

    with monkeypatch.context() as m:
        m.setattr(registry_commit, "write_text_atomic", write)
        with pytest.raises(Died):
            reg.publish(first / MIXED, r, variant="mixed", sign=key)
    assert (r / FID / "mixed" / "1.0.0.json.sig").is_file()
    opened = reg.open_registry(r)
    assert opened.recovered == [("recovered an interrupted publish of map_from_bk_depth/mixed "
                                 "1.0.0: its file had not landed, so it was undone")]
    assert not (r / FID / "mixed" / "1.0.0.json.sig").exists()
    assert (r / "index.json").read_bytes() == before


# ----------------------------------------------------------------------------- old registries
@pytest.fixture
def old(tmp_path) -> Path:
    return Path(shutil.copytree(OLD, tmp_path / "registry_v1"))


def test_a_registry_written_before_variants_reads_and_verifies(old):
    index = load(old / "index.json")
    assert index["format"] == "refit-registry/1" and "variants" not in index
    opened = reg.open_registry(old)
    assert opened.chains() == [(FID, None)] and opened.variants(FID) == []
    assert [e["version"] for e in opened.versions(FID)] == ["1.0.0", "2.0.0"]
    assert reg.resolve(old, FID) == old / FID / "2.0.0.json"
    assert reg.registry_problems(old) == []
    _valid_index(index)
    report = verify_registry(old, trust=trusted_keys([DATA / "registry_v1.key.pub"]))
    signatures = {Path(c.file).name: c.ok for c in report.checks if c.name == "signature"}
    assert signatures == {"1.0.0.json": False, "2.0.0.json": True}   # 2.0.0 was signed
    assert [c.name for c in report.failures()] == ["signature"]
    # its neighbours were different models chained in one variant: diff says so
    d = diff_files(old / FID / "1.0.0.json", old / FID / "2.0.0.json")
    assert d["comparison"]["kind"] == "different-models" and d["bump"] == "major"


def test_an_old_file_still_reproduces_from_its_store(old, tmp_path):
    from _harness import copy_demo_store

    from refit.publish.verify import verify_file

    store = copy_demo_store(tmp_path / "store")
    report = verify_file(old / FID / "1.0.0.json", store=store)
    assert report.ok, [c.message for c in report.failures()]
    assert [c.name for c in report.checks] == ["sha256", "schema", "bytes", "reproduce"]


def test_publishing_a_variant_into_an_old_registry_keeps_its_files(old, runs):
    _, first, _ = runs
    before = {p.relative_to(old).as_posix(): p.read_bytes() for p in old.rglob("*")
              if p.is_file()}
    old_entries = load(old / "index.json")["functions"]
    res = reg.publish(first / MIXED, old, variant="mixed")
    assert (res.chain, res.version, res.others) == (f"{FID}/mixed", "1.0.0", ["default"])
    after = {p.relative_to(old).as_posix(): p.read_bytes() for p in old.rglob("*")
             if p.is_file() and p.name != ".lock"}
    assert {k: v for k, v in after.items() if k in before and k != "index.json"} == \
        {k: v for k, v in before.items() if k != "index.json"}
    index = load(old / "index.json")
    assert index["functions"] == old_entries and index["format"] == "refit-registry/1.1"
    assert reg.registry_problems(old) == []
    _valid_index(index)
    # the old default chain goes on: after its quadratic 2.0.0 a linear line is a major bump
    nxt = reg.publish(first / OLS, old, variant="default", dry_run=True)
    assert (nxt.chain, nxt.version, nxt.previous) == (FID, "3.0.0", "2.0.0")
    assert [i for i, _, _ in nxt.model_changes] == ["form"]


def test_an_index_of_a_later_major_format_is_refused(old):
    index = load(old / "index.json")
    index["format"] = "refit-registry/2"
    (old / "index.json").write_text(json.dumps(index))
    with pytest.raises(UnreadableInputError, match="format 'refit-registry/2', a major "
                       "version this refit does not read.*upgrade refit"):
        reg.open_registry(old)


def _valid_index(index: dict) -> None:
    """The index follows schemas/registry.index.schema.json (JSON Schema 2020-12, checked
    with the jsonschema package)."""
    from jsonschema import Draft202012Validator

    from refit._util.resources import schemas_dir

    schema = json.loads((schemas_dir() / "registry.index.schema.json").read_text("utf-8"))
    Draft202012Validator.check_schema(schema)
    errors = list(Draft202012Validator(schema).iter_errors(index))
    assert errors == [], [e.message for e in errors]


@pytest.mark.parametrize("edit", [
    lambda i: i.update(variants=[]),
    lambda i: i.update(variants={FID: {"default": []}}),
    lambda i: i.update(variants={FID: {"Mixed": []}}),
    lambda i: i.update(variants={FID: {"mixed": [{"version": "1.0.0"}]}}),  # no variant
    lambda i: i["functions"][FID][0].update(variant="mixed"),
])
def test_the_reader_and_the_index_schema_refuse_the_same_shapes(old, edit):
    from jsonschema import Draft202012Validator

    from refit._util.resources import schemas_dir
    from refit.publish.registry_layout import index_shape_problem

    index = load(old / "index.json")
    edit(index)
    schema = json.loads((schemas_dir() / "registry.index.schema.json").read_text("utf-8"))
    assert list(Draft202012Validator(schema).iter_errors(index)), "the schema accepts it"
    assert index_shape_problem(index) is not None
