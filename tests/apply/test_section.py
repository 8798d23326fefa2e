"""Estimates along a section (refit.apply.section): the table against apply's numbers, the
age interpolation against numpy.interp, and the bad inputs the issue lists.

References: numpy.interp (the reference implementation of piecewise-linear interpolation);
Caudill et al. (1996, J. Sed. Res. 66:58) for Retallack (1994) at D = 100 cm: 648 +- 141 mm.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from refit.apply.estimates import FLAG_NOT_DECOMPACTED, apply_files
from refit.apply.propagation import snap_to_bounds
from refit.apply.section import (
    PREDICTION, PUBLISHED_SE, interpolate_age, read_age_model, resolution_notes,
    section_files,
)
from refit.errors import InvalidDataError, UsageError

RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"
CIA_K = "refit/published/map_from_cia_k.sheldon2002.json"
DEMO = "calib_demo/fossils.csv"
CONSTANTS = "calib_demo/compaction_constants.csv"


def test_section_table_holds_applys_numbers():
    files = [RETALLACK, CIA_K]
    res = section_files(files, DEMO, seed=3)
    ref = apply_files(files, DEMO, seed=3).results
    t = res.table
    assert len(t) == len(ref) == 28
    merged = t.merge(ref, on=["paleosol_id", "coefficient_file"], suffixes=("", "_a"))
    assert len(merged) == 28
    for c in ("estimate", "lower", "upper"):
        np.testing.assert_array_equal(merged[c].to_numpy(float), merged[c + "_a"].to_numpy(float))
    raw = pd.read_csv(DEMO)
    levels = dict(zip(raw["paleosol_id"], raw["level_m"]))
    sections = dict(zip(raw["paleosol_id"], raw["section"]))
    assert all(t["level_m"] == t["paleosol_id"].map(levels))
    assert all(t["section"] == t["paleosol_id"].map(sections))
    # sorted up each section, sections in the table's order
    assert res.sections() == ["Murrenhal Bluff", "Coldstave Gorge"]
    for _, g in t.groupby("section"):
        assert g["level_m"].is_monotonic_increasing
    # Retallack's file gives a published +- (one SE), CIA-K too: never a prediction interval
    ret = t[t["function_id"] == "map_from_bk_depth"]
    assert set(ret["interval_kind"]) == {PUBLISHED_SE}


def test_retallack_worked_value_through_a_section(tmp_path):
    # Caudill et al. (1996): D = 100 cm -> 648 +- 141 mm (coefficients give 648.1)
    p = tmp_path / "f.csv"
    p.write_text("paleosol_id,section,level_m,bk_depth_cm\nA,S,3,100\nB,S,1,100\n")
    t = section_files([RETALLACK], p).table
    assert list(t["paleosol_id"]) == ["B", "A"]  # sorted by level
    assert t["estimate"].to_numpy() == pytest.approx([648.1, 648.1], abs=0.05)
    assert t["lower"].to_numpy() == pytest.approx([507.1, 507.1], abs=0.05)


def test_age_interpolation_matches_numpy_interp():
    rng = np.random.default_rng(7)
    lv = np.array([0.0, 40.0, 95.0, 160.0])
    age = np.array([8.4, 8.1, 7.9, 7.5])
    sd = np.array([0.05, 0.1, 0.08, 0.06])
    x = rng.uniform(0, 160, 50)
    got, got_sd = interpolate_age(x, lv, age, sd)
    np.testing.assert_allclose(got, np.interp(x, lv, age), rtol=0, atol=0)
    np.testing.assert_allclose(got_sd, np.interp(x, lv, sd), rtol=0, atol=0)
    # the model's order does not matter; outside the dated range: no age (no extrapolation)
    shuffled = rng.permutation(4)
    again, _ = interpolate_age(x, lv[shuffled], age[shuffled])
    np.testing.assert_array_equal(again, got)
    out, out_sd = interpolate_age([-1.0, 161.0, np.nan], lv, age, sd)
    assert np.isnan(out).all() and np.isnan(out_sd).all()


@pytest.mark.parametrize("levels, ages, message", [
    ([10.0], [5.0], "at least two"),
    ([0.0, 10.0, 20.0], [8.0, 7.5, 7.8], "not monotonic"),
    ([0.0, 10.0, 10.0], [8.0, 7.5, 7.4], "dated twice"),
])
def test_bad_age_models_are_refused_with_a_message(levels, ages, message):
    with pytest.raises(InvalidDataError, match=message):
        interpolate_age([5.0], levels, ages, where="model.csv")


def test_age_model_file_and_column(tmp_path):
    model, name = read_age_model("calib_demo/age_model.csv")
    assert name == "age_ma" and len(model) == 6
    res = section_files([RETALLACK], DEMO, age_model="calib_demo/age_model.csv")
    t = res.table
    assert res.axis == "age" and set(t["age_unit"]) == {"age_ma"}
    for sec, g in t.groupby("section"):
        m = model[model["section"] == sec]
        np.testing.assert_allclose(g["age"], np.interp(g["level_m"], m["level_m"], m["age"]))
        np.testing.assert_allclose(g["age_sd"], np.interp(g["level_m"], m["level_m"],
                                                          m["age_sd"]))
    # ages in a column of the fossil table, as written in the file
    p = tmp_path / "f.csv"
    p.write_text("paleosol_id,section,level_m,bk_depth_cm,age_ma,age_sd_ma\n"
                 "A,S,1,100,8.2,0.1\nB,S,2,90,8.0,\n")
    t = section_files([RETALLACK], p, age_column="age_ma").table
    assert list(t["age"]) == [8.2, 8.0] and t["age_sd"].iloc[0] == 0.1
    assert math.isnan(t["age_sd"].iloc[1])
    with pytest.raises(UsageError, match="no such column"):
        section_files([RETALLACK], p, age_column="age_yr")
    with pytest.raises(UsageError, match="not both"):
        section_files([RETALLACK], p, age_column="age_ma", age_model="x.csv")


def test_awkward_sections_get_a_stated_choice(tmp_path):
    p = tmp_path / "f.csv"
    p.write_text("paleosol_id,section,level_m,bk_depth_cm\n"
                 "A,One,5,100\n"                      # a section with one paleosol
                 "B,Two,20,100\nC,Two,10,80\n"        # out of order
                 "D,Two,10,120\n"                     # level repeated
                 "E,Two,,90\n")                       # no level
    res = section_files([RETALLACK], p)
    text = "\n".join(res.notes)
    assert "One: one paleosol" in text
    assert "C and D share level 10 m" in text
    assert "Two: the fossil table lists its levels out of order" in text
    assert "E has no level_m: in the table, not in the figure" in text
    assert "E" in set(res.table["paleosol_id"])
    q = tmp_path / "g.csv"
    q.write_text("paleosol_id,section,level_m,bk_depth_cm\nA,S,,100\n")
    with pytest.raises(InvalidDataError, match="no paleosol has a level_m"):
        section_files([RETALLACK], q)


def test_resolution_note_counts_steps_within_the_intervals():
    t = pd.DataFrame({
        "section": "S", "paleosol_id": ["A", "B", "C"], "level_m": [1.0, 2.0, 3.0],
        "fit": "f", "estimate": [500.0, 520.0, 900.0], "lower": [400.0, 420.0, 850.0],
        "upper": [600.0, 620.0, 950.0], "interval_kind": PREDICTION})
    notes = resolution_notes(t)
    # A-B: each inside the other's interval (not resolved); B-C: apart (resolved)
    assert len(notes) == 1 and "f: 1 of 2" in notes[0] and "A (1 m) to B (2 m)" in notes[0]


def test_depths_applied_without_decompaction_are_flagged(tmp_path):
    res = apply_files([RETALLACK, CIA_K], DEMO)
    bk = res.results[res.results["function_id"] == "map_from_bk_depth"]
    assert bk["flags"].str.contains(FLAG_NOT_DECOMPACTED).all()
    ck = res.results[res.results["function_id"] == "map_from_cia_k"]
    assert not ck["flags"].fillna("").str.contains(FLAG_NOT_DECOMPACTED).any()
    assert len(res.warnings) == 1 and "--decompact" in res.warnings[0]
    done = apply_files([RETALLACK], DEMO, decompact=True, constants_file=CONSTANTS)
    assert not done.results["flags"].str.contains(FLAG_NOT_DECOMPACTED).any()
    assert done.warnings == [] and (done.results["problem"] == "").all()
    p = tmp_path / "f.csv"  # never buried: nothing to flag
    p.write_text("paleosol_id,bk_depth_cm,burial_depth_km\nA,100,0\n")
    assert apply_files([RETALLACK], p).warnings == []


def test_float_noise_at_a_bound_is_the_bound():
    # the values the issue reports after Monte Carlo propagation, MAP >= 0
    assert snap_to_bounds(3.5e-14, [0.0], 583.0) == 0.0
    assert snap_to_bounds(-8.1e-12, [0.0], 583.0) == 0.0
    assert snap_to_bounds(0.02, [0.0], 583.0) == 0.02      # a real value stays
    assert snap_to_bounds(-math.inf, [0.0], 583.0) == -math.inf
    assert snap_to_bounds(583.0 + 1e-10, [None, 583.0], 583.0) == 583.0
