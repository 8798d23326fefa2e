"""Regression tests for the curate holes of the guarantees issue: every row accounted for,
encodings, identifiers, size limits, special files, manifests, messages.

Oracles: the input files written here (each row counted by hand), the Unicode standard's
normal forms through Python's ``unicodedata`` (NFC), RFC 3629 (UTF-8) through Python's
codecs, numpy's shortest float32 text, the OWASP "CSV Injection" page (common practice:
cells starting with =, +, -, @ are formulas to a spreadsheet).
"""

from __future__ import annotations

import hashlib
import json
import os
import shutil

import numpy as np
import pandas as pd
import pytest
from click.testing import CliRunner

from refit._util.resources import demo_dir
from refit.cli import main
from refit.curate.store import admit, open_store
from refit.curate.tables import read_table
from refit.errors import InvalidDataError, UnreadableInputError

HEADER = "profile_id,latitude,longitude,source,map_mm,bk_depth_cm,bk_thickness_cm,vegetation"


def data_row(i: int) -> str:
    return f"P{i},{30 + i / 10},{-100 - i / 10},SRC-{i},{300 + 10 * i},{20 + 3 * i},10,grassland"


def cli(*args):
    return CliRunner().invoke(main, [str(a) for a in args])


def one_error_line(result):
    lines = [ln for ln in result.output.splitlines() if ln.strip()]
    assert lines and lines[-1].startswith("Error: "), result.output
    assert sum(ln.startswith("Error:") for ln in lines) == 1
    assert "unexpected" not in result.output and "Traceback" not in result.output
    return lines[-1]


# --- item 1: every row of the input is accounted for ----------------------------------

def test_data_rows_above_the_header_are_read_as_data(tmp_path):
    # 8 data rows, the header, 2 data rows: 10 data rows in all (counted by hand)
    path = tmp_path / "above.csv"
    path.write_text("Survey 2024\n" + "\n".join(map(data_row, range(8))) + "\n" + HEADER
                    + "\n" + "\n".join(map(data_row, range(8, 10))) + "\n", encoding="utf-8")
    table = read_table(path, as_text=True)
    assert table.source_rows.tolist() == [2, 3, 4, 5, 6, 7, 8, 9, 11, 12]
    assert table.frame["profile_id"].tolist() == [f"P{i}" for i in range(10)]
    assert any("rows 2, 3, 4, 5, 6, 7, 8, 9" in n and "as data" in n for n in table.notes)
    assert any("title or notes (rows 1)" in n for n in table.notes)
    result = admit(path, tmp_path / "store")
    assert (result.rows_read, result.accepted) == (10, 10)
    assert len(open_store(tmp_path / "store").records) == 10


def test_rows_above_the_header_stay_data_when_the_ids_below_look_like_numbers(tmp_path):
    # found by the long fuzzing run (hypothesis): two data rows, the header, one row whose
    # id is "+2"; the id column looked numeric from the one row below, so "P0" and "P1"
    # were skipped as notes. A column named like a canonical one takes the schema's type.
    path = tmp_path / "plus.csv"
    path.write_text("P0,30.0000,-100.0000,SRC-0,250,20,10\n"
                    "P1,30.1429,-100.1111,SRC-1,263,23,11\n"
                    "profile_id,latitude,longitude,source,map_mm,bk_depth_cm,bk_thickness_cm\n"
                    "+2,30.2857,-100.2222,SRC-2,276,26,12\n", encoding="utf-8")
    table = read_table(path, as_text=True)
    assert table.source_rows.tolist() == [1, 2, 4]
    result = admit(path, tmp_path / "store")
    assert result.rows_read == 3
    assert result.accepted + result.rejected + result.suspect == 3


def test_a_bad_data_row_above_the_header_is_quarantined_with_its_text(tmp_path):
    bad = "P-above,95.5,-100,SRC-X,300,20,10,grassland"  # latitude 95.5: out of range
    path = tmp_path / "above.csv"
    path.write_text(bad + "\n" + "\n".join(map(data_row, range(3))) + "\n" + HEADER + "\n"
                    + data_row(5) + "\n", encoding="utf-8")
    result = admit(path, tmp_path / "store")
    assert result.rows_read == result.accepted + result.rejected + result.suspect == 5
    assert result.rejected == 1
    quarantined = pd.read_csv(tmp_path / "store" / result.quarantine_file, dtype=str)
    assert quarantined.iloc[0, :8].tolist() == bad.split(",")
    assert quarantined["_source_row"].tolist() == ["1"]


def _workbook(path, rows, hidden_first=False):
    from openpyxl import Workbook

    book = Workbook()
    sheet = book.active
    if hidden_first:
        sheet.title = "notes"
        sheet.append(["not the data"])
        sheet.sheet_state = "hidden"
        sheet = book.create_sheet("data")
    for row in rows:
        sheet.append(row)
    book.save(path)
    return path


XLSX_HEADER = ["profile_id", "latitude", "longitude", "source", "map_mm", "bk_depth_cm"]


def test_formula_cells_without_saved_values_are_refused_with_their_address(tmp_path):
    # openpyxl writes formulas without a saved value, as a program (not a spreadsheet) does
    path = _workbook(tmp_path / "f.xlsx", [XLSX_HEADER, ["P1", 30.1, -100.2, "S", 300, 20],
                                           ['="XF-"&"2b"', 30.2, -100.3, "S", "=200+144.3", 25]])
    with pytest.raises(UnreadableInputError, match=r"2 formula cell\(s\) without a saved "
                       r"value: A3 \(=\"XF-\"&\"2b\"\), E3 \(=200\+144.3\)"):
        read_table(path, as_text=True)
    line = one_error_line(cli("admit", path, "--into", tmp_path / "s"))
    assert "A3" in line and "E3" in line
    assert not (tmp_path / "s").exists()


def test_a_hidden_first_sheet_is_passed_over_and_sheet_names_one(tmp_path):
    path = _workbook(tmp_path / "h.xlsx", [XLSX_HEADER, ["P1", 30.1, -100.2, "S", 300, 20]],
                     hidden_first=True)
    table = read_table(path, as_text=True)
    assert table.frame["profile_id"].tolist() == ["P1"]
    assert any("first visible sheet" in n and "'notes' (hidden)" in n for n in table.notes)
    ok = cli("admit", path, "--into", tmp_path / "s", "--sheet", "data", "--dry-run")
    assert ok.exit_code == 0, ok.output
    assert "Rows read 1" in ok.output
    res = cli("check", path, "--sheet", "nope")
    assert res.exit_code == 2 and "no worksheet 'nope'" in one_error_line(res)


def test_the_first_sheet_read_names_the_sheets_left_unread(tmp_path):
    # a workbook whose table is on its second sheet: `refit check` without --sheet reads the
    # notes on the first one and fails; its printout names the sheet left unread and --sheet
    from _harness import SHEET_HEADER, sheet_soils, write_workbook

    path = tmp_path / "survey.xlsx"
    write_workbook(path, {"README": [["Field notes (invented)"]],
                          "Soils": [SHEET_HEADER, *sheet_soils(5, 3, prefix="RV",
                                                               source="Rivet")]})
    res = cli("check", path)
    assert res.exit_code == 2
    assert ("sheet 'README' (the first visible sheet; not read: 'Soils'; name another with "
            "--sheet NAME), has a header (row 1) but no data rows") in one_error_line(res)
    assert cli("check", path, "--sheet", "Soils").exit_code == 0
    # notes of a few lines above: the sheet is read, and its note names the unread one
    write_workbook(path, {"README": [["Field notes (invented)"], ["x", "y"], ["1", "2"]],
                          "Soils": [SHEET_HEADER]})
    res = cli("check", path)
    assert "sheet 'README' (the first visible sheet; not read: 'Soils'; name another with " \
           "--sheet NAME)" in res.output


# --- item 6: encodings, identifiers, formulas, float32 ---------------------------------

def test_utf8_and_latin1_mixed_in_the_first_lines_are_refused(tmp_path):
    path = tmp_path / "mix.csv"
    path.write_bytes((HEADER + "\n" + data_row(1).replace("SRC-1", "Vèsk") + "\n").encode()
                     + (data_row(2).replace("SRC-2", "Vèsk") + "\n").encode("latin-1"))
    with pytest.raises(UnreadableInputError, match=r"mixes encodings: byte b'\\xe8' on line 3"):
        read_table(path, as_text=True)
    # Latin-1 first and UTF-8 later: refused too (cp1252 would read it as 'VÃ¨sk')
    path.write_bytes((HEADER + "\n" + data_row(1).replace("SRC-1", "Vèsk") + "\n")
                     .encode("latin-1") + (data_row(2).replace("SRC-2", "Vèsk") + "\n").encode())
    with pytest.raises(UnreadableInputError, match=r"on line 2 is not UTF-8, but line 3"):
        read_table(path, as_text=True)
    # one encoding throughout is read: Latin-1 alone
    path.write_bytes((HEADER + "\n" + data_row(1).replace("SRC-1", "Vèsk") + "\n")
                     .encode("latin-1"))
    assert read_table(path, as_text=True).frame["source"].tolist() == ["Vèsk"]


@pytest.mark.parametrize("codec", ["utf-16-le", "utf-16-be", "utf-32-le", "utf-32-be"])
def test_utf16_and_utf32_without_a_byte_order_mark_are_detected(tmp_path, codec):
    path = tmp_path / "wide.csv"
    path.write_bytes((HEADER + "\n" + data_row(1).replace("SRC-1", "Vèsk") + "\n").encode(codec))
    table = read_table(path, as_text=True)
    assert table.frame["source"].tolist() == ["Vèsk"]
    assert any(codec in n for n in table.notes)


def test_ids_are_normalised_before_the_duplicate_check(tmp_path):
    import unicodedata

    nfc, nfd = "V\u00e8sk1", "Ve\u0300sk1"
    assert unicodedata.normalize("NFC", nfd) == nfc != nfd  # the oracle: Unicode NFC
    path = tmp_path / "ids.csv"
    rows = [data_row(1).replace("P1", nfc, 1), data_row(2).replace("P2", nfd, 1),
            data_row(3).replace("P3", "P\u200b9", 1), data_row(4).replace("P4", "P9", 1)]
    path.write_text(HEADER + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    result = admit(path, tmp_path / "store")
    assert result.rejected == 4
    assert result.reasons.get("unique-id") == 4
    assert any("normalised 2 profile_id" in m for m in result.mappings)


def test_formula_like_text_is_warned_about_and_kept(tmp_path):
    path = tmp_path / "f.csv"
    path.write_text(HEADER + "\n" + data_row(1).replace("P1", "=1+1", 1).replace(
        "SRC-1", "@SUM(1)") + "\n" + data_row(2) + "\n", encoding="utf-8")
    result = admit(path, tmp_path / "store")
    assert result.accepted == 2
    assert result.warnings.get("formula-like-text") == 2
    records = open_store(tmp_path / "store").records_text
    assert records["profile_id"].tolist() == ["=1+1", "P2"]  # kept exactly as typed


def test_float32_parquet_is_read_at_its_shown_precision(tmp_path):
    frame = pd.DataFrame({"profile_id": ["P1"], "latitude": np.float32([30.1]),
                          "longitude": [-100.0], "source": ["S"],
                          "map_mm": np.float32([240.3])})
    frame.to_parquet(tmp_path / "f.parquet")
    assert float(np.float32(240.3)) != 240.3  # the oracle: float32 cannot hold 240.3
    assert read_table(tmp_path / "f.parquet").frame["map_mm"].tolist() == [240.3]
    result = admit(tmp_path / "f.parquet", tmp_path / "store")
    assert result.accepted == 1
    assert open_store(tmp_path / "store").records_text["map_mm"].tolist() == ["240.3"]


# --- item 8: sizes, special files, read-only stores, wrong shapes ----------------------

def test_a_field_over_the_limit_is_a_clear_error(tmp_path):
    path = tmp_path / "long.csv"
    path.write_text(HEADER + "\n" + data_row(1).replace("grassland", "g" * 131_073) + "\n",
                    encoding="utf-8")
    res = cli("admit", path, "--into", tmp_path / "s")
    assert res.exit_code == 2
    assert "longer than 131,072 characters" in one_error_line(res)


@pytest.mark.parametrize("special", ["/dev/zero", "/dev/urandom", "fifo"])
def test_special_files_are_not_regular_files(tmp_path, special):
    if special == "fifo":
        special = tmp_path / "fifo.csv"
        os.mkfifo(special)
    if not os.path.exists(special):
        pytest.skip(f"{special} does not exist here")
    for args in (("admit", special, "--into", tmp_path / "s"), ("check", special)):
        res = cli(*args)
        assert res.exit_code == 2
        line = one_error_line(res)
        assert "not a regular file" in line and "empty" not in line


def test_a_file_over_the_size_limit_is_refused_before_reading(tmp_path, monkeypatch):
    import refit.curate.tables as tables

    path = tmp_path / "sparse.csv"
    with open(path, "wb") as fh:  # sparse: costs no disk
        fh.write((HEADER + "\n").encode())
        fh.truncate(tables.MAX_TABLE_BYTES + 1)
    res = cli("check", path)
    assert res.exit_code == 2
    assert f"at most {tables.MAX_TABLE_BYTES // 2**20} MiB" in one_error_line(res)


def _store(tmp_path):
    store = tmp_path / "store"
    shutil.copytree(demo_dir() / "store", store)
    return store


def test_a_read_only_store_dry_run_reads_and_admit_is_a_clear_error(tmp_path, monkeypatch):
    # root ignores permission bits, so the file system's refusal is simulated where the lock
    # file is made (the same OSError a read-only mount raises)
    import errno

    import filelock

    store = _store(tmp_path)

    def refuse(self, *a, **k):
        raise OSError(errno.EROFS, "Read-only file system")

    monkeypatch.setattr(filelock.FileLock, "acquire", refuse)
    table = demo_dir() / "incoming_soils.csv"
    dry = cli("admit", table, "--into", store, "--dry-run")
    assert dry.exit_code == 0, dry.output
    assert "Dry run" in dry.output
    res = cli("admit", table, "--into", store)
    line = one_error_line(res)
    assert res.exit_code == 2 and "cannot be written (Read-only file system" in line


def test_a_lock_of_the_wrong_kind_is_named(tmp_path):
    store = _store(tmp_path)
    (store / ".lock").unlink(missing_ok=True)  # the demo store's own lock file, if any
    (store / ".lock").mkdir()
    res = cli("admit", demo_dir() / "incoming_soils.csv", "--into", store)
    assert res.exit_code == 2
    assert ".lock is not a lock file" in one_error_line(res)


# --- item 7: manifest schema, agreement and repair -------------------------------------

def _edit_manifest(store, **changes):
    manifest = json.loads((store / "manifest.json").read_text(encoding="utf-8"))
    for key, value in changes.items():
        if value is None:
            manifest.pop(key, None)
        else:
            manifest[key] = value
    (store / "manifest.json").write_text(json.dumps(manifest), encoding="utf-8")
    return manifest


@pytest.mark.parametrize("changes, message", [
    ({"version": -1}, r"\$\.version: -1 is less than the minimum of 0"),
    ({"changelog": None}, r"'changelog' is a required property"),
    ({"row_count": 299}, r"row_count is 299 but records.csv has 300 rows"),
    ({"version": 7}, r"version is 7 but the changelog's last version is 1"),
    ({"records_sha256": "0" * 64}, r"does not match its manifest"),
    ({"changelog": "x"}, r"\$\.changelog: 'x' is not of type 'array'"),
])
def test_a_manifest_that_disagrees_stops_with_the_repair_command(tmp_path, changes, message):
    store = _store(tmp_path)
    _edit_manifest(store, **changes)
    with pytest.raises(InvalidDataError, match=message) as err:
        open_store(store)
    assert f"refit admit --repair-manifest {store}" in str(err.value)
    res = cli("admit", demo_dir() / "incoming_soils.csv", "--into", store, "--dry-run")
    assert res.exit_code == 1 and "--repair-manifest" in one_error_line(res)


def test_a_hand_edit_with_a_rehashed_manifest_is_caught_and_repaired(tmp_path):
    store = _store(tmp_path)
    records = store / "records.csv"
    lines = records.read_text(encoding="utf-8").splitlines(keepends=True)
    records.write_text("".join(lines + [lines[-1].replace(lines[-1].split(",")[0], "HAND1",
                                                         1)]), encoding="utf-8")
    sha = hashlib.sha256(records.read_bytes()).hexdigest()
    _edit_manifest(store, records_sha256=sha, row_count=301)
    with pytest.raises(InvalidDataError, match=r"last changelog entry \(version 1\) records "
                       r"300 rows"):
        open_store(store)
    res = cli("admit", "--repair-manifest", store)
    assert res.exit_code == 0, res.output
    assert "recorded as version 2 (kind 'repair')" in res.output
    assert "version: 1 -> 2" in res.output
    opened = open_store(store)
    assert (opened.version, len(opened.records_text)) == (2, 301)
    entry = opened.manifest["changelog"][-1]
    assert (entry["kind"], entry["row_count_after"], entry["records_sha256"]) == \
        ("repair", 301, sha)
    # the next admit's accounting adds up again: version 3 adds exactly its accepted rows
    result = admit(demo_dir() / "incoming_soils.csv", store)
    assert result.version_after == 3
    assert len(open_store(store).records_text) == 301 + result.accepted
    again = cli("admit", "--repair-manifest", store)
    assert "nothing changed" in again.output


def test_a_missing_changelog_is_rebuilt_and_said(tmp_path):
    store = _store(tmp_path)
    _edit_manifest(store, changelog=None)
    res = cli("admit", "--repair-manifest", store)
    assert res.exit_code == 0
    assert "the changelog was missing" in res.output
    assert open_store(store).version == 1


# --- item 10: admit errors are one line -----------------------------------------------

def test_an_admit_refused_for_several_reasons_says_so_on_one_line(tmp_path):
    path = tmp_path / "t.csv"
    path.write_text("a,b\n1,2\n", encoding="utf-8")
    res = cli("admit", path, "--into", tmp_path / "s")
    assert res.exit_code == 1
    line = one_error_line(res)
    assert "(1) required column 'profile_id'" in line and "(5) no climate column" in line
    assert not (tmp_path / "s").exists()


def test_an_absurd_oxide_total_is_shown_as_read_without_a_warning(tmp_path):
    # found by the long fuzzing run: an oxide of 1e308 made the oxide-total message round
    # 1e308 * 10**6 (overflow: inf, and a numpy RuntimeWarning on stderr)
    import subprocess
    import sys

    table = tmp_path / "ox.csv"
    table.write_text("profile_id,latitude,longitude,source,map_mm,sio2_wt,al2o3_wt\n"
                     "A,10,10,S1,500,1e308,10\n", encoding="utf-8")
    run = subprocess.run([sys.executable, "-m", "refit", "check", str(table)],
                         capture_output=True, text=True, timeout=120)
    assert run.returncode == 1
    assert run.stderr == ""
    assert "the oxides add up to 1e+308 wt%" in run.stdout
