"""The section figure: climate against stratigraphic level (or age), one figure a section.

Drawn from the long-format table of :mod:`refit.apply.section` (never from anything
else, so figure and table agree). Per section, one panel per climate quantity (MAP in mm
and MAT in degC never share an axis), the level (or age) upward:

* one colour and marker per fit (Okabe-Ito colours, :mod:`refit.report.style`), the same
  fit in the same colour in every section; estimates of one fit joined up-section by a
  thin line (not a model: straight segments between the paleosols);
* a prediction interval as a solid bar, a published ±1 standard error as a dashed, thinner
  bar with end ticks (it is not a prediction interval);
* a flagged estimate (the equation does not hold there) as a hollow marker, its flags
  named beside it; labels are placed apart, measured with the renderer
  (:mod:`refit.report.labels`);
* a limit cut at a physical bound (flag ``truncated-at-bound``: MAP cannot fall below
  0 mm) as a small triangle at the bound pointing past it, explained in the legend (the
  limit before the cut is in the table);
* the age's ±1 SD as a thin grey vertical bar when ages are given;
* the fits with an estimate at one paleosol are drawn a few points apart vertically
  around its level (:func:`dodge`) so their bars do not hide each other.
"""

from __future__ import annotations

import re
import textwrap
from pathlib import Path

import numpy as np

from refit.report import style

PREDICTION, PUBLISHED_SE = "prediction", "published ±1 SE"  # refit.apply.section
POSTERIOR = "posterior"  # refit.apply.section: a posterior's median and interval
#: one colour per fit, in order (Okabe-Ito without black and yellow first; yellow last,
#: it is faint on white)
PALETTE = (style.BLUE, style.VERMILLION, style.BLUISH_GREEN, style.REDDISH_PURPLE,
           style.ORANGE, style.SKY_BLUE, "#7F6A00", style.BLACK)
MARKERS = ("o", "s", "D", "^", "v", "P", "X", "*")
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
#: characters per line of a legend entry (longer entries wrap)
LEGEND_WIDTH = 62
FILE = "section.csv"


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


def age_axis_label(name: str) -> str:
    """``age_ma`` -> ``age [Ma]`` (the unit in the column's name), else the name."""
    unit = {"ma": "Ma", "ka": "ka", "yr": "yr", "ga": "Ga"}.get(str(name).rpartition("_")[2])
    return f"age [{unit}]" if unit else str(name)


def fit_name(row) -> str:
    """A fit's name in the legend: a literature equation by its file's name (which
    carries the source), a refit fit by function, version and candidate."""
    if row["function_id"] == "posterior":
        return "posterior of all proxies together (refit)"
    if row["origin"] == "literature":
        return f"{row['fit']} (published)"
    return f"{row['fit']} (refit)"


def colours(table) -> dict:
    """Colour and marker of each fit, in the table's order of fits."""
    fits = list(dict.fromkeys(table["fit"]))
    post = set(table.loc[table["interval_kind"] == POSTERIOR, "fit"]) \
        if "interval_kind" in table else set()
    others = [m for m in MARKERS if m != "D"]    # the diamond marks a posterior
    return {f: (PALETTE[i % len(PALETTE)], "D" if f in post else others[i % len(others)])
            for i, f in enumerate(fits)}


def _yvalues(t, axis: str):
    return t["age" if axis == "age" else "level_m"].to_numpy(float)


def section_figure(table, section: str, *, axis: str = "level_m", y_label: str = ""):
    """One section's figure (a matplotlib Figure), or None when nothing can be drawn.

    Parameters
    ----------
    table : pandas.DataFrame
        The section table (:data:`refit.apply.section.TABLE_COLUMNS`), every section.
    section : str
        The section to draw.
    axis : {"level_m", "age"}
        The vertical axis.
    y_label : str
        Its label (default ``level [m]``, or the age column's name).
    """
    from matplotlib.lines import Line2D

    from refit.report.labels import freeze_layout

    style_of = colours(table)
    t = table[(table["section"] == section) & np.isfinite(_yvalues(table, axis))
              & np.isfinite(table["estimate"].to_numpy(float))]
    if t.empty:
        return None
    groups = [g for _, g in t.groupby(["response", "unit"], sort=False)]
    fig, axes = style.figure(len(groups), width=4.6 * len(groups) + 0.4, height=6.4)
    y_all = _yvalues(t, axis)
    span = float(np.ptp(y_all)) or max(abs(float(y_all[0])) * 0.1, 1.0)
    with style.styled():
        clips = [_limits(ax, g, axis, span) for ax, g in zip(axes, groups)]
        for ax in axes:
            ax.set_ylabel("level [m]" if axis == "level_m" else age_axis_label(y_label))
        if axis == "age" and _ages_fall_upward(t):
            for ax in axes:
                ax.invert_yaxis()
        fig.suptitle(f"{section}: climate up the section", x=0.01, ha="left",
                     fontsize=11, fontweight="bold")
        common = common_flags(t)
        handles = [Line2D([], [], color=style_of[f][0], marker=style_of[f][1], lw=1.0,
                          mfc="white" if common[f] else style_of[f][0],
                          label=fit_name(t[t["fit"] == f].iloc[0]) + (
                              "; all flagged: " + flag_label(";".join(common[f]))
                              if common[f] else ""))
                   for f in dict.fromkeys(t["fit"])]
        handles += _style_handles(t, axis)
        # as many legend columns of LEGEND_WIDTH characters as the figure's width holds
        # (about 15 characters per inch at this size), the entries wrapped to fit
        room = int(fig.get_figwidth() * 15)
        ncol = 2 if room >= 2 * LEGEND_WIDTH + 6 else 1
        width = min(LEGEND_WIDTH, room // ncol - 6)
        for h in handles:
            h.set_label(textwrap.fill(h.get_label(), width, subsequent_indent="  "))
        fig.legend(handles=handles, loc="outside lower center", ncol=ncol, fontsize=7.5)
        renderer = freeze_layout(fig)
        for ax, g, clip in zip(axes, groups, clips):
            _panel(ax, g, axis, clip, style_of)
            _labels(ax, renderer, g, axis, common)
    return fig


def _ages_fall_upward(t) -> bool:
    """True when age decreases up-section (older at the base, as usual)."""
    ok = t[np.isfinite(t["age"].to_numpy(float))]
    if len(ok) < 2:
        return True
    return bool(np.corrcoef(ok["level_m"].to_numpy(float),
                            ok["age"].to_numpy(float))[0, 1] < 0)


def _limits(ax, g, axis: str, span: float) -> tuple[float, float]:
    """Axis limits, labels and title of one quantity's panel; returns the x range the
    intervals are clipped to."""
    y_all = _yvalues(g, axis)
    finite = np.concatenate([g[c].to_numpy(float) for c in ("estimate", "lower", "upper")])
    finite = finite[np.isfinite(finite)]
    lo_ax, hi_ax = float(finite.min()), float(finite.max())
    pad = 0.06 * (hi_ax - lo_ax) if hi_ax > lo_ax else max(abs(hi_ax) * 0.1, 1.0)
    ax.set_xlim(lo_ax - pad, hi_ax + 4 * pad)  # room at the right for labels
    ax.set_ylim(float(np.nanmin(y_all)) - 0.06 * span, float(np.nanmax(y_all)) + 0.06 * span)
    from refit.curate.schema import notation

    ax.set_xlabel(notation(str(g["response"].iloc[0]), str(g["unit"].iloc[0])))
    ax.set_title(notation(str(g["response"].iloc[0]), ""))
    return lo_ax - pad, hi_ax + 4 * pad


def dodge(ax, g) -> np.ndarray:
    """Vertical drawing offset of each row [data units]: the fits with an estimate at one
    paleosol are set :data:`DODGE_PT` points apart around its level, measured on the
    laid-out axes (so the offset is the same few points on any section's height)."""
    y0, y1 = ax.get_ylim()
    per_pt = (y1 - y0) / (ax.get_window_extent().height / (ax.figure.dpi / 72.0))
    out = np.zeros(len(g))
    ok = np.isfinite(g["estimate"].to_numpy(float))
    pos = np.arange(len(g))
    for _, idx in g[ok].groupby("paleosol_id", sort=False).indices.items():
        rows = pos[ok][idx]
        n = len(rows)
        out[rows] = (np.arange(n) - (n - 1) / 2) * DODGE_PT * per_pt
    return out


def _panel(ax, g, axis: str, xclip: tuple, style_of: dict) -> None:
    """Estimates, intervals and age bars of one quantity in one section (the layout is
    frozen: the offsets of :func:`dodge` are measured on it)."""
    from matplotlib.collections import LineCollection

    y_all = _yvalues(g, axis) + dodge(ax, g)
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
        ax.errorbar(g["estimate"].to_numpy(float)[first], _yvalues(g, axis)[first],
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


def _labels(ax, renderer, g, axis: str, common: dict) -> None:
    """Flag names beside flagged estimates, then paleosol ids at the right of each
    level, placed apart (labels with no free place are left out; the table has all)."""
    from refit.report.labels import place_labels

    y = _yvalues(g, axis)
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
    place_labels(ax, renderer, xs, _yvalues(ids, axis), list(ids["paleosol_id"]),
                 avoid=pts, fontsize=LABEL_SIZE, color="#555555", gid="paleosol-label",
                 taken=taken)


def _style_handles(t, axis: str) -> list:
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


def slug(section: str) -> str:
    """A file-name-safe form of a section name."""
    return re.sub(r"[^A-Za-z0-9]+", "-", str(section)).strip("-").lower() or "section"


def section_png(table, section: str, **kwargs) -> bytes | None:
    """:func:`section_figure` as PNG bytes (None when nothing can be drawn)."""
    import io

    fig = section_figure(table, section, **kwargs)
    if fig is None:
        return None
    buf = io.BytesIO()
    with style.styled():
        fig.savefig(buf, format="png", dpi=150, metadata={"Software": None})
    return buf.getvalue()


def read_section_table(path):
    """The table written by ``refit section`` (``section.csv`` in a folder, or the file)."""
    import pandas as pd

    from refit.errors import InvalidDataError, UnreadableInputError

    p = Path(path)
    target = p / FILE if p.is_dir() else p
    if not target.is_file():
        raise UnreadableInputError(f"{path}: no {FILE} there; name the folder written by "
                                   "`refit section --out DIR`")
    table = pd.read_csv(target, keep_default_na=False, na_values=[""])
    from refit.apply.section import TABLE_COLUMNS

    # tables written before the limits before a cut were kept lack only those columns
    for c in ("lower_untruncated", "upper_untruncated"):
        if c not in table.columns:
            table[c] = np.nan
    missing = [c for c in TABLE_COLUMNS if c not in table.columns]
    if missing:
        raise InvalidDataError(f"{target} lacks {', '.join(missing)}: rerun `refit section`")
    for c in ("section", "paleosol_id", "fit", "origin", "response", "unit", "flags",
              "problem", "interval_kind", "coefficient_file", "age_unit", "function_id"):
        table[c] = table[c].astype(object).fillna("").astype(str)
    return table


def report_section(path) -> dict:
    """What the HTML report shows of a ``refit section`` folder: one figure per section
    (``figure``: a matplotlib Figure the report embeds), the caption, and the notes
    written beside the table."""
    table = read_section_table(path)
    folder = Path(path) if Path(path).is_dir() else Path(path).parent
    notes_file = folder / "notes.txt"
    notes = [ln for ln in notes_file.read_text("utf-8").splitlines() if ln.strip()] \
        if notes_file.is_file() else []
    axis = "age" if table["age"].notna().any() else "level_m"
    label = table["age_unit"].iloc[0] if axis == "age" else "level [m]"
    figures = []
    for sec in dict.fromkeys(table["section"]):
        fig = section_figure(table, sec, axis=axis, y_label=label)
        if fig is not None:
            figures.append({"section": sec, "figure": fig})
    return {"figures": figures, "notes": notes, "caption": caption(table),
            "source": str(folder / FILE), "n_rows": len(table)}


def caption(table) -> str:
    """What the section figures show, in words."""
    fits = list(dict.fromkeys(table["fit"]))
    return (f"Each figure is one section: the estimates of {len(fits)} fit(s) for every "
            "paleosol against its stratigraphic level (or age), one colour and marker per "
            "fit, the estimates of a fit joined up-section by thin straight lines (not a "
            "model). Solid bars are prediction intervals; dashed bars with end ticks are "
            "published ±1 standard errors, which are not prediction intervals and "
            "understate the uncertainty of a new estimate. Hollow markers are flagged: the "
            "equation does not hold there, and the flag is named beside the point. A "
            "triangle at the end of a bar marks a limit cut at a physical bound (e.g. "
            "MAP cannot fall below 0 mm); the limit before the cut is in the table. Fits "
            "at one level are set a little apart vertically so their bars stay visible. "
            "Every number is in the section table; the notes below say where adjacent "
            "levels differ by less than their intervals resolve.")


def write_section(result, folder, *, overwrite: bool = True) -> list[Path]:
    """Write a :class:`refit.apply.section.SectionResult` to ``folder``: ``section.csv``
    (the long table), ``notes.txt`` (the choices made and what the levels resolve) and
    ``section-<name>.png`` per section. Returns the paths written (csv, notes, figures).

    Raises
    ------
    UsageError
        ``folder`` already holds a section table and ``overwrite`` is false.
    """
    from refit._util.atomic import write_bytes_atomic, write_text_atomic
    from refit.errors import UsageError

    folder = Path(folder)
    if (folder / FILE).exists() and not overwrite:
        raise UsageError(f"--out {folder} already holds {FILE}; pass --overwrite")
    folder.mkdir(parents=True, exist_ok=True)
    written = [folder / FILE, folder / "notes.txt"]
    write_text_atomic(written[0], result.table.to_csv(index=False))
    write_text_atomic(written[1], "".join(n + "\n" for n in result.notes))
    for sec in result.sections():
        png = section_png(result.table, sec, axis=result.axis, y_label=result.age_label)
        if png is not None:
            target = folder / f"section-{slug(sec)}.png"
            write_bytes_atomic(target, png)
            written.append(target)
    return written
