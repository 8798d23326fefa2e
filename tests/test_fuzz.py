"""Fuzzed input through the command line (click's CliRunner, in-process).

Malformed calibration and fossil tables, recipes and coefficient files are generated with
hypothesis: wrong types, missing and extra columns, unicode, huge and tiny numbers, NaN and
infinities, wrong delimiters, truncated files, other encodings and random bytes. The
property, for every command: the exit code is 0, 1 or 2; no traceback is shown and the
guarded wrapper's "unexpected" message (which means a refit bug) never appears; a failure
says "Error:" (or a FAIL or INVALID verdict) and names the file; and for admit, rows read = accepted +
rejected (the store's manifest agrees).

CI runs 30 examples per property (derandomized profile "ci" of tests/conftest.py);
HYPOTHESIS_PROFILE=long runs 10,000.
"""

from __future__ import annotations

import json
import math
import os
import shutil
import sys
import tempfile
from pathlib import Path

import pytest
from _harness import LINEAR, make_fits
from click.testing import CliRunner
from hypothesis import HealthCheck, example, given, settings
from hypothesis import strategies as st

from refit._util.resources import demo_dir
from refit.cli import main

LONG = os.environ.get("HYPOTHESIS_PROFILE") == "long"
FUZZ = settings(max_examples=10_000 if LONG else 30, deadline=None,
                suppress_health_check=[HealthCheck.too_slow,
                                       HealthCheck.function_scoped_fixture])

CALIBRATION = ["profile_id", "latitude", "longitude", "source", "map_mm", "mat_c", "mar_mm",
               "bk_depth_cm", "bk_thickness_cm", "by_depth_cm", "sio2_wt", "al2o3_wt",
               "cao_wt", "vegetation", "parent_material", "soil_order", "age_ka",
               "MAP (in)", "Depth to Bk (in)", "Lat", "mat_f"]
FOSSIL = ["paleosol_id", "bk_depth_cm", "bk_depth_sd_cm", "bk_thickness_cm",
          "burial_depth_km", "soil_order", "vegetation", "parent_material", "sio2_wt",
          "al2o3_wt", "cao_wt", "notes"]
ODD_CELLS = ["", "nan", "NaN", "inf", "-inf", "Infinity", "1e308", "1e-308", "1e999", "-0",
             "12,5", "1.2.3", "∞", " 7 ", "0x1F", "NULL", "N/A", "—", "grassland",
             "Mollisols", "loess", "shrubland", "-40.5", "52.25", "300", "60", "1e-320",
             "\"", "'", "a\"b", "=1+1", "\u200b5", "５", "٣"]


def invoke(*args):
    result = CliRunner().invoke(main, [str(a) for a in args], catch_exceptions=True)
    return result


def assert_well_behaved(result, path=None):
    out = result.output
    assert result.exception is None or isinstance(result.exception, SystemExit), \
        f"uncaught {type(result.exception).__name__}: {result.exception}\n{out}"
    assert result.exit_code in (0, 1, 2), out
    assert "Traceback" not in out, out
    assert "Error: unexpected" not in out and "refit bug" not in out, out  # guarded's bug line
    if result.exit_code != 0:
        assert any(w in out for w in ("Error:", "FAIL", "INVALID", "problem")), out
        if path is not None and "Error:" in out:
            assert Path(path).name in out, out


# ----------------------------------------------------------------------------- tables
cells = st.one_of(
    st.sampled_from(ODD_CELLS),
    st.floats(allow_nan=True, allow_infinity=True).map(repr),
    st.integers(-10 ** 30, 10 ** 30).map(str),
    st.text(max_size=10),
)


@st.composite
def table_bytes(draw, names):
    cols = draw(st.lists(st.one_of(st.sampled_from(names), st.text(max_size=8)),
                         min_size=0, max_size=len(names) + 2, unique=True))
    if draw(st.booleans()):  # half the tables have the required columns: rows get checked
        cols = [c for c in names[:5] if c not in cols] + cols
    delim = draw(st.sampled_from([",", ";", "\t", "|", " "]))
    header_delim = draw(st.sampled_from([delim, delim, ","]))  # sometimes the wrong one
    n_rows = draw(st.integers(0, 8))
    lines = [header_delim.join(cols)]
    for _ in range(n_rows):
        lines.append(delim.join(draw(cells) for _ in cols))
    if draw(st.booleans()):
        lines.insert(0, draw(st.text(max_size=30)))  # a title row, or junk
    text = "\n".join(lines) + draw(st.sampled_from(["\n", "", "\r\n"]))
    mode = draw(st.sampled_from(["utf8", "utf8", "bom", "latin1", "utf16", "truncated",
                                 "bytes", "empty"]))
    if mode == "bytes":
        return draw(st.binary(max_size=400))
    if mode == "empty":
        return b""
    data = {"utf8": lambda t: t.encode("utf-8", "surrogatepass"),
            "bom": lambda t: b"\xef\xbb\xbf" + t.encode("utf-8", "surrogatepass"),
            "latin1": lambda t: t.encode("latin-1", "replace"),
            "utf16": lambda t: t.encode("utf-16", "surrogatepass"),
            "truncated": lambda t: t.encode("utf-8", "surrogatepass")}[mode](text)
    if mode == "truncated" and data:
        data = data[: draw(st.integers(0, len(data) - 1))]
    return data


@FUZZ
@given(data=table_bytes(CALIBRATION), ext=st.sampled_from(["csv", "tsv", "txt", "xlsx"]))
def test_check_never_crashes_on_calibration_tables(data, ext):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / f"soils.{ext}"
        path.write_bytes(data)
        assert_well_behaved(invoke("check", path), path)


@FUZZ
@given(data=table_bytes(FOSSIL))
def test_check_and_apply_never_crash_on_fossil_tables(data):
    import refit.published

    equation = Path(refit.published.__file__).parent / "map_from_bk_depth.retallack1994.json"
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "fossils.csv"
        path.write_bytes(data)
        assert_well_behaved(invoke("check", path, "--kind", "fossil"), path)
        assert_well_behaved(invoke("apply", equation, "--fossils", path))


ADMITTED: list[int] = []  # examples that landed (seen by test_fuzzing_reaches_admits)


@FUZZ
@given(data=table_bytes(CALIBRATION))
# found by the 10,000-example run: a latitude of 1e308 overflowed the duplicate-site grid
@example(data=b"profile_id,latitude,longitude,source,map_mm\n,1e308,0.0,inf,\n")
def test_admit_accounts_for_every_row_read(data):
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "incoming.csv"
        path.write_bytes(data)
        store = Path(tmp) / "store"
        result = invoke("admit", path, "--into", store, "--format", "json")
        assert_well_behaved(result, path)
        if result.exit_code == 0:
            ADMITTED.append(1)
            report = json.loads(result.stdout)
            assert report["rows_read"] == report["accepted"] + report["rejected"]
            manifest = json.loads((store / "manifest.json").read_text("utf-8"))
            entry = manifest["changelog"][-1]
            assert (entry["rows_read"], entry["accepted"], entry["rejected"]) == (
                report["rows_read"], report["accepted"], report["rejected"])
            assert manifest["row_count"] == report["accepted"]
        else:
            assert not (store / "manifest.json").exists()  # nothing written


def test_fuzzing_reaches_admits():
    # the generator must produce tables that land (else the accounting is never tested);
    # runs after test_admit_accounts_for_every_row_read in file order
    if ADMITTED == [] and not os.environ.get("PYTEST_XDIST_WORKER"):
        test_admit_accounts_for_every_row_read()
    assert len(ADMITTED) >= 1


# ----------------------------------------------------------------------------- recipes
def mangled(draw, data: bytes) -> bytes:
    """``data`` whole (4 times in 6), cut short at a drawn byte, or replaced by drawn bytes."""
    mode = draw(st.sampled_from(["whole"] * 4 + ["truncated", "bytes"]))
    if mode == "truncated":
        return data[: draw(st.integers(0, len(data)))]
    if mode == "bytes":
        return draw(st.binary(max_size=300))
    return data


def toml_value(value) -> str:
    """A TOML rendering of a generated value (strings as JSON-escaped basic strings)."""
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf") \
            if math.isinf(value) else repr(value)
    if isinstance(value, int):
        return str(value)
    if isinstance(value, str):
        return json.dumps(value)
    if isinstance(value, list):
        return "[" + ", ".join(toml_value(v) for v in value) + "]"
    return "{" + ", ".join(f"{json.dumps(k)} = {toml_value(v)}" for k, v in value.items()) + "}"


scalars = st.one_of(st.booleans(), st.integers(-3, 12), st.floats(allow_nan=True),
                    st.text(max_size=12),
                    st.sampled_from(["linear", "quadratic", "ols", "huber", "inverse",
                                     "forward", "kfold", "loo", "analytic", "map_mm",
                                     "bk_depth_cm", "source", "../x", "/etc", "map mm"]))
values = st.one_of(scalars, st.lists(scalars, max_size=3),
                   st.dictionaries(st.sampled_from(["min", "max", "x"]), scalars, max_size=2))

BASE_RECIPE = {
    "data": {"table": "soils.csv"},
    "subset": {"parent_material": "loess"},
    "function": {"id": "map_from_bk_depth", "response": "map_mm",
                 "predictors": ["bk_depth_cm"]},
    "candidates": {"forms": ["linear"], "estimators": ["ols"], "directions": ["inverse"]},
    "validation": {"scheme": "kfold", "folds": 3, "seed": 1},
    "intervals": {"level": 0.95, "methods": ["analytic"]},
}
KEYS = [(s, k) for s, d in BASE_RECIPE.items() for k in d] + [
    ("subset", "vegetation"), ("subset", "age_ka"), ("validation", "repeats"),
    ("validation", "groups"), ("bogus", "key"), ("function", "extra")]


@st.composite
def recipe_bytes(draw):
    doc = json.loads(json.dumps(BASE_RECIPE))
    for _ in range(draw(st.integers(1, 3))):
        section, key = draw(st.sampled_from(KEYS))
        if draw(st.integers(0, 4)) == 0:
            doc.get(section, {}).pop(key, None)
        else:
            doc.setdefault(section, {})[key] = draw(values)
    text = "\n".join(f"[{s}]\n" + "\n".join(f"{json.dumps(k)} = {toml_value(v)}"
                                            for k, v in d.items()) for s, d in doc.items())
    data = text.encode("utf-8", "surrogatepass")
    return mangled(draw, data)


@pytest.fixture(scope="module")
def soils(tmp_path_factory):
    """A small calibration table (the demo store's loess soils, first 40 rows)."""
    import pandas as pd

    folder = tmp_path_factory.mktemp("fuzz-recipe")
    records = pd.read_csv(demo_dir() / "store" / "records.csv", dtype=str,
                          keep_default_na=False)
    records[records["parent_material"] == "loess"].head(40).to_csv(folder / "soils.csv",
                                                                   index=False)
    return folder / "soils.csv"


@FUZZ
@given(data=recipe_bytes())
# found by the 10,000-example run: a missing data table was reported without the recipe
@example(data=b'[data]\ntable = "0"\n[function]\nid = "map_from_bk_depth"\n'
              b'response = "map_mm"\npredictors = ["bk_depth_cm"]\n')
def test_fit_never_crashes_on_recipes(soils, data):
    with tempfile.TemporaryDirectory() as tmp:
        shutil.copy(soils, Path(tmp) / "soils.csv")
        recipe = Path(tmp) / "recipe.toml"
        recipe.write_bytes(data)
        result = invoke("fit", recipe, "--out", Path(tmp) / "run", "--quiet")
        assert_well_behaved(result)
        if result.exit_code != 0:
            assert "recipe.toml" in result.output or "soils.csv" in result.output, \
                result.output


# ----------------------------------------------------------------------------- coefficients
@pytest.fixture(scope="module")
def candidate(tmp_path_factory):
    fits = make_fits(tmp_path_factory.mktemp("fuzz-coef"))
    return json.loads((fits / LINEAR).read_text("utf-8"))


json_values = st.recursive(
    st.one_of(st.none(), st.booleans(), st.integers(-10 ** 20, 10 ** 20),
              st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=10),
              st.sampled_from([1e308, 5e-324, -1e308, 0.0, -0.0, "NaN", "inf"])),
    lambda inner: st.one_of(st.lists(inner, max_size=3),
                            st.dictionaries(st.text(max_size=5), inner, max_size=3)),
    max_leaves=6)


def paths(content, prefix=()):
    """Every key path into a JSON document (into objects and lists)."""
    out = [prefix] if prefix else []
    if isinstance(content, dict):
        for k, v in content.items():
            out += paths(v, prefix + (k,))
    elif isinstance(content, list):
        for i, v in enumerate(content):
            out += paths(v, prefix + (i,))
    return out


@st.composite
def coefficient_bytes(draw, candidate):
    from refit.coefficients import content_sha256

    doc = json.loads(json.dumps(candidate))
    for _ in range(draw(st.integers(1, 3))):
        where = draw(st.sampled_from(paths(doc) + [("extra_field",)]))
        parent = doc
        try:
            for k in where[:-1]:
                parent = parent[k]
            action = draw(st.sampled_from(["set", "set", "delete"]))
            if action == "delete" and isinstance(parent, dict):
                parent.pop(where[-1], None)
            elif isinstance(parent, dict) or (isinstance(parent, list)
                                              and where[-1] < len(parent)):
                parent[where[-1]] = draw(json_values)
        except (KeyError, IndexError, TypeError):
            pass
    if draw(st.booleans()):  # rehash, so the file gets past the hash to the schema
        try:
            doc["sha256"] = content_sha256(doc)
        except Exception:  # noqa: BLE001  (content that cannot be hashed: keep the old)
            pass
    data = json.dumps(doc, indent=1, ensure_ascii=draw(st.booleans())).encode(
        "utf-8", "surrogatepass")
    return mangled(draw, data)


@FUZZ
@given(data=st.data())
def test_verify_and_apply_never_crash_on_coefficient_files(candidate, data):
    raw = data.draw(coefficient_bytes(candidate))
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "fit.json"
        path.write_bytes(raw)
        assert_well_behaved(invoke("verify", path), path)
        assert_well_behaved(invoke("apply", path, "--fossils",
                                   demo_dir() / "fossils.csv"), path)


def test_the_property_catches_a_traceback():
    # the checker itself must fail on a crash (a test that cannot fail is a defect)
    class Fake:
        exception, exit_code = ZeroDivisionError("x"), 1
        output = "Traceback (most recent call last):"
    with pytest.raises(AssertionError):
        assert_well_behaved(Fake())


# ----------------------------------------------------------------------------- attacks
# Tamper attacks a content hash alone cannot see, and inputs sized to exhaust refit. The
# reference for "same content" is Python's json module (RFC 8259): an edit that json.loads
# reads as the same document must still be refused, because load() checks the exact bytes.
ATTACKS = {"non-finite": 0, "respelled": 0, "nested": 0, "recipe sizes": 0,
           "rows above the header": 0, "encodings and ids": 0, "manifest edits": 0}
#: the property that counts each kind of attack (a run of some properties only, with -k,
#: leaves the others' counts at 0)
COUNTED_BY = {
    "non-finite": "test_a_non_finite_number_in_place_of_a_null_never_loads",
    "respelled": "test_the_same_content_in_other_bytes_never_loads",
    "nested": "test_deeply_nested_json_is_a_clear_error",
    "recipe sizes": "test_fit_refuses_recipe_sizes_beyond_the_limits_at_once",
    "rows above the header": "test_every_data_row_is_accounted_for_whatever_its_place_or_encoding",
    "encodings and ids": "test_every_data_row_is_accounted_for_whatever_its_place_or_encoding",
    "manifest edits": "test_a_manifest_of_the_wrong_shape_is_a_clear_error",
}


def _null_offsets(raw: bytes) -> list[int]:
    import re

    return [m.start(1) for m in re.finditer(rb"[:\[,]\s*(null)", raw)]


@pytest.fixture(scope="module")
def written(candidate):
    from refit.coefficients import dumps

    return dumps(candidate).encode("utf-8")


@FUZZ
@given(data=st.data())
def test_a_non_finite_number_in_place_of_a_null_never_loads(written, data):
    from refit import coefficients
    from refit.errors import RefitError

    offsets = _null_offsets(written)
    assert offsets
    at = data.draw(st.sampled_from(offsets))
    token = data.draw(st.sampled_from([b"1e999", b"-1e999", b"1E400", b"-9.9e9999",
                                       b"1" + b"0" * 400, b"NaN", b"Infinity", b"-Infinity"]))
    raw = written[:at] + token + written[at + 4:]
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "fit.json"
        path.write_bytes(raw)
        with pytest.raises(RefitError):
            coefficients.load(path)
        result = invoke("verify", path)
        assert_well_behaved(result, path)
        assert result.exit_code == 1
    ATTACKS["non-finite"] += 1


def _in_string(text: str) -> list[bool]:
    """Per character of a JSON text: whether it lies inside a string (quotes excluded),
    escapes followed (RFC 8259 section 7)."""
    out, inside, escaped = [], False, False
    for c in text:
        if inside and not escaped and c == '"':
            inside = False
            out.append(False)
            continue
        out.append(inside)
        if inside:
            escaped = c == "\\" and not escaped
        elif c == '"':
            inside = True
    return out


def _in_escape(text: str, i: int) -> bool:
    """Whether the letter at ``i`` is one of the four hex digits of a ``\\uXXXX``."""
    return any(text[j:j + 2] == "\\u" and j + 2 <= i < j + 6 for j in range(max(0, i - 5), i))


@st.composite
def respelled(draw, raw: bytes) -> bytes:
    """The same JSON document in other bytes: whitespace, key order or a \\u escape."""
    text = raw.decode("utf-8")
    inside = _in_string(text)
    how = draw(st.sampled_from(["space", "key order", "escape", "indent", "line ends"]))
    if how == "space":   # between tokens only: a space inside a string changes the content
        spots = [i + 1 for i, c in enumerate(text) if c in ",:[{" and not inside[i]]
        i = draw(st.sampled_from(spots))
        return (text[:i] + draw(st.sampled_from([" ", "\t", "\n", "  "])) + text[i:]).encode()
    if how == "escape":  # a letter inside a string, not one already part of an escape
        spots = [i for i, c in enumerate(text) if c.isalpha() and inside[i]
                 and text[i - 1] != "\\" and not _in_escape(text, i)]
        i = draw(st.sampled_from(spots))
        return (text[:i] + f"\\u{ord(text[i]):04x}" + text[i + 1:]).encode()
    doc = json.loads(text)
    if how == "key order":
        keys = list(doc)
        order = draw(st.permutations(keys).filter(lambda p: list(p) != sorted(keys)))
        return (json.dumps({k: doc[k] for k in order}, indent=1, ensure_ascii=False)
                + "\n").encode()
    if how == "indent":
        return (json.dumps(doc, indent=draw(st.sampled_from([None, 0, 2, 4])),
                           sort_keys=True, ensure_ascii=False) + "\n").encode()
    return text.replace("\n", "\r\n").encode()


@FUZZ
@given(data=st.data())
def test_the_same_content_in_other_bytes_never_loads(written, data):
    from refit import coefficients
    from refit.errors import InvalidDataError

    raw = data.draw(respelled(written))
    assert json.loads(raw) == json.loads(written)       # the hash cannot tell them apart
    if raw == written:
        return
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "fit.json"
        path.write_bytes(raw)
        with pytest.raises(InvalidDataError, match="bytes check failed"):
            coefficients.load(path)
        result = invoke("verify", path)
        assert_well_behaved(result, path)
        assert result.exit_code == 1 and "FAIL bytes" in result.output
    ATTACKS["respelled"] += 1


@FUZZ
@given(depth=st.integers(100, 200_000), opener=st.sampled_from(["[", '{"a":']),
       where=st.sampled_from(["top", "field"]))
def test_deeply_nested_json_is_a_clear_error(depth, opener, where):
    closer = "]" if opener == "[" else "}"
    body = opener * depth + "1" * (opener == "[") + "null" * (opener != "[") + closer * depth
    text = body if where == "top" else '{"coefficients": ' + body + "}"
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "deep.json"
        path.write_text(text)
        result = invoke("verify", path)
        assert_well_behaved(result, path)
        assert result.exit_code == 1
        assert len(result.output.strip().splitlines()) <= 4
    ATTACKS["nested"] += 1


sizes = st.one_of(st.integers(10 ** 3, 10 ** 30), st.just(99999999999999999999),
                  st.just(2 ** 32), st.just(100_000_000))


@FUZZ
@given(key=st.sampled_from(["seed", "repeats", "folds"]), value=sizes,
       list_key=st.sampled_from([None, "forms", "estimators", "methods"]),
       n=st.integers(65, 250_000))
def test_fit_refuses_recipe_sizes_beyond_the_limits_at_once(soils, key, value, list_key, n):
    doc = json.loads(json.dumps(BASE_RECIPE))
    # beyond each limit (folds and repeats 1,000; seeds 0 .. 2**32 - 1)
    doc["validation"][key] = value + (2 ** 32 if key == "seed" else 1_000)
    if list_key:
        section = "intervals" if list_key == "methods" else "candidates"
        doc[section][list_key] = doc[section][list_key] * n
    text = "\n".join(f"[{s}]\n" + "\n".join(f"{json.dumps(k)} = {toml_value(v)}"
                                            for k, v in d.items()) for s, d in doc.items())
    with tempfile.TemporaryDirectory() as tmp:
        shutil.copy(soils, Path(tmp) / "soils.csv")
        recipe = Path(tmp) / "recipe.toml"
        recipe.write_text(text)
        result = invoke("fit", recipe, "--out", Path(tmp) / "run", "--quiet")
        assert_well_behaved(result, recipe)
        assert result.exit_code == 2 and len(result.output) < 1000, result.output[:2000]
        assert "refit's limit" in result.output
        assert not (Path(tmp) / "run").exists()
    ATTACKS["recipe sizes"] += 1


# Curate attacks: data rows above the header, mixed and wide encodings, look-alike ids,
# formula-like text, manifests of the wrong shape.
ID_SPELLINGS = ["P{i}", "Ve\u0300sk{i}", "V\u00e8sk{i}", "P\u200b{i}", "={i}+1", "@SUM({i})",
                "+{i}", "-x{i}", "P\ufeff{i}"]


@st.composite
def shaped_table(draw):
    n = draw(st.integers(1, 12))
    ids = [draw(st.sampled_from(ID_SPELLINGS)).format(i=i) for i in range(n)]
    rows = [f"{pid},{30 + i / 7:.4f},{-100 - i / 9:.4f},SRC-{i % 3},{250 + 13 * i},"
            f"{20 + 3 * i},{10 + i}" for i, pid in enumerate(ids)]
    header = "profile_id,latitude,longitude,source,map_mm,bk_depth_cm,bk_thickness_cm"
    above = draw(st.integers(0, n - 1))
    lines = rows[:above] + [header] + rows[above:]
    if draw(st.booleans()):
        lines.insert(0, draw(st.sampled_from(["Survey 2024", "Notes: depths in cm", ""])))
    text = "\n".join(lines) + "\n"
    codec = draw(st.sampled_from(["utf-8", "utf-8", "utf-16-le", "utf-16-be", "utf-32-le",
                                  "mixed"]))
    if codec == "mixed":  # UTF-8 then Latin-1 at a drawn line
        cut = draw(st.integers(0, len(lines)))
        data = ("\n".join(lines[:cut]) + "\nVèsk").encode("utf-8") + \
            ("\n" + "\n".join(lines[cut:]) + "\nVèsk\n").encode("latin-1", "replace")
    else:
        data = text.encode(codec)
    return data, n, above, codec


@FUZZ
@given(shaped=shaped_table())
def test_every_data_row_is_accounted_for_whatever_its_place_or_encoding(shaped):
    data, n, above, codec = shaped
    with tempfile.TemporaryDirectory() as tmp:
        path = Path(tmp) / "incoming.csv"
        path.write_bytes(data)
        result = invoke("admit", path, "--into", Path(tmp) / "store", "--format", "json")
        assert_well_behaved(result, path)
        if codec == "mixed":
            assert result.exit_code == 2 and "mixes encodings" in result.output
        else:
            assert result.exit_code == 0, result.output
            report = json.loads(result.stdout)
            # every data row written, above the header or below it, is read and accounted
            assert report["rows_read"] == n
            assert n == report["accepted"] + report["rejected"] + report["suspect"]
    ATTACKS["rows above the header" if above else "encodings and ids"] += 1


MANIFEST_EDITS = st.sampled_from([
    ("version", -1), ("version", 0), ("version", 99), ("version", "1"), ("version", None),
    ("changelog", None), ("changelog", {}), ("changelog", []), ("row_count", -5),
    ("row_count", 10 ** 30), ("records_sha256", "x"), ("name", 7), ("name", None),
])


@FUZZ
@given(edits=st.lists(MANIFEST_EDITS, min_size=1, max_size=3), top=st.booleans())
def test_a_manifest_of_the_wrong_shape_is_a_clear_error(edits, top):
    with tempfile.TemporaryDirectory() as tmp:
        store = Path(tmp) / "store"
        shutil.copytree(demo_dir() / "store", store)
        manifest = json.loads((store / "manifest.json").read_text("utf-8"))
        for key, value in edits:
            if value is None:
                manifest.pop(key, None)
            else:
                manifest[key] = value
        doc = manifest if top else [manifest]
        (store / "manifest.json").write_text(json.dumps(doc), encoding="utf-8")
        result = invoke("admit", demo_dir() / "incoming_soils.csv", "--into", store,
                        "--dry-run")
        assert_well_behaved(result)
        assert result.exit_code == 1 and "--repair-manifest" in result.output, result.output
        repaired = invoke("admit", "--repair-manifest", store)
        assert_well_behaved(repaired)
        assert repaired.exit_code == 0 and "rebuilt" in repaired.output
        again = invoke("admit", demo_dir() / "incoming_soils.csv", "--into", store,
                       "--dry-run")
        assert again.exit_code == 0, again.output
    ATTACKS["manifest edits"] += 1


def test_zz_report_attack_counts(request):
    # runs last in file order: how many attacks of each kind ran (-s shows the line); every
    # kind whose property ran in this session was tried at least once
    print("attacks run:", ", ".join(f"{k} {v}" for k, v in ATTACKS.items()))
    ran = {item.originalname for item in request.session.items}
    assert set(COUNTED_BY.values()) <= {name for name in dir(sys.modules[__name__])
                                        if name.startswith("test_")}
    if not os.environ.get("PYTEST_XDIST_WORKER"):
        missing = [kind for kind, test in COUNTED_BY.items()
                   if test in ran and ATTACKS[kind] == 0]
        assert not missing, f"no attack of kind {missing} ran"
