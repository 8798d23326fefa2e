"""The marks of one panel of the section figure: estimates, intervals, flags, labels.

What each mark means is in :mod:`refit.report.section_plot`; this module draws one panel
of fits (:func:`draw_panel`), its label column (:func:`draw_labels`: the paleosol ids
and the flags, right of every mark, pushed apart in level by :func:`repel`, measured
with the renderer) and the legend entries of the line
styles (:func:`style_handles`). Every artist carries a ``gid`` naming what it is and of
which fit (``estimates:<fit>``, ``interval:<kind>:<fit>``, ...), so tests find them.
"""

from __future__ import annotations

import numpy as np

from refit.report import style

PREDICTION, PUBLISHED_SE = "prediction", "published ±1 SE"  # refit.apply.section
POSTERIOR = "posterior"  # refit.apply.section: a posterior's median and interval
#: flags that say the equation does not hold there (marked hollow and named)
SERIOUS = ("outside-calibration-range", "beyond-turning-point", "unbounded", "two-roots",
           "open-below", "open-above", "setting-mismatch", "beyond-search-window",
           "not-decompacted")
SHORT = {"outside-calibration-range": "outside range",
         "beyond-turning-point": "beyond turning point"}
#: the legend's words for a limit cut at a physical bound (flag ``truncated-at-bound``):
#: not a sign that the equation fails, so drawn at the cut end and explained, not hollow
TRUNCATED_TEXT = ("triangle at a bar's end: the interval is cut at a physical bound there "
                  "(flag truncated-at-bound; e.g. MAP cannot fall below 0 mm); the limit "
                  "before the cut is in the table (lower_untruncated, upper_untruncated)")
#: vertical offset between the fits drawn at one paleosol [points]
DODGE_PT = 3.0
LABEL_SIZE = 7.0
#: characters of a flag line in the label column before it wraps
FLAG_WIDTH = 24
#: a fit's marker written as a character, so a flag line in the label column names its
#: fit (markers of :mod:`refit.report.section_layout`; the diamond is a posterior's)
GLYPH = {"o": "\u25cf", "s": "\u25a0", "^": "\u25b2", "v": "\u25bc", "P": "\u271a",
         "D": "\u25c6"}
ID_COLOUR = "#444444"
#: gaps [points]: between the rightmost mark and the label column, between the lines of
#: one paleosol's label, between the labels of two paleosols; half a marker's size
COLUMN_GAP_PT, LINE_GAP_PT, BLOCK_GAP_PT, MARKER_HALF_PT = 5.0, 0.5, 2.0, 3.5

def serious_flags(flags) -> list[str]:
    """The flags of a row that say the equation does not hold there."""
    return [f for f in str(flags or "").split(";") if f in SERIOUS]


def flag_label(flags, common=()) -> str:
    """The short text drawn beside a flagged estimate (flags in ``common``, shared by
    every estimate of the fit in the figure, are said once in the legend instead)."""
    return ", ".join(SHORT.get(f, f.replace("-", " ")) for f in serious_flags(flags)
                     if f not in common)


def common_flags(t) -> dict:
    """Per fit, the serious flags every one of its drawn estimates carries."""
    out = {}
    for fit, g in t.groupby("fit", sort=False):
        sets = [set(serious_flags(f)) for f in g["flags"]]
        out[fit] = sorted(set.intersection(*sets)) if sets else []
    return out


def yvalues(t, axis: str):
    return t["age" if axis == "age" else "level_m"].to_numpy(float)


def dodge(ax, g) -> np.ndarray:
    """Vertical drawing offset of each row [data units]: the fits with an estimate at one
    paleosol are set :data:`DODGE_PT` points apart around its level, measured on the
    laid-out axes (so the offset is the same few points on any section's height)."""
    y0, y1 = ax.get_ylim()
    per_pt = (y1 - y0) / (ax.get_window_extent().height / (ax.figure.dpi / 72.0))
    out = np.zeros(len(g))
    ok = np.isfinite(g["estimate"].to_numpy(float))
    pos = np.arange(len(g))
    for idx in g[ok].groupby("paleosol_id", sort=False).indices.values():
        rows = pos[ok][idx]
        n = len(rows)
        out[rows] = (np.arange(n) - (n - 1) / 2) * DODGE_PT * per_pt
    return out


def draw_panel(ax, g, axis: str, xclip: tuple, style_of: dict) -> None:
    """Estimates, intervals and age bars of one quantity in one section (the layout is
    frozen: the offsets of :func:`dodge` are measured on it)."""
    from matplotlib.collections import LineCollection

    y_all = yvalues(g, axis) + dodge(ax, g)
    for fit in dict.fromkeys(g["fit"]):
        m = (g["fit"] == fit).to_numpy()
        colour, marker = style_of[fit]
        rows, yy = g[m], y_all[m]
        est = rows["estimate"].to_numpy(float)
        order = np.argsort(yy, kind="stable")
        ax.plot(est[order], yy[order], color=colour, lw=0.8, alpha=0.55, zorder=2,
                gid=f"path:{fit}")
        for kind, ls, lw in ((PREDICTION, "-", 2.4), (PUBLISHED_SE, "--", 1.3),
                             (POSTERIOR, ":", 2.4)):
            k = (rows["interval_kind"] == kind).to_numpy()
            if not k.any():
                continue
            lo = np.clip(rows["lower"].to_numpy(float)[k], *xclip)
            hi = np.clip(rows["upper"].to_numpy(float)[k], *xclip)
            segs = [[(a, b), (c, b)] for a, c, b in zip(lo, hi, yy[k])]
            ax.add_collection(LineCollection(segs, colors=colour, linestyles=ls,
                                             linewidths=lw, zorder=3,
                                             gid=f"interval:{kind}:{fit}"))
            if kind == PUBLISHED_SE:
                ax.plot(np.concatenate([lo, hi]), np.concatenate([yy[k], yy[k]]),
                        ls="none", marker="|", ms=6, mew=1.0, color=colour, zorder=3)
        _truncated_ends(ax, rows, yy, colour, fit)
        flagged = np.array([bool(serious_flags(f)) for f in rows["flags"]])
        for sel, face, gid in ((~flagged, colour, "estimates"),
                               (flagged, "white", "flagged")):
            if sel.any():
                ax.plot(est[sel], yy[sel], ls="none", marker=marker, ms=5.5, mfc=face,
                        mec=colour, mew=1.3, zorder=4, gid=f"{gid}:{fit}")
    sd = g["age_sd"].to_numpy(float)
    first = ~g["paleosol_id"].duplicated().to_numpy() & np.isfinite(sd)
    if axis == "age" and first.any():  # once per paleosol, at its first fit's estimate
        ax.errorbar(g["estimate"].to_numpy(float)[first], yvalues(g, axis)[first],
                    yerr=sd[first], fmt="none", ecolor=style.GREY, elinewidth=0.9,
                    capsize=2, zorder=1, gid="age-sd")


def _truncated_ends(ax, rows, yy, colour, fit) -> None:
    """A triangle at each limit cut at a bound, pointing past it (gid ``truncated:<fit>``)."""
    from refit.apply.estimates import truncated_sides

    cut_lo, cut_hi = truncated_sides(rows)
    for cut, col, marker in ((cut_lo, "lower", "<"), (cut_hi, "upper", ">")):
        if cut.any():
            ax.plot(rows[col].to_numpy(float)[cut], yy[cut], ls="none", marker=marker,
                    ms=5, color=colour, zorder=4, gid=f"truncated:{fit}")


def label_blocks(g, common: dict, style_of: dict, axis: str) -> list:
    """What the label column says of each paleosol of a panel: ``(id, level, lines)``,
    ``lines`` being ``(text, colour, gid)``: the id (gid ``paleosol-label``), then one
    line per fit whose estimate there is flagged (gid ``flag-label``): the fit's marker
    as a character and its flags (those not already said in the fit's legend entry,
    ``common``), in the fit's colour, wrapped at :data:`FLAG_WIDTH` characters."""
    out = []
    y = yvalues(g, axis)
    for pid, idx in g.groupby("paleosol_id", sort=False).indices.items():
        lines = [(str(pid), ID_COLOUR, "paleosol-label")]
        for i in idx:
            fit = g["fit"].iloc[i]
            text = flag_label(g["flags"].iloc[i], common.get(fit, ()))
            if text:
                colour, marker = style_of[fit]
                words = _wrap_flags(f"{GLYPH.get(marker, '•')} {text}")
                lines.append((words, colour, "flag-label"))
        out.append((str(pid), float(y[idx[0]]), lines))
    return out


def _wrap_flags(text: str) -> str:
    """A flag line broken after a comma (then within a flag) past :data:`FLAG_WIDTH`."""
    import textwrap

    lines: list[str] = []
    for part in text.split(", "):
        if lines and len(lines[-1]) + 2 + len(part) <= FLAG_WIDTH:
            lines[-1] += ", " + part
        else:
            if lines:
                lines[-1] += ","
            lines.extend(textwrap.wrap(part, FLAG_WIDTH, initial_indent="   " if lines
                                       else "", subsequent_indent="   "))
    return "\n".join(lines)


def text_size(fig, renderer, text: str) -> tuple[float, float]:
    """Width and height [pixels] of ``text`` at :data:`LABEL_SIZE`, measured with the
    figure's renderer."""
    from matplotlib.text import Text

    ext = Text(0, 0, text, fontsize=LABEL_SIZE, figure=fig, linespacing=1.1).get_window_extent(renderer)
    return ext.width, ext.height


def column_width(fig, g, common: dict, style_of: dict, axis: str) -> float:
    """Width [in] of the widest label of ``g`` (the label column of its panels)."""
    renderer = fig.canvas.get_renderer()
    widths = [text_size(fig, renderer, s)[0] for _, _, lines in
              label_blocks(g, common, style_of, axis) for s, _, _ in lines]
    return max(widths, default=0.0) / fig.dpi


def repel(want, heights, lo: float, hi: float, gap: float) -> np.ndarray:
    """Centres of boxes of ``heights`` on one axis, as near to ``want`` as they can be
    with ``gap`` between neighbours and all inside ``[lo, hi]`` (the bottom one wins
    when they do not fit) [pixels]. Neighbours that would touch are merged into one
    stack centred on the mean of what its members want (a 1-D repel: order kept)."""
    want, heights = np.asarray(want, float), np.asarray(heights, float)
    stacks: list[list] = []                   # [members in order, bottom]

    def settle(members):
        h = heights[members]
        offs = np.concatenate([[0.0], np.cumsum(h + gap)[:-1]])   # bottom of each
        total = h.sum() + gap * (len(h) - 1)
        bottom = float(np.mean(want[members] - h / 2 - offs))
        return max(lo, min(bottom, hi - total))

    for i in np.argsort(want, kind="stable"):
        stacks.append([[int(i)], settle([int(i)])])
        while len(stacks) > 1:
            (pm, pb), (cm, cb) = stacks[-2], stacks[-1]
            top = pb + heights[pm].sum() + gap * len(pm)
            if top <= cb:
                break
            stacks[-2:] = [[pm + cm, settle(pm + cm)]]
    out = np.empty(len(want))
    for members, bottom in stacks:
        for k in members:
            out[k] = bottom + heights[k] / 2
            bottom += heights[k] + gap
    return out


def draw_labels(ax, renderer, g, axis: str, common: dict, style_of: dict) -> list:
    """The label column of a panel: at the right of every drawn mark, each paleosol's
    id at its level and, under it, the flags of its flagged estimates (one line per fit,
    after the fit's marker, in its colour); labels near in level are pushed apart
    vertically (:func:`repel`), measured with the renderer, so no text touches another
    or a mark. Returns the text artists drawn."""
    fig = ax.figure
    per_pt = fig.dpi / 72.0
    frame = ax.get_window_extent(renderer)
    to_px = ax.transData.transform
    xl = ax.get_xlim()
    reach = np.concatenate([g[c].to_numpy(float) for c in ("estimate", "lower", "upper")])
    reach = np.clip(reach[np.isfinite(reach)], min(xl), max(xl))
    x_col = float(to_px((reach.max(), 0.0))[0]) + (MARKER_HALF_PT + COLUMN_GAP_PT) * per_pt
    blocks = label_blocks(g, common, style_of, axis)
    if not blocks:
        return []
    sizes = [[text_size(fig, renderer, s)[1] for s, _, _ in lines] for _, _, lines in blocks]
    line_gap = LINE_GAP_PT * per_pt
    heights = np.array([sum(h) + line_gap * (len(h) - 1) for h in sizes])
    level_px = np.array([to_px((xl[0], y))[1] for _, y, _ in blocks])
    # the id's line centred on the level, the flag lines hanging under it
    want = level_px + np.array([h[0] / 2 for h in sizes]) - heights / 2
    centres = repel(want, heights, frame.y0 + 1, frame.y1 - 1, BLOCK_GAP_PT * per_pt)
    out = []
    for (_, _, lines), h, c, hb in zip(blocks, sizes, centres, heights):
        top = c + hb / 2
        for (s, colour, gid), hl in zip(lines, h):
            out.append(ax.text((x_col - frame.x0) / frame.width,
                               (top - frame.y0) / frame.height, s, transform=ax.transAxes,
                               ha="left", va="top", fontsize=LABEL_SIZE, color=colour,
                               gid=gid, clip_on=False, linespacing=1.1))
            out[-1].set_in_layout(False)
            top -= hl + line_gap
    return out


def style_handles(t, axis: str) -> list:
    """Legend entries for what the line styles and hollow markers mean."""
    from matplotlib.lines import Line2D

    kinds = set(t["interval_kind"])
    out = []
    if "prediction" in kinds:
        lv = t.loc[t["interval_kind"] == "prediction", "level"].dropna()
        what = f"{float(lv.iloc[0]):.0%} " if len(lv) and lv.nunique() == 1 else ""
        out.append(Line2D([], [], color="#444444", lw=2.4,
                          label=f"{what}prediction interval"))
    if POSTERIOR in kinds:
        out.append(Line2D([], [], color="#444444", lw=2.4, ls=":", marker="D", ms=4,
                          label="posterior median and equal-tailed interval (dotted "
                                "bar, diamond marker)"))
    if "published ±1 SE" in kinds:
        out.append(Line2D([], [], color="#444444", lw=1.3, ls="--",
                          label="published ±1 SE (not a prediction interval)"))
    if any(serious_flags(f) for f in t["flags"]):
        out.append(Line2D([], [], ls="none", marker="o", mfc="white", mec="#444444",
                          label="hollow: flagged, the equation does not hold here; the "
                                "flags are named at the right under the paleosol's id, "
                                "after the fit's marker (or in the fit's legend entry)"))
    if "none" in kinds:
        out.append(Line2D([], [], ls="none", marker="o", color="#444444",
                          label="marker alone: the file gives no interval"))
    from refit.apply.estimates import truncated_sides

    cut_lo, cut_hi = truncated_sides(t)
    if cut_lo.any() or cut_hi.any():
        out.append(Line2D([], [], ls="none", marker="<", ms=5, color="#444444",
                          label=TRUNCATED_TEXT))
    if axis == "age" and np.isfinite(t["age_sd"].to_numpy(float)).any():
        out.append(Line2D([], [], color=style.GREY, lw=0.8, label="age ±1 SD"))
    return out
