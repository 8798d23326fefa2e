"""State-factor subsets: each filter shape, the counts per step, and refusals."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from refit.errors import InvalidDataError, UsageError
from refit.select.subsets import (
    apply_filters,
    check_enough,
    drop_incomplete,
    filter_mask,
    parse_filter,
    rows_needed,
)


@pytest.fixture
def frame():
    return pd.DataFrame({
        "vegetation": ["grassland", "Grassland ", "forest", "savanna", None, "shrubland"],
        "parent_material": ["loess", "loess", "loess", "alluvium", "loess", "loess"],
        "age_ka": [2.0, 5.0, 12.0, 40.0, 8.0, np.nan],
        "slope_deg": [1, 2, 3, 4, 5, 6],
        "map_mm": [300.0, 400.0, np.nan, 600.0, 700.0, 800.0],
    })


def test_filter_shapes(frame):
    eq = parse_filter("parent_material", "loess", where="r.toml, line 3")
    one = parse_filter("vegetation", ["grassland", "savanna"])
    rng = parse_filter("age_ka", {"min": 5, "max": 12})
    num = parse_filter("slope_deg", [2, 4])
    assert (eq.kind, one.kind, rng.kind) == ("equals", "one-of", "range")
    assert filter_mask(frame, eq).tolist() == [True, True, True, False, True, True]
    # text compares without regard to case or surrounding spaces; missing never matches
    assert filter_mask(frame, one).tolist() == [True, True, False, True, False, False]
    # closed range; NaN is never kept
    assert filter_mask(frame, rng).tolist() == [False, True, True, False, True, False]
    assert filter_mask(frame, num).tolist() == [False, True, False, True, False, False]
    assert rng.describe() == "5 <= age_ka <= 12"
    assert parse_filter("age_ka", {"max": 3}).describe() == "age_ka <= 3"


def test_counts_per_step_in_order(frame):
    filters = [parse_filter("parent_material", "loess"),
               parse_filter("vegetation", ["grassland", "shrubland"]),
               parse_filter("age_ka", {"min": 4})]
    res = apply_filters(frame, filters)
    assert [(s["kept"], s["removed"]) for s in res.steps] == [(5, 1), (3, 2), (1, 2)]
    assert res.frame.index.tolist() == [1]
    res2 = drop_incomplete(apply_filters(frame, filters[:1]), ["map_mm", "age_ka"])
    assert res2.steps[-1] == {"step": "with a value in map_mm, age_ka", "kept": 3,
                              "removed": 2}
    assert res2.to_dict()["rows_before"] == 6 and res2.to_dict()["rows_after"] == 3


def test_value_nobody_has_is_noted(frame):
    res = apply_filters(frame, [parse_filter("vegetation", "grasland", where="r.toml, line 4")])
    assert len(res.frame) == 0
    assert res.notes and "r.toml, line 4: no record has vegetation = 'grasland'" in res.notes[0]
    assert "grassland" in res.notes[0]


def test_filter_on_a_missing_column_names_the_line(frame):
    flt = parse_filter("landfrom", "fan", where="r.toml, line 7")
    with pytest.raises(InvalidDataError, match=r"r.toml, line 7: .*'landfrom'.*columns are"):
        apply_filters(frame, [flt], source="store 'x' (version 2)")


def test_range_on_text_column_is_refused(frame):
    with pytest.raises(InvalidDataError, match="holds text"):
        filter_mask(frame, parse_filter("vegetation", {"min": 1}, where="r.toml, line 2"))


@pytest.mark.parametrize("value, fragment", [
    ([], "at least one"), ([["a"]], "at least one"), ({"min": 1, "max": 0}, "larger than"),
    ({"low": 1}, "unknown key 'low'"), (True, "a value"), (float("nan"), "a value"),
    ({"min": True}, "must be a number"),
])
def test_bad_filter_values(value, fragment):
    with pytest.raises(UsageError, match=fragment):
        parse_filter("age_ka", value, where="r.toml, line 9")


def test_rows_needed():
    # coefficients + 2 (common practice: two residual degrees of freedom at least);
    # Theil-Sen's own minimum is 3 points
    assert rows_needed(2, "ols") == 4
    assert rows_needed(3, "huber") == 5
    assert rows_needed(1, "theil-sen") == 3


def test_too_few_rows_says_how_many_are_needed(frame):
    res = apply_filters(frame, [parse_filter("age_ka", {"min": 10})])
    with pytest.raises(InvalidDataError) as e:
        check_enough(len(res.frame), 5, "form 'quadratic' (3 coefficients)", res,
                     where="r.toml, line 5")
    msg = str(e.value)
    assert "keeps 2 row(s)" in msg and "needs at least 5" in msg
    assert "age_ka >= 10 -> 2" in msg and msg.startswith("r.toml, line 5:")
    check_enough(5, 5, "anything")  # enough: no error
