"""Attacks on the coefficient-file reader and the consumer API.

The hash is SHA-256 (FIPS 180-4) through the standard library's hashlib; JSON is RFC 8259,
whose numbers have no NaN or infinity, and Python's json module (the reference parser here)
reads ``1e999`` as ``inf``. Every attack must end in refit's own error (never a raw
``RecursionError``, ``TypeError`` or numpy ``ValueError``) and never in a file that loads
with different numbers.
"""

from __future__ import annotations

import hashlib
import json
import re
from pathlib import Path

import numpy as np
import pytest

import refit.published
from _harness import cli
from refit import coefficients
from refit.coefficients import dumps
from refit.errors import InvalidDataError, RefitError, UsageError

PUBLISHED = Path(refit.published.__file__).parent
FILES = sorted(PUBLISHED.glob("*.json"))
SMALL = PUBLISHED / "map_from_ca_alumina.sheldon2002.json"


def nulls(raw: bytes) -> list[int]:
    """Byte offsets of every JSON ``null`` value in a file refit wrote."""
    return [m.start(1) for m in re.finditer(rb"[:\[,]\s*(null)", raw)]


@pytest.mark.parametrize("path", FILES, ids=[p.stem for p in FILES])
@pytest.mark.parametrize("number", [b"1e999", b"-1e999", b"1" + b"0" * 400])
def test_an_overflowing_number_in_place_of_any_null_is_refused(path, number, tmp_path):
    raw = path.read_bytes()
    where = nulls(raw)
    assert where, "every shipped file has at least one null to attack"
    target = tmp_path / "edited.json"
    for i in where:
        target.write_bytes(raw[:i] + number + raw[i + 4:])
        with pytest.raises(InvalidDataError, match="finite") as err:
            coefficients.load(target)
        assert str(target) in str(err.value)
        code, out = cli("verify", target)
        assert code == 1 and "Error: unexpected" not in out, out


def test_the_canonical_form_refuses_non_finite_numbers():
    # before the fix, inf and NaN were written as null: two contents, one hash
    content = json.loads(SMALL.read_bytes())
    for bad in (float("inf"), -float("inf"), float("nan")):
        edited = {**content, "predictors": [{**content["predictors"][0], "valid_min": bad}]}
        with pytest.raises(InvalidDataError, match=r"\$\.predictors\[0\]\.valid_min"):
            coefficients.content_sha256(edited)
    # the canonical bytes of the untouched content are the README's recipe, via hashlib
    body = {k: v for k, v in content.items() if k != "sha256"}
    canon = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert coefficients.content_sha256(content) == hashlib.sha256(
        canon.encode("utf-8")).hexdigest() == content["sha256"]


def _respelled(raw: bytes) -> dict:
    """Same JSON content, other bytes: the edits a hash of the content cannot see."""
    text = raw.decode("utf-8")
    content = json.loads(text)
    first_key = next(iter(content))
    fid = content["function_id"]
    reordered = {k: content[k] for k in reversed(list(content))}
    return {
        "trailing space": (text.rstrip("\n") + " \n").encode(),
        "indent 2": (json.dumps(content, indent=2, ensure_ascii=False) + "\n").encode(),
        "CRLF line ends": text.replace("\n", "\r\n").encode(),
        "key order": (json.dumps(reordered, indent=1, ensure_ascii=False) + "\n").encode(),
        "\\u escape in a value": text.replace(f'"function_id": "{fid}"', '"function_id": '
                                            f'"\\u{ord(fid[0]):04x}{fid[1:]}"', 1).encode(),
        "escaped key letter": text.replace(f'"{first_key}"',
                                           '"\\u00' + f'{ord(first_key[0]):02x}'
                                           + first_key[1:] + '"', 1).encode(),
    }


@pytest.mark.parametrize("edit", list(_respelled(SMALL.read_bytes())))
def test_load_refuses_respelled_bytes_and_says_which_check(edit, tmp_path):
    raw = SMALL.read_bytes()
    changed = _respelled(raw)[edit]
    assert changed != raw and json.loads(changed) == json.loads(raw)
    target = tmp_path / "respelled.json"
    target.write_bytes(changed)
    with pytest.raises(InvalidDataError, match="bytes check failed") as err:
        coefficients.load(target)
    assert str(target) in str(err.value)


def test_load_says_the_hash_check_failed(tmp_path):
    content = json.loads(SMALL.read_bytes())
    content["coefficients"][0] += 1.0
    target = tmp_path / "edited.json"
    target.write_text(dumps(content), encoding="utf-8")
    with pytest.raises(InvalidDataError, match=r"\$\.sha256 does not match the content"):
        coefficients.load(target)


@pytest.mark.parametrize("depth", [1_000, 100_000])
def test_deeply_nested_json_is_a_refit_error(depth, tmp_path):
    target = tmp_path / "deep.json"
    target.write_text('{"a": ' + "[" * depth + "]" * depth + "}", encoding="utf-8")
    with pytest.raises(InvalidDataError, match="nested too deeply"):
        coefficients.load(target)
    code, out = cli("verify", target)
    assert code == 1 and out.startswith("Error: ") and "unexpected" not in out, out
    assert len(out.splitlines()) == 1


@pytest.mark.parametrize("bad", [None, 3, 2.5, b"x.json", ["a.json"], ""])
def test_load_of_something_that_is_not_a_path_is_a_usage_error(bad):
    with pytest.raises(UsageError, match="named by a path"):
        coefficients.load(bad)


def test_weights_of_the_wrong_length_are_a_refit_error():
    eq = coefficients.load(SMALL)
    with pytest.raises(UsageError, match="one number or one per value"):
        eq.predict([50], weights=[1, 2])
    with pytest.raises(UsageError, match="one number or one per value"):
        eq.predict([50, 60, 70], weights=[1, 2])
    # the accepted spellings give the same numbers as the default weight 1
    a = eq.predict([50, 60], weights=1).estimate
    b = eq.predict([50, 60], weights=[1.0]).estimate
    np.testing.assert_array_equal(a, eq.predict([50, 60]).estimate)
    np.testing.assert_array_equal(a, b)


@pytest.mark.parametrize("values", [np.array([1 + 2j]), [1 + 2j], 1 + 0j,
                                    {"ca_al": np.array([0.5 + 1j])}])
def test_complex_values_are_refused_not_truncated(values):
    eq = coefficients.load(SMALL)
    name = eq.predictor_names[0]
    if isinstance(values, dict):
        values = {name: values["ca_al"]}
    with pytest.raises(InvalidDataError):
        eq.predict(values)


def test_every_attack_file_is_refused_by_every_reader_path(tmp_path):
    """load, read_record, verify_bytes and the CLI agree on a file with 1e999 for a null."""
    from refit.coefficients import read_record
    from refit.publish.verify import verify_bytes

    raw = SMALL.read_bytes()
    i = nulls(raw)[0]
    changed = raw[:i] + b"1e999" + raw[i + 4:]
    target = tmp_path / "inf.json"
    target.write_bytes(changed)
    for reader in (coefficients.load, read_record):
        with pytest.raises(RefitError, match="finite"):
            reader(target)
    with pytest.raises(RefitError, match="finite"):
        verify_bytes(changed, "inf.json")


# ------------------------------------------------- files written before one spelling
LEGACY = Path(__file__).parents[1] / "data" / "legacy" / "map_from_bk_depth.schema-1.0.0.json"
# ^ the literature file as refit shipped it under schema 1.0.0, keys in the order they were
#   built (git history of refit/published/, before keys were sorted)


def test_a_file_written_before_keys_were_sorted_still_loads_with_the_same_numbers():
    raw = LEGACY.read_bytes()
    assert raw != dumps(json.loads(raw)).encode()      # not today's spelling
    old = coefficients.load(LEGACY)
    new = coefficients.load(PUBLISHED / "map_from_bk_depth.retallack1994.json")
    assert old.record["schema_version"] == "1.0.0"
    # the shipped file is the same content re-issued under schema 1.2.0
    strip = ("schema_version", "sha256")
    assert {k: v for k, v in old.record.items() if k not in strip} == \
        {k: v for k, v in new.record.items() if k not in strip}
    x = np.array([20.0, 55.0, 90.0])
    a, b = old.predict({"bk_depth_cm": x}), new.predict({"bk_depth_cm": x})
    np.testing.assert_array_equal(a.estimate, b.estimate)
    np.testing.assert_array_equal(a.lower, b.lower)
    # and the file's content hash is SHA-256 (FIPS 180-4) of its canonical content
    body = {k: v for k, v in json.loads(raw).items() if k != "sha256"}
    canon = json.dumps(body, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    assert hashlib.sha256(canon.encode()).hexdigest() == old.record["sha256"]


@pytest.mark.parametrize("edit", ["trailing space", "CRLF line ends", "indent 2",
                                  "\\u escape in a value"])
def test_a_legacy_file_respelled_by_hand_is_still_refused(edit, tmp_path):
    changed = _respelled(LEGACY.read_bytes())[edit]
    target = tmp_path / "old.json"
    target.write_bytes(changed)
    with pytest.raises(InvalidDataError, match="bytes check failed"):
        coefficients.load(target)


def test_a_current_file_in_the_legacy_spelling_is_refused(tmp_path):
    # schema 1.2.0 and later were only ever written with sorted keys
    content = json.loads(SMALL.read_bytes())
    assert content["schema_version"] >= "1.2.0"
    reordered = {k: content[k] for k in reversed(list(content))}
    target = tmp_path / "reordered.json"
    target.write_text(json.dumps(reordered, indent=1, ensure_ascii=False) + "\n", "utf-8")
    with pytest.raises(InvalidDataError, match="bytes check failed"):
        coefficients.load(target)


def test_verify_says_how_a_legacy_file_was_checked():
    from refit.publish.verify import verify_file

    report = verify_file(LEGACY)
    checks = {c.name: c for c in report.checks}
    assert checks["bytes"].ok and "schema 1.0.0" in checks["bytes"].message
    assert "order is not checked" in checks["bytes"].message
