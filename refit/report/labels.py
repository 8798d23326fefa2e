"""Point labels that do not print over each other: a small greedy collision pass.

A label is tried at a few offsets around its point, nearest first, in the eight compass
directions; the first place whose text box stays inside the axes and clear of the labels
already placed (and, if it can, of every data point) wins. Labels placed away from their
point get a thin leader line. Labels are placed in the order given, so the caller lists
the most important first; a label with no free place is left out (the caller says where
the full list is). Everything is measured in display pixels with the figure's own
renderer, after the layout is frozen, so what is checked is what is saved.
"""

from __future__ import annotations

import numpy as np

#: offsets tried around a point [points]: a near ring without a leader line, then rings
#: farther out with one
RINGS = (5.0, 14.0, 26.0, 40.0)
#: directions tried on each ring, in order: up-right first (the usual reading place)
DIRECTIONS = ((1, 1), (1, -1), (-1, 1), (-1, -1), (1, 0), (-1, 0), (0, 1), (0, -1))
#: gap kept between two label boxes [pixels]
GAP = 1.5
#: half-size of a data point's marker box to keep clear [points]
MARKER_HALF = 2.5


def freeze_layout(fig):
    """Run the figure's layout once and keep it: returns the renderer.

    Labels are placed in display pixels, so the axes must not move afterwards; the
    layout engine is switched off once it has placed everything.
    """
    fig.draw_without_rendering()
    fig.set_layout_engine("none")
    return fig.canvas.get_renderer()


def _alignment(dx: float, dy: float) -> tuple[str, str]:
    ha = "left" if dx > 0 else "right" if dx < 0 else "center"
    va = "bottom" if dy > 0 else "top" if dy < 0 else "center"
    return ha, va


def _box(px: float, py: float, w: float, h: float, ha: str, va: str) -> np.ndarray:
    """(x0, y0, x1, y1) of a w x h text box anchored at (px, py) [pixels]."""
    x0 = px - {"left": 0.0, "right": w, "center": w / 2}[ha]
    y0 = py - {"bottom": 0.0, "top": h, "center": h / 2}[va]
    return np.array([x0, y0, x0 + w, y0 + h])


def _overlaps(box: np.ndarray, boxes: list, gap: float) -> bool:
    return any(box[0] < b[2] + gap and b[0] < box[2] + gap and
               box[1] < b[3] + gap and b[1] < box[3] + gap for b in boxes)


def _covers_points(box: np.ndarray, pts: np.ndarray, half: float) -> bool:
    if pts.size == 0:
        return False
    return bool(np.any((pts[:, 0] > box[0] - half) & (pts[:, 0] < box[2] + half) &
                       (pts[:, 1] > box[1] - half) & (pts[:, 1] < box[3] + half)))


def _candidates():
    """(dx, dy [points], leader line?) of every place tried, nearest first."""
    for r in RINGS:
        for ux, uy in DIRECTIONS:
            norm = np.hypot(ux, uy)
            yield r * ux / norm, r * uy / norm, r > RINGS[0]


def place_labels(ax, renderer, x, y, texts, *, avoid=None, stems=None,
                 fontsize: float = 7.5, color: str = "black",
                 gid: str = "point-label", taken: list | None = None) -> list:
    """Label points (x[i], y[i]) with texts[i] where no two labels touch.

    Parameters
    ----------
    ax : matplotlib.axes.Axes
        Axes whose figure layout is frozen (:func:`freeze_layout`) and limits final.
    renderer : matplotlib renderer
        From :func:`freeze_layout`.
    x, y : array_like [data units]
        The points to label, most important first.
    texts : sequence of str
    avoid : (array_like, array_like), optional
        Data points [data units] that labels keep clear of when they can.
    stems : (array_like, array_like), optional
        Vertical stems from y = 0 to these (x, y) [data units] that labels keep clear of
        when they can (a stem plot).
    fontsize : float [points]
    color : str
    gid : str
        Given to every label (tests find them by it).
    taken : list, optional
        Boxes [pixels] of labels placed by an earlier call, kept clear of; the boxes
        placed here are appended to it, so several calls share one set of labels.

    Returns
    -------
    list of matplotlib.text.Annotation
        The labels drawn, in the order placed (a label with no free place is left out).
    """
    from matplotlib.text import Text

    to_px = ax.transData.transform
    per_pt = ax.figure.dpi / 72.0
    frame = ax.get_window_extent(renderer)
    pts = (to_px(np.column_stack([np.asarray(avoid[0], float), np.asarray(avoid[1], float)]))
           if avoid is not None else np.empty((0, 2)))
    if stems is not None:
        sx = np.asarray(stems[0], float)
        base = to_px(np.column_stack([sx, np.zeros_like(sx)]))
        top = to_px(np.column_stack([sx, np.asarray(stems[1], float)]))
        # a stem as a row of points one marker apart along it, from base to top
        steps = [base + (top - base) * f for f in np.linspace(0.0, 1.0, 80)]
        pts = np.vstack([pts, *steps])
    placed = taken if taken is not None else []
    out = []
    for xi, yi, s in zip(np.asarray(x, float), np.asarray(y, float), texts):
        if not (np.isfinite(xi) and np.isfinite(yi)):
            continue
        probe = Text(0, 0, str(s), fontsize=fontsize, figure=ax.figure)
        ext = probe.get_window_extent(renderer)
        px, py = to_px((xi, yi))
        spot = _free_spot(px, py, ext.width, ext.height, per_pt, frame, placed, pts)
        if spot is None:
            continue
        dx, dy, lead, box = spot
        ha, va = _alignment(dx, dy)
        ann = ax.annotate(str(s), (xi, yi), xytext=(dx, dy), textcoords="offset points",
                          ha=ha, va=va, fontsize=fontsize, color=color, gid=gid,
                          arrowprops=(dict(arrowstyle="-", lw=0.5, color=color, shrinkA=0,
                                           shrinkB=2.5) if lead else None))
        ann.set_in_layout(False)
        placed.append(box)
        out.append(ann)
    return out


def _free_spot(px, py, w, h, per_pt, frame, placed, pts):
    """The first candidate place clear of labels (and points, if any place is)."""
    inside = (frame.x0, frame.y0, frame.x1, frame.y1)
    for strict in (True, False):
        for dx, dy, lead in _candidates():
            ha, va = _alignment(dx, dy)
            box = _box(px + dx * per_pt, py + dy * per_pt, w, h, ha, va)
            if (box[0] < inside[0] or box[1] < inside[1] or box[2] > inside[2]
                    or box[3] > inside[3]):
                continue
            if _overlaps(box, placed, GAP):
                continue
            if strict and _covers_points(box, pts, MARKER_HALF * per_pt):
                continue
            return dx, dy, lead, box
    return None
