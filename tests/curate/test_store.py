"""The calibration store (refit.curate.store): admit, duplicates, quarantine, versions, atomicity.

What is checked against what: the accounting identity rows read = accepted + rejected and
"nothing lost" (every rejected row byte-for-byte in quarantine) as properties over random
tables (hypothesis); file hashes against hashlib; the store before/after an interrupted
admit against snapshots of a store that was never interrupted.
"""

from __future__ import annotations

import csv
import hashlib
import json
import os
import random
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from refit.errors import InvalidDataError, StoreBusyError, UsageError
from refit.curate.store import admit, open_store

HEADER = ["profile_id", "latitude", "longitude", "source", "map_mm", "bk_depth_cm",
          "bk_thickness_cm", "vegetation"]
DAY = "2025-03-01"


def row(pid, lat, lon, src="SRC-A", map_mm=None, depth="50", thick="30", veg="grassland"):
    if map_mm is None:  # distinct per id, so rows are not duplicate measurements
        map_mm = str(200 + 7 * sum(map(ord, pid)) % 1000)
    return [pid, str(lat), str(lon), src, map_mm, depth, thick, veg]


BASE = [row("B-1", -40.0, 52.0, map_mm="400"), row("B-2", -40.1, 52.1, map_mm="500", depth="60"),
        row("B-3", -40.2, 52.2, map_mm="600", depth="70")]


def write_csv(path: Path, rows, header=HEADER, delim=",", before=()) -> Path:
    with open(path, "w", encoding="utf-8", newline="") as fh:
        for line in before:
            fh.write(line + "\n")
        writer = csv.writer(fh, delimiter=delim, lineterminator="\n")
        writer.writerow(header)
        writer.writerows(rows)
    return path


def snapshot(store: Path) -> dict[str, bytes]:
    """Every file of a store except its lock file, by relative path."""
    if not store.exists():
        return {}
    return {str(p.relative_to(store)): p.read_bytes() for p in sorted(store.rglob("*"))
            if p.is_file() and p.name != ".lock"}


def read_rows(path: Path) -> list[list[str]]:
    with open(path, encoding="utf-8", newline="") as fh:
        return list(csv.reader(fh))


@pytest.fixture
def base_store(tmp_path):
    store = tmp_path / "soils"
    admit(write_csv(tmp_path / "base.csv", BASE), store, today=DAY)
    return store


def test_admit_creates_a_store(tmp_path):
    table = write_csv(tmp_path / "base.csv", BASE)
    result = admit(table, tmp_path / "soils", today=DAY)
    assert result.created and result.version_after == 1
    assert (result.rows_read, result.accepted, result.rejected) == (3, 3, 0)
    store = open_store(tmp_path / "soils")
    assert store.name == "soils" and store.version == 1
    assert store.records["profile_id"].tolist() == ["B-1", "B-2", "B-3"]
    assert store.records["map_mm"].tolist() == [400.0, 500.0, 600.0]
    assert store.records["added_on"].tolist() == [DAY] * 3
    manifest = store.manifest
    records = (tmp_path / "soils" / "records.csv").read_bytes()
    assert manifest["records_sha256"] == hashlib.sha256(records).hexdigest()
    entry = manifest["changelog"][0]
    assert entry["source_sha256"] == hashlib.sha256(table.read_bytes()).hexdigest()
    assert (entry["rows_read"], entry["accepted"], entry["rejected"]) == (3, 3, 0)
    assert entry["source_file"] == "base.csv" and entry["date"] == DAY
    assert entry["row_count_after"] == 3 and entry["quarantine_file"] is None


def test_columns_are_canonical_and_extras_sorted(tmp_path, base_store):
    from refit.curate.units import canonical_columns

    header = HEADER + ["zeta", "alpha"]
    rows = [row("N-1", -41.0, 53.0) + ["z", "a"]]
    admit(write_csv(tmp_path / "new.csv", rows, header), base_store, today=DAY)
    columns = read_rows(base_store / "records.csv")[0]
    assert columns == canonical_columns() + ["alpha", "zeta"]


def test_versions_are_prefixes_and_rebuild_exactly(tmp_path, base_store):
    v1 = (base_store / "records.csv").read_bytes()
    rows = [row("N-1", -41.0, 53.0) + ["x"]]
    admit(write_csv(tmp_path / "new.csv", rows, HEADER + ["extra"]), base_store, today=DAY)
    store = open_store(base_store)
    assert store.version == 2 and len(store.records) == 4
    rebuilt = store.records_at(1)
    from refit.curate.store import records_bytes

    assert records_bytes(rebuilt) == v1  # same bytes as version 1 had
    assert store.records["profile_id"].tolist() == ["B-1", "B-2", "B-3", "N-1"]
    assert store.records["extra"].fillna("").tolist() == ["", "", "", "x"]


def test_rejected_rows_go_to_quarantine_unchanged(tmp_path, base_store):
    header = ["Profile ID", "Lat", "Long", "Source", "MAP (in)", "Depth to Bk (in)",
              "Bk thickness (in)", "Vegetation"]
    rows = [["N-1", "-41.0", "53.0", "SRC-B", "20", "10", "12", "grassland"],
            ["N-2", "-41.1", "53.1", "SRC-B", " about 19 ", "10", "12", "grassland"],
            ["N-3", "-95.5", "53.2", "SRC-B", "21", "10", "12", "grassland"],
            ["N-4", "-41.3", "53.3", "SRC-B", "22", "-3", "12", "alpine meadow"]]
    table = write_csv(tmp_path / "campaign.csv", rows, header, delim=";",
                      before=["Campaign 2025; inches"])
    result = admit(table, base_store, today=DAY)
    assert (result.rows_read, result.accepted, result.rejected) == (4, 1, 3)
    assert result.quarantine_file == "quarantine/0002-campaign.csv"
    quarantined = read_rows(base_store / result.quarantine_file)
    assert quarantined[0] == header + ["_reasons", "_source_row"]
    assert [r[:-2] for r in quarantined[1:]] == rows[1:]  # original text, original names
    assert [r[-1] for r in quarantined[1:]] == ["4", "5", "6"]  # title 1, header 2
    assert quarantined[1][-2].startswith("not-a-number (column 'MAP (in)'): 'about 19'")
    assert quarantined[2][-2].startswith("range (column 'Lat'): latitude -95.5")
    assert "range (column 'Depth to Bk (in)')" in quarantined[3][-2]
    assert "vocabulary (column 'Vegetation')" in quarantined[3][-2]
    problems = read_rows(base_store / result.problems_file)
    assert problems[0] == ["severity", "rule", "row", "profile_id", "column", "value",
                           "message", "file_column", "outcome"]
    assert {r[1] for r in problems[1:]} >= {"not-a-number", "range", "vocabulary"}
    store = open_store(base_store)
    assert store.records["profile_id"].tolist()[-1] == "N-1"
    assert store.records["map_mm"].iloc[-1] == pytest.approx(20 * 25.4)  # 1 in = 25.4 mm
    assert result.reasons == {"range": 2, "not-a-number": 1, "vocabulary": 1}


def test_duplicates_against_store_and_within_batch(tmp_path, base_store):
    rows = [
        row("B-2", -45.0, 55.0),                            # id already stored
        row("N-1", -40.0004, 52.0004),                     # same source, within 0.0005°
        row("N-2", -40.0006, 52.0),                        # 0.0006° away: another site
        row("N-3", -40.0, 52.0, src="SRC-B"),              # other source, same place
        row("N-4", -42.0, 54.0, map_mm="500", depth="60"),  # same measurements as B-2
        row("N-5", -43.0, 56.0, map_mm="900", depth="5"),
        row("N-6", -43.0002, 56.0002, map_mm="910", depth="6"),  # same site as N-5 (batch)
    ]
    result = admit(write_csv(tmp_path / "new.csv", rows), base_store, today=DAY)
    rejected = {r["profile_id"]: r["reasons"] for r in result.rejected_rows}
    assert set(rejected) == {"B-2", "N-1", "N-4", "N-6"}
    assert rejected["B-2"][0].startswith("duplicate-id (column 'profile_id'):")
    assert rejected["N-1"][0].startswith("duplicate-site (column 'latitude|longitude'):")
    assert "'B-1'" in rejected["N-1"][0]
    assert rejected["N-4"][0].startswith("duplicate-measurements (column 'map_mm|")
    assert "'B-2'" in rejected["N-4"][0]
    assert "'N-5'" in rejected["N-6"][0]
    assert result.accepted == 3


def test_site_tolerance_is_a_parameter(tmp_path, base_store):
    rows = [row("N-1", -40.003, 52.0, map_mm="999")]
    table = write_csv(tmp_path / "new.csv", rows)
    assert admit(table, base_store, dry_run=True, today=DAY).rejected == 0
    assert admit(table, base_store, dry_run=True, today=DAY, tolerance_deg=0.005).rejected == 1


# --- same site across the antimeridian ------------------------------------------------------
# reference: the angular difference of two longitudes, min(|d|, 360 - |d|) with d = a - b
# (common practice for longitudes); 179.9995 and -179.9995 are 0.001 degree apart.

@pytest.mark.parametrize("a, b, gap", [
    (179.9995, -179.9995, 0.001), (-179.9995, 179.9995, 0.001), (10.0, 20.0, 10.0),
    (-170.0, 170.0, 20.0), (0.0, 180.0, 180.0), (180.0, -180.0, 0.0), (52.0, 52.0004, 0.0004),
])
def test_longitude_gap_is_the_angular_difference(a, b, gap):
    from refit.curate.duplicates import longitude_gap

    assert longitude_gap(a, b) == pytest.approx(gap, abs=1e-9)


def sites(*rows):
    import pandas as pd

    return pd.DataFrame([{"profile_id": p, "latitude": float(lat), "longitude": float(lon),
                          "source": src} for p, lat, lon, src in rows])


@pytest.mark.parametrize("stored_lon, new_lon, tol, same", [
    (179.9999, -179.9999, 0.0005, True),    # 0.0002 apart across the antimeridian
    (-179.9999, 179.9999, 0.0005, True),
    (179.9995, -179.9995, 0.002, True),     # 0.001 apart, within a 0.002 tolerance
    (179.9995, -179.9995, 0.0005, False),   # 0.001 apart: more than 0.0005
    (180.0, -180.0, 0.0005, True),          # one meridian, written two ways
    (52.0, 52.0004, 0.0005, True),          # a plain case, far from the antimeridian
    (52.0, 52.0006, 0.0005, False),
    (179.9999, 179.9999 - 360.0 + 0.01, 0.0005, False),  # 0.01 apart
])
def test_same_site_across_the_antimeridian(stored_lon, new_lon, tol, same):
    from refit.curate.duplicates import find_duplicates

    stored = sites(("S-1", -17.0, stored_lon, "SRC-A"))
    batch = sites(("N-1", -17.0002, new_lon, "SRC-A"), ("N-2", -17.0, new_lon, "SRC-B"))
    found = find_duplicates(batch, stored, np.zeros(2, bool), tolerance_deg=tol)
    assert [(d["pos"], d["rule"]) for d in found] == ([(0, "duplicate-site")] if same else [])
    if same:
        assert "profile 'S-1'" in found[0]["message"]


def test_grid_lookup_equals_the_pairwise_scan_near_the_antimeridian():
    # fast (grid cells) against naive (every pair, angular difference); seeded sites
    # clustered within a few tolerances of +-180 and of 0 degrees
    from refit.curate.duplicates import find_duplicates

    rng = np.random.default_rng(20261202)
    tol = 0.0005
    n = 300
    lon = rng.choice([180.0, -180.0, 0.0], n) + rng.uniform(-1.5 * tol, 1.5 * tol, n)
    lon = np.where(lon > 180, lon - 360, np.where(lon < -180, lon + 360, lon))
    lat = rng.uniform(-30 * tol, 30 * tol, n)
    src = rng.choice(["A", "B"], n)
    stored = sites(*[(f"S-{i}", lat[i], lon[i], src[i]) for i in range(0, n, 2)])
    batch = sites(*[(f"N-{i}", lat[i], lon[i], src[i]) for i in range(1, n, 2)])
    found = {d["pos"] for d in find_duplicates(batch, stored, np.zeros(len(batch), bool), tol)
             if d["rule"] == "duplicate-site"}
    # naive: a batch row duplicates a stored row or an earlier batch row that was kept
    kept = list(stored.itertuples(index=False))
    expected = set()
    for pos, r in enumerate(batch.itertuples(index=False)):
        def near(o):
            d = abs(r.longitude - o.longitude) % 360
            return (o.source == r.source and abs(r.latitude - o.latitude) <= tol
                    and min(d, 360 - d) <= tol)
        if any(near(o) for o in kept):
            expected.add(pos)
        else:
            kept.append(r)
    assert found == expected
    # both outcomes occur, and 11 of the duplicates are only found across +-180 (the
    # grid without the wrap-around finds 88 of these 99)
    assert len(expected) == 99 and len(batch) == 150


def test_admit_catches_a_site_written_on_the_other_side(tmp_path, base_store):
    rows = [row("E-1", -17.0, 179.9999, map_mm="810")]
    admit(write_csv(tmp_path / "east.csv", rows), base_store, today=DAY)
    rows = [row("W-1", -17.0, -179.9999, map_mm="820")]
    result = admit(write_csv(tmp_path / "west.csv", rows), base_store, today=DAY)
    assert (result.accepted, result.rejected) == (0, 1)
    reasons = result.rejected_rows[0]["reasons"]
    assert reasons[0].startswith("duplicate-site (column 'latitude|longitude'):")
    assert "'E-1'" in reasons[0]


@pytest.mark.parametrize("header, rows, expected", [
    (["profile_id", "map_mm"], [["X", "1"]], ["latitude", "longitude", "source"]),
    (["profile_id", "latitude", "longitude", "source", "bk_depth_cm"],
     [["X", "1", "1", "s", "1"]], ["map_mm"]),
    (HEADER[:4] + ["bk_depth_kg"], [["X", "1", "1", "s", "1"]], ["bk_depth_kg", "kg"]),
])
def test_table_level_errors_refuse_everything(tmp_path, base_store, header, rows, expected):
    before = snapshot(base_store)
    with pytest.raises(InvalidDataError) as err:
        admit(write_csv(tmp_path / "bad.csv", rows, header), base_store, today=DAY)
    for word in expected:  # all missing columns listed at once
        assert word in str(err.value)
    assert snapshot(base_store) == before


def test_batch_with_nothing_accepted_is_recorded_without_a_new_version(tmp_path, base_store):
    records = (base_store / "records.csv").read_bytes()
    result = admit(write_csv(tmp_path / "bad.csv", [row("B-1", 1, 1)]), base_store, today=DAY)
    assert (result.accepted, result.rejected, result.version_after) == (0, 1, 1)
    assert not result.new_version
    assert (base_store / "records.csv").read_bytes() == records
    store = open_store(base_store)
    entry = store.manifest["changelog"][-1]
    assert store.version == 1 and entry["kind"] == "attempt" and entry["rejected"] == 1
    assert entry["version"] == 1 and entry["records_sha256"] == store.manifest["records_sha256"]
    assert (base_store / entry["quarantine_file"]).is_file()
    assert store.records_at(1).shape[0] == len(store.records_text)  # version 1 unchanged


def test_same_file_twice_stops_unless_again(tmp_path, base_store):
    from refit.curate.store import AlreadyAdmittedError

    table = write_csv(tmp_path / "new.csv", [row("N-1", -41, 53)])
    admit(table, base_store, today=DAY)
    before = snapshot(base_store)
    with pytest.raises(AlreadyAdmittedError, match="version 2.*--again"):
        admit(table, base_store, today=DAY)
    assert snapshot(base_store) == before  # nothing written
    again = admit(table, base_store, today=DAY, again=True)
    assert again.accepted == 0 and again.reasons["duplicate-id"] == 1


def test_dry_run_writes_nothing(tmp_path, base_store):
    before = snapshot(base_store)
    table = write_csv(tmp_path / "new.csv", [row("N-1", -41, 53), row("B-1", -42, 54)])
    result = admit(table, base_store, dry_run=True, today=DAY)
    assert (result.accepted, result.rejected, result.version_after) == (1, 1, 1)
    assert snapshot(base_store) == before
    fresh = tmp_path / "not-yet"
    assert admit(table, fresh, dry_run=True).created and not fresh.exists()


def test_folder_that_is_not_a_store_is_refused(tmp_path):
    folder = tmp_path / "papers"
    folder.mkdir()
    (folder / "thesis.docx").write_text("x")
    with pytest.raises(UsageError, match="not a refit store") as err:
        admit(write_csv(tmp_path / "t.csv", BASE), folder)
    assert err.value.exit_code == 2
    empty = tmp_path / "empty"
    empty.mkdir()
    assert admit(write_csv(tmp_path / "t.csv", BASE), empty, today=DAY).created


def test_edited_records_are_refused(base_store, tmp_path):
    with open(base_store / "records.csv", "a", encoding="utf-8") as fh:
        fh.write("HAND-1,1,1,x,100" + "," * 27 + "\n")
    with pytest.raises(InvalidDataError, match="edited outside refit") as err:
        open_store(base_store)
    assert err.value.exit_code == 1
    with pytest.raises(InvalidDataError, match="edited outside refit"):
        admit(write_csv(tmp_path / "t.csv", [row("N-1", 1, 1)]), base_store)


def test_store_vocabulary_extension(tmp_path, base_store):
    table = write_csv(tmp_path / "t.csv", [row("N-1", -41, 53, veg="alpine meadow")])
    assert admit(table, base_store, dry_run=True).rejected == 1
    extra = tmp_path / "vocab.json"
    extra.write_text(json.dumps({"vegetation": ["alpine meadow"]}))
    assert admit(table, base_store, dry_run=True, vocab_files=[extra]).rejected == 0
    (base_store / "vocabularies.json").write_text(extra.read_text())
    assert admit(table, base_store, dry_run=True).rejected == 0


def test_requeued_quarantine_file_is_admitted_without_its_extra_columns(tmp_path,
                                                                        base_store):
    result = admit(write_csv(tmp_path / "t.csv", [row("N-1", -41, 53, map_mm="x")]),
                   base_store, today=DAY)
    quarantine = base_store / result.quarantine_file
    rows = read_rows(quarantine)
    rows[1][HEADER.index("map_mm")] = "450"
    fixed = write_csv(tmp_path / "fixed.csv", rows[1:], rows[0])
    again = admit(fixed, base_store, today=DAY)
    assert again.accepted == 1
    assert "_reasons" not in open_store(base_store).records.columns


# --- recovery, lock and interruption ---------------------------------------------------

def test_recovery_rolls_back_an_uncommitted_stage(base_store):
    before = snapshot(base_store)
    stage = base_store / ".pending-test"
    stage.mkdir()
    (stage / "records.csv").write_text("half written")
    store = open_store(base_store)
    assert "undone" in store.recovered[0]
    assert not stage.exists() and snapshot(base_store) == before


def test_recovery_rolls_forward_a_committed_stage(tmp_path, base_store):
    done = tmp_path / "done"
    shutil.copytree(base_store, done)
    admit(write_csv(tmp_path / "n.csv", [row("N-1", -41, 53, map_mm="x"),
                                        row("N-2", -42, 54)]), done, today=DAY)
    after = snapshot(done)
    stage = base_store / ".pending-test"
    for rel in ("records.csv", "manifest.json", "quarantine/0002-n.csv",
                "quarantine/0002-n.problems.csv"):
        (stage / rel).parent.mkdir(parents=True, exist_ok=True)
        (stage / rel).write_bytes(after[rel])
    (stage / "COMMIT").write_text(json.dumps({
        "version": 2, "source_file": "n.csv",
        "files": ["quarantine/0002-n.csv", "quarantine/0002-n.problems.csv",
                  "records.csv", "manifest.json"]}))
    os.replace(stage / "quarantine" / "0002-n.csv", base_store / "quarantine" / "0002-n.csv")
    store = open_store(base_store)  # killed after the first move: finish the rest
    assert "completed (version 2)" in store.recovered[0]
    assert snapshot(base_store) == after and store.version == 2


HOLD_LOCK = """
import sys, time
from filelock import FileLock
lock = FileLock(sys.argv[1]); lock.acquire(); print("held", flush=True); time.sleep(60)
"""


def test_second_writer_is_refused_while_the_store_is_locked(tmp_path, base_store):
    holder = subprocess.Popen([sys.executable, "-c", HOLD_LOCK, str(base_store / ".lock")],
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        before = snapshot(base_store)
        table = write_csv(tmp_path / "t.csv", [row("N-1", -41, 53)])
        with pytest.raises(StoreBusyError, match="busy") as err:
            admit(table, base_store, lock_timeout=0.2)
        assert err.value.exit_code == 1 and snapshot(base_store) == before
    finally:
        holder.kill()
        holder.wait()
    assert admit(table, base_store, today=DAY).accepted == 1  # free again


KILLABLE = """
import os, sys, time
import refit.curate.store as store
import refit.curate.store_commit as commit
import refit.curate.checks, refit.curate.tables, refit.curate.units  # noqa: F401  (imports before the clock starts)
delay, crash_at = float(sys.argv[3]), int(sys.argv[4])
real_replace, real_write = os.replace, commit.write_bytes_atomic
calls = [0]
def slow_replace(a, b):
    calls[0] += 1
    if calls[0] == crash_at:
        os._exit(9)
    time.sleep(delay)
    real_replace(a, b)
def slow_write(path, data):
    time.sleep(delay)
    real_write(path, data)
commit.os.replace = slow_replace
commit.write_bytes_atomic = slow_write
print("go", flush=True)
store.admit(sys.argv[1], sys.argv[2], today="2025-03-01")
"""


def _interrupted_admit(tmp_path, base_store, tag, delay, crash_at, kill_after):
    work = tmp_path / f"store-{tag}"
    shutil.copytree(base_store, work)
    proc = subprocess.Popen([sys.executable, "-c", KILLABLE, str(tmp_path / "n.csv"),
                             str(work), str(delay), str(crash_at)],
                            stdout=subprocess.PIPE, text=True)
    assert proc.stdout.readline().strip() == "go"
    if kill_after is not None:
        time.sleep(kill_after)
        proc.send_signal(signal.SIGKILL)
    proc.wait(timeout=60)
    return work


def test_interrupted_admit_leaves_store_before_or_after(tmp_path, base_store):
    table = write_csv(tmp_path / "n.csv", [row("N-1", -41, 53), row("B-1", -42, 54)])
    before = snapshot(base_store)
    done = tmp_path / "done"
    shutil.copytree(base_store, done)
    admit(table, done, today=DAY)
    after = snapshot(done)
    assert after != before
    rng = random.Random(20250301)  # seeded kill moments
    cases = [(f"kill{i}", 0.05, 0, rng.uniform(0.0, 1.0)) for i in range(6)]
    # os.replace calls: 4 staged files, the COMMIT marker (5th), then 4 moves into place;
    # die at each of them
    cases += [(f"crash{k}", 0.0, k, None) for k in range(1, 10)]
    outcomes = set()
    for tag, delay, crash_at, kill_after in cases:
        work = _interrupted_admit(tmp_path, base_store, tag, delay, crash_at, kill_after)
        visible = {k: v for k, v in snapshot(work).items() if not k.startswith(".pending")}
        committed = any((p / "COMMIT").exists() for p in work.glob(".pending-*"))
        if not committed:  # without a commit marker nothing visible may have changed
            assert visible in (before, after), tag
        store = open_store(work)  # recovery
        state = snapshot(work)
        assert state in (before, after), tag
        assert not list(work.glob(".pending-*")) and not list(work.rglob(".tmp-*")), tag
        assert store.version == (1 if state == before else 2)
        outcomes.add("before" if state == before else "after")
    assert outcomes == {"before", "after"}  # the cases reach both sides of the commit


# --- the accounting as a property over random tables ------------------------------------

GOOD = {"latitude": ["-40.5", "12", "0"], "longitude": ["52.25", "-3", "179.9"],
        "source": ["SRC-A", "SRC-B"], "map_mm": ["300", "1200.5", ""],
        "bk_depth_cm": ["", "50"], "bk_thickness_cm": ["30", "12.5"],
        "vegetation": ["grassland", "savanna", ""]}
BAD = ["abc", "", "nan", "inf", "-5", "1e9", "12,5", " 7 ", "NaN", "-inf", "∞", "grassland"]


@st.composite
def tables(draw):
    columns = draw(st.lists(st.sampled_from(HEADER), min_size=1, max_size=len(HEADER),
                            unique=True))
    if draw(st.booleans()):
        columns = [c for c in HEADER if c in columns or c in ("profile_id", "latitude",
                                                               "longitude", "source",
                                                               "map_mm")]
    n = draw(st.integers(1, 12))
    rows = []
    for _ in range(n):
        cells = []
        for col in columns:
            if col == "profile_id":
                cells.append(draw(st.sampled_from(["B-1", "P-1", "P-2", "", "P-3"]))
                             if draw(st.integers(0, 3)) == 0 else f"R-{len(rows)}")
            elif draw(st.integers(0, 4)) == 0:
                cells.append(draw(st.sampled_from(BAD)))
            else:
                cells.append(draw(st.sampled_from(GOOD[col])))
        rows.append(cells)
    return columns, rows, draw(st.sampled_from([",", ";", "\t"]))


@settings(max_examples=25)
@given(tables())
def test_accounting_property(base_rows):
    columns, rows, delim = base_rows
    with tempfile.TemporaryDirectory() as tmp:
        tmp = Path(tmp)
        store = tmp / "s"
        admit(write_csv(tmp / "base.csv", BASE), store, today=DAY)
        table = write_csv(tmp / "in.csv", rows, columns, delim=delim)
        before = snapshot(store)
        try:
            dry = admit(table, store, dry_run=True, today=DAY)
        except InvalidDataError:
            with pytest.raises(InvalidDataError):
                admit(table, store, today=DAY)
            assert snapshot(store) == before  # a refused admit changes nothing
            return
        assert snapshot(store) == before  # a dry run changes nothing
        result = admit(table, store, today=DAY)
        nonblank = [r for r in rows if any(c.strip() for c in r)]
        assert result.rows_read == len(nonblank) == result.accepted + result.rejected
        assert (dry.accepted, dry.rejected) == (result.accepted, result.rejected)
        opened = open_store(store)
        assert len(opened.records) == 3 + result.accepted
        if result.rejected:
            quarantined = read_rows(store / result.quarantine_file)
            assert quarantined[0] == columns + ["_reasons", "_source_row"]
            assert len(quarantined) - 1 == result.rejected
            for q in quarantined[1:]:
                assert q[:-2] == rows[int(q[-1]) - 2]  # unchanged, at its file row
                assert q[-2]  # with its reasons
        else:
            assert result.quarantine_file is None


def test_read_only_store_opens_without_its_lock(base_store, monkeypatch):
    import refit.curate.store as store_module

    def refuse(self):
        raise PermissionError(13, "Permission denied", str(base_store / ".lock"))

    monkeypatch.setattr(store_module._locked, "__enter__", refuse)
    assert open_store(base_store).version == 1
    (base_store / ".pending-x").mkdir()
    with pytest.raises(InvalidDataError, match="read-only"):
        open_store(base_store)


def test_failed_first_admit_leaves_no_folder(tmp_path):
    table = write_csv(tmp_path / "t.csv", [["X", "1"]], ["profile_id", "bk_depth_cm"])
    with pytest.raises(InvalidDataError):
        admit(table, tmp_path / "new")
    assert not (tmp_path / "new").exists()
