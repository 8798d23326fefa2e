"""`refit report`: one self-contained HTML file holding the run's numbers.

The run is a small recipe on the demo scenario's store (the demo's invented data); the
checks read the HTML back with the standard library's html.parser and compare it with the
run folder's own files (leaderboard.csv, run.json, fits/*.json).
"""

from __future__ import annotations

import base64
import io
import json
import shutil
from html.parser import HTMLParser

import numpy as np
import pandas as pd
import pytest
from _harness import copy_demo_store, recipe_toml
from click.testing import CliRunner

from refit._util.numbers import reading_texts
from refit.cli.fit import fit as fit_cmd
from refit.cli.report import report
from refit.report.context import num


def report_recipe(store) -> str:
    """The report run's recipe, on the store at ``store``."""
    return recipe_toml(
        data={"store": store.as_posix()},
        subset={"vegetation": ["grassland", "shrubland", "savanna"], "parent_material": "loess",
                "age_ka": {"min": 5}},
        candidates={"directions": ["inverse", "forward"]},
        validation={"scheme": "group-kfold", "folds": 4, "repeats": 2, "groups": "source",
                    "seed": 7},
        intervals={"level": 0.9, "methods": ["analytic", "jackknife+"]})


class Page(HTMLParser):
    """Tags, attributes and text of an HTML page."""

    def __init__(self):
        super().__init__()
        self.tags, self.text = [], []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)

    @property
    def body(self) -> str:
        return " ".join(" ".join(self.text).split())


def parse(path) -> Page:
    p = Page()
    p.feed(path.read_text("utf-8"))
    p.close()
    return p


@pytest.fixture(scope="module")
def run_dir(tmp_path_factory):
    tmp = tmp_path_factory.mktemp("report")
    store = copy_demo_store(tmp / "store")
    recipe = tmp / "recipe.toml"
    recipe.write_text(report_recipe(store), "utf-8")
    out = tmp / "run"
    res = CliRunner().invoke(fit_cmd, [str(recipe), "--out", str(out), "--quiet"])
    assert res.exit_code == 0, res.output
    return out


@pytest.fixture(scope="module")
def written(run_dir):
    out = run_dir.parent / "reports" / "r.html"
    res = CliRunner().invoke(report, [str(run_dir), "--out", str(out)])
    assert res.exit_code == 0, res.output
    assert f"Report written to {out}" in res.output      # -q: tests/cli/test_cli_quiet.py
    return out


def test_html_parses_and_embeds_its_images(written):
    page = parse(written)
    imgs = [a for t, a in page.tags if t == "img"]
    assert len(imgs) == 7            # six figures and the per-source panel
    for a in imgs:
        assert a["src"].startswith("data:image/png;base64,")
        raw = base64.b64decode(a["src"].split(",", 1)[1])
        assert raw[:8] == b"\x89PNG\r\n\x1a\n"
        assert a.get("alt")


def test_html_needs_no_network(written):
    page = parse(written)
    for tag, attrs in page.tags:
        for key in ("src", "href", "data", "poster", "action"):
            value = attrs.get(key) or ""
            assert not value.lower().startswith(("http:", "https:", "//")), (tag, attrs)
        assert tag not in ("script", "link", "iframe", "object")
    assert "@import" not in written.read_text("utf-8")
    assert "url(" not in written.read_text("utf-8")


def test_html_holds_the_runs_numbers(run_dir, written):
    body = parse(written).body
    run = json.loads((run_dir / "run.json").read_text())
    board = pd.read_csv(run_dir / "leaderboard.csv")
    assert run["dataset"]["sha256"] in body
    assert f"version {run['dataset']['version']}" in body
    assert f"kept {run['subset']['rows_after']} of {run['subset']['rows_before']} records" \
        in body
    for r in board.itertuples():
        assert r.candidate in body
        assert num(r.rmsep) in body and num(r.interval_score) in body
    top = json.loads((run_dir / "fits" / (board.candidate[0].replace("/", "__")
                                          .replace("+", "-plus") + ".json")).read_text())
    for c in top["coefficients"]:
        assert num(c, 6) in body
    assert "for research, not for engineering, hazard or regulatory decisions" in body
    assert f"refit report {run_dir}" in body
    assert "refit fit" in body
    opt = json.loads((run_dir / "leaderboard.json").read_text())["verdict"]["optimism"]
    assert f"{opt['median_rmsep_ratio']:.2f}×" in body


def test_forward_candidate_on_request(run_dir, tmp_path):
    out = tmp_path / "fw.html"
    res = CliRunner().invoke(report, [str(run_dir), "--out", str(out), "--quiet",
                                      "--candidate", "quadratic__ols__forward__analytic"])
    assert res.exit_code == 0, res.output
    body = parse(out).body
    assert "reported as asked" in body
    assert "Forward fit: bk_depth_cm regressed on map_mm" in body
    assert "bk_depth_cm = " in body and "map_mm²" in body


def test_refuses_to_overwrite_and_unknown_candidate(run_dir, written):
    res = CliRunner().invoke(report, [str(run_dir), "--out", str(written)])
    assert res.exit_code == 2 and "--overwrite" in res.output
    res = CliRunner().invoke(report, [str(run_dir), "--out", str(written), "--overwrite",
                                      "--candidate", "cubic__ols__inverse__analytic"])
    assert res.exit_code == 2 and "choose one of" in res.output


def test_moved_data_named_and_found_with_store(run_dir, tmp_path):
    moved = tmp_path / "run"
    shutil.copytree(run_dir, moved)
    store = run_dir.parent / "store"
    meta = json.loads((moved / "run.json").read_text())
    meta["dataset"]["path"] = str(tmp_path / "gone")
    (moved / "run.json").write_text(json.dumps(meta))
    res = CliRunner().invoke(report, [str(moved), "--out", str(tmp_path / "a.html")])
    assert res.exit_code == 2
    assert "not found" in res.output and "--store" in res.output
    res = CliRunner().invoke(report, [str(moved), "--out", str(tmp_path / "a.html"),
                                      "--store", str(store), "--quiet"])
    assert res.exit_code == 0, res.output


def test_a_run_the_data_do_not_reproduce_is_refused(run_dir, tmp_path):
    moved = tmp_path / "run"
    shutil.copytree(run_dir, moved)
    path = moved / "fits" / "linear__ols__inverse__analytic.json"
    rec = json.loads(path.read_text())
    rec["coefficients"] = list(np.asarray(rec["coefficients"]) * 1.01)
    # rehashed and spelled as refit writes, so the one reader passes it: the refit is
    # what catches it
    from refit.coefficients.format import dumps, with_hash

    path.write_text(dumps(with_hash(rec)), "utf-8")
    res = CliRunner().invoke(report, [str(moved), "--out", str(tmp_path / "b.html"),
                                      "--candidate", "linear__ols__inverse__analytic"])
    assert res.exit_code == 1
    assert "does not reproduce the run's coefficients" in res.output


def test_missing_run_folder_is_a_usage_error(tmp_path):
    res = CliRunner().invoke(report, [str(tmp_path / "nope"), "--out",
                                      str(tmp_path / "c.html")])
    assert res.exit_code == 2 and "run folder" in res.output
    assert not (tmp_path / "c.html").exists()


# ----------------------------------------------------------------- the fits compared
@pytest.fixture(scope="module")
def compared(run_dir):
    """A `refit compare` folder: the run's top fit and a published equation on the demo
    fossils (some rows cannot be evaluated, so compare exits 1 but writes both files)."""
    from refit._util.resources import demo_dir
    from refit.cli.compare import compare
    from refit.demo import published_equations

    board = pd.read_csv(run_dir / "leaderboard.csv")
    top = run_dir / "fits" / (board.candidate[0].replace("/", "__")
                              .replace("+", "-plus") + ".json")
    retallack = [p for p in published_equations() if "bk_depth" in p.name][0]
    out = run_dir.parent / "compare"
    res = CliRunner().invoke(compare, [str(top), str(retallack), "--fossils",
                                       str(demo_dir() / "fossils.csv"), "--out", str(out)])
    assert res.exit_code in (0, 1), res.output
    assert (out / "comparison.csv").is_file() and (out / "comparison.png").is_file()
    assert "Drawn: all 14 panel(s) (14 paleosol(s)) in 2 figure file(s)" in res.output
    assert str(out / "comparison-2.png") in res.output
    return out


def comparison_image(page):
    return [a for t, a in page.tags if t == "img" and "compared fits" in a.get("alt", "")]


def test_report_embeds_the_comparison_when_given(run_dir, compared, tmp_path):
    from PIL import Image

    out = tmp_path / "cmp.html"
    res = CliRunner().invoke(report, [str(run_dir), "--out", str(out), "--quiet",
                                      "--compare", str(compared)])
    assert res.exit_code == 0, res.output
    page = parse(out)
    imgs = comparison_image(page)
    # every paleosol drawn: 14 demo paleosols = 14 panels, 12 a page -> 2 images
    pages = sorted(compared.glob("comparison*.png"))
    assert len(imgs) == len(pages) == 2
    assert len([t for t, _ in page.tags if t == "img"]) == 7 + len(pages)
    assert imgs[0]["src"].startswith("data:image/png;base64,")
    raw = base64.b64decode(imgs[0]["src"].split(",", 1)[1])
    # drawn from comparison.csv by the function `refit compare` drew comparison.png with:
    # the same picture size (PNG header, ISO/IEC 15948)
    with Image.open(compared / "comparison.png") as ref:
        assert Image.open(io.BytesIO(raw)).size == ref.size
    body = page.body
    table = pd.read_csv(compared / "comparison.csv")
    assert f"The comparison table ({len(table)} rows" in body
    for r in table.dropna(subset=["estimate"]).itertuples():
        # no posterior in this comparison: the posterior cell stays empty
        # estimate and interval at one resolution (tests/util/test_reading_numbers.py)
        est, lo, hi = reading_texts(r.estimate, r.lower, r.upper, missing="", infinity="∞")
        assert f"{r.paleosol_id} {r.fit} {est} {lo} to {hi} frequentist {r.unit}" in body
    assert "Fits compared." in body and "research use" in body
    assert f"{table['paleosol_id'].nunique()} paleosol(s)" in body
    assert f"--compare {compared}" in body          # the command that rewrites it
    assert 'href="#comparison"' in out.read_text("utf-8")


def test_report_embeds_compares_own_pages_only_while_they_show_the_table(run_dir, compared,
                                                                         tmp_path):
    # `refit compare` stores the table's SHA-256 in each page (a PNG tEXt chunk, ISO/IEC
    # 15948); the report embeds those very bytes while the hash matches the table (no
    # second drawing), and redraws from the table once the table is edited
    import hashlib
    import shutil

    from refit.apply.compare import TABLE_HASH_KEY

    digest = hashlib.sha256((compared / "comparison.csv").read_bytes()).hexdigest()
    from PIL import Image

    for png in sorted(compared.glob("comparison*.png")):
        with Image.open(png) as im:
            assert im.text[TABLE_HASH_KEY] == digest

    def embedded(folder, name):
        out = tmp_path / name
        res = CliRunner().invoke(report, [str(run_dir), "--out", str(out), "--quiet",
                                          "--compare", str(folder)])
        assert res.exit_code == 0, res.output
        return [base64.b64decode(a["src"].split(",", 1)[1])
                for a in comparison_image(parse(out))]

    on_disk = [(compared / n).read_bytes() for n in ("comparison.png", "comparison-2.png")]
    assert embedded(compared, "same.html") == on_disk
    edited = tmp_path / "edited"
    shutil.copytree(compared, edited)
    table = pd.read_csv(edited / "comparison.csv")
    row = table["estimate"].first_valid_index()
    table.loc[row, "estimate"] = table.loc[row, "estimate"] + 1.0
    table.to_csv(edited / "comparison.csv", index=False)
    redrawn = embedded(edited, "edited.html")
    assert len(redrawn) == len(on_disk) and redrawn[0] != on_disk[0]
    with Image.open(io.BytesIO(redrawn[0])) as im:
        assert TABLE_HASH_KEY not in im.text      # drawn here, from the edited table


def test_report_without_comparison_has_no_comparison_section(written):
    page = parse(written)
    assert comparison_image(page) == []
    html = written.read_text("utf-8")
    assert 'id="comparison"' not in html and "Fits compared" not in page.body


def test_comparison_folder_without_its_table_is_refused(run_dir, tmp_path):
    empty = tmp_path / "nothing"
    empty.mkdir()
    res = CliRunner().invoke(report, [str(run_dir), "--out", str(tmp_path / "d.html"),
                                      "--compare", str(empty)])
    assert res.exit_code == 2 and "comparison.csv" in res.output
    assert not (tmp_path / "d.html").exists()
    bad = tmp_path / "bad"
    bad.mkdir()
    (bad / "comparison.csv").write_text("paleosol_id,estimate\nP1,3\n", "utf-8")
    res = CliRunner().invoke(report, [str(run_dir), "--out", str(tmp_path / "d.html"),
                                      "--compare", str(bad)])
    assert res.exit_code == 1 and "lacks the column" in res.output


# ------------------------------------------------------- run files of the wrong shape
def test_what_refit_fit_writes_meets_the_run_folder_schema(run_dir):
    # the writer's own output against schemas/run.folder.schema.json, checked by the
    # jsonschema package's Draft 2020-12 validator (the reference implementation here)
    import jsonschema

    from refit._util.resources import schemas_dir

    schema = json.loads((schemas_dir() / "run.folder.schema.json").read_text("utf-8"))
    jsonschema.Draft202012Validator.check_schema(schema)
    for part, name in (("run", "run.json"), ("leaderboard", "leaderboard.json")):
        content = json.loads((run_dir / name).read_text("utf-8"))
        v = jsonschema.Draft202012Validator({"$ref": f"#/$defs/{part}",
                                             "$defs": schema["$defs"]})
        assert list(v.iter_errors(content)) == [], name


@pytest.mark.parametrize("name, text, says", [
    ("run.json", "[1, 2]", "$: [1, 2] is not of type 'object'"),
    ("run.json", '{"dataset": 3}', "'created' is a required property"),
    ("run.json", "EDIT-dataset", "$.dataset: 3 is not of type 'object'"),
    ("run.json", "EDIT-seed", "$.seed: 'x' is not of type 'integer'"),
    ("leaderboard.json", "EDIT-rows", "$.rows: 'x' is not of type 'array'"),
    ("leaderboard.json", "{}", "'function_id' is a required property"),
])
def test_a_run_file_of_the_wrong_shape_is_refused_with_where(run_dir, tmp_path, name, text,
                                                            says):
    bad = tmp_path / "run"
    shutil.copytree(run_dir, bad)
    if text.startswith("EDIT-"):
        key = text[5:]
        content = json.loads((bad / name).read_text("utf-8"))
        content[key] = 3 if key == "dataset" else "x"
        text = json.dumps(content)
    (bad / name).write_text(text, "utf-8")
    res = CliRunner().invoke(report, [str(bad), "--out", str(tmp_path / "r.html")])
    assert res.exit_code == 1, res.output
    assert f"{bad / name} is not a run file refit wrote: " in res.output
    assert says in res.output and "rerun `refit fit --out RUN`" in res.output
    assert "refit bug" not in res.output and not (tmp_path / "r.html").exists()


def test_an_edited_candidate_file_in_a_run_is_refused_by_the_one_reader(run_dir, tmp_path):
    bad = tmp_path / "run"
    shutil.copytree(run_dir, bad)
    board = pd.read_csv(bad / "leaderboard.csv")
    target = bad / "fits" / f"{board.candidate[0].replace('+', '-plus')}.json"
    target.write_text(target.read_text("utf-8").replace('"n": ', '"n":  ', 1), "utf-8")
    res = CliRunner().invoke(report, [str(bad), "--out", str(tmp_path / "r.html")])
    assert res.exit_code == 1 and "bytes check failed" in res.output, res.output


def test_comparison_section_shows_the_posterior_beside_the_interval(tmp_path):
    # a comparison table with a forward file's posterior and a combined posterior row (as
    # `refit compare --posterior` writes it): the report's table puts the posterior median
    # and interval beside the frequentist interval, says which kind each row is, and the
    # caption explains the hatched green bars
    from refit.report.comparison import section

    base = {"response": "map_mm", "unit": "mm", "level": 0.95, "cv_coverage": np.nan,
            "cv_scheme": "", "problem": "", "function_id": "f", "version": "1.0.0"}
    rows = [
        {**base, "paleosol_id": "P1", "fit": "f 1.0.0 a", "estimate": 650.0, "lower": 400.0,
         "upper": 900.0, "interval": "analytic", "flags": "", "origin": "refit",
         "posterior_median": 660.0, "posterior_lower": 430.0, "posterior_upper": 880.0,
         "posterior_flags": ""},
        {**base, "paleosol_id": "P1", "fit": "posterior a + b", "estimate": 700.0,
         "lower": 560.0, "upper": 840.0, "interval": "posterior", "flags": "",
         "origin": "posterior", "function_id": "posterior", "posterior_median": 700.0,
         "posterior_lower": 560.0, "posterior_upper": 840.0,
         "posterior_flags": "proxies-disagree"},
    ]
    folder = tmp_path / "cmp"
    folder.mkdir()
    pd.DataFrame(rows).to_csv(folder / "comparison.csv", index=False)
    got = section(folder, "f")
    assert got["posterior"] is True
    assert got["header"][3:6] == ["interval", "kind", "posterior median (interval)"]
    assert got["rows"][0][3:6] == ["400 to 900", "frequentist", "660 (430 to 880)"]
    assert got["rows"][1][4:6] == ["posterior (Bayesian, proxies multiplied)",
                                   "700 (560 to 840); proxies-disagree"]
    assert "Green hatched bars" in got["caption"] and "research use" in got["caption"]
    # a table written before the posterior columns existed still reads, without them
    pd.DataFrame(rows[:1]).drop(columns=["posterior_median", "posterior_lower",
                                         "posterior_upper", "posterior_flags"]).to_csv(
        folder / "comparison.csv", index=False)
    old = section(folder, "f")
    assert old["posterior"] is False and old["rows"][0][5] == ""
    assert "Green hatched" not in old["caption"]


def test_comparison_caption_counts_refits_apart_from_the_posterior():
    # the posterior row is refit's own but not a fit with a cross-validated coverage: the
    # caption names its colour and does not count it among the blue bars
    from refit.report.comparison import caption

    table = pd.DataFrame({"paleosol_id": ["P1"] * 3,
                          "fit": ["map_from_bk_depth 1.0.0 linear__ols__inverse__analytic",
                                  "Retallack 1994, from bk_depth", "posterior combined"],
                          "origin": ["refit", "literature", "posterior"],
                          "function_id": ["map_from_bk_depth", "map_from_bk_depth",
                                          "posterior"]})
    text = caption(table, None, "comparison.csv", "map_from_bk_depth")
    assert "blue bars are the 1 fit(s) made with refit" in text
    assert "Green hatched bars with an open circle are the posterior" in text
    plain = caption(table.iloc[:2], None, "comparison.csv", "map_from_bk_depth")
    assert "Green hatched" not in plain


def test_banner_holds_the_general_caution_and_a_fit_s_own_notes_go_to_the_flags():
    # the demo's mixed fit carried "between-source: 1 group(s) hold a single soil; ..."
    # glued after the research-use caution in the banner; it is a note on this fit
    from types import SimpleNamespace

    from refit.coefficients import CAUTION
    from refit.report.context import cautions_and_flags

    note = "between-source: 1 group(s) hold a single soil; they inform the between-source " \
           "variance only"
    domain = "Beyond bk_depth_cm 289 the equation extrapolates."
    inp = SimpleNamespace(run={"cautions": [CAUTION]},
                          record={"cautions": [CAUTION, domain, note]})
    out = cautions_and_flags(inp, ["8 of 20 candidates fall short.", domain])
    assert out["cautions"] == [CAUTION]
    assert out["flags"] == ["8 of 20 candidates fall short.", domain,
                            "Between-source: 1 group(s) hold a single soil; they inform the "
                            "between-source variance only."]


def test_residual_standard_error_with_its_unit_and_a_readable_df():
    from refit.report.context import _unit_suffix, df_text

    assert df_text(51.7385) == "51.7" and df_text(117.0) == "117" and df_text(None) == ""
    record = {"response": {"name": "map_mm", "unit": "mm"},
              "predictors": [{"name": "bk_depth_cm", "unit": "cm"}]}
    assert _unit_suffix(record, "map_mm", False) == " mm"
    assert _unit_suffix(record, "bk_depth_cm", False) == " cm"  # a forward fit's residuals
    assert _unit_suffix(record, "ln(map_mm)", True) == ""
