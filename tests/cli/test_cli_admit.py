"""`refit admit` end to end through click's test runner: exit code first, then the store.

Every bad-input case of the calibration-table issue gets its exit code (0 success,
1 invalid data, 2 unreadable input or usage) and a message naming the file, row and column.
Expected values come from the input files in tests/data and from exact unit definitions
(NIST SP 811: 1 in = 25.4 mm; t/°C = (t/°F - 32) x 5/9).
"""

from __future__ import annotations

import json
import shutil
import subprocess
import sys
from pathlib import Path

import pandas as pd
import pytest
from click.testing import CliRunner

from refit.cli import main
from refit.curate.store import open_store

DATA = Path(__file__).resolve().parents[1] / "data"


def run(*args):
    return CliRunner().invoke(main, ["admit", *map(str, args)])


@pytest.fixture
def store(tmp_path):
    path = tmp_path / "soils"
    result = run(DATA / "admit_base.csv", "--into", path)
    assert result.exit_code == 0, result.output
    return path


def files_of(store: Path) -> dict[str, bytes]:
    return {str(p.relative_to(store)): p.read_bytes() for p in store.rglob("*")
            if p.is_file() and p.name != ".lock"}


def test_first_admit_creates_the_store_and_says_so(tmp_path):
    path = tmp_path / "new_store"
    result = run(DATA / "admit_base.csv", "--into", path)
    assert result.exit_code == 0
    assert f"created the store 'new_store' in {path}" in result.output
    assert "Rows read 4 = accepted 4 + rejected 0 + suspect 0." in result.output
    opened = open_store(path)
    assert opened.version == 1
    assert opened.records["map_mm"].tolist() == [250.0, 410.0, 560.0, 700.0]


def test_incoming_table_accounting_and_values(store):
    result = run(DATA / "admit_incoming.csv", "--into", store)
    assert result.exit_code == 0, result.output
    out = result.output
    assert "Rows read 10 = accepted 2 + rejected 8 + suspect 0." in out
    assert "skipped 1 row(s) above the header" in out and "semicolon" in out
    assert "column 'MAP (in)' -> map_mm: in to mm (x 25.4)" in out
    assert f"quarantine{'/'}0002-admit_incoming.csv" in out
    opened = open_store(store)
    assert opened.version == 2 and len(opened.records) == 6
    new = opened.records.set_index("profile_id").loc[["N-01", "N-10"]]
    # N-01: 12.0 in, 64.4 °F, 10 in, 15 in; exact definitions (NIST SP 811)
    assert new.loc["N-01", "map_mm"] == pytest.approx(12.0 * 25.4, abs=1e-9)
    assert new.loc["N-01", "mat_c"] == pytest.approx((64.4 - 32) * 5 / 9, abs=1e-9)
    assert new.loc["N-01", "bk_depth_cm"] == pytest.approx(25.4, abs=1e-9)
    assert new.loc["N-10", "bk_thickness_cm"] == pytest.approx(22 * 2.54, abs=1e-9)
    assert new.loc["N-01", "notes"] == "good"


@pytest.mark.parametrize("row, column, text", [
    (4, "MAP (in)", "not-a-number (column 'MAP (in)'): 'about 19'"),   # text in a number
    (5, "MAT (°F)", "not-finite (column 'MAT (°F)')"),                  # infinity
    (6, "Depth to Bk (in)", "range (column 'Depth to Bk (in)'): bk_depth_cm -10.16"),
    (7, "Lat", "range (column 'Lat'): latitude -94.5"),                 # coordinates
    (8, "Vegetation", "vocabulary (column 'Vegetation'): 'alpine meadow'"),
    (9, "Profile ID", "duplicate-id (column 'Profile ID'): profile_id 'T-02'"),
    (10, "Profile ID", "unique-id (column 'Profile ID'): profile_id 'N-08' is used by rows 10, 11"),
])
def test_bad_rows_named_by_row_column_and_value(store, row, column, text):
    result = run(DATA / "admit_incoming.csv", "--into", store)
    assert result.exit_code == 0
    # the per-row detail is in the quarantine file; the terminal shows grouped blocks
    quarantine = pd.read_csv(store / "quarantine" / "0002-admit_incoming.csv", dtype=str)
    reasons = quarantine.set_index("_source_row").loc[str(row), "_reasons"]
    assert text in reasons and column in reasons
    rule = text.split(" ", 1)[0]
    assert any(ln.startswith(f"  [{rule}]") and str(row) in ln
               for ln in result.output.splitlines())


def test_strict_exits_1_when_rows_were_rejected(store):
    assert run(DATA / "admit_incoming.csv", "--into", store, "--strict").exit_code == 1
    assert open_store(store).version == 2  # the admit still landed


def test_json_report(store):
    result = run(DATA / "admit_incoming.csv", "--into", store, "--format", "json")
    assert result.exit_code == 0
    report = json.loads(result.stdout)
    assert (report["rows_read"], report["accepted"], report["rejected"]) == (10, 2, 8)
    assert report["rows_read"] == report["accepted"] + report["rejected"] + report["suspect"]
    assert report["reasons"]["unique-id"] == 2 and report["version_after"] == 2
    assert [r["row"] for r in report["rejected_rows"]] == [4, 5, 6, 7, 8, 9, 10, 11]


def test_dry_run_writes_nothing(store):
    before = files_of(store)
    result = run(DATA / "admit_incoming.csv", "--into", store, "--dry-run")
    assert result.exit_code == 0
    assert "Dry run: nothing was written." in result.output
    assert "accepted 2 would go to" in result.output
    assert files_of(store) == before


def write(path: Path, text: str, encoding="utf-8") -> Path:
    path.write_text(text, encoding=encoding)
    return path


@pytest.mark.parametrize("content, code, words", [
    (None, 2, ["no such file"]),
    ("", 2, ["is empty"]),
    ("profile_id:latitude:longitude\nA:1:2\nB:3:4\n", 2, ["colon", "comma"]),
    ("profile_id,map_mm\nA,100\n", 1, ["latitude", "longitude", "source"]),
    ("profile_id,latitude,longitude,source,bk_depth_kg\nA,1,2,s,3\n", 1,
     ["'bk_depth_kg'", "'kg'", "accepted units"]),
    ("profile_id,latitude,longitude,source,MAP (°C)\nA,1,2,s,3\n", 1, ["'MAP (°C)'", "°C"]),
    # the header: a name twice, a column of values without a name, a name and its synonym
    ("profile_id,latitude,longitude,source,map_mm,map_mm\nA,1,2,s,3,4\n", 1,
     ["cannot be admitted; nothing was written", "columns 5 and 6 are both named 'map_mm' "
      "(spreadsheet columns E and F) in the header on row 1", "Rename the columns"]),
    ("profile_id,latitude,longitude,source,map_mm,,notes\nA,1,2,s,3,wet,x\n", 1,
     ["cannot be admitted; nothing was written", "column F (column 6) has values but no "
      "name in the header on row 1 (e.g. 'wet' on row 2 in F)", "Type a name for it"]),
    ("profile_id,latitude,longitude,source,map_mm,MAP (mm)\nA,1,2,s,3,4\n", 1,
     ["cannot be admitted; nothing was written", "columns 'map_mm' (column 5, E in a "
      "spreadsheet) and 'MAP (mm)' (column 6, F) both map to map_mm", "keep one of them"]),
])
def test_bad_tables_exit_codes_and_messages(tmp_path, store, content, code, words):
    table = tmp_path / "incoming.csv"
    if content is not None:
        write(table, content)
    before = files_of(store)
    result = run(table, "--into", store)
    assert result.exit_code == code, result.output
    assert result.stderr.startswith("Error: ") and "Traceback" not in result.output
    assert str(table) in result.stderr
    for word in words:
        assert word in result.stderr
    assert files_of(store) == before


def test_xlsx_with_title_row_is_admitted(tmp_path, store):
    from openpyxl import Workbook

    book = Workbook()
    sheet = book.active
    sheet.append(["Field sheet 2025 (depths in cm)"])
    sheet.append(["profile_id", "latitude", "longitude", "source", "map_mm", "bk_depth_cm",
                  "bk_thickness_cm"])
    sheet.append(["X-1", -42.5, 55.25, "TEST-2025", 333, 40, 25])
    sheet.append(["X-2", -42.6, 55.35, "TEST-2025", 444, -1, 25])
    book.save(tmp_path / "sheet.xlsx")
    result = run(tmp_path / "sheet.xlsx", "--into", store)
    assert result.exit_code == 0, result.output
    assert "Rows read 2 = accepted 1 + rejected 1 + suspect 0." in result.output
    assert "[range] bk_depth_cm = '-1': 1 row 4 (X-2)" in result.output
    opened = open_store(store)
    assert opened.records["map_mm"].iloc[-1] == 333.0


def test_folder_that_is_not_a_store_is_refused(tmp_path):
    folder = tmp_path / "docs"
    folder.mkdir()
    write(folder / "readme.txt", "x")
    result = run(DATA / "admit_base.csv", "--into", folder)
    assert result.exit_code == 2 and "not a refit store" in result.stderr


def test_hand_edited_store_is_refused(store):
    with open(store / "records.csv", "a", encoding="utf-8") as fh:
        fh.write("X\n")
    result = run(DATA / "admit_incoming.csv", "--into", store)
    assert result.exit_code == 1 and "edited outside refit" in result.stderr


def test_busy_store_is_refused(store):
    hold = ("import sys, time\nfrom filelock import FileLock\nl = FileLock(sys.argv[1])\n"
            "l.acquire(); print('held', flush=True); time.sleep(60)\n")
    holder = subprocess.Popen([sys.executable, "-c", hold, str(store / ".lock")],
                              stdout=subprocess.PIPE, text=True)
    try:
        assert holder.stdout.readline().strip() == "held"
        import refit.curate.store

        old = refit.curate.store.LOCK_TIMEOUT_S
        refit.curate.store.LOCK_TIMEOUT_S = 0.2
        try:
            result = CliRunner().invoke(main, ["admit", str(DATA / "admit_incoming.csv"),
                                               "--into", str(store)])
        finally:
            refit.curate.store.LOCK_TIMEOUT_S = old
        assert result.exit_code == 1 and "busy" in result.stderr
    finally:
        holder.kill()
        holder.wait()


def test_vocab_option_extends_the_vocabulary(tmp_path, store):
    vocab = write(tmp_path / "v.json", json.dumps({"vegetation": ["alpine meadow"]}))
    result = run(DATA / "admit_incoming.csv", "--into", store, "--vocab", vocab, "--dry-run")
    assert result.exit_code == 0
    assert "Rows read 10 = accepted 3 + rejected 7 + suspect 0." in result.output


def test_demo_tables_if_present(tmp_path):
    from refit._util.resources import demo_dir

    demo = demo_dir()
    if not (demo / "incoming_soils.csv").is_file():
        pytest.skip("demo tables not generated")
    shutil.copy(demo / "base_soils.csv", tmp_path / "base.csv")
    assert run(tmp_path / "base.csv", "--into", tmp_path / "s").exit_code == 0
    result = run(demo / "incoming_soils.csv", "--into", tmp_path / "s", "--format", "json")
    assert result.exit_code == 0
    report = json.loads(result.stdout)
    assert report["rows_read"] == report["accepted"] + report["rejected"] + report["suspect"]
    assert report["rejected"] >= 12  # a dozen deliberately bad rows
