"""Admitting soils a reviewer would trust: unit slips, suspect rows, mixed units, accounting.

References computed in the tests:
- statsmodels ``RLM`` with ``HuberT`` (t = 1.345) and ``scale_est="mad"`` for the robust line;
- statsmodels ``OLSInfluence.resid_studentized_external`` (the externally studentised
  residual) for the standardised leave-one-out predictive residual with an OLS reference;
- unit factors: NIST SP 811 (appendix B): 1 in = 25.4 mm exactly, 1 m = 100 cm, 1 cm = 10 mm.
The store and incoming tables are seeded simulations (invented data).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from refit.curate import consistency as cs
from refit.curate.store import admit, open_store
from refit.errors import InvalidDataError, UsageError

DAY = "2025-03-01"


def soils(n, seed, *, start=0, prefix="S"):
    """Seeded soils on the line MAP = 150 + 3.5 * Bk depth [mm, cm], SD 40 mm."""
    rng = np.random.default_rng(seed)
    depth = np.round(rng.uniform(20, 150, n), 1)
    return pd.DataFrame({
        "profile_id": [f"{prefix}-{k}" for k in range(start, start + n)],
        "latitude": np.round(-40 - rng.uniform(0, 1, n), 5),
        "longitude": np.round(52 + rng.uniform(0, 1, n), 5), "source": "SIM-2025",
        "map_mm": np.round(150 + 3.5 * depth + rng.normal(0, 40, n), 1),
        "bk_depth_cm": depth, "bk_thickness_cm": 30.0})


@pytest.fixture
def store(tmp_path):
    path = tmp_path / "store"
    soils(120, 1).to_csv(tmp_path / "base.csv", index=False)
    admit(tmp_path / "base.csv", path, today=DAY)
    return path


def write(tmp_path, frame, name="new.csv"):
    frame.to_csv(tmp_path / name, index=False)
    return tmp_path / name


# --- the reference line and the residual, against statsmodels -------------------------------

def test_huber_line_matches_statsmodels_rlm():
    sm = pytest.importorskip("statsmodels.api")
    rng = np.random.default_rng(7)
    x = rng.uniform(10, 200, 200)
    y = 150 + 3 * x + rng.standard_t(3, 200) * 60
    coef, scale, *_ = cs.huber_line(x, y)
    ref = sm.RLM(y, sm.add_constant(x), M=sm.robust.norms.HuberT()).fit()  # scale_est="mad"
    np.testing.assert_allclose(coef, ref.params, rtol=1e-6)
    assert scale == pytest.approx(ref.scale, rel=1e-6)


def test_loo_predictive_residual_is_the_externally_studentised_residual():
    sm = pytest.importorskip("statsmodels.api")
    from statsmodels.stats.outliers_influence import OLSInfluence

    frame = soils(60, 3)
    ref = cs.reference_fit(frame, "map_mm", "bk_depth_cm", robust=False)
    new_x, new_y = np.array([40.0, 140.0, 95.0]), np.array([900.0, 300.0, 480.0])
    z = ref.z(new_x, new_y)
    for k in range(3):  # each new soil appended alone to the store: its external residual
        x = np.append(frame["bk_depth_cm"], new_x[k])
        y = np.append(frame["map_mm"], new_y[k])
        infl = OLSInfluence(sm.OLS(y, sm.add_constant(x)).fit())
        assert z[k] == pytest.approx(infl.resid_studentized_external[-1], rel=1e-9)


# --- unit slips of whole columns: refused with the evidence, --unit confirms ------------------

@pytest.mark.parametrize("column, header, factor, likely", [
    ("map_mm", "map_mm", 1 / 25.4, "inches"),      # MAP typed in inches (NIST SP 811)
    ("bk_depth_cm", "bk_depth_cm", 1 / 100, "metres"),   # depths in metres
    ("bk_depth_cm", "bk_depth_cm", 10, "mm"),       # depths in mm under a cm header
])
def test_column_slip_is_refused_once_with_evidence(tmp_path, store, column, header, factor,
                                                   likely):
    new = soils(20, 5, start=500)
    new[column] = np.round(new[column] * factor, 4)
    before = (store / "manifest.json").read_bytes()
    with pytest.raises(InvalidDataError) as err:
        admit(write(tmp_path, new), store, today=DAY)
    text = str(err.value)
    assert f"looks like {likely}" in text and "median" in text and "--unit" in text
    assert text.count("looks like") == 1 and "nothing was written" in text
    assert (store / "manifest.json").read_bytes() == before
    unit = {"inches": "in", "metres": "m", "mm": "mm"}[likely]
    result = admit(write(tmp_path, new), store, today=DAY, units={header: unit})
    assert result.accepted == 20 and result.suspect == 0
    back = open_store(store).records.set_index("profile_id").loc["S-500", column]
    assert back == pytest.approx(new.loc[0, column] / factor, rel=1e-9)


def test_unit_option_for_a_missing_column_is_a_usage_error(tmp_path, store):
    with pytest.raises(UsageError, match="does not have"):
        admit(write(tmp_path, soils(5, 9, start=700)), store, units={"MAP (in)": "mm"})


# --- single rows: suspect, with the unit they fit in ------------------------------------------

def test_single_row_slips_are_suspect_and_say_which_unit_fits(tmp_path, store):
    new = soils(20, 11, start=900)
    new.loc[0, "map_mm"] = round(new.loc[0, "map_mm"] / 25.4, 2)      # inches
    new.loc[1, "bk_depth_cm"] = round(new.loc[1, "bk_depth_cm"] * 10, 1)  # mm for cm
    result = admit(write(tmp_path, new), store, today=DAY)
    # the MAP in inches (about 16 mm) is also below any Bk soil: rejected, and its reasons
    # say which unit it fits in; the depth in mm is legal alone: suspect
    assert (result.rows_read, result.accepted, result.rejected, result.suspect) == \
        (20, 18, 1, 1)
    by_row = {s["pos"]: s for s in result.suspect_rows}
    assert "This value fits if it is in inches" in by_row[0]["message"]
    assert "fits if it is in mm" in by_row[1]["message"]
    assert abs(by_row[0]["z"]) > cs.SUSPECT_Z and "threshold is |z| 3.5" in by_row[0]["message"]
    quarantine = pd.read_csv(store / result.quarantine_file, dtype=str)
    assert set(quarantine["profile_id"]) == {"S-900", "S-901"}
    assert quarantine["_reasons"].str.contains("suspect-residual").all()
    assert quarantine.set_index("profile_id").loc["S-900", "_reasons"].count(
        "map-below-bk-minimum") == 1


def test_accept_suspect_admits_them_with_a_warning(tmp_path, store):
    new = soils(10, 12, start=950)
    new.loc[0, "bk_depth_cm"] = round(new.loc[0, "bk_depth_cm"] * 10, 1)  # mm for cm
    result = admit(write(tmp_path, new), store, today=DAY, accept_suspect=True)
    assert (result.accepted, result.suspect, result.suspect_accepted) == (10, 0, 1)


def test_mixed_units_in_one_column_are_refused_with_the_rows(tmp_path, store):
    new = soils(12, 13, start=1000)
    new.loc[:3, "map_mm"] = (new.loc[:3, "map_mm"] / 25.4).round(2)  # 4 of 12 rows in inches
    with pytest.raises(InvalidDataError, match=r"(?s)mixed units.*4 rows fit only in inches "
                                               r"\(file rows 2, 3, 4, 5\)"):
        admit(write(tmp_path, new), store, today=DAY)


def test_tiny_store_skips_the_consistency_test_and_says_so(tmp_path):
    soils(5, 2).to_csv(tmp_path / "b.csv", index=False)
    admit(tmp_path / "b.csv", tmp_path / "s", today=DAY)
    new = soils(5, 4, start=50)
    new.loc[0, "map_mm"] = 20.0
    result = admit(write(tmp_path, new), tmp_path / "s", today=DAY)
    assert result.suspect == 0 and "skipped: the store has 5 soils" in result.consistency[0]


def test_all_missing_column_is_admitted_without_a_slip(tmp_path, store):
    new = soils(8, 14, start=1100)
    new["bk_thickness_cm"] = np.nan
    result = admit(write(tmp_path, new), store, today=DAY)
    assert result.accepted == 8 and result.warnings == {"bk-depth-without-thickness": 8}


# --- accounting: nothing lost ----------------------------------------------------------------

@settings(max_examples=12, deadline=None,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(seed=st.integers(0, 10_000), n_inch=st.integers(0, 2), n_bad=st.integers(0, 3))
def test_rows_read_equal_accepted_rejected_and_suspect(tmp_path_factory, seed, n_inch, n_bad):
    tmp = tmp_path_factory.mktemp("acc")
    soils(60, 1).to_csv(tmp / "b.csv", index=False)
    admit(tmp / "b.csv", tmp / "s", today=DAY)
    new = soils(15, seed, start=2000)
    new.loc[: n_inch - 1, "map_mm"] = (new.loc[: n_inch - 1, "map_mm"] / 25.4).round(2)
    new.loc[14 - n_bad + 1:, "latitude"] = 95.0
    result = admit(write(tmp, new), tmp / "s", today=DAY)
    assert result.rows_read == result.accepted + result.rejected + result.suspect == 15
    held = pd.read_csv(tmp / "s" / result.quarantine_file) if result.quarantine_file else []
    assert len(held) == result.rejected + result.suspect


# --- the second reference pair: MAP on CIA-K (CIA-K computed from the oxides) ----------------
# CIA-K by hand, independent of refit.soil: 100 Al2O3 / (Al2O3 + CaO + Na2O) in moles
# (Harnois 1988; Sheldon, Retallack & Tanaka 2002, J. Geology 110:687, from memory), molar
# masses from the IUPAC standard atomic weights: Al2O3 101.96, CaO 56.08, Na2O 61.98 g/mol.
AL2O3, CAO, NA2O = 101.96, 56.08, 61.98


def cia_k_by_hand(al2o3_wt, cao_wt, na2o_wt):
    al, ca, na = al2o3_wt / AL2O3, cao_wt / CAO, na2o_wt / NA2O
    return 100 * al / (al + ca + na)


def cao_for(cia_k, al2o3_wt=15.0, na2o_wt=1.0):
    """The CaO [wt%] that gives ``cia_k`` with the other two oxides fixed (the formula
    above solved for CaO)."""
    al, na = al2o3_wt / AL2O3, na2o_wt / NA2O
    return (al * 100 / cia_k - al - na) * CAO


def weathered_soils(n, seed, *, start=0, prefix="W"):
    """Seeded soils on two lines: Bk depth = (MAP - 150) / 3.5 [cm] and
    CIA-K = (MAP + 600) / 18, each with scatter (invented)."""
    rng = np.random.default_rng(seed)
    map_mm = np.round(rng.uniform(200, 700, n), 1)
    cia = (map_mm + 600) / 18 + rng.normal(0, 2.5, n)
    return pd.DataFrame({
        "profile_id": [f"{prefix}-{k}" for k in range(start, start + n)],
        "latitude": np.round(-40 - rng.uniform(0, 1, n), 5),
        "longitude": np.round(52 + rng.uniform(0, 1, n), 5), "source": "SIM-2025",
        "map_mm": map_mm,
        "bk_depth_cm": np.round((map_mm - 150) / 3.5 + rng.normal(0, 10, n), 1),
        "bk_thickness_cm": 30.0, "al2o3_wt": 15.0, "cao_wt": np.round(cao_for(cia), 4),
        "na2o_wt": 1.0})


@pytest.fixture
def two_pair_store(tmp_path):
    path = tmp_path / "store2"
    weathered_soils(150, 21).to_csv(tmp_path / "base2.csv", index=False)
    admit(tmp_path / "base2.csv", path, today=DAY)
    return path


def test_the_pairs_are_declared_with_source_and_threshold():
    by = {p.label: p for p in cs.REFERENCES}
    assert set(by) == {"MAP on depth to Bk", "MAP on CIA-K"}
    assert (by["MAP on CIA-K"].response, by["MAP on CIA-K"].predictor) == ("map_mm", "cia_k")
    assert "Sheldon" in by["MAP on CIA-K"].source and by["MAP on CIA-K"].threshold == 3.5
    assert by["MAP on CIA-K"].columns == ("map_mm", "al2o3_wt", "cao_wt", "na2o_wt")


def test_cia_k_pair_holds_a_planted_row_with_the_z_of_statsmodels_rlm(tmp_path,
                                                                      two_pair_store):
    sm = pytest.importorskip("statsmodels.api")
    new = weathered_soils(20, 22, start=500)
    # planted: the oxides say CIA-K 92 (a wet climate, MAP about 1050 mm on the store's
    # line) but the MAP is dry; its Bk depth agrees with the MAP, so only CIA-K objects
    new.loc[0, ["map_mm", "bk_depth_cm", "cao_wt", "na2o_wt"]] = [
        300.0, 43.0, round(cao_for(92.0, na2o_wt=0.3), 4), 0.3]
    base = pd.read_csv(two_pair_store / "records.csv")  # the store the row is judged against
    result = admit(write(tmp_path, new), two_pair_store, today=DAY)
    assert (result.rows_read, result.accepted, result.rejected, result.suspect) == \
        (20, 19, 0, 1)
    [held] = result.suspect_rows
    assert held["pos"] == 0 and held["pair"] == "MAP on CIA-K"
    # independent: statsmodels RLM (HuberT, t = 1.345, scale_est "mad") on the store's
    # soils, CIA-K by hand; h = x0' (X'X)^-1 x0 from statsmodels OLS normalized_cov_params
    x = cia_k_by_hand(base["al2o3_wt"], base["cao_wt"], base["na2o_wt"]).to_numpy()
    X = sm.add_constant(x)
    rlm = sm.RLM(base["map_mm"].to_numpy(), X, M=sm.robust.norms.HuberT()).fit()
    x0 = np.array([1.0, cia_k_by_hand(15.0, new.loc[0, "cao_wt"], 0.3)])
    h = x0 @ sm.OLS(base["map_mm"].to_numpy(), X).fit().normalized_cov_params @ x0
    expected = (300.0 - x0 @ rlm.params) / (rlm.scale * np.sqrt(1 + h))
    assert expected < -3.5  # the plant is beyond the threshold by the reference itself
    assert held["z"] == pytest.approx(expected, rel=1e-6)
    assert "reference pair 'MAP on CIA-K'" in held["message"]
    assert "(from al2o3_wt, cao_wt, na2o_wt)" in held["message"]
    assert "threshold is |z| 3.5" in held["message"]
    assert any("reference pair 'MAP on CIA-K'" in n and "Sheldon" in n
               for n in result.consistency)
    quarantine = pd.read_csv(two_pair_store / result.quarantine_file, dtype=str)
    reasons = quarantine.set_index("profile_id").loc["W-500", "_reasons"]
    assert "MAP on CIA-K" in reasons and "MAP on depth to Bk" not in reasons


def test_a_row_suspect_by_both_pairs_counts_once_and_lists_each_pair(tmp_path,
                                                                     two_pair_store):
    new = weathered_soils(12, 23, start=600)
    new.loc[3, "map_mm"] = 2500.0  # far from both its Bk depth and its CIA-K
    result = admit(write(tmp_path, new), two_pair_store, today=DAY, dry_run=True)
    assert result.rows_read == result.accepted + result.rejected + result.suspect == 12
    assert result.suspect == 1
    assert sorted(s["pair"] for s in result.suspect_rows) == ["MAP on CIA-K",
                                                             "MAP on depth to Bk"]
    held = admit(write(tmp_path, new), two_pair_store, today=DAY, accept_suspect=True)
    assert (held.accepted, held.suspect, held.suspect_accepted) == (12, 0, 1)


def test_store_too_small_for_the_cia_k_pair_skips_it_and_says_so(tmp_path):
    base = weathered_soils(120, 24)
    base.loc[12:, ["al2o3_wt", "cao_wt", "na2o_wt"]] = np.nan  # oxides on 12 soils only
    base.to_csv(tmp_path / "b.csv", index=False)
    admit(tmp_path / "b.csv", tmp_path / "s", today=DAY)
    new = weathered_soils(10, 25, start=800)
    new.loc[0, ["map_mm", "bk_depth_cm", "cao_wt", "na2o_wt"]] = [
        300.0, 43.0, round(cao_for(92.0, na2o_wt=0.3), 4), 0.3]
    result = admit(write(tmp_path, new), tmp_path / "s", today=DAY)
    assert result.suspect == 0 and result.accepted == 10
    skip = [n for n in result.consistency if "skipped" in n]
    assert skip == [("consistency test of map_mm on cia_k (reference pair 'MAP on CIA-K') "
                     "skipped: the store has 12 soils with both (at least 20 are needed for a "
                     "reference line)")]
    assert any("reference pair 'MAP on depth to Bk'" in n and "skipped" not in n
               for n in result.consistency)


def test_map_in_inches_without_bk_is_seen_against_the_cia_k_line(tmp_path, two_pair_store):
    new = weathered_soils(20, 26, start=900)
    new[["bk_depth_cm", "bk_thickness_cm"]] = np.nan  # only the CIA-K pair can judge MAP
    new["map_mm"] = (new["map_mm"] / 25.4).round(2)  # inches (NIST SP 811: 1 in = 25.4 mm)
    with pytest.raises(InvalidDataError) as err:
        admit(write(tmp_path, new), two_pair_store, today=DAY)
    text = str(err.value)
    assert "looks like inches" in text and text.count("looks like") == 1
    assert "against reference pair 'MAP on CIA-K'" in text


def test_a_row_held_by_two_reference_pairs_is_one_row_in_its_block():
    # found by reading the demo's admit: "[suspect-residual] map_mm = '7620': 2 rows 24, 24"
    # (the same file row held by both pairs); the block now counts distinct rows and says
    # both pairs' findings, while the problems table keeps one row per finding
    import pandas as pd

    from refit.curate.problems import group_problems

    probs = pd.DataFrame({
        "severity": ["suspect", "suspect", "suspect"], "rule": ["suspect-residual"] * 3,
        "column": ["map_mm"] * 3, "value": ["7620", "7620", "7620"],
        "row": [24, 24, 30], "profile_id": ["A", "A", "B"],
        "message": ["against pair 'MAP on depth to Bk'", "against pair 'MAP on CIA-K'",
                    "against pair 'MAP on depth to Bk'"]})
    one = group_problems(probs.iloc[:2])
    assert one.loc[0, "count"] == 1 and one.loc[0, "rows"] == "24"
    assert one.loc[0, "profile_id"] == "A"
    assert one.loc[0, "message"] == ("against pair 'MAP on depth to Bk' against pair "
                                     "'MAP on CIA-K'")
    two = group_problems(probs)
    assert two.loc[0, "count"] == 2 and two.loc[0, "rows"] == "24, 30"
    assert two.loc[0, "profile_id"] == ""
