"""Crash safety: `refit admit` and `refit publish` killed (SIGKILL) at seeded random moments.

After each kill the store or registry must be exactly as before or exactly as after the
command (records, manifest, quarantine; files and index), no temporary file may be visible
to readers, the next command must finish or undo the interrupted one and say so, and
`refit check` / `refit verify` must pass. A handful of kill moments run in CI; REFIT_LONG=1
runs 100 per command.

The oracle is the pair of states produced by not running and by running the command to the
end (snapshots of every file's bytes); the kill moments are drawn with a seeded
``random.Random`` over the command's measured run time, half of them inside its last 15 %,
where the staging, commit and moves happen.
"""

from __future__ import annotations

import json
import random
import shutil
import subprocess
import sys
from pathlib import Path

import pytest

from _harness import (LINEAR, QUADRATIC, cli, copy_demo_store, make_fits, n_runs,
                      publish_all, run_killed, snapshot, timed_run, visible)
from refit._util.resources import demo_dir

INCOMING = demo_dir() / "incoming_soils.csv"
SEED = 20261209


def kill_moments(duration: float, n: int, seed: int) -> list[float]:
    """``n`` seeded delays [s]: 0 (nothing started), one past the end (a generous one: a
    loaded machine can slow one run several times; the run is waited for, not slept
    through), the rest random."""
    rng = random.Random(seed)
    out = [0.0, max(duration * 3, 60.0)]
    for i in range(max(0, n - 2)):
        lo, hi = (0.85, 1.05) if i % 2 == 0 else (0.0, 1.1)
        out.append(rng.uniform(lo * duration, hi * duration))
    return out


# ----------------------------------------------------------------------------- store
@pytest.fixture(scope="module")
def store_states(tmp_path_factory):
    """The demo store before and after admitting the incoming soils, and the run time."""
    root = tmp_path_factory.mktemp("crash-store")
    base = copy_demo_store(root / "base")
    done = root / "done"
    shutil.copytree(base, done)
    duration = timed_run("admit", INCOMING, "--into", done)
    return {"base": base, "before": snapshot(base), "after": snapshot(done),
            "duration": duration, "root": root}


def test_killed_admit_leaves_the_store_before_or_after(store_states, tmp_path):
    before, after = store_states["before"], store_states["after"]
    assert set(after) > set(before)  # the batch adds a version and a quarantine file
    outcomes, recovered = [], 0
    for i, delay in enumerate(kill_moments(store_states["duration"], n_runs(4), SEED)):
        work = tmp_path / f"s{i}"
        shutil.copytree(store_states["base"], work)
        run_killed("admit", INCOMING, "--into", work, delay=delay)
        seen = snapshot(work)
        # a reader sees no temporary file, and every visible file is whole: its old or new
        # bytes (a committed admit may be half moved; the next command completes it)
        for name, data in visible(seen).items():
            assert data in (before.get(name), after.get(name)), (delay, name)
        leftovers = sorted(set(seen) - set(visible(seen)))
        # the next command recovers, says so, and is not blocked by a stale lock (--again:
        # when the killed admit had landed, the same file is already in the changelog)
        code, out = cli("admit", INCOMING, "--into", work, "--dry-run", "--again")
        assert code == 0, out
        assert "busy" not in out
        if leftovers:
            recovered += 1
            assert "Note: recovered an interrupted admit" in out, (leftovers, out)
        state = snapshot(work)
        assert state in (before, after), (delay, sorted(set(state) ^ set(before)))
        outcomes.append("before" if state == before else "after")
        code, out = cli("check", work / "records.csv")
        assert code == 0, out
        assert f"{sum(1 for _ in open(work / 'records.csv', encoding='utf-8')) - 1} rows" \
            in out
    assert outcomes[0] == "before" and outcomes[1] == "after"
    print(f"admit kills: {outcomes.count('before')} before, {outcomes.count('after')} "
          f"after, {recovered} recovered with a message")


def test_killed_first_admit_leaves_no_store_or_a_whole_one(store_states, tmp_path):
    """A first admit into a missing folder is staged beside it and renamed into place: a
    kill leaves no store folder at all or the whole new store; never a half one."""
    done = tmp_path / "reference"
    code, out = cli("admit", INCOMING, "--into", done)
    assert code == 0, out
    whole = {k: v for k, v in snapshot(done).items()}
    duration = store_states["duration"]
    outcomes = []
    for i, delay in enumerate(kill_moments(duration, n_runs(4), SEED + 1)):
        parent = tmp_path / f"p{i}"
        parent.mkdir()
        target = parent / "reference"  # same name: same manifest name
        run_killed("admit", INCOMING, "--into", target, delay=delay)
        if target.exists():
            seen = snapshot(target)
            manifest = json.loads(seen["manifest.json"])
            assert seen["records.csv"] == whole["records.csv"], delay
            assert manifest["version"] == 1 and manifest["row_count"] == \
                json.loads(whole["manifest.json"])["row_count"]
            outcomes.append("after")
        else:
            outcomes.append("before")
        # whatever the moment, the next admit works (a staging folder left by the kill is
        # beside the store, never inside it)
        code, out = cli("admit", INCOMING, "--into", target, "--dry-run", "--again")
        assert code == 0, out
    assert outcomes[0] == "before" and outcomes[1] == "after"
    print(f"first-admit kills: {outcomes.count('before')} no store, "
          f"{outcomes.count('after')} whole store")


def test_stale_staging_and_temporary_files_are_recovered_with_a_message(store_states,
                                                                       tmp_path):
    work = tmp_path / "s"
    shutil.copytree(store_states["base"], work)
    (work / ".pending-0123456789ab").mkdir()
    (work / ".pending-0123456789ab" / "records.csv").write_bytes(b"half a file")
    (work / ".tmp-records.csv.x1y2z3").write_bytes(b"profile_id,lat")
    (work / "quarantine" / ".tmp-0002-x.csv.abc").write_bytes(b"")
    code, out = cli("admit", INCOMING, "--into", work, "--dry-run")
    assert code == 0, out
    assert "Note: recovered an interrupted admit that had not been committed" in out
    assert "temporary file" in out
    assert snapshot(work) == store_states["before"]


# ----------------------------------------------------------------------------- registry
def normalised(snap: dict[str, bytes]) -> dict[str, bytes]:
    """Registry snapshot with the publication times blanked (they differ between runs)."""
    out = dict(snap)
    if "index.json" in out:
        index = json.loads(out["index.json"])
        for entries in index.get("functions", {}).values():
            for e in entries:
                e["published"] = ""
        out["index.json"] = json.dumps(index, sort_keys=True).encode()
    return out


@pytest.fixture(scope="module")
def registry_states(tmp_path_factory):
    """A registry with 1.0.0; the state after publishing the quadratic (2.0.0); run time."""
    root = tmp_path_factory.mktemp("crash-registry")
    fits = make_fits(root)
    base = publish_all(fits, root / "base", LINEAR)
    done = root / "done"
    shutil.copytree(base, done)
    duration = timed_run("publish", fits / QUADRATIC, "--to", done)
    assert (done / "map_from_bk_depth" / "2.0.0.json").is_file()
    return {"base": base, "fits": fits, "before": normalised(snapshot(base)),
            "after": normalised(snapshot(done)), "duration": duration}


def copy_registry(src: Path, dest: Path) -> Path:
    shutil.copytree(src, dest)
    for p in dest.rglob("*.json"):
        p.chmod(0o444) if p.parent != dest else None
    return dest


def test_killed_publish_leaves_the_registry_before_or_after(registry_states, tmp_path):
    before, after = registry_states["before"], registry_states["after"]
    outcomes = []
    moments = kill_moments(registry_states["duration"], n_runs(6), SEED + 1)
    for i, delay in enumerate(moments):
        work = copy_registry(registry_states["base"], tmp_path / f"r{i}")
        run_killed("publish", registry_states["fits"] / QUADRATIC, "--to", work, delay=delay)
        seen = snapshot(work)
        assert all(not n.startswith(".tmp-") for n in visible(seen)), seen.keys()
        code, out = cli("verify", work)  # the next command: recovers, then verifies
        assert code == 0, (delay, out)
        if set(seen) - set(visible(seen)):
            assert "Note: recovered" in out, (sorted(seen), out)
        state = normalised(snapshot(work))
        assert state in (before, after), (delay, sorted(set(state) ^ set(after)))
        outcomes.append("before" if state == before else "after")
    assert outcomes[0] == "before" and outcomes[1] == "after"
    print(f"publish kills: {outcomes.count('before')} before, {outcomes.count('after')} after")


DIE_BEFORE_INDEX = """
import os, sys
import refit.publish.registry_commit as commit
import refit.publish.registry as registry
commit.write_index = lambda reg: os._exit(9)   # the process dies before the index lands
registry.publish(sys.argv[1], sys.argv[2])
"""


def test_publish_killed_between_file_and_index_is_completed(registry_states, tmp_path):
    # the worst moment: the new file is on disk, the index does not list it yet
    work = copy_registry(registry_states["base"], tmp_path / "r")
    proc = subprocess.run([sys.executable, "-c", DIE_BEFORE_INDEX,
                           str(registry_states["fits"] / QUADRATIC), str(work)],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 9, proc.stderr
    assert (work / "map_from_bk_depth" / "2.0.0.json").is_file()
    code, out = cli("verify", work)
    assert code == 0, out
    assert "Note: recovered an interrupted publish of map_from_bk_depth 2.0.0" in out
    assert normalised(snapshot(work)) == registry_states["after"]
    # and a second publish of the same candidate is refused: nothing new to add
    code, out = cli("publish", registry_states["fits"] / QUADRATIC, "--to", work)
    assert code == 1 and "nothing to publish" in out, out


# ----------------------------------------------------------------------------- signed
@pytest.fixture(scope="module")
def signed_states(tmp_path_factory):
    """A signed registry with 1.0.0; the state after a signed publish of 2.0.0; run time.
    Ed25519 signatures are deterministic (RFC 8032), so 'after' is one state."""
    from refit.publish.registry import publish
    from refit.publish.signing import new_key_pair

    root = tmp_path_factory.mktemp("crash-signed")
    fits = make_fits(root)
    key, pub, _ = new_key_pair(root / "lab.key")
    base = root / "base"
    publish(fits / LINEAR, base, create=True, sign=key)
    done = root / "done"
    shutil.copytree(base, done)
    duration = timed_run("publish", fits / QUADRATIC, "--to", done, "--sign", key)
    assert (done / "map_from_bk_depth" / "2.0.0.json.sig").is_file()
    return {"base": base, "fits": fits, "key": key, "pub": pub,
            "before": normalised(snapshot(base)), "after": normalised(snapshot(done)),
            "duration": duration}


def test_killed_signed_publish_leaves_the_registry_before_or_after(signed_states, tmp_path):
    s = signed_states
    outcomes = []
    for i, delay in enumerate(kill_moments(s["duration"], n_runs(4), SEED + 2)):
        work = copy_registry(s["base"], tmp_path / f"r{i}")
        run_killed("publish", s["fits"] / QUADRATIC, "--to", work, "--sign", s["key"],
                   delay=delay)
        code, out = cli("verify", work, "--trust", s["pub"])  # recovers, then verifies
        assert code == 0, (delay, out)
        state = normalised(snapshot(work))
        assert state in (s["before"], s["after"]), (delay, sorted(set(state) ^
                                                                  set(s["after"])))
        outcomes.append("before" if state == s["before"] else "after")
    assert outcomes[0] == "before" and outcomes[1] == "after"
    print(f"signed publish kills: {outcomes.count('before')} before, "
          f"{outcomes.count('after')} after")


DIE_AFTER_SIGNATURE = """
import os, sys
import refit.publish.registry_commit as commit
import refit.publish.registry as registry
real = commit.write_text_atomic
def write(path, text):
    real(path, text)
    if str(path).endswith(".sig"):
        os._exit(9)                  # the signature landed, its file did not
commit.write_text_atomic = write
registry.publish(sys.argv[1], sys.argv[2], sign=sys.argv[3])
"""


def test_signed_publish_killed_between_signature_and_file_is_undone(signed_states,
                                                                    tmp_path):
    s = signed_states
    work = copy_registry(s["base"], tmp_path / "r")
    proc = subprocess.run([sys.executable, "-c", DIE_AFTER_SIGNATURE,
                           str(s["fits"] / QUADRATIC), str(work), str(s["key"])],
                          capture_output=True, text=True, timeout=120)
    assert proc.returncode == 9, proc.stderr
    assert (work / "map_from_bk_depth" / "2.0.0.json.sig").is_file()
    code, out = cli("verify", work, "--trust", s["pub"])
    assert code == 0, out
    assert "its file had not landed, so it was undone" in out
    assert normalised(snapshot(work)) == s["before"]
