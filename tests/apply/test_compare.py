"""compare: the comparison table and the interval figure.

Reference values: the published Retallack (1994) equation at D = 100 cm gives 648 +- 141 mm
(Caudill et al. 1996, J. Sed. Res. 66:58); the figure is checked as a PNG by its signature
(PNG specification, ISO/IEC 15948: the 8-byte signature 89 50 4E 47 0D 0A 1A 0A).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from refit.apply.compare import (at_frame, compare_files, coverage_text, figure_png,
                           panel_groups)
from refit.errors import UsageError

RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"
CIA_K = "refit/published/map_from_cia_k.sheldon2002.json"


def test_at_values_table():
    table, result = compare_files([RETALLACK], at=["bk_depth_cm=100"])
    assert len(table) == 1
    r = table.iloc[0]
    assert r["paleosol_id"] == "at bk_depth_cm=100"
    assert r["estimate"] == pytest.approx(648.1, abs=0.05)
    assert r["width"] == pytest.approx(282.0, abs=1e-9)
    assert r["fit"] == "Retallack 1994, from bk_depth"  # by its short citation, not its id
    assert "published-plus-minus-only" in r["flags"]
    assert result.problems == []


def test_coverage_text():
    assert coverage_text(0.8823, "group-kfold", 0.95, "candidate") == \
        "CV coverage 88% of 95% (group-kfold)"
    assert coverage_text(None, "", None, "published") == \
        "no cross-validation (interval = published ±1 SE)"
    assert coverage_text(None, "", None, "none") == "no cross-validation (no interval given)"


def test_quantities_never_share_an_axis():
    # MAP [mm] and MAT [degC] for one paleosol go to two panels
    table = pd.DataFrame({"paleosol_id": ["P", "P", "P", "Q", "Q"],
                          "response": ["map_mm", "mat_c", "map_mm", "map_mm", "mat_c"],
                          "unit": ["mm", "degC", "mm", "mm", "degC"],
                          "estimate": [600.0, 12.1, 650.0, 700.0, np.nan]})
    panels = panel_groups(table)
    # Q's MAT panel has no estimate at all, so it is left out and Q keeps a plain title
    assert [(title, list(rows["unit"])) for title, rows in panels] == [
        ("P: MAP [mm]", ["mm", "mm"]), ("P: MAT [°C]", ["degC"]), ("Q", ["mm"])]


def test_figure_is_a_png_with_one_panel_per_paleosol(tmp_path):
    table, _ = compare_files([RETALLACK, CIA_K], fossils="calib_demo/fossils.csv",
                             paleosols=["MB-P01", "MB-P03"])
    assert set(table["paleosol_id"]) == {"MB-P01", "MB-P03"} and len(table) == 4
    png = figure_png(table)
    assert png[:8] == b"\x89PNG\r\n\x1a\n" and len(png) > 10_000
    import matplotlib.image as mpimg
    import io

    img = mpimg.imread(io.BytesIO(png))
    assert img.shape[0] > img.shape[1] * 0.3  # two stacked panels


def test_usage_errors():
    with pytest.raises(UsageError, match="either --fossils"):
        compare_files([RETALLACK])
    with pytest.raises(UsageError, match="NAME=VALUE"):
        at_frame(["bk_depth_cm"])
    with pytest.raises(UsageError, match="not a number"):
        at_frame(["bk_depth_cm=deep"])
    with pytest.raises(UsageError, match="not in the table"):
        compare_files([RETALLACK], fossils="calib_demo/fossils.csv", paleosols=["X"])


def test_cia_k_from_oxides_on_the_demo():
    # CIA-K from the oxides (molar, refit.soil.indices); the published P = 221.12 e^(0.0197 x)
    # (Sheldon et al. 2002, CONFIRMED) evaluated at that index
    from refit.soil.indices import cia_k

    table, _ = compare_files([CIA_K], fossils="calib_demo/fossils.csv",
                             paleosols=["MB-P01"])
    x = float(cia_k(15.47, 1.37, 0.96))
    import math

    assert table["estimate"][0] == pytest.approx(221.12 * math.exp(0.0197 * x), rel=1e-12)
    assert isinstance(table, pd.DataFrame)


def _rows(fits, origins, function_ids, flags=None, pid="P1"):
    """A comparison table of one paleosol: one row per fit, invented numbers."""
    from refit.apply.compare import TABLE_COLUMNS

    n = len(fits)
    t = pd.DataFrame({"paleosol_id": [pid] * n, "fit": fits, "origin": origins,
                      "function_id": function_ids, "response": "map_mm", "unit": "mm",
                      "estimate": np.linspace(500.0, 700.0, n), "lower": 400.0,
                      "upper": 800.0, "level": 0.95, "interval": "analytic",
                      "cv_coverage": np.nan, "cv_scheme": "", "problem": "",
                      "flags": flags or [""] * n})
    return t.reindex(columns=TABLE_COLUMNS).fillna({"problem": "", "flags": ""})


def test_fit_label_of_the_combined_posterior_has_no_double_space():
    from collections import namedtuple

    from refit.apply.compare import fit_label

    Row = namedtuple("Row", "citation candidate function_id version status")
    assert fit_label(Row("", "", "posterior", "", "combined")) == "posterior combined"
    # a candidate read back from a CSV as NaN falls back to the status, too
    assert fit_label(Row(np.nan, np.nan, "posterior", np.nan, "combined")) == \
        "posterior combined"
    assert fit_label(Row("", "linear__ols__inverse__analytic", "map_from_bk_depth", "1.0.0",
                         "published")) == \
        "map_from_bk_depth 1.0.0 linear__ols__inverse__analytic"


def test_the_combined_posterior_is_its_own_kind_in_the_table_and_the_legend():
    from refit.apply.compare import POSTERIOR_TEXT, _legend_handles, comparison_table

    results = pd.DataFrame({
        "paleosol_id": ["P1", "P1"], "function_id": ["map_from_bk_depth", "posterior"],
        "version": ["1.0.0", ""], "status": ["published", "combined"],
        "candidate": ["linear__ols__forward__analytic", ""], "citation": ["", ""],
        "estimate": [600.0, 650.0], "lower": [400.0, 500.0], "upper": [800.0, 790.0]})
    table = comparison_table(results)
    assert list(table["origin"]) == ["refit", "posterior"]
    assert table["fit"].iloc[1] == "posterior combined"
    labels = [h.get_label() for h in _legend_handles(table)]
    # what the legend names is what is drawn: no published equation here
    assert labels == ["fit made with refit (CV coverage at right)", "estimate",
                      POSTERIOR_TEXT, "posterior median"]


def test_paler_bars_are_explained_only_when_drawn():
    from refit.apply.compare import FLAGGED_TEXT, _legend_handles

    plain = _rows(["Retallack 1994, from bk_depth"], ["literature"], ["map_from_bk_depth"])
    assert [h.get_label() for h in _legend_handles(plain)] == [
        "published equation (±1 SE)", "estimate"]
    flagged = _rows(["Retallack 1994, from bk_depth"], ["literature"], ["map_from_bk_depth"],
                    flags=["outside-calibration-range"])
    assert FLAGGED_TEXT in [h.get_label() for h in _legend_handles(flagged)]


def test_long_fit_labels_are_shown_whole_and_the_page_title_clears_them():
    # a long label a run candidate gets: function id, 'unpublished' and the
    # candidate name; the figure is drawn and each text's box measured by the renderer
    import matplotlib.pyplot as plt

    from refit.apply.compare import comparison_figure

    long = "map_from_bk_depth unpublished quadratic__huber__inverse__split-conformal"
    table = pd.concat([_rows([long, "Retallack 1994, from bk_depth"], ["refit", "literature"],
                             ["map_from_bk_depth"] * 2, pid=p) for p in ("P1", "P2")])
    fig = comparison_figure(table, title="page 1 of 2")
    renderer = fig.canvas.get_renderer()
    labels = [t.get_window_extent(renderer) for ax in fig.axes for t in ax.get_yticklabels()]
    assert len(labels) == 4 and min(b.x0 for b in labels) >= 0.0  # none cut at the left edge
    title = next(t for t in fig.texts if t.get_text() == "page 1 of 2")
    box = title.get_window_extent(renderer)
    others = labels + [lg.get_window_extent(renderer) for lg in fig.legends]
    assert not any(box.overlaps(b) for b in others)
    assert box.y1 <= fig.bbox.y1 and box.x0 >= 0.0
    plt.close(fig)


def test_a_row_s_note_never_reaches_the_next_row():
    # found by looking at the demo's figure: three-line notes (coverage, posterior, flags)
    # ran into the next row's note; rows are spaced by their longest note, measured here
    # with matplotlib's renderer on the figure as drawn
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    from refit.apply.compare import _panel

    rows = _rows(["a", "b", "c"], ["refit"] * 3, ["map_from_bk_depth"] * 3,
                 flags=["outside-calibration-range;setting-not-recorded;two-rays"] * 3)
    rows["posterior_median"] = [500.0, 510.0, 520.0]
    rows["posterior_lower"] = [400.0, 410.0, 420.0]
    rows["posterior_upper"] = [600.0, 610.0, 620.0]
    from refit.apply.compare import ROW_IN, row_pitch

    fig, ax = plt.subplots(figsize=(11, ROW_IN * 3 * row_pitch(rows) + 0.9))
    _panel(ax, rows, "P")
    fig.subplots_adjust(left=0.25, right=0.61)
    renderer = fig.canvas.get_renderer()
    boxes = sorted((t.get_window_extent(renderer) for t in ax.texts), key=lambda b: b.y0)
    assert len(boxes) == 3
    for lower, upper in zip(boxes, boxes[1:]):
        assert lower.y1 <= upper.y0, (lower, upper)
    plt.close(fig)
