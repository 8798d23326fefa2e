"""`refit check` end to end on small invented tables: exit code first, then the output."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest
from click.testing import CliRunner

from refit.cli import main

DATA = Path(__file__).resolve().parents[1] / "data"


def run(*args):
    return CliRunner().invoke(main, ["check", *map(str, args)])


def test_valid_table_exits_0():
    result = run(DATA / "check_valid.csv")
    assert result.exit_code == 0, result.output
    assert "VALID: no errors" in result.output
    assert "4 rows" in result.output


def test_invalid_table_json_lists_every_problem():
    result = run(DATA / "check_invalid.csv", "--format", "json")
    assert result.exit_code == 1
    doc = json.loads(result.output)
    assert doc["ok"] is False and doc["n_rows"] == 4
    got = [(p["severity"], p["rule"], p["row"], p["profile_id"], p["column"], p["value"])
           for p in doc["problems"]]
    # the file has a title line, so its header is on row 2 and data start on row 3
    assert got == [
        ("error", "range", 4, "VX-12", "latitude", "95"),
        ("error", "not-a-number", 5, "VX-13", "map_mm", "dry"),
        ("error", "vocabulary", 5, "VX-13", "vegetation", "prairie"),
        ("error", "unique-id", 5, "VX-13", "profile_id", "VX-13"),
        ("error", "unique-id", 6, "VX-13", "profile_id", "VX-13"),
        ("error", "range", 6, "VX-13", "bk_depth_cm", "-5"),
        ("error", "mar-above-map", 6, "VX-13", "mar_mm", "700"),
        ("warning", "gypsum-above-carbonate", 3, "VX-11", "by_depth_cm", "10"),
        # a Bk depth without a thickness: a warning (many compilations give no thickness)
        ("warning", "bk-depth-without-thickness", 5, "VX-13", "bk_thickness_cm", ""),
        ("warning", "vocabulary-form", 6, "VX-13", "soil_order", "mollisol"),
    ]
    assert {"rule": "range", "severity": "error", "count": 2} in doc["summary"]
    assert sum(s["count"] for s in doc["summary"]) == len(doc["problems"]) == 10
    assert any("header on row 2" in note for note in doc["notes"])
    assert all(p["message"] for p in doc["problems"])


def test_invalid_table_text_report():
    result = run(DATA / "check_invalid.csv")
    assert result.exit_code == 1
    out = result.output
    assert "7 errors" in out and "3 warnings" in out
    assert "[not-a-number] map_mm = 'dry': 1 row 5 (VX-13)" in out
    # the duplicated id: one block for both rows, its fix said once
    assert "[unique-id] profile_id = 'VX-13': 2 rows 5, 6" in out
    assert out.count("every profile needs its own id") == 1
    assert "summary per rule" in out and "mar-above-map" in out
    assert "INVALID: 7 errors in 3 rows" in out
    assert out.index("7 errors") < out.index("3 warnings") < out.index("summary per rule")


def test_grouped_blocks_say_a_repeated_problem_once(tmp_path):
    rows = ["profile_id,latitude,longitude,source,map_mm,parent_material"]
    rows += [f"T-{k},-40,53,S,400,gravel" for k in range(30)]
    (tmp_path / "t.csv").write_text("\n".join(rows) + "\n", encoding="utf-8")
    result = run(tmp_path / "t.csv")
    assert result.exit_code == 1
    out = result.output
    assert "30 errors in 1 block" in out
    assert "[vocabulary] parent_material = 'gravel': 30 rows 2, 3, 4, 5, 6, 7, 8, 9, 10, 11 " \
           "and 20 more" in out
    assert out.count("is not in the parent_material vocabulary") == 1


def test_text_report_is_capped_but_summary_complete():
    result = run(DATA / "check_invalid.csv", "--max-rows", "2")
    assert result.exit_code == 1
    assert "... 4 more blocks of errors (raise --max-rows" in result.output
    assert "not-a-number" in result.output.split("summary per rule")[1]


def test_vocab_extension_file():
    result = run(DATA / "check_invalid.csv", "--vocab", DATA / "check_vocab.json",
                 "--format", "json")
    assert result.exit_code == 1
    rules = [p["rule"] for p in json.loads(result.output)["problems"]]
    assert "vocabulary" not in rules and len(rules) == 9


@pytest.mark.parametrize("args,needle", [
    (["missing.csv"], "missing.csv"),
    ([DATA / "check_empty.csv"], "empty"),
    ([DATA / "check_valid.csv", "--kind", "sediment"], "sediment"),
    ([DATA / "check_valid.csv", "--vocab", "nope.json"], "nope.json"),
    ([DATA / "check_valid.csv", "--format", "xml"], "xml"),
])
def test_usage_and_unreadable_input_exit_2(args, needle):
    result = run(*args)
    assert result.exit_code == 2
    assert needle in result.output
    assert "Traceback" not in result.output


@pytest.mark.parametrize("header, cells, words", [
    ("profile_id,latitude,longitude,source,map_mm,map_mm", "A,1,2,s,3,4",
     ["columns 5 and 6 are both named 'map_mm' (spreadsheet columns E and F) in the header "
      "on row 1", "Rename the columns so each name appears once"]),
    ("profile_id,latitude,longitude,source,map_mm,,notes", "A,1,2,s,3,wet,x",
     ["column F (column 6) has values but no name in the header on row 1 (e.g. 'wet' on "
      "row {row} in F)", "Type a name for it in row 1"]),
    ("profile_id,latitude,longitude,source,map_mm,MAP (mm)", "A,1,2,s,3,4",
     ["columns 'map_mm' (column 5, E in a spreadsheet) and 'MAP (mm)' (column 6, F) both "
      "map to map_mm", "keep one of them and delete the other"]),
])
@pytest.mark.parametrize("blank_line", [False, True])  # the one-call read and the careful one
def test_header_problems_exit_1_naming_file_and_columns(tmp_path, header, cells, words,
                                                        blank_line):
    path = tmp_path / "soils.csv"
    path.write_text(header + "\n" + ("\n" if blank_line else "") + cells + "\n",
                    encoding="utf-8")
    result = run(path)
    assert result.exit_code == 1, result.output
    assert result.output.startswith(f"Error: {path}: ")
    for word in words:  # the data row is row 2, or row 3 below a blank line
        assert word.format(row=3 if blank_line else 2) in result.output
    assert "Traceback" not in result.output


def test_importing_the_command_does_not_import_pandas():
    code = ("import sys, refit.cli.check; "
            "sys.exit(1 if {'pandas', 'pandera', 'rich'} & set(sys.modules) else 0)")
    assert subprocess.run([sys.executable, "-c", code]).returncode == 0
