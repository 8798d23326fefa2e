"""`refit demo` end to end on the bundled invented scenario (CLI driven in-process)."""

from __future__ import annotations

import json
from html.parser import HTMLParser

import pandas as pd
import pytest
from click.testing import CliRunner

from refit.cli import main
from refit.coefficients import load
from refit.curate.store import open_store


@pytest.fixture(scope="module")
def demo_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo") / "out"
    result = CliRunner().invoke(main, ["demo", "--out", str(out)])
    return out, result


def test_demo_exits_0_and_prints_each_step(demo_run):
    out, result = demo_run
    assert result.exit_code == 0, result.output
    text = result.output
    # the accounting: rows read = accepted + rejected + suspect, where each went
    assert "Rows read 46 = accepted 27 + rejected 15 + suspect 4." in text
    # the planted slips and rows caught, each with what refit says about it
    text = " ".join(text.split())  # messages are wrapped to the terminal
    assert "This value fits if it is in mm: MAP (in) read in mm gives map_mm 300" in text
    assert "This value fits if it is in cm: Depth to Bk (in) read in cm gives bk_depth_cm 150" \
        in text
    assert "This value fits if it is in mm: Depth to Bk (in) read in mm gives bk_depth_cm 35" \
        in text
    assert "[bk-too-shallow] bk_depth_cm = '1.524'" in text
    # the planted row whose MAP is far from what its CIA-K says, named by its pair
    assert "map_mm 300 at cia_k 90.39 (from al2o3_wt, cao_wt, na2o_wt)" in text
    assert "reference pair 'MAP on CIA-K'" in text
    assert "[map-below-bk-minimum] map_mm = '5.08'" in text
    # unmapped columns: the heading says they are kept, each line only what to do
    assert "Columns not mapped (kept as extra columns, unchecked):" in text
    assert "'Bk depth SD (in)': a calibration table has no SD columns" in text
    assert "'region': rename it to a canonical column" in text
    assert text.count("refit keeps it as an extra column") == 0
    for step in ("1. Check", "2. Admit", "3. Fit", "4. Publish", "5. Apply", "6. Compare",
                 "7. Section", "8. Report", "Where everything went"):
        assert step in text
    assert "Leaderboard: map_from_bk_depth" in text and "not for engineering" in text


def test_demo_output_reads_cleanly(demo_run):
    """What a first reader stumbled on: one caution, not one per step; each forward file
    named by its folder (both files have one candidate name); every input on a line of its
    own in "where everything went"; wrapped lines kept under their item."""
    out, result = demo_run
    lines = result.output.splitlines()
    assert sum(line.startswith("Caution:") for line in lines) == 1
    assert lines[-1].startswith("Caution: invented data")
    forward = [line.strip() for line in lines if "linear__ols__forward__analytic.json" in line]
    assert forward == [str(out / "forward" / f"run_{name}" / "fits" /
                           "linear__ols__forward__analytic.json")
                       for name in ("forward_bk_depth", "forward_cia_k")]
    went = lines[next(i for i, s in enumerate(lines) if s.startswith("Where everything")):]
    for label, name in (("fossils (input)", "fossils.csv"),
                        ("age model (input)", "age_model.csv"),
                        ("compaction constants (input)", "compaction_constants.csv")):
        line = next(s for s in went if s.strip().startswith(label))
        assert line.split()[-1] == str(out / name)
    # the paths stand in one column
    assert len({line.index(str(out)) for line in went[1:-1]}) == 1
    # the admit's list of renamed columns wraps under its own item (indent 7 > 5)
    first = next(i for i, s in enumerate(lines) if "renamed 22 columns" in s)
    assert lines[first].startswith("     renamed") and lines[first + 1].startswith("       '")
    assert "each section from the published fit" in result.output
    shown = next(s for s in lines if "paleosols shown" in s)
    assert shown.strip().startswith("3 of 14 paleosols shown")


def test_demo_store_and_quarantine(demo_run):
    out, _ = demo_run
    store = open_store(out / "store")
    assert store.version == 2
    assert len(store.records) == store.manifest["row_count"]
    entry = store.manifest["changelog"][-1]
    assert (entry["rows_read"], entry["accepted"], entry["rejected"], entry["suspect"]) == \
        (46, 27, 15, 4)
    quarantined = pd.read_csv(out / "store" / entry["quarantine_file"], dtype=str)
    assert len(quarantined) == 19 and quarantined["_reasons"].str.len().gt(0).all()
    check = json.loads((out / "check-incoming.json").read_text(encoding="utf-8"))
    assert check["n_rows"] == 46 and not check["ok"]


def test_demo_fit_publish_apply_compare(demo_run):
    out, _ = demo_run
    board = pd.read_csv(out / "run" / "leaderboard.csv")
    assert len(board) >= 12
    assert len(list((out / "run" / "fits").glob("*.json"))) == len(board)
    run = json.loads((out / "run" / "run.json").read_text(encoding="utf-8"))
    store = open_store(out / "store")
    assert run["dataset"]["version"] == 2
    assert run["dataset"]["sha256"] == store.manifest["records_sha256"]

    published = sorted((out / "registry" / "map_from_bk_depth").glob("*.json"))
    assert [p.name for p in published] == ["1.0.0.json"]
    eq = load(published[0])
    assert eq.record["candidate"] == board.iloc[0]["candidate"]

    estimates = pd.read_csv(out / "estimates.csv", keep_default_na=False, na_values=[""])
    mine = estimates[estimates["coefficient_file"].str.contains("registry")]
    assert len(mine) == 14  # every demo paleosol
    # the demo's edge paleosol (see calib_demo/make_demo.py) is flagged
    flags = dict(zip(mine["paleosol_id"], mine["flags"].fillna("")))
    assert "outside-calibration-range" in flags["CG-P07"]  # 3 cm: shallower than any soil
    table = pd.read_csv(out / "compare" / "comparison.csv")
    assert set(table["paleosol_id"]) == set(estimates["paleosol_id"])
    assert (out / "compare" / "comparison.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    # the demo decompacts (its constants file): no depth is applied as measured
    assert not estimates["flags"].fillna("").str.contains("not-decompacted").any()
    assert (estimates["problem"].fillna("") == "").sum() > 0
    assert mine["predictors_used"].str.contains("decompacted").all()
    # every panel drawn (14 paleosols, a MAT panel for the 7 with oxides): 12 a page
    pages = sorted((out / "compare").glob("comparison*.png"))
    assert len(pages) == 2


def test_demo_draws_each_section_and_embeds_it(demo_run):
    out, result = demo_run
    folder = out / "section"
    assert sorted(p.name for p in folder.glob("*.png")) == [
        "section-coldstave-gorge.png", "section-murrenhal-bluff.png"]
    t = pd.read_csv(folder / "section.csv")
    from refit.demo import section_rows

    est = section_rows(pd.read_csv(out / "estimates.csv"),
                       out / "registry" / "map_from_bk_depth" / "1.0.0.json")
    # one row per drawn estimate: the published fit, two literature equations and the
    # posterior of both proxies together; the same numbers as estimates.csv
    assert len(t) == len(est)
    merged = t.merge(est, on=["paleosol_id", "coefficient_file", "function_id"],
                     suffixes=("", "_a"))
    assert len(merged) == len(est)
    assert (merged["estimate"].fillna(-1) == merged["estimate_a"].fillna(-1)).all()
    assert t["fit"].nunique() == 4 and (t["origin"] == "refit").any()
    html = (out / "report.html").read_text(encoding="utf-8")
    assert 'id="sections"' in html and html.count('class="section-figure"') == 2
    assert "Notes on the sections" in html


def test_demo_report_is_self_contained(demo_run):
    out, _ = demo_run
    html = (out / "report.html").read_text(encoding="utf-8")

    class Images(HTMLParser):
        srcs: list = []
        alts: list = []

        def handle_starttag(self, tag, attrs):
            if tag == "img":
                self.srcs.append(dict(attrs).get("src", ""))
                self.alts.append(dict(attrs).get("alt", ""))

    parser = Images()
    parser.srcs, parser.alts = [], []
    parser.feed(html)
    assert parser.srcs and all(s.startswith("data:image/") for s in parser.srcs)
    run = json.loads((out / "run" / "run.json").read_text(encoding="utf-8"))
    assert run["dataset"]["sha256"] in html
    # the demo's comparison of fits is in the report too, embedded like the other figures
    # every page of it: all panels drawn, 12 a page
    pages = len(list((out / "compare").glob("comparison*.png")))
    assert sum("compared fits" in a for a in parser.alts) == pages == 2
    table = pd.read_csv(out / "compare" / "comparison.csv")
    assert f"The comparison table ({len(table)} rows" in html
    assert "--compare" in html


def test_demo_refuses_a_folder_it_did_not_write(tmp_path):
    mine = tmp_path / "mine"
    mine.mkdir()
    (mine / "thesis.docx").write_bytes(b"precious")
    result = CliRunner().invoke(main, ["demo", "--out", str(mine)])
    assert result.exit_code == 2
    assert "not an earlier refit demo folder" in result.output
    assert (mine / "thesis.docx").read_bytes() == b"precious"


def test_demo_replaces_its_own_earlier_output(demo_run):
    out, _ = demo_run
    first = (out / "run" / "leaderboard.csv").read_bytes()
    res = CliRunner().invoke(main, ["demo", "--out", str(out), "--quiet"])
    assert res.exit_code == 0 and res.output == ""       # -q: nothing but errors
    # same recipe, same data version, same seed: the same numbers
    assert (out / "run" / "leaderboard.csv").read_bytes() == first


def test_demo_shows_the_posterior_of_two_proxies(demo_run):
    out, result = demo_run
    est = pd.read_csv(out / "estimates.csv", keep_default_na=False, na_values=[""])
    for col in ("posterior_median", "posterior_mode", "posterior_lower", "posterior_upper",
                "proxy_chi2", "proxy_chi2_p", "posterior_flags"):
        assert col in est.columns
    both = est[est["function_id"] == "posterior"]
    # the paleosols with oxides and a Bk depth (calib_demo/fossils.csv): MB-P01, -P03,
    # -P05, -P07, CG-P02, CG-P04
    assert sorted(both["paleosol_id"]) == sorted(["MB-P01", "MB-P03", "MB-P05", "MB-P07",
                                                  "CG-P02", "CG-P04"])
    assert (both["posterior_lower"] < both["posterior_median"]).all()
    assert (both["posterior_median"] < both["posterior_upper"]).all()
    assert both["proxy_chi2_p"].between(0, 1).all()
    # the frequentist rows of the same forward files stand beside it
    fwd = est[(est["direction"] == "forward") & (est["function_id"] != "posterior")]
    assert fwd["estimate"].notna().any() and fwd["posterior_median"].notna().any()
    meta = json.loads((out / "estimates.csv.posterior.json").read_text(encoding="utf-8"))
    assert meta["posteriors"][-1]["grid"]["points"] == 2000
    assert "posterior median" in result.output


# --------------------------------------------------- every --help example, from the demo folder

def help_examples(command) -> list[str]:
    """The example lines of a command's help: ``refit ...`` lines, continuations joined,
    comments dropped."""
    lines, out, joined = (command.help or "").splitlines(), [], ""
    in_examples = False
    for line in lines:
        text = line.strip()
        if text.startswith("Example"):
            in_examples = True
            continue
        if not in_examples:
            continue
        if joined:
            joined += " " + text
        elif text.startswith("refit "):
            joined = text
        if joined and not joined.endswith("\\"):
            out.append(joined.split(" # ")[0].strip())
            joined = ""
        elif joined:
            joined = joined[:-1].rstrip()
    return out


ORDER = ("check", "admit", "init", "fit", "report", "keygen", "publish", "verify", "diff", "apply",
         "compare", "section")


def test_every_help_example_runs_in_the_demo_folder(demo_run, tmp_path, monkeypatch):
    import glob
    import shlex
    import shutil

    out, result = demo_run
    assert result.exit_code == 0, result.output
    for name in ("incoming_soils.csv", "fossils.csv", "age_model.csv",
                 "compaction_constants.csv", "recipe.toml"):
        assert (out / name).is_file(), name  # the demo writes its inputs too
    folder = tmp_path / "demo"
    shutil.copytree(out, folder)
    monkeypatch.chdir(folder)
    assert set(ORDER) | {"demo"} == set(main.commands)
    ran = 0
    for name in ORDER:
        for example in help_examples(main.commands[name]):
            words = shlex.split(example)
            target = None
            if ">" in words:
                target, words = words[words.index(">") + 1], words[: words.index(">")]
            args = []
            for w in words[1:]:
                args += sorted(glob.glob(w)) if "*" in w else [w]
            res = CliRunner().invoke(main, args)
            assert res.exit_code in (0, 1), f"{example}\n{res.output}"
            assert "Error: unexpected" not in res.output and "Traceback" not in res.output
            if name in ("init", "fit", "report", "keygen", "publish", "diff", "compare", "section"):
                assert res.exit_code == 0, f"{example}\n{res.output}"
            if target:
                (folder / target).write_text(res.stdout, encoding="utf-8")
                assert (folder / target).stat().st_size > 0
            ran += 1
    assert ran >= 20
    from refit.select.recipe import read_recipe

    drafted = read_recipe(folder / "my-recipe.toml")  # `refit init store` wrote it
    assert (drafted.response, drafted.predictors, drafted.groups) == (
        "map_mm", ("bk_depth_cm",), "source")
    # what they wrote, re-opened
    board = pd.read_csv(folder / "leaderboard.csv")
    assert list(board.columns)[:2] == ["rank", "candidate"] and len(board) > 5
    assert json.loads((folder / "problems.json").read_text())["n_rows"] == 46
    assert (folder / "reports" / "linear.html").is_file()
    signed = sorted((folder / "registry" / "map_from_bk_depth").glob("*.json.sig"))
    assert len(signed) == 1
    est = pd.read_csv(folder / "my-estimates.csv")
    assert est["propagation"].str.startswith("monte-carlo").any()
