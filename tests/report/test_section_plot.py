"""The section figure (refit.report.section_plot): what is drawn matches the section table,
labels never overlap (measured with matplotlib's own renderer), the age axis reads
up-section, and the report embeds one figure per section."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.collections import LineCollection

from refit.apply.section import PREDICTION, PUBLISHED_SE, section_files
from refit.report.section_plot import (
    report_section, section_figure, serious_flags, write_section,
)

RETALLACK = "refit/published/map_from_bk_depth.retallack1994.json"
CIA_K = "refit/published/map_from_cia_k.sheldon2002.json"
DEMO = "calib_demo/fossils.csv"
CONSTANTS = "calib_demo/compaction_constants.csv"


@pytest.fixture(scope="module")
def result():
    return section_files([RETALLACK, CIA_K], DEMO, decompact=True,
                         constants_file=CONSTANTS, seed=1)


def _artists(fig, prefix):
    out = {}
    for ax in fig.axes:
        for a in list(ax.lines) + list(ax.collections) + list(ax.texts):
            gid = a.get_gid() or ""
            if gid.startswith(prefix):
                out.setdefault(gid, []).append(a)
    return out


@pytest.mark.parametrize("section", ["Coldstave Gorge", "Murrenhal Bluff"])
def test_points_intervals_and_flags_drawn_match_the_table(result, section):
    t = result.table
    t = t[(t["section"] == section) & t["estimate"].notna()]
    fig = section_figure(result.table, section)
    ax = fig.axes[0]
    y0, y1 = ax.get_ylim()
    tol = 0.03 * abs(y1 - y0)  # the drawing offset between fits is a few points
    for fit, g in t.groupby("fit"):
        flagged = np.array([bool(serious_flags(f)) for f in g["flags"]])
        for kind, sel in (("estimates", ~flagged), ("flagged", flagged)):
            lines = _artists(fig, f"{kind}:{fit}").get(f"{kind}:{fit}", [])
            if not sel.any():
                assert lines == []
                continue
            (line,) = lines
            x, y = np.asarray(line.get_xdata(), float), np.asarray(line.get_ydata(), float)
            np.testing.assert_allclose(np.sort(x), np.sort(g["estimate"][sel]), rtol=0)
            order = np.argsort(x)
            ref = g[sel].sort_values("estimate")
            assert np.all(np.abs(y[order] - ref["level_m"].to_numpy()) <= tol)
        kind = set(g["interval_kind"])
        assert kind <= {PREDICTION, PUBLISHED_SE}
        (coll,) = _artists(fig, f"interval:{kind.pop()}:{fit}").popitem()[1]
        assert isinstance(coll, LineCollection)
        segs = coll.get_segments()
        lo = np.sort([s[0][0] for s in segs])
        hi = np.sort([s[1][0] for s in segs])
        np.testing.assert_allclose(lo, np.sort(g["lower"]), rtol=0, atol=1e-9)
        np.testing.assert_allclose(hi, np.sort(g["upper"]), rtol=0, atol=1e-9)


def test_flags_are_named_and_explained_in_the_legend(result):
    fig = section_figure(result.table, "Coldstave Gorge")
    labels = [a.get_text() for a in _artists(fig, "flag-label").get("flag-label", [])]
    # CG-P08: 280 cm lies beyond the Retallack (1994) vertex at 245.1 cm (derived from its
    # coefficients); decompacted it is deeper still
    assert any("beyond turning point" in s for s in labels)
    legend = " ".join(t.get_text() for t in fig.legends[0].get_texts())
    assert "published ±1 SE (not a prediction interval)" in legend
    assert "hollow: flagged" in legend
    assert "map_from_bk_depth.retallack1994 (published)" in legend


@pytest.mark.parametrize("section", ["Coldstave Gorge", "Murrenhal Bluff"])
def test_no_two_labels_overlap(result, section):
    fig = section_figure(result.table, section)
    renderer = fig.canvas.get_renderer()
    texts = [a for k, v in _artists(fig, "").items() if k.endswith("-label") for a in v]
    ids = [a.get_text() for a in texts if a.get_gid() == "paleosol-label"]
    assert len(ids) >= 5
    boxes = [a.get_window_extent(renderer) for a in texts]
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (texts[i].get_text(), texts[j].get_text())
        ax = texts[i].axes.get_window_extent(renderer)
        assert ax.x0 - 1 <= boxes[i].x0 and boxes[i].x1 <= ax.x1 + 1


def test_age_axis_reads_up_section_and_carries_the_sd():
    res = section_files([RETALLACK], DEMO, age_model="calib_demo/age_model.csv")
    fig = section_figure(res.table, "Murrenhal Bluff", axis="age", y_label="age_ma")
    ax = fig.axes[0]
    assert ax.get_ylabel() == "age [Ma]"
    lo, hi = ax.get_ylim()
    assert lo > hi  # inverted: older (larger Ma) at the base
    assert _artists(fig, "age-sd")


def test_written_folder_and_report_section(result, tmp_path):
    written = write_section(result, tmp_path / "s")
    names = sorted(p.name for p in written)
    assert names == ["notes.txt", "section-coldstave-gorge.png",
                     "section-murrenhal-bluff.png", "section.csv"]
    assert written[2].read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    part = report_section(tmp_path / "s")
    assert [f["section"] for f in part["figures"]] == ["Murrenhal Bluff", "Coldstave Gorge"]
    assert part["figures"][0]["figure"].axes[0].get_ylabel() == "level [m]"
    assert part["notes"] == result.notes and part["n_rows"] == len(result.table)
