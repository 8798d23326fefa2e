"""Column synonyms and unit conversion (refit.curate.units).

Oracles: the exact unit definitions of NIST SP 811 (2008), appendix B.8 and section 4.2.1.1
(1 in = 2.54 cm exactly, the international inch; 1 ft = 0.3048 m exactly; t/°C = T/K - 273.15;
t/°C = (t/°F - 32) x 5/9), and pint used directly as a reference library.
"""

from __future__ import annotations

import json
import math
import warnings

import numpy as np
import pandas as pd
import pint
import pytest
from hypothesis import given
from hypothesis import strategies as st

from refit.errors import InvalidDataError
from refit.curate.units import canonical_columns, normalise_columns, parse_name

REF = pint.UnitRegistry()  # an independent registry, as the reference


@pytest.mark.parametrize("name, canonical", [
    ("Profile ID", "profile_id"), ("profile id", "profile_id"), ("lat", "latitude"),
    ("Latitude", "latitude"), ("long", "longitude"), ("lon", "longitude"),
    ("LONGITUDE", "longitude"), ("MAP (mm)", "map_mm"), ("precip_mm", "map_mm"),
    ("MAT (°C)", "mat_c"), ("depth to Bk (cm)", "bk_depth_cm"),
    ("Bk thickness (in)", "bk_thickness_cm"), ("SiO2 (wt%)", "sio2_wt"),
    ("bk_depth_in", "bk_depth_cm"), ("bk_depth_m", "bk_depth_cm"),
    ("bk_depth_mm", "bk_depth_cm"), ("bk_thickness_in", "bk_thickness_cm"),
    ("by_depth_ft", "by_depth_cm"), ("map_in", "map_mm"), ("map_cm", "map_mm"),
    ("mat_f", "mat_c"), ("MAT (°F)", "mat_c"), ("mar_in", "mar_mm"),
    ("elevation_ft", "elevation_m"), ("Soil order", "soil_order"), ("Age (ka)", "age_ka"),
    ("MAP [mm/yr]", "map_mm"),
])
def test_synonyms_map_to_canonical(name, canonical):
    assert parse_name(name)[0] == canonical


@pytest.mark.parametrize("name", ["region", "mat_min", "map_source", "sample_weight"])
def test_unrelated_names_stay_extra(name):
    assert parse_name(name) is None
    out, lines = normalise_columns(pd.DataFrame({name: ["1"]}))
    assert list(out.columns) == [name] and lines == []


def test_every_canonical_column_maps_to_itself():
    for name in canonical_columns():
        assert parse_name(name) == (name, None)


# exact definitions, NIST SP 811 appendix B.8
@pytest.mark.parametrize("column, target, factor", [
    ("map_in", "map_mm", 25.4),            # 1 in = 25.4 mm exactly
    ("MAP (cm)", "map_mm", 10.0),
    ("bk_depth_in", "bk_depth_cm", 2.54),  # 1 in = 2.54 cm exactly
    ("bk_depth_m", "bk_depth_cm", 100.0),
    ("bk_depth_mm", "bk_depth_cm", 0.1),
    ("by_depth_ft", "by_depth_cm", 30.48),  # 1 ft = 0.3048 m exactly
    ("elevation_ft", "elevation_m", 0.3048),
    ("mar_in", "mar_mm", 25.4),
])
def test_length_conversions_match_exact_definitions(column, target, factor):
    values = [0.0, 1.0, 12.5, 39.37]
    out, lines = normalise_columns(pd.DataFrame({column: values}))
    np.testing.assert_allclose(out[target].to_numpy(float), np.array(values) * factor,
                               rtol=1e-14, atol=0)
    assert lines == [f"column {column!r} -> {target}: " + lines[0].split(": ", 1)[1]]
    assert f"x {factor:g}" in lines[0]


def test_fahrenheit_to_celsius_exact():
    # NIST SP 811 4.2.1.1: t/°C = (t/°F - 32) / 1.8; -40 °F = -40 °C, 212 °F = 100 °C
    fahrenheit = [32.0, 212.0, -40.0, 61.5, 98.6]
    out, lines = normalise_columns(pd.DataFrame({"MAT (°F)": fahrenheit}))
    expected = [(f - 32) * 5 / 9 for f in fahrenheit]
    np.testing.assert_allclose(out["mat_c"].to_numpy(float), expected, rtol=0, atol=1e-12)
    assert out["mat_c"].iloc[0] == 0.0 and out["mat_c"].iloc[2] == -40.0
    assert lines == ["column 'MAT (°F)' -> mat_c: °F to °C ((value - 32) x 0.5555555556)"]


def test_kelvin_to_celsius_exact():
    # NIST SP 811 4.2.1.1: t/°C = T/K - 273.15
    out, _ = normalise_columns(pd.DataFrame({"MAT (K)": [273.15, 300.0]}))
    np.testing.assert_allclose(out["mat_c"].to_numpy(float), [0.0, 26.85], atol=1e-12)


@given(st.lists(st.floats(-1e4, 1e4, allow_nan=False), min_size=1, max_size=20),
       st.sampled_from([("map_in", "inch", "millimeter", "map_mm"),
                        ("bk_depth_m", "meter", "centimeter", "bk_depth_cm"),
                        ("by_depth_ft", "foot", "centimeter", "by_depth_cm"),
                        ("mat_f", "degF", "degC", "mat_c"),
                        ("age (Ma)", "megayear", "kiloyear", "age_ka")]))
def test_conversions_agree_with_pint(values, case):
    column, src, dst, target = case
    out, _ = normalise_columns(pd.DataFrame({column: values}))
    expected = REF.Quantity(np.array(values), src).to(dst).magnitude
    np.testing.assert_allclose(out[target].to_numpy(float), expected, rtol=1e-12,
                               atol=1e-9)


def test_text_cells_survive_conversion_unchanged():
    frame = pd.DataFrame({"MAP (in)": ["10", "about 19", "", "nan", "inf"]})
    out, _ = normalise_columns(frame)
    col = out["map_mm"]
    assert col.iloc[0] == pytest.approx(254.0)
    assert col.iloc[1] == "about 19"
    assert col.iloc[2] == ""
    assert col.iloc[3] == "nan"
    assert math.isinf(col.iloc[4])


@pytest.mark.parametrize("column, unit", [("bk_depth_kg", "kg"), ("MAP (°C)", "°C"),
                                          ("MAT (mm)", "mm"), ("bk_depth (bananas)", "bananas")])
def test_unconvertible_unit_names_column_unit_and_accepted(column, unit):
    with pytest.raises(InvalidDataError) as err:
        normalise_columns(pd.DataFrame({column: [1.0]}))
    msg = str(err.value)
    assert repr(column) in msg and repr(unit) in msg and "accepted units" in msg


def test_unconvertible_units_all_listed_at_once():
    with pytest.raises(InvalidDataError) as err:
        normalise_columns(pd.DataFrame({"bk_depth_kg": [1], "MAP (°C)": [2]}))
    assert "'bk_depth_kg'" in str(err.value) and "'MAP (°C)'" in str(err.value)


def test_two_columns_for_one_canonical_name_both():
    with pytest.raises(InvalidDataError) as err:
        normalise_columns(pd.DataFrame({"map_mm": [1], "MAP (in)": [2]}))
    assert "'map_mm'" in str(err.value) and "'MAP (in)'" in str(err.value)


def test_renames_are_reported_and_values_untouched():
    frame = pd.DataFrame({"Latitude": ["-40.5"], "map_mm": ["300"]})
    out, lines = normalise_columns(frame)
    assert list(out.columns) == ["latitude", "map_mm"]
    assert out["latitude"].iloc[0] == "-40.5"
    assert lines == ["column 'Latitude' -> latitude (renamed)"]


def test_problems_name_the_file_column_and_the_number_as_typed(tmp_path):
    """A range error on a converted column quotes the file's own value and unit."""
    from refit.curate.checks import check_file

    path = tmp_path / "inches.csv"
    path.write_text(
        "Profile ID,Lat,Long,Source,MAP (in),Depth to Bk (in),Bk thickness (in)\n"
        "P-1,-40,54,S1,20,-4,10\n"
        "P-2,-40,54.1,S1,21,8,10\n",
        encoding="utf-8",
    )
    report = check_file(path)
    err = report.errors[report.errors["rule"] == "range"]
    assert list(err["row"]) == [2]
    assert list(err["file_column"]) == ["Depth to Bk (in)"]
    # -4 in x 2.54 cm/in = -10.16 cm (1 in = 2.54 cm exactly, NIST SP 811)
    assert list(err["value"]) == ["-10.16"]
    message = err["message"].iloc[0]
    assert "holds -4 in" in message and "converted to cm" in message
    assert "needs that unit in the column name" not in message


def test_repeated_header_is_named_as_written_with_the_file_by_refit_check(tmp_path):
    # pandas.read_csv renames a repeated header 'bk_depth_cm' to 'bk_depth_cm.1' (checked
    # here against pandas itself); the message must show the file's own names and
    # positions, not pandas' renaming
    from click.testing import CliRunner

    from refit.cli import main

    path = tmp_path / "twice.csv"
    path.write_text("profile_id,latitude,longitude,source,bk_depth_cm,bk_depth_cm\n"
                    "P-1,-40,54,S1,10,12\n", encoding="utf-8")
    assert list(pd.read_csv(path).columns)[-2:] == ["bk_depth_cm", "bk_depth_cm.1"]
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 1, res.output
    assert "twice.csv" in res.output
    assert "columns 5 and 6 are both named 'bk_depth_cm'" in res.output
    assert "bk_depth_cm.1" not in res.output and "Traceback" not in res.output


def test_repeated_header_with_a_unit_is_refused_not_kept_as_an_extra_column():
    # 'bk_depth_in' twice: pandas' 'bk_depth_in.1' used to fall through as an unknown column
    frame = pd.DataFrame([[10.0, 12.0]], columns=["bk_depth_in", "bk_depth_in.1"])
    with pytest.raises(InvalidDataError) as err:
        normalise_columns(frame)
    assert str(err.value) == ("columns 1 and 2 are both named 'bk_depth_in' (spreadsheet "
                              "columns A and B) and map to bk_depth_cm; keep one of them "
                              "and delete the other, or rename it if it holds another "
                              "quantity")


def test_two_synonyms_keep_their_own_names_in_the_message():
    frame = pd.DataFrame([[10.0, 4.0]], columns=["Depth to Bk (cm)", "bk_depth_in"])
    with pytest.raises(InvalidDataError) as err:
        normalise_columns(frame)
    assert str(err.value) == ("columns 'Depth to Bk (cm)' (column 1, A in a spreadsheet) "
                              "and 'bk_depth_in' (column 2, B) both map to bk_depth_cm; "
                              "keep one of them and delete the other, or rename it if it "
                              "holds another quantity")


def test_overflowing_conversion_warns_nothing_and_is_a_range_error(tmp_path):
    # 1e308 in x 2.54 cm/in exceeds the float64 maximum (about 1.798e308, IEEE 754
    # binary64); the conversion must not emit numpy's "overflow" RuntimeWarning
    from click.testing import CliRunner

    from refit.cli import main
    from refit.curate.units import convert_values, ureg

    values = pd.Series([1e308, -1e308, 10.0, float("inf")])
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        out = convert_values(values, ureg().inch, ureg().centimeter)
    assert [str(w.message) for w in caught] == []
    big = np.finfo(np.float64).max
    assert out.tolist() == [big, -big, pytest.approx(25.4), float("inf")]

    path = tmp_path / "huge.csv"
    path.write_text("profile_id,latitude,longitude,source,map_mm,bk_depth_in,bk_thickness_cm\n"
                    "P-1,-40,54,S1,300,1e308,10\nP-2,-40,54.1,S1,300,10,10\n",
                    encoding="utf-8")
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = CliRunner().invoke(main, ["check", str(path), "--format", "json"])
    assert res.exit_code == 1, res.output
    assert [str(w.message) for w in caught if issubclass(w.category, RuntimeWarning)] == []
    errors = [p for p in json.loads(res.output)["problems"] if p["severity"] == "error"]
    assert [(p["rule"], p["row"], p["column"]) for p in errors] == [
        ("range", 2, "bk_depth_cm")]
    assert "holds 1e+308 in" in errors[0]["message"]


def test_two_columns_are_named_by_their_place_in_the_file(tmp_path):
    # an empty, unnamed column B is left out by the reader; the letters still count it, as
    # a spreadsheet does (E and G, not D and F)
    from click.testing import CliRunner

    from refit.cli import main

    frame = pd.DataFrame([[1.0, 2.0]], columns=["map_mm", "MAP (mm)"])
    with pytest.raises(InvalidDataError, match=r"'map_mm' \(column 5, E in a spreadsheet\) "
                       r"and 'MAP \(mm\)' \(column 7, G\) both map to map_mm"):
        normalise_columns(frame, positions={"map_mm": 5, "MAP (mm)": 7})
    path = tmp_path / "t.csv"
    path.write_text("profile_id,,latitude,longitude,map_mm,source,MAP (mm)\n"
                    "A,,1,2,3,s,4\n", encoding="utf-8")
    res = CliRunner().invoke(main, ["check", str(path)])
    assert res.exit_code == 1, res.output
    assert "'map_mm' (column 5, E in a spreadsheet) and 'MAP (mm)' (column 7, G)" in res.output
