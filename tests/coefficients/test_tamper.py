"""Tamper evidence of published coefficient files and registries.

tests/publish/test_verify.py already checks that ``verify_bytes`` catches every single-byte change
of a published file. Here: the consumer's loader ``refit.coefficients.load`` refuses every
single-byte change too (all byte positions of the smallest shipped coefficient file, each byte flipped in its
lowest bit, line ends also turned into spaces; not even a change of layout alone loads),
``refit verify REGISTRY`` on the command line
fails for changed bytes of a registry's file, and an index that disagrees with its files
(a wrong hash, a missing or extra version, an entry pointing outside the registry) is
reported. The hash is SHA-256 (FIPS 180-4) from the standard library's hashlib.
"""

from __future__ import annotations

import json
import random
import shutil
from pathlib import Path

import pytest

from _harness import LINEAR, QUADRATIC, cli, make_fits, publish_all
from refit import coefficients
from refit.errors import RefitError


@pytest.fixture(scope="module")
def registry(tmp_path_factory):
    root = tmp_path_factory.mktemp("tamper")
    return publish_all(make_fits(root), root / "registry", LINEAR, QUADRATIC)


def changes(raw: bytes):
    """Every single-byte change tested: low bit flipped; a line end turned into a space."""
    for i, byte in enumerate(raw):
        for new in {byte ^ 0x01} | ({0x20} if byte == 0x0A else set()):
            yield i, raw[:i] + bytes([new]) + raw[i + 1:]


def test_load_refuses_every_single_byte_change(tmp_path):
    # the smallest coefficient file refit ships (a published equation, ~2 kB)
    import refit.published

    original = Path(refit.published.__file__).parent / "map_from_ca_alumina.sheldon2002.json"
    raw = original.read_bytes()
    assert coefficients.load(original).record["sha256"]  # the untouched file loads
    target = tmp_path / "edited.json"
    accepted, n = [], 0
    for i, changed in changes(raw):
        n += 1
        target.write_bytes(changed)
        try:
            coefficients.load(target)
        except RefitError:
            continue
        except Exception as exc:  # any other exception is a defect (a traceback for users)
            pytest.fail(f"byte {i}: {type(exc).__name__}: {exc}")
        # no change loads, not even a layout-only one (same JSON content): the bytes
        # are checked as well as the content hash
        accepted.append(i)
    assert n >= len(raw)
    assert accepted == []


def test_load_names_the_file_and_the_hash(registry, tmp_path):
    raw = (registry / "map_from_bk_depth" / "1.0.0.json").read_bytes()
    content = json.loads(raw)
    content["coefficients"][0] += 1.0
    target = tmp_path / "bumped.json"
    target.write_text(json.dumps(content, indent=1), encoding="utf-8")
    with pytest.raises(RefitError, match="sha256") as err:
        coefficients.load(target)
    assert str(target) in str(err.value)


def test_verify_cli_fails_for_changed_bytes_in_a_registry(registry, tmp_path):
    raw = (registry / "map_from_bk_depth" / "2.0.0.json").read_bytes()
    rng = random.Random(20261209)  # seeded sample of positions (all are in test_verify.py)
    for i in sorted(rng.sample(range(len(raw)), 6)):
        work = tmp_path / f"r{i}"
        shutil.copytree(registry, work)
        f = work / "map_from_bk_depth" / "2.0.0.json"
        f.chmod(0o644)
        f.write_bytes(raw[:i] + bytes([raw[i] ^ 0x01]) + raw[i + 1:])
        code, out = cli("verify", work)
        assert code == 1, (i, out)
        assert "FAIL" in out and "2.0.0.json" in out, out
        assert "Traceback" not in out and "Error: unexpected" not in out


def edit_index(reg: Path, fn) -> None:
    index = json.loads((reg / "index.json").read_text("utf-8"))
    fn(index["functions"])
    (reg / "index.json").write_text(json.dumps(index, indent=1), encoding="utf-8")


@pytest.mark.parametrize("edit, words", [
    (lambda f: f["map_from_bk_depth"][1].update(file_sha256="0" * 64),
     "no longer match the file_sha256"),
    (lambda f: f["map_from_bk_depth"].pop(), "2.0.0.json is on disk but not in index.json"),
    (lambda f: f["map_from_bk_depth"].append({**f["map_from_bk_depth"][1],
                                              "version": "3.0.0"}),
     "lists map_from_bk_depth 3.0.0 but map_from_bk_depth/3.0.0.json is missing"),
])
def test_disagreeing_index_is_reported_by_the_cli(registry, tmp_path, edit, words):
    work = tmp_path / "r"
    shutil.copytree(registry, work)
    edit_index(work, edit)
    code, out = cli("verify", work)
    assert code == 1 and words in out, out
    assert "Traceback" not in out and "Error: unexpected" not in out


def test_index_entry_pointing_outside_the_registry_is_refused(registry, tmp_path):
    # a hand-made index naming '../outside' must not make refit read files outside it
    work = tmp_path / "r"
    shutil.copytree(registry, work)
    outside = tmp_path / "outside"
    outside.mkdir()
    shutil.copy(work / "map_from_bk_depth" / "1.0.0.json", outside / "1.0.0.json")
    edit_index(work, lambda f: f.update({"../outside": [f["map_from_bk_depth"][0]]}))
    code, out = cli("verify", work)
    assert code == 1, out
    assert "'../outside'" in out and "Traceback" not in out and "Error: unexpected" not in out
    code, out = cli("publish", work / "map_from_bk_depth" / "2.0.0.json", "--to", work)
    assert code == 1 and "Traceback" not in out and "Error: unexpected" not in out, out
