"""The section figure with many fits (refit.report.section_layout, section_plot): at most
five fits a panel, panels side by side on one level axis, further pages after four
panels; every fit's points drawn where the plan says, at the table's numbers; no legend
over any axes (measured with matplotlib's own renderer); no warning from matplotlib.

The fits are made on a seeded simulation (a test input, not demo data); the reference
for each drawn point is the section table itself (the figure must copy its numbers).
"""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest

from refit.apply.section import section_files
from refit.report.section_layout import FITS_PER_PANEL, PALETTE, PANELS_PER_PAGE
from refit.report.section_plot import (
    figure_contents,
    section_figure,
    section_pages,
    write_section,
)


def _files(folder, n: int) -> list[str]:
    """``n`` inverse fits of MAP on depth to the Bk horizon, each on its own seeded draw
    of 40 soils (so every fit's numbers differ), written as coefficient files."""
    from refit.coefficients import fit_record, write_record
    from refit.models.fitting import fit

    prov = {"dataset": {"name": "t", "version": 1, "sha256": "0" * 64}, "subset": {},
            "recipe": None, "recipe_sha256": None}
    out = []
    for k in range(n):
        rng = np.random.default_rng(100 + k)
        x = rng.uniform(200, 1200, 40)
        t = pd.DataFrame({"map_mm": x, "bk_depth_cm": 10 + 0.1 * x + rng.normal(0, 8, 40)})
        rec = fit_record(fit(t, "map_mm", ["bk_depth_cm"], direction="inverse"),
                         function_id="map_from_bk_depth", cv=None, level=0.95,
                         interval_method="analytic", provenance=prov,
                         candidate=f"linear__ols__inverse__draw{k:02d}")
        out.append(str(write_record(rec, folder / f"fit{k:02d}.json")))
    return out


def _fossils(folder) -> str:
    path = folder / "fossils.csv"
    pd.DataFrame({"paleosol_id": [f"A{i}" for i in range(5)] + [f"B{i}" for i in range(4)],
                  "section": ["Alpha"] * 5 + ["Beta"] * 4,
                  "level_m": [2.0, 9.0, 17.5, 30.0, 41.0, 1.0, 6.0, 12.0, 20.0],
                  "bk_depth_cm": [40.0, 55.0, 72.0, 61.0, 90.0, 35.0, 80.0, 66.0, 48.0]}
                 ).to_csv(path, index=False)
    return str(path)


@pytest.fixture(scope="module")
def many(tmp_path_factory):
    folder = tmp_path_factory.mktemp("many")
    return section_files(_files(folder, 23), _fossils(folder)), folder


def _drawn(figures, fit) -> np.ndarray:
    """x of every estimate marker of ``fit`` (plain and hollow) in ``figures``."""
    xs = [np.asarray(a.get_xdata(), float) for fig in figures for ax in fig.axes
          for a in ax.lines if a.get_gid() in (f"estimates:{fit}", f"flagged:{fit}")]
    return np.sort(np.concatenate(xs)) if xs else np.array([])


def _legend_clear(fig) -> int:
    """Assert no legend overlaps any axes (frame, ticks, labels and title) or another
    legend, and each lies inside the figure; returns the legends checked."""
    renderer = fig.canvas.get_renderer()
    legends = list(fig.legends) + [lg for sf in fig.subfigs for lg in sf.legends]
    boxes = [lg.get_window_extent(renderer) for lg in legends]
    page = fig.bbox
    for i, box in enumerate(boxes):
        assert page.x0 - 1 <= box.x0 and box.x1 <= page.x1 + 1
        assert page.y0 - 1 <= box.y0 and box.y1 <= page.y1 + 1
        for ax in fig.axes:
            assert not box.overlaps(ax.get_tightbbox(renderer)), (i, ax.get_title("left"))
        for other in boxes[i + 1:]:
            assert not box.overlaps(other)
    return len(boxes)


def test_twenty_fits_four_panels_every_point_drawn_no_overlap_no_warning(tmp_path):
    files = _files(tmp_path, 20)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        res = section_files(files, _fossils(tmp_path))
        pages = section_pages(res.table, "Alpha")
        for p in pages:
            p.figure.canvas.draw()            # render as saved: a warning would show here
    assert [str(w.message) for w in caught] == []
    t = res.table[res.table["section"] == "Alpha"]
    fits = list(dict.fromkeys(t["fit"]))
    assert len(fits) == 20
    (page,) = pages                               # 4 panels of 5 fit on one figure
    assert len(page.panels) == PANELS_PER_PAGE
    assert [len(p.fits) for p in page.panels] == [FITS_PER_PANEL] * 4
    assert page.fits == fits                      # each fit once, in the table's order
    fig = page.figure
    assert len(fig.axes) == 4
    assert [ax.get_title("left") for ax in fig.axes] == [
        "MAP · fits 1-5 of 20", "MAP · fits 6-10 of 20", "MAP · fits 11-15 of 20",
        "MAP · fits 16-20 of 20"]
    # the level axis is shared: one range on every panel; x: one range for MAP
    assert len({ax.get_ylim() for ax in fig.axes}) == 1
    assert len({ax.get_xlim() for ax in fig.axes}) == 1
    for fit in fits:
        np.testing.assert_array_equal(_drawn([fig], fit),
                                      np.sort(t.loc[t["fit"] == fit, "estimate"]))
    # each panel draws its own fits only, five distinct colours
    for ax, panel in zip(fig.axes, page.panels):
        mine = {a.get_gid().split(":", 1)[1] for a in ax.lines
                if (a.get_gid() or "").startswith(("estimates:", "flagged:"))}
        assert mine == set(panel.fits)
        colours = {a.get_markeredgecolor() for a in ax.lines
                   if (a.get_gid() or "").startswith(("estimates:", "flagged:"))}
        assert colours == set(PALETTE)
    # a legend per panel naming its five fits, and one for the line styles
    assert [len(sf.legends[0].get_texts()) for sf in fig.subfigs] == [5] * 4
    assert "prediction interval" in fig.legends[0].get_texts()[0].get_text()
    assert _legend_clear(fig) == 5


def test_more_fits_than_a_figure_holds_go_to_pages(many, tmp_path):
    res, _ = many
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        written = write_section(res, tmp_path / "s")
    assert [str(w.message) for w in caught] == []
    names = [p.name for p in written[2:]]
    assert names == ["section-alpha.png", "section-alpha-2.png", "section-beta.png",
                     "section-beta-2.png"]
    assert figure_contents(res) == [
        ("section-alpha.png",
         "20 fits in 4 panels (MAP: fits 1-5, 6-10, 11-15, 16-20 of 23, a panel each)"),
        ("section-alpha-2.png", "3 fits in 1 panel (MAP: fits 21-23 of 23, a panel each)"),
        ("section-beta.png",
         "20 fits in 4 panels (MAP: fits 1-5, 6-10, 11-15, 16-20 of 23, a panel each)"),
        ("section-beta-2.png", "3 fits in 1 panel (MAP: fits 21-23 of 23, a panel each)")]
    for sec in ("Alpha", "Beta"):
        pages = section_pages(res.table, sec)
        figs = [p.figure for p in pages]
        assert figs[1]._suptitle.get_text().endswith("(page 2 of 2)")
        # one level range and one MAP range on every page of the section
        assert len({ax.get_ylim() for f in figs for ax in f.axes}) == 1
        assert len({ax.get_xlim() for f in figs for ax in f.axes}) == 1
        t = res.table[res.table["section"] == sec]
        for fit in dict.fromkeys(t["fit"]):
            np.testing.assert_array_equal(_drawn(figs, fit),
                                          np.sort(t.loc[t["fit"] == fit, "estimate"]))
        for fig in figs:
            _legend_clear(fig)
    # the report embeds every page, each named
    from refit.report.section_plot import report_section

    part = report_section(tmp_path / "s")
    assert [(f["section"], f["page_label"]) for f in part["figures"]] == [
        ("Alpha", " (page 1 of 2)"), ("Alpha", " (page 2 of 2)"),
        ("Beta", " (page 1 of 2)"), ("Beta", " (page 2 of 2)")]
    # every fit's numbers stay in the table: 23 fits x 9 paleosols
    csv = pd.read_csv(written[0])
    assert csv["fit"].nunique() == 23 and len(csv) == 23 * 9
    # a shorter rerun into the same folder removes the pages it no longer draws
    short = section_files(sorted(res.table["coefficient_file"].unique())[:4],
                          _fossils(tmp_path))
    again = write_section(short, tmp_path / "s")
    assert sorted(p.name for p in (tmp_path / "s").glob("*.png")) == \
        ["section-alpha.png", "section-beta.png"]
    assert len(again) == 4


def test_three_fits_one_panel_one_legend_as_before(tmp_path):
    res = section_files(_files(tmp_path, 3), _fossils(tmp_path))
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        (page,) = section_pages(res.table, "Alpha")
        page.figure.canvas.draw()
    assert [str(w.message) for w in caught] == []
    fig = page.figure
    assert len(fig.axes) == 1 and fig.subfigs == []
    assert fig.axes[0].get_title("left") == "MAP"            # no "fits 1-3 of 3"
    (legend,) = fig.legends                            # fits and line styles in one
    texts = [" ".join(x.get_text().split()) for x in legend.get_texts()]
    assert sum("linear__ols__inverse__draw" in s for s in texts) == 3
    assert _legend_clear(fig) == 1
    t = res.table[res.table["section"] == "Alpha"]
    for fit in dict.fromkeys(t["fit"]):
        np.testing.assert_array_equal(_drawn([fig], fit),
                                      np.sort(t.loc[t["fit"] == fit, "estimate"]))
    assert section_figure(res.table, "Alpha", page=2) is None
