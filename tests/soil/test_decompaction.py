"""Burial decompaction (Sheldon & Retallack 2001, Geology 29:247).

The equation's form is FROM MEMORY and its constants are FROM MEMORY - LOW CONFIDENCE
(reference note on published functions, section 5): the tests check the form's own limits
(no burial -> no change; great depth -> the initial solidity), values worked by hand from
the formula, and a confirmed practice example (Caudill et al. 1996: a 10 % compaction
turns a measured 90 cm into 100 cm).
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest

from refit.soil import decompaction as dc
from refit.errors import InvalidDataError, UnreadableInputError
from refit.curate.fossils import decompact_frame

# FROM MEMORY - LOW CONFIDENCE (Sheldon & Retallack 2001, Table 1): Aridisols
ARID_SI, ARID_K = 0.62, 0.17


def test_no_burial_no_change():
    # limit of the formula at D = 0: F0 / e^0 - 1 = -Si, so B = 1 (reference note, sec. 9)
    for si, k in [(0.62, 0.17), (0.3, 0.5), (0.9, 0.05)]:
        assert dc.compaction_ratio(0.0, si, k) == pytest.approx(1.0, abs=1e-15)
        assert dc.decompact(87.0, 0.0, si, k) == pytest.approx(87.0, abs=1e-12)


def test_great_depth_gives_initial_solidity():
    # limit of the formula as D -> infinity: B -> Si (all initial porosity lost)
    for si, k in [(0.62, 0.17), (0.3, 0.5)]:
        assert dc.compaction_ratio(1e6, si, k) == pytest.approx(si, abs=1e-15)
        assert dc.compaction_ratio(300.0, si, k) == pytest.approx(si, rel=1e-12)


def test_value_worked_from_the_formula():
    # worked by hand from B = -Si / (F0 / exp(D k) - 1), Aridisols constants (LOW
    # CONFIDENCE), D = 2 km: exp(0.34) = 1.4049475906; 0.38 / 1.4049475906 = 0.2704728;
    # B = 0.62 / (1 - 0.2704727) = 0.8498654; 124 cm / B = 145.9055 cm (7 digits)
    b = dc.compaction_ratio(2.0, ARID_SI, ARID_K)
    assert b == pytest.approx(0.8498654, abs=5e-8)
    assert dc.decompact(124.0, 2.0, ARID_SI, ARID_K) == pytest.approx(145.9055, abs=5e-5)


def test_ten_percent_compaction_practice_example():
    # Caudill et al. (1996), J. Sed. Res. 66:58 (CONFIRMED practice example): allowing
    # for 10 % compaction, a measured 90 cm Bk depth is 100 cm before burial. The depth
    # giving B = 0.9 follows from the formula: D = ln(F0 / (1 - Si / B)) / k.
    d = math.log((1 - ARID_SI) / (1 - ARID_SI / 0.9)) / ARID_K
    assert dc.compaction_ratio(d, ARID_SI, ARID_K) == pytest.approx(0.9, rel=1e-12)
    assert dc.decompact(90.0, d, ARID_SI, ARID_K) == pytest.approx(100.0, rel=1e-12)


def test_ratio_decreases_with_depth_and_bad_inputs_are_nan():
    b = dc.compaction_ratio(np.linspace(0, 10, 50), ARID_SI, ARID_K)
    assert np.all(np.diff(b) < 0) and np.all((b > ARID_SI) & (b <= 1))
    assert np.isnan(dc.compaction_ratio(-1.0, ARID_SI, ARID_K))
    assert np.isnan(dc.compaction_ratio(1.0, 1.5, ARID_K))
    assert np.isnan(dc.compaction_ratio(np.nan, ARID_SI, ARID_K))


def test_built_in_constants_are_marked_low_confidence():
    assert set(dc.BUILT_IN) == {"Aridisols"}  # nothing else is built in on purpose
    c = dc.BUILT_IN["Aridisols"]
    assert (c.initial_solidity, c.k_per_km) == (ARID_SI, ARID_K)
    assert c.initial_porosity == pytest.approx(0.38)
    assert "low confidence" in c.status


def test_load_constants_csv_and_json(tmp_path):
    p = tmp_path / "c.csv"
    p.write_text("key,initial_solidity,k_per_km,source\nMollisols,0.6,0.12,lab\n")
    got = dc.load_constants(p)["Mollisols"]
    assert (got.initial_solidity, got.k_per_km, got.status) == (0.6, 0.12, dc.STATUS_USER)
    j = tmp_path / "c.json"
    j.write_text(json.dumps({"sandstone": {"initial_solidity": 0.7, "k_per_km": 0.3}}))
    assert dc.load_constants(j)["sandstone"].k_per_km == 0.3
    bad = tmp_path / "bad.csv"
    bad.write_text("key,initial_solidity,k_per_km\nMollisols,1.6,0.1\n")
    with pytest.raises(InvalidDataError, match="Mollisols: initial_solidity"):
        dc.load_constants(bad)
    with pytest.raises(UnreadableInputError, match="no such"):
        dc.load_constants(tmp_path / "missing.csv")


def test_decompact_frame_records_every_step():
    frame = pd.DataFrame({
        "paleosol_id": ["A", "B", "C", "D", "E"],
        "bk_depth_cm": [124.0, 100.0, 80.0, 90.0, 50.0],
        "bk_thickness_cm": [60.0, np.nan, 40.0, 30.0, 20.0],
        "burial_depth_km": [2.0, 0.0, 1.0, np.nan, 1.5],
        "soil_order": ["Aridisols", "Mollisols", "Mollisols", "Aridisols", "Vertisols"],
        "initial_solidity": [np.nan, np.nan, 0.5, np.nan, np.nan],
        "compaction_k_per_km": [np.nan, np.nan, 0.2, np.nan, np.nan],
    })
    out, rec = decompact_frame(frame)
    b = dc.compaction_ratio(2.0, ARID_SI, ARID_K)
    assert out["bk_depth_cm"][0] == pytest.approx(124.0 / b)
    assert rec["bk_depth_cm_measured"][0] == 124.0 and rec["burial_depth_km"][0] == 2.0
    assert rec["initial_solidity"][0] == ARID_SI and rec["compaction_k_per_km"][0] == ARID_K
    assert "Aridisols" in rec["compaction_constants"][0]
    assert "low confidence" in rec["compaction_constants"][0]
    assert out["bk_depth_cm"][1] == 100.0  # not buried: unchanged, no constants needed
    assert rec["decompaction_problem"][1] == ""
    # per-row constants win over the soil order
    assert out["bk_depth_cm"][2] == pytest.approx(80 / dc.compaction_ratio(1.0, 0.5, 0.2))
    assert "per-row" in rec["compaction_constants"][2]
    assert "no burial depth" in rec["decompaction_problem"][3]
    assert np.isnan(out["bk_depth_cm"][3])
    assert "'Vertisols'" in rec["decompaction_problem"][4]
    assert np.isnan(out["bk_depth_cm"][4])


def test_example_constants_files_agree_and_say_they_are_invented():
    # calib_demo's example in both documented formats: the same constants, each marked
    from refit._util.resources import demo_dir

    csv_c = dc.load_constants(demo_dir() / "compaction_constants.csv")
    json_c = dc.load_constants(demo_dir() / "compaction_constants.json")
    assert set(csv_c) == set(json_c) == {"Mollisols", "Alfisols", "Vertisols"}
    for key, c in csv_c.items():
        assert (c.initial_solidity, c.k_per_km) == (json_c[key].initial_solidity,
                                                    json_c[key].k_per_km)
        assert "INVENTED" in c.source and c.status == dc.STATUS_USER
    # user constants never replace the built-in Aridisols unless they name it
    assert dc.constants_table(csv_c)["Aridisols"] is dc.BUILT_IN["Aridisols"]


def test_readme_lists_every_built_in_constant_with_its_status():
    from pathlib import Path

    readme = (Path(__file__).resolve().parents[2] / "README.md").read_text("utf-8")
    part = readme.split("## Burial and decompaction", 1)[1].split("\n## ", 1)[0]
    for c in dc.BUILT_IN.values():
        row = f"| {c.key} | {c.initial_solidity:g} | {c.k_per_km:g} |"
        assert row in part and "LOW CONFIDENCE" in part
    assert "calib_demo/compaction_constants.csv" in part and "```" in part
