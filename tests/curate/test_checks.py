"""check_frame: every rule, with the row, column, value and rule asserted.

The rules come from the issue and the descriptor (schemas/calibration.table.json); the
data are small invented tables. Row numbers follow the spreadsheet convention: with the
header on row 1 the first data row is row 2.
"""

from __future__ import annotations

import json
import math

import numpy as np
import pandas as pd
import pytest
from hypothesis import given
from hypothesis import strategies as st

from refit.curate.checks import (
    CARBONATE_WET_LIMIT_MM, PROBLEM_COLUMNS, check_frame, load_vocabularies, vocab_key,
)
from refit.errors import UnreadableInputError, UsageError


def base(n: int = 4) -> pd.DataFrame:
    """A valid invented calibration table."""
    return pd.DataFrame({
        "profile_id": [f"T{i + 1}" for i in range(n)],
        "latitude": np.linspace(30.1, 31.0, n),
        "longitude": np.linspace(-101.0, -100.0, n),
        "source": ["survey_alder_2020"] * n,
        "map_mm": np.linspace(300.0, 700.0, n),
        "mat_c": [12.0] * n,
        "mar_mm": [40.0] * n,
        "bk_depth_cm": np.linspace(30.0, 80.0, n),
        "bk_thickness_cm": [40.0] * n,
        "by_depth_cm": [150.0] * n,
        "sio2_wt": [62.0] * n, "al2o3_wt": [14.0] * n, "cao_wt": [4.0] * n,
        "na2o_wt": [1.5] * n, "k2o_wt": [2.5] * n,
        "vegetation": ["grassland"] * n,
        "parent_material": ["loess"] * n,
        "soil_order": ["Mollisols"] * n,
        "landform": ["terrace"] * n,
        "slope_deg": [2.0] * n,
        "age_ka": [10.0] * n,
    })


def only(report, rule):
    return report.problems[report.problems["rule"] == rule]


def cells(report, rule):
    """(row, column, value) of each problem of one rule."""
    got = only(report, rule)
    return [(None if pd.isna(r) else int(r), c, v)
            for r, c, v in zip(got["row"], got["column"], got["value"])]


def test_valid_table_has_no_problem():
    report = check_frame(base())
    assert report.ok
    assert report.problems.empty
    assert list(report.problems.columns) == PROBLEM_COLUMNS
    assert report.n_rows == 4 and len(report.bad_rows()) == 0


def test_missing_required_columns_are_all_listed_at_once():
    report = check_frame(base().drop(columns=["latitude", "source"]))
    assert cells(report, "required-column") == [(None, "latitude", ""), (None, "source", "")]
    assert "latitude, source" in only(report, "required-column")["message"].iloc[0]
    assert len(report.table_errors()) == 2 and not report.ok


def test_duplicated_profile_id_names_both_rows():
    frame = base()
    frame.loc[2, "profile_id"] = "T1"
    report = check_frame(frame)
    assert cells(report, "unique-id") == [(2, "profile_id", "T1"), (4, "profile_id", "T1")]
    assert "rows 2, 4" in only(report, "unique-id")["message"].iloc[0]


def test_text_in_numeric_column_is_reported_with_the_text_once():
    frame = base().astype({"map_mm": object, "latitude": object})
    frame.loc[1, "map_mm"] = "12,5"
    frame.loc[3, "latitude"] = "30°N"
    report = check_frame(frame)
    assert cells(report, "not-a-number") == [(3, "map_mm", "12,5"), (5, "latitude", "30°N")]
    # the unparsed required latitude is not reported a second time as empty
    assert only(report, "required-value").empty
    assert math.isnan(report.frame.loc[1, "map_mm"])
    assert report.frame["map_mm"].dtype == "float64"


def test_infinity_is_an_error_and_empty_cells_are_allowed():
    frame = base()
    frame.loc[0, "mat_c"] = np.inf
    frame.loc[1, "mat_c"] = np.nan
    frame["by_depth_cm"] = frame["by_depth_cm"].astype(object)
    frame.loc[2, "by_depth_cm"] = "NA"  # a declared missing-value token
    report = check_frame(frame)
    assert cells(report, "not-finite") == [(2, "mat_c", "inf")]
    assert len(report.problems) == 1
    assert math.isnan(report.frame.loc[0, "mat_c"])


def test_empty_required_cell():
    frame = base()
    frame.loc[1, "longitude"] = np.nan
    frame.loc[2, "source"] = "  "
    report = check_frame(frame)
    assert cells(report, "required-value") == [(3, "longitude", ""), (4, "source", "")]


@pytest.mark.parametrize("column,value", [
    ("latitude", 95.0), ("latitude", -90.5), ("longitude", -200.0), ("map_mm", 13000.0),
    ("map_mm", -1.0), ("mat_c", -45.0), ("mar_mm", -1.0), ("bk_depth_cm", -5.0),
    ("bk_thickness_cm", 1200.0), ("by_depth_cm", 1001.0), ("al2o3_wt", -0.5),
    ("slope_deg", 95.0), ("age_ka", -1.0),
])
def test_out_of_range(column, value):
    frame = base()
    frame.loc[1, column] = value
    report = check_frame(frame)
    assert cells(report, "range") == [(3, column, f"{value:g}")]


@pytest.mark.parametrize("column,value", [
    ("latitude", 90.0), ("longitude", -180.0), ("map_mm", 12000.0), ("mat_c", 40.0),
    ("bk_depth_cm", 0.0), ("by_depth_cm", 1000.0),
])
def test_range_bounds_are_inclusive(column, value):
    frame = base()
    frame.loc[1, column] = value
    assert only(check_frame(frame), "range").empty


@given(st.floats(min_value=-1e4, max_value=1e4, allow_nan=False))
def test_latitude_range_property(lat):
    # reference: the definition of latitude, -90..90 degrees
    frame = base(1)
    frame["latitude"] = [lat]
    assert only(check_frame(frame), "range").empty == (-90 <= lat <= 90)


def test_mar_above_map():
    frame = base()
    frame.loc[0, "mar_mm"] = 301.0  # map_mm is 300 on this row
    frame.loc[1, "mar_mm"] = frame.loc[1, "map_mm"]  # equal is allowed
    report = check_frame(frame)
    assert cells(report, "mar-above-map") == [(2, "mar_mm", "301")]
    assert "300" in only(report, "mar-above-map")["message"].iloc[0]


def test_bk_depth_without_positive_thickness():
    frame = base()
    frame.loc[0, "bk_thickness_cm"] = np.nan
    frame.loc[1, "bk_thickness_cm"] = 0.0
    frame.loc[2, "bk_thickness_cm"] = -3.0  # a range error, not this one
    frame.loc[3, ["bk_depth_cm", "bk_thickness_cm"]] = np.nan  # no Bk: fine
    report = check_frame(frame)
    assert cells(report, "bk-depth-without-thickness") == [
        (2, "bk_thickness_cm", ""), (3, "bk_thickness_cm", "0")]
    assert cells(report, "range") == [(4, "bk_thickness_cm", "-3")]


def test_bk_depth_without_thickness_column():
    report = check_frame(base(2).drop(columns="bk_thickness_cm"))
    assert [r for r, _, _ in cells(report, "bk-depth-without-thickness")] == [2, 3]


def test_oxide_total_above_101():
    frame = base()
    frame.loc[0, "sio2_wt"] = 82.6  # 82.6 + 14 + 4 + 1.5 + 2.5 = 104.6
    frame.loc[1, "sio2_wt"] = 78.9  # total 100.9: allowed (<= 101)
    report = check_frame(frame)
    got = cells(report, "oxide-total")
    assert [(r, v) for r, _, v in got] == [(2, "104.6")]
    assert got[0][1] == "sio2_wt+al2o3_wt+cao_wt+na2o_wt+k2o_wt"


def test_no_climate_column_and_row_without_climate():
    report = check_frame(base().drop(columns=["map_mm", "mat_c", "mar_mm"]))
    assert cells(report, "climate-column") == [(None, "map_mm|mat_c|mar_mm", "")]
    frame = base()
    frame.loc[2, ["map_mm", "mat_c", "mar_mm"]] = np.nan
    assert [r for r, _, _ in cells(check_frame(frame), "climate-missing")] == [4]


def test_gypsum_above_carbonate_is_a_warning():
    frame = base()
    frame.loc[1, "by_depth_cm"] = 20.0  # Bk at 46.7 cm on this row
    report = check_frame(frame)
    assert cells(report, "gypsum-above-carbonate") == [(3, "by_depth_cm", "20")]
    assert report.ok and only(report, "gypsum-above-carbonate")["severity"].eq("warning").all()


def test_carbonate_in_wet_climate_is_a_warning():
    frame = base()
    frame.loc[0, "map_mm"] = CARBONATE_WET_LIMIT_MM + 40  # 800 mm with a Bk
    frame.loc[1, "map_mm"] = CARBONATE_WET_LIMIT_MM  # at the limit: no warning
    frame.loc[2, ["map_mm", "bk_depth_cm", "bk_thickness_cm"]] = [1200.0, np.nan, np.nan]
    report = check_frame(frame)
    assert cells(report, "carbonate-in-wet-climate") == [(2, "map_mm", "800")]
    assert report.ok


def test_unknown_vocabulary_lists_allowed_values_and_how_to_extend():
    frame = base()
    frame.loc[1, "vegetation"] = "prairie"
    frame.loc[2, "soil_order"] = "Chernozem"
    report = check_frame(frame)
    assert cells(report, "vocabulary") == [(3, "vegetation", "prairie"),
                                           (4, "soil_order", "Chernozem")]
    veg, order = only(report, "vocabulary")["message"]
    assert "grassland" in veg and "--vocab" in veg and "vocabularies.json" in veg
    assert "Vertisols" in order and "closed" in order


def test_vocabulary_variants_warn_and_are_canonicalised():
    frame = base()
    frame.loc[0, "soil_order"] = "mollisol"
    frame.loc[1, "vegetation"] = "Desert_Scrub"
    frame.loc[2, "parent_material"] = " Loess "  # spaces are stripped silently
    frame.loc[3, "parent_material"] = "eolian sand "
    report = check_frame(frame)
    assert cells(report, "vocabulary-form") == [(2, "soil_order", "mollisol"),
                                                (3, "vegetation", "Desert_Scrub"),
                                                (4, "parent_material", "Loess")]
    assert report.ok
    assert report.frame["soil_order"].tolist()[:2] == ["Mollisols", "Mollisols"]
    assert report.frame.loc[1, "vegetation"] == "desert scrub"
    assert report.frame["parent_material"].tolist() == [
        "loess", "loess", "loess", "eolian sand"]


def test_vocab_key():
    assert vocab_key("Mollisols") == vocab_key("mollisol") == "mollisol"
    assert vocab_key(" Eolian-Sand ") == "eolian sand"


def test_vocabulary_extension_file(tmp_path):
    ext = tmp_path / "vocabularies.json"
    ext.write_text(json.dumps({"$comment": "x", "vegetation": ["prairie"]}))
    vocab = load_vocabularies(ext)
    assert "prairie" in vocab["vegetation"] and "grassland" in vocab["vegetation"]
    frame = base()
    frame.loc[1, "vegetation"] = "prairie"
    assert check_frame(frame, vocabularies=vocab).ok


@pytest.mark.parametrize("content,error", [
    ({"soil_order": ["Chernozems"]}, UsageError),
    ({"colour": ["red"]}, UsageError),
    ({"vegetation": "prairie"}, UsageError),
    ("not json", UnreadableInputError),
])
def test_bad_vocabulary_extension(tmp_path, content, error):
    ext = tmp_path / "v.json"
    ext.write_text(content if isinstance(content, str) else json.dumps(content))
    with pytest.raises(error, match="v.json"):
        load_vocabularies(ext)


def test_missing_vocabulary_file(tmp_path):
    with pytest.raises(UnreadableInputError, match="not found"):
        load_vocabularies(tmp_path / "nope.json")


def test_not_a_date():
    frame = base()
    frame["added_on"] = ["2024-05-31", "31/05/2024", None, "2024-02-30"]
    report = check_frame(frame)
    assert cells(report, "not-a-date") == [(3, "added_on", "31/05/2024"),
                                           (5, "added_on", "2024-02-30")]


def test_source_rows_index_and_bad_rows():
    frame = base().set_axis(["a", "b", "c", "d"])
    frame.loc["c", "latitude"] = 99.0
    frame.loc["a", "by_depth_cm"] = 1.0  # warning only: not a bad row
    report = check_frame(frame, source_rows=[5, 6, 7, 9])
    assert cells(report, "range") == [(7, "latitude", "99")]
    assert list(report.bad_rows()) == ["c"]
    assert list(report.frame.index) == ["a", "b", "c", "d"]
    assert only(report, "range")["profile_id"].tolist() == ["T3"]


def test_errors_first_then_warnings_and_summary():
    frame = base()
    frame.loc[0, "by_depth_cm"] = 1.0
    frame.loc[3, "latitude"] = 99.0
    frame.loc[2, "latitude"] = 99.0
    report = check_frame(frame)
    assert report.problems["severity"].tolist() == ["error", "error", "warning"]
    assert report.summary().to_dict("records") == [
        {"rule": "range", "severity": "error", "count": 2},
        {"rule": "gypsum-above-carbonate", "severity": "warning", "count": 1}]
    doc = json.loads(json.dumps(report.to_dict()))
    assert doc["n_errors"] == 2 and doc["n_warnings"] == 1 and doc["ok"] is False
    assert [p["row"] for p in doc["problems"]] == [4, 5, 2]


def test_extra_columns_are_kept_and_duplicate_columns_reported():
    frame = base()
    frame["plot_code"] = ["x1", "x2", "x3", "x4"]
    report = check_frame(frame)
    assert report.ok and report.frame["plot_code"].tolist() == ["x1", "x2", "x3", "x4"]
    dup = pd.concat([base(), base()[["map_mm"]]], axis=1)
    assert cells(check_frame(dup), "duplicate-column") == [(None, "map_mm", "")]


def test_numeric_profile_ids_become_text():
    frame = base()
    frame["profile_id"] = [101, 102, 103, 101]
    report = check_frame(frame)
    assert cells(report, "unique-id") == [(2, "profile_id", "101"), (5, "profile_id", "101")]


def test_unknown_kind_is_a_usage_error():
    with pytest.raises(UsageError, match="sediment"):
        check_frame(base(), kind="sediment")


# --- sequences (thresholds are common practice, see refit/curate/sequences.py) -------------------

def sequence_frame(kind: str, n: int = 4) -> pd.DataFrame:
    frame = base(n)
    frame["sequence_id"] = "S1"
    frame["sequence_kind"] = kind
    return frame


def seq_warnings(report, rule="sequence-factor-varies"):
    got = only(report, rule)
    assert got["row"].isna().all() and got["severity"].eq("warning").all()
    return list(zip(got["column"], got["value"]))


def test_clean_climosequence_has_no_warning():
    # MAP varies 300..700 mm along it; everything else is held constant
    report = check_frame(sequence_frame("climosequence"))
    assert report.problems.empty


def test_climosequence_with_varying_vegetation_and_age():
    frame = sequence_frame("climosequence")
    frame.loc[3, "vegetation"] = "woodland"
    frame.loc[2, "age_ka"] = 25.0  # 10 and 25 ka: more than twice the youngest
    report = check_frame(frame)
    assert seq_warnings(report) == [("vegetation", "grassland, woodland"),
                                    ("age_ka", "10 to 25 ka over 4 profiles")]
    message = only(report, "sequence-factor-varies")["message"].iloc[0]
    assert "'S1'" in message and "climosequence" in message
    assert report.ok


def test_age_within_a_factor_of_two_is_held_constant():
    frame = sequence_frame("climosequence")
    frame.loc[2, "age_ka"] = 19.0
    assert check_frame(frame).problems.empty


def test_biosequence_with_a_wide_rainfall_range():
    frame = sequence_frame("biosequence")
    frame["vegetation"] = ["grassland", "savanna", "woodland", "forest"]
    report = check_frame(frame)
    assert seq_warnings(report) == [("map_mm", "300 to 700 mm over 4 profiles")]


def test_biosequence_within_200_mm_is_held_constant():
    frame = sequence_frame("biosequence")
    frame["vegetation"] = ["grassland", "savanna", "woodland", "forest"]
    frame["map_mm"] = [500.0, 550.0, 600.0, 700.0]
    assert check_frame(frame).problems.empty


def test_sequence_whose_own_factor_does_not_vary():
    frame = sequence_frame("lithosequence")
    frame["map_mm"] = 500.0
    report = check_frame(frame)
    assert seq_warnings(report, "sequence-factor-constant") == [("parent_material", "")]


def test_sequence_mixing_kinds_and_without_kind():
    frame = sequence_frame("climosequence")
    frame.loc[3, "sequence_kind"] = "toposequence"
    frame.loc[0, "sequence_id"] = "S0"
    frame.loc[0, "sequence_kind"] = None
    report = check_frame(frame)
    assert seq_warnings(report, "sequence-mixed-kinds") == [
        ("sequence_kind", "climosequence, toposequence")]
    assert "'S0'" in only(report, "sequence-kind-missing")["message"].iloc[0]


def test_sequence_kind_without_id_is_a_row_warning():
    frame = base()
    frame["sequence_kind"] = [None, "chronosequence", None, None]
    assert cells(check_frame(frame), "sequence-id-missing") == [(3, "sequence_id", "")]


def test_dates_from_a_spreadsheet_are_kept_as_iso_text():
    import datetime as dt

    frame = base()
    frame["added_on"] = [dt.date(2024, 1, 2), dt.datetime(2024, 1, 3), None, "2024-01-05"]
    report = check_frame(frame)
    assert report.ok
    assert report.frame["added_on"].tolist()[:2] == ["2024-01-02", "2024-01-03"]
    assert pd.isna(report.frame.loc[2, "added_on"])


def test_header_without_rows_is_valid_with_a_warning():
    report = check_frame(base().iloc[:0])
    assert report.ok and report.n_rows == 0
    assert cells(report, "no-rows") == [(None, "", "")]


# values around every bound, text, infinity and gaps, for the shortcut test below
_cell = st.one_of(
    st.sampled_from([np.nan, np.inf, -np.inf, -1000.5, -180.0, -90.0, -40.5, -1e-9, 0.0,
                     40.0, 90.0, 90.01, 100.0, 180.5, 1000.0, 12000.0, 12000.5]),
    st.floats(min_value=-200, max_value=13000, allow_nan=False),
    st.sampled_from(["", "NA", " 12 ", "abc"]),
)
_COLUMNS = ["latitude", "longitude", "map_mm", "mat_c", "mar_mm", "bk_depth_cm",
            "bk_thickness_cm", "al2o3_wt", "slope_deg"]


@given(st.lists(st.tuples(*[_cell] * len(_COLUMNS)), min_size=1, max_size=8),
       st.lists(st.sampled_from(["T1", "T2", "T3", None]), min_size=8, max_size=8))
def test_prescan_shortcut_gives_the_same_problems_as_full_pandera(rows, ids):
    # reference: pandera validating every column of the schema (PRESCREEN off)
    import refit.curate.checks as checks
    import refit.curate.rules as rules

    frame = pd.DataFrame(rows, columns=_COLUMNS, dtype=object)
    frame["profile_id"] = ids[: len(frame)]
    frame["source"] = "survey_alder_2020"
    fast = checks.check_frame(frame).problems
    rules.PRESCREEN = False
    try:
        full = checks.check_frame(frame).problems
    finally:
        rules.PRESCREEN = True
    pd.testing.assert_frame_equal(fast, full)
