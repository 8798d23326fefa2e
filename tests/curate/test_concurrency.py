"""Concurrency: real processes admitting into one store at once never lose or duplicate a row.

Three `refit admit` processes are released at the same moment (each waits on its stdin
after importing): two halves of the demo's incoming table and the first half again. Each
process either lands (exit 0) or is refused with the 'busy' message (exit 1, nothing
written); no other outcome is allowed. The oracle is the accounting each process prints
(--format json) and the store before: final records = before + the accepted rows of the
processes that landed, every accepted profile exactly once, one version per landed admit.
"""

from __future__ import annotations

import json
import shutil

import pandas as pd
import pytest

from _harness import n_runs, run, start
from refit._util.resources import demo_dir
from refit.curate.store import open_store


def halves(tmp_path):
    """The demo's incoming table split in two (title row and header kept in both)."""
    lines = (demo_dir() / "incoming_soils.csv").read_text(encoding="utf-8-sig").splitlines()
    head, rows = lines[:2], [ln for ln in lines[2:] if ln.strip()]
    cut = len(rows) // 2
    a, b = tmp_path / "part_a.csv", tmp_path / "part_b.csv"
    a.write_text("\n".join(head + rows[:cut]) + "\n", encoding="utf-8")
    b.write_text("\n".join(head + rows[cut:]) + "\n", encoding="utf-8")
    return a, b, len(rows[:cut]), len(rows[cut:])


@pytest.mark.parametrize("round_", range(n_runs(1, 5)))
def test_simultaneous_admits_lose_and_duplicate_nothing(tmp_path, round_):
    store = tmp_path / "store"
    shutil.copytree(demo_dir() / "store", store)
    before = open_store(store)
    n_before, v_before = len(before.records_text), before.version
    a, b, n_a, n_b = halves(tmp_path)
    a2 = tmp_path / "part_a2.csv"  # the same rows in another file (a re-admit of the same
    a2.write_bytes(a.read_bytes() + b"\n")  # bytes stops unless --again)
    tables = [a, b, a2]
    procs = [start("admit", t, "--into", store, "--format", "json", gate=True)
             for t in tables]
    for p in procs:           # release all three together
        p.stdin.write("go\n")
        p.stdin.flush()
    results = []
    for p in procs:
        out, err = p.communicate(timeout=120)
        results.append((p.returncode, out, err))
    landed = []
    for (code, out, err), table in zip(results, tables):
        if code == 0:
            landed.append(json.loads(out))
        else:   # the only allowed failure: busy, with the message naming the lock
            assert code == 1 and "is busy" in err and "Traceback" not in err, (code, err)
    assert landed, results
    after = open_store(store)
    records = after.records_text
    # nothing lost: before's rows are still the first rows, unchanged
    pd.testing.assert_frame_equal(records.iloc[:n_before][list(before.records_text.columns)]
                                  .reset_index(drop=True), before.records_text)
    # every landed admit read all its rows and accounted for them
    for r in landed:
        assert r["rows_read"] == r["accepted"] + r["rejected"] + r["suspect"]
        assert r["rows_read"] in (n_a, n_b)
    accepted = sum(r["accepted"] for r in landed)
    assert len(records) == n_before + accepted
    versions = [r for r in landed if r["new_version"]]  # an admit accepting nothing: none
    assert after.version == v_before + len(versions)
    assert [e["version"] for e in after.manifest["changelog"] if e.get("kind") != "attempt"][
        -len(versions):] == sorted(r["version_after"] for r in versions)
    # nothing duplicated: each profile id once; the repeated half adds no row twice
    assert not records["profile_id"].duplicated().any()
    if len(landed) == 3:
        second_a = [r for r in landed if "part_a" in r["table"] and not r["new_version"]]
        assert len(second_a) == 1 and second_a[0]["accepted"] == 0


@pytest.mark.parametrize("round_", range(n_runs(2, 20)))
def test_simultaneous_first_admits_into_a_new_folder(tmp_path, round_):
    """Three first admits race into a folder that does not exist yet (nor its parent).

    Each stages a whole store in a sibling folder and renames it into place; the losers of
    the rename admit into the winner's store under its lock. Before the staging, a failing
    admit's cleanup removed the new folder under the others ("unexpected FileNotFoundError
    ... .lock"). Oracle: each process's own accounting and the final store.
    """
    store = tmp_path / "new" / "store"
    a, b, n_a, n_b = halves(tmp_path)
    bad = tmp_path / "bad.csv"  # fails (no source column): must not disturb the others
    bad.write_text("profile_id,latitude,longitude,map_mm\nX1,1,2,300\n", encoding="utf-8")
    tables = [a, b, bad]
    procs = [start("admit", t, "--into", store, "--format", "json", gate=True)
             for t in tables]
    for p in procs:
        p.stdin.write("go\n")
        p.stdin.flush()
    results = [p.communicate(timeout=120) + (p.returncode,) for p in procs]
    landed = []
    for (out, err, code), table in zip(results, tables):
        assert "unexpected" not in err and "Traceback" not in err, err
        if table == bad:
            assert code == 1 and "cannot be admitted" in err, (code, err)
        elif code == 0:
            landed.append(json.loads(out))
        else:
            assert code == 1 and "is busy" in err, (code, err)
    assert landed
    after = open_store(store)
    assert len(after.records_text) == sum(r["accepted"] for r in landed)
    assert after.version == sum(1 for r in landed if r["new_version"])
    assert not after.records_text["profile_id"].duplicated().any()
    assert all(r["store"] == str(store) for r in landed)
    # no staging folder is left beside the store
    assert sorted(p.name for p in store.parent.iterdir()) == ["store"]


HOLDER = """
import sys, time
from filelock import FileLock
lock = FileLock(sys.argv[1], timeout=5)
lock.acquire()
print("locked", flush=True)
time.sleep(600)
"""


def _aged_stage(parent, name, tmp_path):
    """A staging folder as a first admit leaves it, its lock held by a real process
    (flock, released by the operating system when the process dies), made older than
    the grace period."""
    import os
    import subprocess
    import sys
    import time

    from refit.curate.store_commit import STAGING_GRACE_S

    stage = parent / f".store.creating-{name}"
    stage.mkdir(parents=True)
    (stage / "records.csv").write_text("half,written\n", encoding="utf-8")
    proc = subprocess.Popen([sys.executable, "-c", HOLDER, str(stage / ".lock")],
                            stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "locked"
    old = time.time() - STAGING_GRACE_S - 5
    os.utime(stage, (old, old))
    return stage, proc


def test_a_killed_first_admits_staging_folder_is_swept_at_once_a_live_ones_kept(tmp_path):
    # before: a killed first admit's staging folder stayed for 10 minutes; now a sweep
    # removes it as soon as nobody holds its lock, and never one whose admit still runs
    import signal

    from refit.curate.store_commit import _sweep_stale_creations

    parent = tmp_path / "new"
    dead, p_dead = _aged_stage(parent, "dead00000000", tmp_path)
    live, p_live = _aged_stage(parent, "live00000000", tmp_path)
    try:
        p_dead.send_signal(signal.SIGKILL)
        p_dead.wait(timeout=30)
        _sweep_stale_creations(parent / "store")
        assert not dead.exists()
        assert live.is_dir() and (live / "records.csv").is_file()
    finally:
        p_live.kill()
        p_live.wait(timeout=30)
    # a first admit sweeps it too once its process is gone, and lands
    dead2, p_dead2 = _aged_stage(parent, "dead11111111", tmp_path)
    p_dead2.kill()
    p_dead2.wait(timeout=30)
    a, _b, n_a, _n_b = halves(tmp_path)
    code, out, err = run("admit", a, "--into", parent / "store", "--format", "json")
    assert code == 0, err
    assert json.loads(out)["accepted"] > 0
    assert sorted(p.name for p in parent.iterdir()) == ["store"]
