"""The invented demo scenario (calib_demo/): reproducible, shaped as promised, and honest.

The scenario is invented (see calib_demo/README.md); these tests check that its generator
is reproducible, that the committed files are what the generator writes, that the tables
have the promised shape and science, and that refit's own check and admit treat every
deliberately bad incoming row for the reason written in its ``Notes`` cell.
"""

from __future__ import annotations

import importlib.util
import json
import shutil
import tomllib

import numpy as np
import pandas as pd
import pytest

from refit._util.resources import demo_dir, schemas_dir

DEMO = demo_dir()


@pytest.fixture(scope="module")
def gen():
    """The generator module, loaded from its file (calib_demo/ is not a package)."""
    spec = importlib.util.spec_from_file_location("make_demo", DEMO / "make_demo.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def tables(gen):
    return gen.generate()


@pytest.fixture(scope="module")
def base(tables):
    return tables["base_soils"]


# --- reproducibility ------------------------------------------------------------------------

def test_generator_is_reproducible_with_its_seed(gen, tables):
    again = gen.generate(gen.SEED)
    for name, frame in tables.items():
        pd.testing.assert_frame_equal(frame, again[name], check_exact=True)


def test_another_seed_gives_other_soils(gen, base):
    other = gen.make_base_soils(gen.SEED + 1)
    assert not np.array_equal(other["map_mm"].to_numpy(), base["map_mm"].to_numpy())


def test_committed_files_equal_a_fresh_run(gen, tables, tmp_path):
    gen.write_csv(tables["base_soils"], tmp_path / "base_soils.csv")
    gen.write_incoming(tables["incoming_soils"], tmp_path / "incoming_soils.csv")
    gen.write_csv(tables["fossils"], tmp_path / "fossils.csv")
    for name in ("base_soils.csv", "incoming_soils.csv", "fossils.csv"):
        assert (tmp_path / name).read_bytes() == (DEMO / name).read_bytes(), (
            f"calib_demo/{name} differs from the generator's output; "
            "run `python calib_demo/make_demo.py` and commit")


# --- base soils: shape and science ----------------------------------------------------------

def test_base_soils_shape(base):
    assert 280 <= len(base) <= 320
    assert base["profile_id"].is_unique
    assert base["map_mm"].min() <= 160 and base["map_mm"].max() >= 1380
    assert 7 <= base["source"].nunique() <= 9
    assert 3 <= base["region"].nunique() <= 4
    # every survey described soils in more than one region (sources span regions)
    spread = base[base["sequence_id"] == ""].groupby("source")["region"].nunique()
    assert len(spread) >= 7 and (spread >= 2).all()
    kinds = base.groupby("sequence_id")["sequence_kind"].first().drop("", errors="ignore")
    assert kinds.value_counts().to_dict() == {
        "climosequence": 3, "toposequence": 1, "chronosequence": 1}


def test_base_soils_use_the_schema_columns(base):
    descriptor = json.loads((schemas_dir() / "calibration.table.json").read_text("utf-8"))
    fields = [f["name"] for f in descriptor["fields"]]
    canonical = [c for c in base.columns if c != "region"]
    assert canonical == [f for f in fields if f in canonical]  # schema order
    assert {"profile_id", "latitude", "longitude", "source", "map_mm"} <= set(canonical)


def test_base_soils_use_the_controlled_vocabularies(base):
    vocab = json.loads((schemas_dir() / "vocabularies.json").read_text("utf-8"))
    for column in ("vegetation", "parent_material", "soil_order", "sequence_kind"):
        used = set(base[column]) - {""}
        assert used <= set(vocab[column]), (column, used - set(vocab[column]))


def test_base_soils_are_clean_for_refit_check(base):
    from refit.curate.checks import check_frame

    report = check_frame(base.astype(object).where(base.notna(), ""))
    assert report.ok, report.errors.to_string()
    # only the deliberate carbonate soils above 760 mm warn (Royer 1999 limit, common practice)
    assert set(report.warnings["rule"]) == {"carbonate-in-wet-climate"}
    wet_bk = (base["bk_depth_cm"].notna() & (base["map_mm"] > 760)).sum()
    assert len(report.warnings) == wet_bk and 5 <= wet_bk <= 20


def test_base_soils_horizons_follow_the_climate(base):
    assert (base["mar_mm"] < base["map_mm"]).all()
    assert base["mat_c"].between(8, 22).all()
    assert base.loc[base["map_mm"] > 1000, "bk_depth_cm"].isna().all()
    gyp = base[base["by_depth_cm"].notna()]
    assert len(gyp) >= 5 and (gyp["map_mm"] < 300).all()
    assert (gyp["by_depth_cm"] > gyp["bk_depth_cm"] + gyp["bk_thickness_cm"]).all()
    bk = base.dropna(subset=["bk_depth_cm"])
    assert (bk["bk_thickness_cm"] > 0).all()
    # thickness grows with seasonality (MAR): a positive, clear correlation
    assert np.corrcoef(bk["mar_mm"], bk["bk_thickness_cm"])[0, 1] > 0.5


def test_base_soils_oxides_and_cia_k(base):
    from scipy import stats

    ox = base.dropna(subset=["sio2_wt"])
    total = ox.filter(like="_wt").sum(axis=1)
    assert total.between(95, 100).all()
    # CIA-K = 100 Al2O3/(Al2O3 + CaO + Na2O), molar proportions (Harnois 1988, Sedimentary
    # Geology 55:319, as CIW); molar masses are the standard values [g/mol]
    al, ca, na = ox["al2o3_wt"] / 101.96, ox["cao_wt"] / 56.08, ox["na2o_wt"] / 61.98
    cia_k = 100 * al / (al + ca + na)
    fit = stats.linregress(ox["map_mm"], cia_k)
    at = {p: fit.intercept + fit.slope * p for p in (200, 1400)}
    assert 45 <= at[200] <= 55 and 80 <= at[1400] <= 90  # design: ~50 -> ~85
    assert len(ox) >= 100


def test_bk_depth_relation_against_statsmodels(base):
    """polyfit and statsmodels OLS agree; R^2 lies in the design band 0.4-0.8.

    The band is the scenario's design goal (a realistic, not perfect, calibration: the
    published depth-to-Bk fits report R^2 of about 0.5, e.g. Retallack 2005, from memory).
    """
    import statsmodels.api as sm

    bk = base.dropna(subset=["bk_depth_cm"])
    x, y = bk["bk_depth_cm"].to_numpy(float), bk["map_mm"].to_numpy(float)
    slope, intercept = np.polyfit(x, y, 1)
    ols = sm.OLS(y, sm.add_constant(x)).fit()
    np.testing.assert_allclose([intercept, slope], ols.params, rtol=1e-8)
    assert 0.4 <= ols.rsquared <= 0.8
    assert slope > 0
    # depth deepens with MAP in the design range: ~20 cm at 200 mm, ~100 cm at 650 mm
    med = bk.groupby(pd.cut(bk["map_mm"], [150, 300, 550, 750]), observed=True)[
        "bk_depth_cm"].median()
    assert med.iloc[0] < 40 and 70 < med.iloc[2] < 130 and med.is_monotonic_increasing


# --- incoming soils ---------------------------------------------------------------------------

def test_incoming_file_looks_like_a_spreadsheet_export():
    raw = (DEMO / "incoming_soils.csv").read_bytes()
    assert raw.startswith(b"\xef\xbb\xbf")  # UTF-8 byte-order mark
    title, header = raw[3:].decode("utf-8").splitlines()[:2]
    assert "inches" in title and ";" not in title
    assert header.split(";")[:6] == ["Profile ID", "Lat", "Long", "Source", "region",
                                     "MAP (in)"]
    assert "MAT (°F)" in header


def test_incoming_labels_one_bad_row_per_kind(gen, tables):
    notes = tables["incoming_soils"]["Notes"].fillna("")
    assert len(notes) == 46
    bad = notes[notes.str.startswith("demo: bad row - ")].str.removeprefix("demo: bad row - ")
    counts = bad.value_counts().to_dict()
    expected = {label: 1 for label, _, _ in gen.BAD_ROWS if label not in gen.ADMITTED_BAD_ROWS}
    expected["duplicated id within the file (both copies)"] = 2
    expected[gen.CIA_K_SLIP_ROW[0]] = 1
    assert notes.iloc[-1] == "demo: bad row - " + gen.CIA_K_SLIP_ROW[0]  # appended last
    assert counts == expected
    assert len(gen.BAD_ROWS) == 18
    assert notes.str.startswith("demo: warning row").sum() == 2
    assert (notes == "").sum() == 25
    assert gen.UNMAPPED_HEADER in tables["incoming_soils"].columns


def test_refit_check_flags_each_bad_row_for_its_reason(gen):
    checks = pytest.importorskip("refit.curate.checks")
    report = checks.check_file(DEMO / "incoming_soils.csv")
    notes = report.frame["notes"].fillna("")
    errors = report.errors
    rows = pd.Series(report.source_rows, index=report.frame.index)
    for label, rule, _ in gen.BAD_ROWS:
        if rule.startswith("duplicate-") or rule == "suspect-residual" \
                or label in gen.ADMITTED_BAD_ROWS:
            continue  # found by admit against the store, not by check; or a warning
        where = notes.index[notes == "demo: bad row - " + label]
        got = errors[errors["row"].isin(rows[where])]
        assert set(got["rule"]) == {rule}, (label, got[["rule", "message"]].to_string())
        assert got["row"].nunique() == len(where)
    erring = set(errors["row"].dropna().astype(int))
    clean = rows[~notes.str.startswith("demo: bad row")]
    assert not erring & set(clean), "a good row was reported as an error"
    warned = report.warnings[report.warnings["row"].notna()]
    assert set(warned["rule"]) == {"carbonate-in-wet-climate", "bk-depth-without-thickness"}
    for r in warned["row"]:
        note = notes[rows[rows == r].index[0]]
        # the MAP typed in mm (7620 mm once converted from inches) also warns as wet
        assert note.startswith("demo: warning row") or "MAP typed in mm" in note, note
    unmapped = report.warnings[report.warnings["rule"] == "unmapped-column"]
    assert set(unmapped["column"]) == {"region", gen.UNMAPPED_HEADER}


# --- store and admit -------------------------------------------------------------------------

def test_store_holds_the_base_soils():
    records = DEMO / "store" / "records.csv"
    if not records.exists():
        pytest.skip("the demo store is not built yet (refit.curate.store.admit missing)")
    store = pd.read_csv(records, dtype={"profile_id": str}, keep_default_na=False)
    base = pd.read_csv(DEMO / "base_soils.csv", keep_default_na=False)
    assert list(store["profile_id"]) == list(base["profile_id"])
    manifest = json.loads((DEMO / "store" / "manifest.json").read_text("utf-8"))
    assert manifest["row_count"] == len(base) and manifest["version"] == 1


def test_admit_rejects_each_bad_row_for_its_reason(gen, tmp_path):
    store_mod = pytest.importorskip("refit.curate.store")
    if not (DEMO / "store" / "manifest.json").exists():
        pytest.skip("the demo store is not built yet")
    store = tmp_path / "store"
    shutil.copytree(DEMO / "store", store)
    result = store_mod.admit(DEMO / "incoming_soils.csv", store, today="2026-12-02")
    after = store_mod.open_store(store)
    assert (result.rows_read, result.accepted, result.rejected, result.suspect) == \
        (46, 27, 15, 4)
    added = after.records.iloc[300:]
    assert after.version == 2 and len(after.records) == 327
    notes = added["notes"].fillna("")
    assert (notes == "").sum() == 25 and notes.str.startswith("demo: warning row").sum() == 2
    probs = pd.read_csv(store / result.problems_file, keep_default_na=False)
    admitted_warnings = probs[(probs["severity"] == "warning") & (probs["outcome"] == "admitted")]
    assert sorted(admitted_warnings["rule"]) == ["bk-depth-without-thickness",
                                                 "carbonate-in-wet-climate"]
    # each single-row unit slip is suspect and the message names the unit it fits in
    # (the MAP of 5 mm is scored too: rejected already, and no other unit makes it fit)
    fits = {s["fits"] for s in result.suspect_rows}
    assert fits == {"millimeter", "centimeter", None}
    # the planted row held by the MAP on CIA-K pair alone: its CIA-K, worked from the oxides
    # with the molar masses Al2O3 101.96, CaO 56.08, Na2O 61.98 g/mol (IUPAC atomic weights):
    # 18/101.96 = 0.17654, 0.6/56.08 = 0.010699, 0.5/61.98 = 0.0080671 mol per 100 g, so
    # CIA-K = 100 * 0.17654 / 0.19531 = 90.39 (Harnois 1988 formula, from memory)
    [cia] = [s for s in result.suspect_rows if s["pos"] == 45]
    assert cia["pair"] == "MAP on CIA-K" and cia["z"] < -3.5 and cia["fits"] is None
    assert "at cia_k 90.39 (from al2o3_wt, cao_wt, na2o_wt)" in cia["message"]
    assert len({s["pos"] for s in result.suspect_rows if "fits if it is in mm" in s["message"]}) == 2
    assert len({s["pos"] for s in result.suspect_rows if "fits if it is in cm" in s["message"]}) == 1
    # the MAP typed in mm (7620 mm) is held by both reference pairs, each named in its reasons
    wet = [s for s in result.suspect_rows if s["value"] == pytest.approx(7620.0)]
    assert sorted(s["pair"] for s in wet) == ["MAP on CIA-K", "MAP on depth to Bk"]
    assert {u["column"] for u in result.unmapped} == {"region", gen.UNMAPPED_HEADER}
    # inches -> mm by the exact inch (NIST SP 811: 1 in = 25.4 mm): the warning row's 32.99 in
    warned = added[notes.str.startswith("demo: warning row - Bk horizon")].iloc[0]
    assert warned["map_mm"] == pytest.approx(32.99 * 25.4, abs=1e-9)
    reasons = _rejected_rules(store / result.quarantine_file, store / result.problems_file)
    for label, rule, _ in gen.BAD_ROWS:
        if label in gen.ADMITTED_BAD_ROWS:
            assert (added["notes"] == "demo: warning row - " + label).sum() == 1
            continue
        mine = reasons[reasons["notes"] == "demo: bad row - " + label]
        assert len(mine) >= 1, label
        # a rejected row is scored too: its reasons may add the residual (MAP of 5 mm)
        assert all(r - {"suspect-residual"} == {rule} or r == {rule} for r in mine["rules"]), \
            (label, mine["rules"].to_list())
    mine = reasons[reasons["notes"] == "demo: bad row - " + gen.CIA_K_SLIP_ROW[0]]
    assert mine["rules"].to_list() == [{"suspect-residual"}]
    held = pd.read_csv(store / result.quarantine_file, dtype=str, keep_default_na=False)
    assert held.iloc[-1]["_reasons"].count("reference pair 'MAP on CIA-K'") == 1
    assert "reference pair 'MAP on depth to Bk'" not in held.iloc[-1]["_reasons"]


def _rejected_rules(quarantine, problems) -> pd.DataFrame:
    """Each quarantined row's Notes cell and the set of error rules the store gave it."""
    rows = pd.read_csv(quarantine, dtype=str, keep_default_na=False)
    probs = pd.read_csv(problems, dtype={"row": "Int64"}, keep_default_na=False)
    errors = probs[probs["severity"].isin(["error", "suspect"])].groupby("row")["rule"].agg(set)
    return pd.DataFrame({"notes": rows["Notes"],
                         "rules": rows["_source_row"].astype(int).map(errors)})


# --- recipe and fossils ----------------------------------------------------------------------

def test_recipe_sections_and_subset_size(base):
    recipe = tomllib.loads((DEMO / "recipe.toml").read_text("utf-8"))
    assert list(recipe) == ["data", "subset", "function", "candidates", "validation",
                            "intervals"]
    assert recipe["data"] == {"store": "store"}
    assert recipe["function"] == {"id": "map_from_bk_depth", "response": "map_mm",
                                  "predictors": ["bk_depth_cm"]}
    assert recipe["candidates"]["directions"] == ["inverse", "forward"]
    assert recipe["validation"] == {"scheme": "group-kfold", "folds": 5, "repeats": 5,
                                    "groups": "source", "seed": 20261201}
    assert recipe["candidates"]["forms"] == ["linear", "quadratic"]
    assert recipe["candidates"]["estimators"] == ["ols", "huber", "mixed"]
    assert recipe["intervals"]["methods"] == ["analytic", "split-conformal", "jackknife+"]
    fitted = _recipe_subset(base, recipe).dropna(subset=["bk_depth_cm", "map_mm"])
    assert len(fitted) >= 100
    # grouped 5-fold by source needs at least 5 groups; the scenario promises 7 or more
    assert fitted["source"].nunique() >= 7


def _recipe_subset(base, recipe) -> pd.DataFrame:
    sub = recipe["subset"]
    keep = (base["vegetation"].isin(sub["vegetation"])
            & (base["parent_material"] == sub["parent_material"])
            & (base["age_ka"] >= sub["age_ka"]["min"]))
    return base[keep]


def test_grouped_cv_by_source_is_harder_than_random(base):
    """Source offsets make held-out surveys harder to predict than held-out rows.

    Out-of-fold RMSEP of a straight line (MAP from Bk depth) with scikit-learn's own
    splitters (KFold vs GroupKFold by source, 5 folds, 10 seeded shuffles each): the
    scenario is built so that grouped cross-validation is at least 8% worse.
    """
    from sklearn.linear_model import LinearRegression
    from sklearn.model_selection import GroupKFold, KFold, cross_val_predict

    recipe = tomllib.loads((DEMO / "recipe.toml").read_text("utf-8"))
    fitted = _recipe_subset(base, recipe).dropna(subset=["bk_depth_cm", "map_mm"])
    x = fitted[["bk_depth_cm"]].to_numpy(float)
    y = fitted["map_mm"].to_numpy(float)
    groups = fitted["source"].to_numpy()

    def rmsep(cv, **kw):
        pred = cross_val_predict(LinearRegression(), x, y, cv=cv, **kw)
        return np.sqrt(np.mean((y - pred) ** 2))

    random = np.mean([rmsep(KFold(5, shuffle=True, random_state=s)) for s in range(10)])
    grouped = np.mean([rmsep(GroupKFold(5, shuffle=True, random_state=s), groups=groups)
                       for s in range(10)])
    assert grouped > 1.08 * random, (grouped, random)


def test_fossils_table(tables):
    fossils = tables["fossils"]
    assert len(fossils) == 14 and fossils["section"].nunique() == 2
    # two placed where equations stop holding (see _edge_fossils in make_demo.py)
    assert set(fossils.loc[fossils["notes"].fillna("").str.startswith("demo:"),
                           "bk_depth_cm"]) == {3, 280}
    assert fossils["paleosol_id"].is_unique
    for col in ("level_m", "bk_depth_cm", "bk_depth_sd_cm", "bk_thickness_cm",
                "bk_thickness_sd_cm", "by_depth_cm", "burial_depth_km", "soil_order",
                "vegetation", "parent_material", "notes", "sio2_wt"):
        assert col in fossils.columns
    assert fossils["by_depth_cm"].notna().sum() < len(fossils) / 2
    gyp = fossils.dropna(subset=["by_depth_cm"])
    assert (gyp["by_depth_cm"] > gyp["bk_depth_cm"]).all()
    # burial deepens down-section: lower levels lie deeper
    for _, sec in fossils.groupby("section"):
        assert sec.sort_values("level_m")["burial_depth_km"].is_monotonic_decreasing


# --- the clustered compilation (calib_demo/make_clustered.py) ------------------------------

@pytest.fixture(scope="module")
def clustered_gen():
    """The clustered generator, loaded from its file (calib_demo/ is not a package)."""
    spec = importlib.util.spec_from_file_location("make_clustered",
                                                  DEMO / "make_clustered.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


@pytest.fixture(scope="module")
def clustered(clustered_gen):
    return clustered_gen.make_soils()


def test_clustered_files_equal_a_fresh_run(clustered_gen, clustered, tmp_path):
    clustered_gen.write_csv(clustered, tmp_path / "soils.csv")
    committed = DEMO / "clustered"
    assert (tmp_path / "soils.csv").read_bytes() == (committed / "soils.csv").read_bytes()
    assert clustered_gen.recipe_text().encode("utf-8") == \
        (committed / "recipe.toml").read_bytes()
    pd.testing.assert_frame_equal(clustered_gen.make_soils(clustered_gen.SEED), clustered,
                                  check_exact=True)
    other = clustered_gen.make_soils(clustered_gen.SEED + 1)
    assert not np.array_equal(other["map_mm"].to_numpy(), clustered["map_mm"].to_numpy())


def test_clustered_table_is_ten_sources_on_slices_of_the_depth_range(clustered_gen,
                                                                     clustered):
    from refit import check_file

    counts = clustered["source"].value_counts()
    assert len(counts) == 10 and (counts == 25).all()
    assert clustered["profile_id"].is_unique
    span = clustered.groupby("source")["bk_depth_cm"].agg(lambda v: v.max() - v.min())
    total = clustered["bk_depth_cm"].max() - clustered["bk_depth_cm"].min()
    assert (span <= clustered_gen.WINDOW_CM).all() and total > 2.5 * clustered_gen.WINDOW_CM
    report = check_file(DEMO / "clustered" / "soils.csv")   # refit's own check accepts it
    assert report.ok and report.n_rows == 250 and len(report.warnings) == 0


def test_clustered_between_to_within_sd_ratio_is_as_intended(clustered_gen, clustered):
    """statsmodels MixedLM (REML, map_mm ~ bk_depth_cm, random intercept by source) on
    the table recovers the between-source / within-source SD ratio the generator intended.

    Tolerance 0.15: the offsets are scaled to a sample SD of exactly 50 mm, so what
    remains is the within-source noise in each source's mean (50 / sqrt(25) = 10 mm, about
    4% of the between variance), the REML within SD's own error (about 1 / sqrt(2 x 240),
    5%) and the slope absorbing part of the offsets; a ratio of 0.5 or 2 fails.
    """
    import statsmodels.formula.api as smf

    m = smf.mixedlm("map_mm ~ bk_depth_cm", clustered,
                    groups=clustered["source"]).fit(reml=True)
    assert m.converged
    ratio = np.sqrt(float(m.cov_re.iloc[0, 0]) / float(m.scale))
    intended = clustered_gen.BETWEEN_SD_MM / clustered_gen.WITHIN_SD_MM
    assert intended == 1.0
    assert ratio == pytest.approx(intended, abs=0.15)
    assert np.sqrt(m.scale) == pytest.approx(clustered_gen.WITHIN_SD_MM, rel=0.1)
    # the slope the generator drew MAP with (mm per cm), within two standard errors
    assert abs(m.fe_params["bk_depth_cm"] - clustered_gen.SLOPE_MM_PER_CM) \
        < 2 * m.bse_fe["bk_depth_cm"]


def test_clustered_recipe_names_what_the_scenario_needs():
    recipe = tomllib.loads((DEMO / "clustered" / "recipe.toml").read_text("utf-8"))
    assert recipe["data"] == {"table": "soils.csv"}
    assert recipe["function"]["id"] == "map_from_bk_depth"
    assert recipe["candidates"]["estimators"] == ["ols", "mixed"]
    assert recipe["validation"]["scheme"] == "group-kfold"
    assert recipe["validation"]["groups"] == "source"
    assert recipe["intervals"] == {"level": 0.95, "methods": [
        "analytic", "jackknife+", "group-jackknife+", "group-cv+"]}
