"""The marks of one panel of the section figure: estimates, intervals, flags, labels.

What each mark means is in :mod:`refit.report.section_plot`; this module draws one panel
of fits (:func:`draw_panel`, :func:`draw_labels`) and the legend entries of the line
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


def draw_labels(ax, renderer, g, axis: str, common: dict) -> None:
    """Flag names beside flagged estimates, then paleosol ids at the right of each
    level, placed apart (labels with no free place are left out; the table has all)."""
    from refit.report.labels import place_labels

    y = yvalues(g, axis)
    est = g["estimate"].to_numpy(float)
    texts = [flag_label(f, common.get(fit, ())) for f, fit in zip(g["flags"], g["fit"])]
    k = np.array([bool(s) for s in texts])
    pts, taken = (est, y), []
    place_labels(ax, renderer, est[k], y[k], [s for s, kk in zip(texts, k) if kk],
                 avoid=pts, fontsize=LABEL_SIZE, color="#333333", gid="flag-label",
                 taken=taken)
    ids = g.drop_duplicates("paleosol_id")
    right = g.groupby("paleosol_id", sort=False).apply(
        lambda r: np.nanmax(np.concatenate([r["estimate"].to_numpy(float),
                                            r["upper"].to_numpy(float)[np.isfinite(
                                                r["upper"].to_numpy(float))]])),
        include_groups=False)
    xl = ax.get_xlim()
    xs = np.minimum(right.reindex(ids["paleosol_id"]).to_numpy(float), xl[1])
    place_labels(ax, renderer, xs, yvalues(ids, axis), list(ids["paleosol_id"]),
                 avoid=pts, fontsize=LABEL_SIZE, color="#555555", gid="paleosol-label",
                 taken=taken)


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
                          label="posterior median and equal-tailed interval (dotted; "
                                "fits named '... posterior', 'posterior combined': all "
                                "proxies together)"))
    if "published ±1 SE" in kinds:
        out.append(Line2D([], [], color="#444444", lw=1.3, ls="--",
                          label="published ±1 SE (not a prediction interval)"))
    if any(serious_flags(f) for f in t["flags"]):
        out.append(Line2D([], [], ls="none", marker="o", mfc="white", mec="#444444",
                          label="hollow: flagged, the equation does not hold here (flag "
                                "named beside it or in the fit's entry)"))
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
