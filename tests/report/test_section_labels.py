"""The section figure's labels (refit.report.section_marks.draw_labels): in a section
like the demo's (two paleosols 3 m apart in a 200 m section, flagged estimates at the
top), no text touches another text, an interval bar, a marker or a joining line, every
flagged estimate is explained beside its paleosol's id, and ids stay at their levels.
Everything is measured in display pixels with matplotlib's own renderer (the boxes the
saved figure draws). The table is invented (the demo's kind of case)."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

from refit.apply.section import PREDICTION, PUBLISHED_SE, TABLE_COLUMNS
from refit.report.section_plot import section_figure

LEVELS = {"P1": 12.0, "P2": 15.0, "P3": 60.0, "P4": 120.0, "P5": 190.0, "P6": 200.0}
#: (estimate, lower, upper) [mm] of fit A (prediction) and fit B (published ±1 SE)
A = {"P1": (590, 370, 810), "P2": (680, 460, 900), "P3": (650, 430, 870),
     "P4": (600, 380, 820), "P5": (380, 170, 600), "P6": (1070, 830, 1310)}
B = {"P1": (640, 480, 790), "P2": (770, 620, 910), "P3": (740, 590, 890),
     "P4": (610, 460, 760), "P5": (160, 20, 300), "P6": (870, 720, 1010)}
FLAGS_A = {"P5": "outside-calibration-range", "P6": "outside-calibration-range"}
FLAGS_B = {"P6": "outside-calibration-range;beyond-turning-point"}


def _table() -> pd.DataFrame:
    rows = []
    for fit, kind, origin, values, flags in (
            ("fit A", PREDICTION, "refit", A, FLAGS_A),
            ("fit B", PUBLISHED_SE, "literature", B, FLAGS_B)):
        for k, (pid, (est, lo, hi)) in enumerate(values.items()):
            rows.append({"section": "Test Gorge", "paleosol_id": pid, "row": k + 2,
                         "level_m": LEVELS[pid], "age": np.nan, "age_sd": np.nan,
                         "age_unit": "", "fit": fit, "function_id": "map_from_x",
                         "version": "1.0.0", "variant": "", "origin": origin,
                         "response": "map_mm", "unit": "mm", "estimate": float(est),
                         "lower": float(lo), "upper": float(hi),
                         "lower_untruncated": np.nan, "upper_untruncated": np.nan,
                         "level": 0.95, "interval_kind": kind,
                         "flags": flags.get(pid, ""), "problem": "",
                         "coefficient_file": f"{fit}.json"})
    t = pd.DataFrame(rows)
    assert list(t.columns) == TABLE_COLUMNS
    return t


@pytest.fixture(scope="module")
def drawn():
    fig = section_figure(_table(), "Test Gorge")
    renderer = fig.canvas.get_renderer()
    (ax,) = fig.axes
    texts = [a for a in ax.texts if a.get_text().strip()]
    return fig, ax, renderer, texts


def _mark_boxes(ax, renderer):
    """(name, x0, y0, x1, y1) [pixels] of every interval bar (with its line width),
    marker and stretch of joining line drawn in the panel."""
    per_pt = ax.figure.dpi / 72.0
    out = []
    for coll in ax.collections:
        gid = coll.get_gid() or ""
        if not gid.startswith("interval:"):
            continue
        half = max(coll.get_linewidths()) * per_pt / 2
        for seg in coll.get_segments():
            (x0, y0), (x1, y1) = ax.transData.transform(np.asarray(seg))
            out.append((gid, min(x0, x1), min(y0, y1) - half, max(x0, x1), max(y0, y1) + half))
    for line in ax.lines:
        gid = line.get_gid() or ""
        xy = ax.transData.transform(np.column_stack([line.get_xdata(), line.get_ydata()]))
        if gid.startswith(("estimates:", "flagged:", "truncated:")) or \
                line.get_linestyle() == "None":
            half = line.get_markersize() * per_pt / 2
            out += [(gid, x - half, y - half, x + half, y + half) for x, y in xy]
        elif gid.startswith("path:"):
            for (xa, ya), (xb, yb) in itertools.pairwise(xy):
                for f in np.linspace(0.0, 1.0, 50):   # the line as points 1/50 apart
                    x, y = xa + f * (xb - xa), ya + f * (yb - ya)
                    out.append((gid, x - 0.5, y - 0.5, x + 0.5, y + 0.5))
    return out


def test_no_text_overlaps_text(drawn):
    _, _, renderer, texts = drawn
    boxes = [t.get_window_extent(renderer) for t in texts]
    assert len(texts) >= 6 + 3                       # six ids, three flagged estimates
    for i in range(len(boxes)):
        for j in range(i + 1, len(boxes)):
            assert not boxes[i].overlaps(boxes[j]), (texts[i].get_text(),
                                                     texts[j].get_text())


def test_no_text_overlaps_a_bar_a_marker_or_a_line(drawn):
    _, ax, renderer, texts = drawn
    marks = _mark_boxes(ax, renderer)
    assert sum(m[0].startswith("interval:") for m in marks) == 12      # 2 fits x 6
    frame = ax.get_window_extent(renderer)
    for t in texts:
        b = t.get_window_extent(renderer)
        assert frame.x0 <= b.x0 and b.x1 <= frame.x1 + 1, t.get_text()  # inside the panel
        for name, x0, y0, x1, y1 in marks:
            clear = b.x1 <= x0 or x1 <= b.x0 or b.y1 <= y0 or y1 <= b.y0
            assert clear, (t.get_text(), name)


def test_every_flagged_estimate_is_named_under_its_id(drawn):
    _, _, renderer, texts = drawn
    flags = [t for t in texts if t.get_gid() == "flag-label"]
    words = [" ".join(t.get_text().split()) for t in flags]
    # P5: fit A; P6: fit A and fit B (its two flags)
    assert sorted(words) == sorted(["\u25cf outside range", "\u25cf outside range",
                                    "\u25a0 outside range, beyond turning point"])
    ids = {t.get_text(): t for t in texts if t.get_gid() == "paleosol-label"}
    assert sorted(ids) == sorted(LEVELS)
    # each flag line hangs right under its paleosol's id, in the column
    for pid, n in (("P5", 1), ("P6", 2)):
        top = ids[pid].get_window_extent(renderer)
        below = [f for f in flags if f.get_window_extent(renderer).y1 <= top.y0
                 and top.y0 - f.get_window_extent(renderer).y1 < 40]
        assert len(below) >= n


def test_ids_stay_at_their_levels_in_order(drawn):
    _, ax, renderer, texts = drawn
    ids = {t.get_text(): t.get_window_extent(renderer) for t in texts
           if t.get_gid() == "paleosol-label"}
    for pid, level in LEVELS.items():
        y = ax.transData.transform((0.0, level))[1]
        box = ids[pid]
        # pushed apart by at most about one label's height (P1 and P2 are ~6 px apart)
        assert abs((box.y0 + box.y1) / 2 - y) <= 1.5 * box.height, pid
    order = sorted(LEVELS, key=LEVELS.get)
    centres = [(ids[p].y0 + ids[p].y1) / 2 for p in order]
    assert centres == sorted(centres)              # up-section reads upward
