"""No code execution from data: payloads planted in every kind of file refit reads.

Each payload would create a marker file if an unsafe loader ran it: a pickle whose
``__reduce__`` calls ``os.system``, Python expressions in strings
(``__import__('os').system(...)``) as an ``eval``-based reader would run them, and YAML
python tags (``!!python/object/apply:os.system``) as ``yaml.unsafe_load`` would run them.
They go into calibration tables, recipes, coefficient files, stores (records, manifest,
vocabularies) and registries; after every command the marker must not exist, the exit code
must be 0, 1 or 2, the payload must be refused or kept as plain text, and no traceback shows.
A static scan of refit's source checks that no unsafe loader or ``eval`` is called at all.
"""

from __future__ import annotations

import ast
import json
import os
import pickle
from pathlib import Path

import pytest

import refit
from _harness import LINEAR, cli, copy_demo_store, make_fits
from refit._util.resources import demo_dir


class _Payload:
    """Unpickling this runs ``os.system`` (the classic pickle exploit)."""

    def __init__(self, marker: Path):
        self.marker = marker

    def __reduce__(self):
        return (os.system, (f"touch {self.marker}",))


def payloads(marker: Path) -> dict[str, str]:
    return {
        "python": f"__import__('os').system('touch {marker}')",
        "yaml": f"!!python/object/apply:os.system ['touch {marker}']",
        "template": "{{ self.__init__.__globals__.__builtins__.__import__('os')"
                    f".system('touch {marker}') }}",
    }


def assert_clean(code: int, out: str, marker: Path) -> None:
    assert not marker.exists(), "a payload ran"
    assert code in (0, 1, 2), out
    assert "Traceback" not in out and "Error: unexpected" not in out, out


@pytest.fixture
def marker(tmp_path):
    return tmp_path / "PWNED"


def test_pickle_payload_is_never_unpickled(tmp_path, marker):
    blob = pickle.dumps(_Payload(marker))
    for name in ("soils.pkl", "soils.csv", "soils.parquet", "soils.xlsx", "fit.json"):
        (tmp_path / name).write_bytes(blob)
    for args in (["check", tmp_path / "soils.pkl"], ["check", tmp_path / "soils.csv"],
                 ["check", tmp_path / "soils.parquet"], ["check", tmp_path / "soils.xlsx"],
                 ["admit", tmp_path / "soils.parquet", "--into", tmp_path / "s1"],
                 ["verify", tmp_path / "fit.json"],
                 ["publish", tmp_path / "fit.json", "--to", tmp_path / "reg", "--init"]):
        code, out = cli(*args)
        assert_clean(code, out, marker)
        assert code in (1, 2), (args, out)  # a pickle is never a valid table or record
    # the same in a store: records.csv and manifest.json replaced by a pickle
    for name in ("records.csv", "manifest.json"):
        store = copy_demo_store(tmp_path / f"store-{name}")
        (store / name).write_bytes(blob)
        code, out = cli("admit", demo_dir() / "incoming_soils.csv", "--into", store)
        assert_clean(code, out, marker)
        assert code == 1 and name in out, out


def test_expression_strings_in_a_table_are_kept_as_text(tmp_path, marker):
    p = payloads(marker)
    table = tmp_path / "soils.csv"
    table.write_text(
        "profile_id,latitude,longitude,source,map_mm,bk_depth_cm,bk_thickness_cm,notes\n"
        f"X-1,-40.1,52.2,SRC,500,60,40,\"{p['python']}\"\n"
        f"X-2,-40.3,52.4,SRC,\"{p['python']}\",60,40,\"{p['yaml']}\"\n"
        f"X-3,-40.5,52.6,SRC,520,61,40,\"{p['template']}\"\n", encoding="utf-8")
    store = tmp_path / "store"
    code, out = cli("admit", table, "--into", store)
    assert_clean(code, out, marker)
    assert code == 0 and "Rows read 3 = accepted 2 + rejected 1" in out, out
    from refit.curate.store import open_store

    records = open_store(store).records_text
    assert list(records["notes"]) == [p["python"], p["template"]]  # kept verbatim, as text
    quarantined = (store / "quarantine").glob("0001-soils.csv")
    assert p["yaml"] in next(quarantined).read_text("utf-8")


RECIPE = """
[data]
store = "store"

[subset]
parent_material = "{python}"
notes = ["{yaml}"]

[function]
id = "map_from_bk_depth"
response = "map_mm"
predictors = ["bk_depth_cm"]
"""


@pytest.mark.parametrize("where", ["subset", "response", "id", "form"])
def test_recipe_strings_are_never_evaluated(tmp_path, demo_store, marker, where):
    p = {k: v.replace('"', "'") for k, v in payloads(marker).items()}
    text = RECIPE.format(**p)
    if where == "response":
        text = text.replace('response = "map_mm"', f'response = "{p["python"]}"')
    elif where == "id":
        text = text.replace('id = "map_from_bk_depth"', f'id = "{p["python"]}"')
    elif where == "form":
        text += f'\n[candidates]\nforms = ["{p["yaml"]}"]\n'
    recipe = tmp_path / "recipe.toml"
    recipe.write_text(text, encoding="utf-8")
    code, out = cli("fit", recipe, "--out", tmp_path / "run", "--quiet")
    assert_clean(code, out, marker)
    assert code in (1, 2), out  # no soil matches the payload, or the name is refused
    assert "recipe.toml" in out or "subset" in out or "no rows" in out.lower(), out


def test_recipe_paths_cannot_leave_the_recipe_folder(tmp_path, demo_store):
    sub = tmp_path / "recipes"
    sub.mkdir()
    for value in ("../store", "../../etc", "/etc", "sub/../../store"):
        recipe = sub / "r.toml"
        recipe.write_text(RECIPE.replace('store = "store"', f'store = "{value}"')
                          .replace("[subset]", "[subset]\n#").replace("notes =", "#"),
                          encoding="utf-8")
        code, out = cli("fit", recipe, "--out", tmp_path / "run", "--quiet")
        assert code == 2, (value, out)
        assert "line 3" in out and "[data] store" in out and "outside" in out, out


def test_coefficient_file_strings_and_tags_stay_data(tmp_path, marker):
    fits = make_fits(tmp_path)
    p = payloads(marker)
    content = json.loads((fits / LINEAR).read_text("utf-8"))
    from refit.coefficients import dumps, with_hash

    content["cautions"] = [p["python"], p["yaml"], p["template"]]
    content["provenance"]["subset"] = {"notes": p["python"]}
    good = tmp_path / "payload.json"
    good.write_text(dumps(with_hash(content)), encoding="utf-8")
    from refit import coefficients
    loaded = coefficients.load(good)
    assert loaded.record["cautions"] == [p["python"], p["yaml"], p["template"]]
    for args in (["verify", good], ["publish", good, "--to", tmp_path / "reg", "--init"],
                 ["diff", fits / LINEAR, good]):
        code, out = cli(*args)
        assert_clean(code, out, marker)
    # a payload where a number belongs is refused by the schema, naming the field
    content["coefficients"][0] = p["python"]
    bad = tmp_path / "bad.json"
    bad.write_text(dumps(with_hash(content)), encoding="utf-8")
    code, out = cli("verify", bad)
    assert_clean(code, out, marker)
    assert code == 1 and "coefficients" in out, out


def test_store_vocabulary_and_registry_index_payloads(tmp_path, demo_store, marker):
    p = payloads(marker)
    store = demo_store
    (store / "vocabularies.json").write_text(json.dumps({"vegetation": [p["python"]],
                                                         p["yaml"]: ["x"]}), encoding="utf-8")
    code, out = cli("admit", demo_dir() / "incoming_soils.csv", "--into", store, "--dry-run")
    assert_clean(code, out, marker)
    reg = tmp_path / "reg"
    reg.mkdir()
    (reg / "index.json").write_text(json.dumps({"format": p["python"], "functions": {
        "map_from_bk_depth": [{"version": p["python"], "file": p["yaml"]}]}}),
        encoding="utf-8")
    code, out = cli("verify", reg)
    assert_clean(code, out, marker)
    assert code == 1, out


# ----------------------------------------------------------------------------- static scan
UNSAFE_CALLS = {"eval", "exec", "compile", "__import__"}
UNSAFE_MODULES = {"pickle", "cPickle", "marshal", "shelve", "dill", "yaml", "cloudpickle"}
UNSAFE_ATTRS = {"read_pickle", "unsafe_load", "full_load", "query"}


def test_refit_source_calls_no_unsafe_loader():
    root = Path(refit.__file__).parent
    found = []
    for path in root.rglob("*.py"):
        tree = ast.parse(path.read_text("utf-8"))
        for node in ast.walk(tree):
            if isinstance(node, ast.Call):
                f = node.func
                if isinstance(f, ast.Name) and f.id in UNSAFE_CALLS:
                    found.append((path.name, node.lineno, f.id))
                if isinstance(f, ast.Attribute) and f.attr in UNSAFE_ATTRS | {"eval"}:
                    found.append((path.name, node.lineno, f.attr))
                if isinstance(f, ast.Attribute) and f.attr == "load" and isinstance(
                        f.value, ast.Name) and f.value.id in ("np", "numpy"):
                    kw = {k.arg: k.value for k in node.keywords}
                    if "allow_pickle" in kw:
                        found.append((path.name, node.lineno, "np.load(allow_pickle)"))
            elif isinstance(node, (ast.Import, ast.ImportFrom)):
                names = [a.name for a in node.names] if isinstance(node, ast.Import) else \
                    [node.module or ""]
                found += [(path.name, node.lineno, n) for n in names
                          if n.split(".")[0] in UNSAFE_MODULES]
    assert found == []


def test_the_static_scan_can_fail(tmp_path):
    # the same walk flags a planted eval (the scan is not vacuous)
    tree = ast.parse("x = eval(text)\nimport pickle\n")
    calls = [n.func.id for n in ast.walk(tree) if isinstance(n, ast.Call)]
    imports = [a.name for n in ast.walk(tree) if isinstance(n, ast.Import) for a in n.names]
    assert "eval" in calls and "pickle" in imports
