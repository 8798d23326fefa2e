"""`refit demo` end to end on the bundled invented scenario (CLI driven in-process)."""

from __future__ import annotations

import json

import pandas as pd
from click.testing import CliRunner

from refit.cli import main
from refit.store import open_store


def test_demo_runs_check_admit_and_fit(tmp_path):
    out = tmp_path / "demo"
    result = CliRunner().invoke(main, ["demo", "--out", str(out)])
    assert result.exit_code == 0, result.output
    text = result.output
    # the accounting the issue asks for: rows read = accepted + rejected, with where they went
    assert "Rows read 40 = accepted 26 + rejected 14." in text
    assert "Leaderboard: map_from_bk_depth" in text and "Caution:" in text

    # re-open what was written and check it
    store = open_store(out / "store")
    assert store.version == 2
    assert len(store.records) == store.manifest["row_count"]
    entry = store.manifest["changelog"][-1]
    assert (entry["rows_read"], entry["accepted"], entry["rejected"]) == (40, 26, 14)
    quarantined = pd.read_csv(out / "store" / entry["quarantine_file"], dtype=str)
    assert len(quarantined) == 14 and quarantined["_reasons"].str.len().gt(0).all()

    check = json.loads((out / "check-incoming.json").read_text(encoding="utf-8"))
    assert check["n_rows"] == 40 and not check["ok"]

    board = pd.read_csv(out / "run" / "leaderboard.csv")
    assert len(board) >= 12
    assert {"candidate", "rmsep", "coverage", "interval_score"} <= set(board.columns)
    assert len(list((out / "run" / "fits").glob("*.json"))) == len(board)
    run = json.loads((out / "run" / "run.json").read_text(encoding="utf-8"))
    assert run["dataset"]["version"] == 2
    assert run["dataset"]["sha256"] == store.manifest["records_sha256"]


def test_demo_refuses_a_folder_it_did_not_write(tmp_path):
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "thesis.docx").write_bytes(b"precious")
    result = CliRunner().invoke(main, ["demo", "--out", str(mine)])
    assert result.exit_code == 2
    assert "not an earlier refit demo folder" in result.output
    assert (mine / "thesis.docx").read_bytes() == b"precious"


def test_demo_replaces_its_own_earlier_output(tmp_path):
    out = tmp_path / "demo"
    runner = CliRunner()
    assert runner.invoke(main, ["demo", "--out", str(out), "--quiet"]).exit_code == 0
    first = (out / "run" / "leaderboard.csv").read_bytes()
    assert runner.invoke(main, ["demo", "--out", str(out), "--quiet"]).exit_code == 0
    # same recipe, same data version, same seed: the same numbers
    assert (out / "run" / "leaderboard.csv").read_bytes() == first
