"""Attacks on a registry and on what `refit verify` proves.

An attacker who can write the files can rehash what they edit (the hash is SHA-256 via the
standard library's hashlib, FIPS 180-4, and its recipe is public) and rewrite index.json to
match. Such an edit must still fail `verify --store` (the domain and the cross-validated
skill are recomputed from the data) and `verify --trust` (an Ed25519 signature, RFC 8032,
checked with the `cryptography` package), and every path must stay inside the registry.
Mount-based attacks (read-only folder, full disk) run where the machine allows mounts.
"""

from __future__ import annotations

import json
import os
import shutil
import subprocess
from pathlib import Path

import pytest

from _harness import LINEAR, QUADRATIC, cli, make_fits
from refit.coefficients import dumps, with_hash
from refit.publish import registry as reg
from refit.publish.signing import new_key_pair, signature_path
from refit.publish.verify import trusted_keys, verify_file, verify_registry


@pytest.fixture(scope="module")
def scene(tmp_path_factory):
    root = tmp_path_factory.mktemp("attacks")
    fits = make_fits(root)
    key, pub, _ = new_key_pair(root / "keys" / "lab.key")
    registry = root / "registry"
    reg.publish(fits / LINEAR, registry, create=True, sign=key)
    reg.publish(fits / QUADRATIC, registry, sign=key)
    return {"root": root, "fits": fits, "registry": registry, "store": root / "store",
            "key": key, "pub": pub}


def forged(content: dict, edit) -> str:
    """The content edited by ``edit`` and rehashed: what an attacker can always make."""
    content = json.loads(json.dumps(content))
    edit(content)
    return dumps(with_hash(content))


EDITS = {
    "valid_max": lambda c: c["predictors"][0].update(valid_max=c["predictors"][0]["valid_max"]
                                                     * 10),
    "valid_min": lambda c: c["predictors"][0].update(valid_min=-1.0),
    "coverage": lambda c: c["cv"].update(coverage=0.99),
    "rmsep": lambda c: c["cv"].update(rmsep=c["cv"]["rmsep"] * 0.8),
    "bias": lambda c: c["cv"].update(bias=0.0),
    "kfold rmsep": lambda c: c["cv"].setdefault("random_kfold", {}).update(rmsep=1.0),
    "broken stick": lambda c: c["domain"]["broken_stick"].update(breakpoint=50.0),
}


@pytest.mark.parametrize("edit", list(EDITS))
def test_a_rehashed_edit_of_domain_or_skill_fails_verify_store(scene, edit, tmp_path):
    content = json.loads((scene["fits"] / LINEAR).read_text("utf-8"))
    target = tmp_path / "forged.json"
    target.write_text(forged(content, EDITS[edit]), encoding="utf-8")
    assert verify_file(target).ok            # hash, schema, bytes: all consistent
    report = verify_file(target, store=scene["store"])
    assert not report.ok
    assert report.failures()[0].name == "reproduce"
    assert "in the file" in report.failures()[0].message
    # the untouched file reproduces (domain and skill recomputed too)
    assert verify_file(scene["fits"] / LINEAR, store=scene["store"]).ok


def _forge_registry(scene, work: Path) -> Path:
    """Edit valid_max in 1.0.0, rehash it and rewrite index.json to match."""
    shutil.copytree(scene["registry"], work)
    f = work / "map_from_bk_depth" / "1.0.0.json"
    text = forged(json.loads(f.read_text("utf-8")), EDITS["valid_max"])
    f.chmod(0o644)
    f.write_text(text, encoding="utf-8")
    index = json.loads((work / "index.json").read_text("utf-8"))
    entry = index["functions"]["map_from_bk_depth"][0]
    entry["sha256"] = json.loads(text)["sha256"]
    entry["file_sha256"] = __import__("hashlib").sha256(text.encode()).hexdigest()
    (work / "index.json").write_text(json.dumps(index, indent=1), encoding="utf-8")
    return work


def test_index_and_file_forged_together_fail_store_and_signature(scene, tmp_path):
    work = _forge_registry(scene, tmp_path / "forged")
    # hashes alone cannot tell: the forgery is consistent (the README says so)
    assert verify_registry(work).ok
    by_store = verify_registry(work, store=scene["store"])
    assert [c.name for c in by_store.failures()] == ["reproduce"]
    assert "valid_max" in by_store.failures()[0].message
    by_key = verify_registry(work, trust=trusted_keys([scene["pub"]]))
    assert [c.name for c in by_key.failures()] == ["signature"]
    assert "does not match the file's bytes" in by_key.failures()[0].message
    code, out = cli("verify", work, "--trust", scene["pub"])
    assert code == 1 and "FAIL signature" in out, out


def test_signatures_round_trip_and_refuse_other_keys(scene, tmp_path):
    keys = trusted_keys([scene["pub"]])
    assert verify_registry(scene["registry"], trust=keys).ok
    _, other, _ = new_key_pair(tmp_path / "other.key")
    report = verify_registry(scene["registry"], trust=trusted_keys([other]))
    assert {c.name for c in report.failures()} == {"signature"}
    assert "not among the trusted keys" in report.failures()[0].message
    # trusting both keys accepts the lab's signature
    assert verify_registry(scene["registry"], trust=trusted_keys([other, scene["pub"]])).ok


def test_a_missing_or_mangled_signature_fails(scene, tmp_path):
    work = tmp_path / "r"
    shutil.copytree(scene["registry"], work)
    keys = trusted_keys([scene["pub"]])
    f = work / "map_from_bk_depth" / "2.0.0.json"
    sig = signature_path(f)
    body = json.loads(sig.read_text("utf-8"))
    sig.chmod(0o644)
    body["signature"] = body["signature"][:-4] + "AAA="
    sig.write_text(json.dumps(body), encoding="utf-8")
    assert "does not match" in verify_file(f, trust=keys).failures()[0].message
    sig.write_text("[1, 2]", encoding="utf-8")
    assert "not a refit signature" in verify_file(f, trust=keys).failures()[0].message
    sig.unlink()
    assert "no signature" in verify_file(f, trust=keys).failures()[0].message


def test_cli_keygen_publish_sign_verify_trust(scene, tmp_path):
    code, out = cli("keygen", tmp_path / "k.key")
    assert code == 0 and "k.key.pub" in out, out
    assert (os.stat(tmp_path / "k.key").st_mode & 0o777) == 0o600
    code, out = cli("keygen", tmp_path / "k.key")
    assert code == 2 and out.startswith("Error: ") and "never overwritten" in out
    code, out = cli("publish", scene["fits"] / LINEAR, "--to", tmp_path / "reg", "--init",
                    "--sign", tmp_path / "k.key")
    assert code == 0 and "1.0.0.json.sig" in out, out
    code, out = cli("verify", tmp_path / "reg", "--trust", tmp_path / "k.key.pub")
    assert code == 0 and "ok   signature" in out, out
    (tmp_path / "bad.key").write_text("not a key")
    code, out = cli("publish", scene["fits"] / QUADRATIC, "--to", tmp_path / "reg",
                    "--sign", tmp_path / "bad.key")
    assert code == 2 and out.startswith("Error: ") and "PEM" in out, out
    assert not (tmp_path / "reg" / "map_from_bk_depth" / "2.0.0.json").exists()


# ----------------------------------------------------------------------------- paths
def test_a_function_folder_linked_outside_the_registry_is_refused(scene, tmp_path):
    work = tmp_path / "r"
    shutil.copytree(scene["registry"], work)
    outside = tmp_path / "elsewhere"
    shutil.move(work / "map_from_bk_depth", outside)
    (work / "map_from_bk_depth").symlink_to(outside, target_is_directory=True)
    code, out = cli("verify", work)
    assert code == 1 and "leads it outside the registry" in out and str(outside) in out, out
    code, out = cli("publish", scene["fits"] / LINEAR, "--to", work, "--bump", "major")
    assert code == 1 and out.startswith("Error: ") and "outside the registry" in out, out


def test_a_version_file_linked_outside_the_registry_is_refused(scene, tmp_path):
    work = tmp_path / "r"
    shutil.copytree(scene["registry"], work)
    f = work / "map_from_bk_depth" / "1.0.0.json"
    outside = tmp_path / "copy.json"
    shutil.copy(f, outside)
    f.chmod(0o644)
    f.unlink()
    f.symlink_to(outside)
    report = verify_registry(work)
    assert not report.ok
    assert any("outside the registry" in c.message and str(outside) in c.message
               for c in report.failures()), report.to_dict()


@pytest.mark.parametrize("functions, words", [
    ({"map_from_bk_depth": "1.0.0"}, "must be a list of versions"),
    ({"map_from_bk_depth": [1, 2]}, "must be an object with a text 'version'"),
    ({"map_from_bk_depth": [{"version": 1}]}, "must be an object with a text 'version'"),
    ({"map_from_bk_depth": [{"version": "1.0.0", "file_sha256": 5}]}, "must be text"),
])
def test_an_index_of_the_wrong_shape_is_a_clear_error(scene, tmp_path, functions, words):
    work = tmp_path / "r"
    shutil.copytree(scene["registry"], work)
    (work / "index.json").write_text(json.dumps({"format": "refit-registry/1",
                                                 "functions": functions}))
    for args in (("verify", work), ("publish", scene["fits"] / LINEAR, "--to", work)):
        code, out = cli(*args)
        assert code == 2 and out.startswith("Error: ") and words in out, out
        assert "unexpected" not in out and len(out.splitlines()) == 1


def test_deeply_nested_index_and_a_folder_for_a_lock(scene, tmp_path):
    work = tmp_path / "r"
    shutil.copytree(scene["registry"], work)
    keep = (work / "index.json").read_text()
    (work / "index.json").write_text('{"functions": ' + "[" * 100_000 + "]" * 100_000 + "}")
    code, out = cli("verify", work)
    assert code == 2 and "nested too deeply" in out and "unexpected" not in out, out
    (work / "index.json").write_text(keep)
    lock = work / ".lock"
    lock.unlink(missing_ok=True)
    lock.mkdir()
    code, out = cli("publish", scene["fits"] / LINEAR, "--to", work, "--bump", "major")
    assert code == 2 and out.startswith("Error: ") and "cannot be written" in out, out


# ----------------------------------------------------------------------------- mounts
def _mount(*args) -> bool:
    try:
        return subprocess.run(["mount", *map(str, args)], capture_output=True,
                              timeout=20).returncode == 0
    except (OSError, subprocess.SubprocessError):
        return False


@pytest.fixture
def mounted(tmp_path):
    """Mount points made by a test, unmounted after it."""
    points = []
    yield points
    for p in reversed(points):
        subprocess.run(["umount", str(p)], capture_output=True, timeout=20)


def test_a_read_only_registry_is_a_clear_error(scene, tmp_path, mounted):
    ro = tmp_path / "ro"
    ro.mkdir()
    if os.geteuid() == 0:
        if not (_mount("--bind", scene["registry"], ro) and mounted.append(ro) is None
                and _mount("-o", "remount,bind,ro", ro)):
            pytest.skip("this machine allows no read-only bind mount")
    else:  # an unprivileged user: permissions make the copy read-only
        shutil.copytree(scene["registry"], ro, dirs_exist_ok=True)
        for p in [ro, *ro.rglob("*")]:
            p.chmod(0o555 if p.is_dir() else 0o444)
    before = sorted(str(p) for p in ro.rglob("*"))
    code, out = cli("publish", scene["fits"] / LINEAR, "--to", ro, "--bump", "major")
    assert code == 2 and out.startswith("Error: ") and "cannot be written" in out, out
    assert "unexpected" not in out
    code, out = cli("publish", scene["fits"] / LINEAR, "--to", ro, "--bump", "major",
                    "--dry-run")
    assert code == 0 and "Would publish" in out, out
    code, out = cli("verify", ro)
    assert code == 0 and "verified" in out, out
    assert sorted(str(p) for p in ro.rglob("*")) == before


def test_a_full_disk_during_publish_is_a_clear_error(scene, tmp_path, mounted):
    if os.geteuid() != 0:
        pytest.skip("a small file system needs a mount (root)")
    full = tmp_path / "full"
    full.mkdir()
    if not _mount("-t", "tmpfs", "-o", "size=256k", "tmpfs", full):
        pytest.skip("this machine allows no tmpfs mount")
    mounted.append(full)
    shutil.copytree(scene["registry"], full / "reg")
    with open(full / "filler", "wb", buffering=0) as fh:   # fill the disk to the last byte
        for block in (4096, 1):
            try:
                while True:
                    fh.write(b"\0" * block)
            except OSError:
                pass
    before = {str(p): p.read_bytes() for p in (full / "reg").rglob("*") if p.is_file()}
    code, out = cli("publish", scene["fits"] / LINEAR, "--to", full / "reg", "--bump", "major")
    assert code in (1, 2) and out.startswith("Error: ") and "unexpected" not in out, out
    assert len(out.strip().splitlines()) == 1
    (full / "filler").unlink()
    after = {str(p): p.read_bytes() for p in (full / "reg").rglob("*") if p.is_file()
             and not p.name.startswith(".")}
    assert after == {k: v for k, v in before.items() if not Path(k).name.startswith(".")}
    code, out = cli("verify", full / "reg")
    assert code == 0, out
