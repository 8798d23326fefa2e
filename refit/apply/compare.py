"""Compare what several fits say about the same paleosol: one table and one figure.

Each fit (a refitted candidate, a published version, a published equation) gives an
estimate and an interval for the same input; the figure draws the intervals as horizontal
bars, one row per fit, the estimate marked, and prints each fit's cross-validated coverage
beside its interval, so that the narrowest interval is not mistaken for the best: a narrow
interval whose coverage under cross-validation falls short of its nominal level is
overconfident. With the posterior (apply's ``posterior=True``), a forward file's row also
carries the posterior median and interval, drawn as a hatched green bar with an open
circle under its frequentist bar, and a paleosol with two or more proxies gets the
combined posterior as a row of its own (``origin`` ``posterior``).
"""

from __future__ import annotations

import io
import math
import textwrap

import numpy as np
import pandas as pd

from refit._util.numbers import reading_texts
from refit.errors import UsageError

TABLE_COLUMNS = [
    "paleosol_id", "fit", "coefficient_file", "function_id", "version", "variant", "status",
    "response", "unit", "predictors_used", "estimate", "lower", "upper",
    "lower_untruncated", "upper_untruncated", "width", "level",
    "interval", "cv_coverage", "cv_scheme", "flags", "problem", "origin", "citation",
    "posterior_median", "posterior_lower", "posterior_upper", "posterior_flags",
]
#: the posterior's columns (empty unless apply ran with ``posterior=True``)
POSTERIOR_COLUMNS = ("posterior_median", "posterior_lower", "posterior_upper",
                     "posterior_flags")
MAX_PANELS = 12
#: the table file written beside the figure pages
FILE = "comparison.csv"
#: PNG text key holding the SHA-256 of the ``comparison.csv`` bytes a page was drawn from,
#: so a report can embed the page knowing it shows that very table
TABLE_HASH_KEY = "refit-comparison-sha256"
#: text sizes of the figure [points]: read at about 70 % scale when the 11-inch figure is
#: shown in a report column, so nothing smaller than 8.5
FONT = {"note": 8.5, "fit": 8.5, "axis": 9.0, "title": 10.0, "legend": 9.0}
#: characters per line of the note printed beside an interval (longer notes wrap)
NOTE_WIDTH = 56

#: The figure's own palette: blue for refits, vermilion for published equations, reddish
#: purple for the combined posterior (as in the section figure), a warm grey for fits
#: without an interval; distinguishable under the common colour-vision
#: deficiencies (blue/orange contrast) and in greyscale (different lightness).
STYLE = {"refit": "#2166ac", "published": "#d55e00", "none": "#8c8c8c",
         "estimate": "#111111", "grid": "#e6e6e6", "flagged_alpha": 0.45,
         # the posterior: bluish green, hatched, its median an open circle (so it stays
         # apart from the frequentist bars in greyscale too)
         "posterior": "#009e73", "posterior_hatch": "////"}


def at_frame(pairs) -> pd.DataFrame:
    """A one-row fossil frame from ``NAME=VALUE`` texts (``--at``).

    Raises
    ------
    UsageError
        A text without ``=`` or a value that is not a number (naming it).
    """
    row = {}
    for text in pairs:
        name, sep, value = str(text).partition("=")
        name = name.strip()
        if not sep or not name:
            raise UsageError(f"--at {text!r}: write NAME=VALUE, e.g. --at bk_depth_cm=100")
        try:
            row[name] = float(value)
        except ValueError:
            raise UsageError(f"--at {text!r}: {value!r} is not a number; write e.g. "
                             f"--at {name}=100")
    label = "at " + ", ".join(f"{k}={v:g}" for k, v in row.items())
    return pd.DataFrame([{"paleosol_id": label, **row}])


def comparison_table(results: pd.DataFrame) -> pd.DataFrame:
    """The comparison table from :func:`refit.apply.estimates.apply_equations` results."""
    t = results.copy()
    t = t[t["function_id"] != "combined"] if "function_id" in t else t
    t["fit"] = [fit_label(r) for r in t.itertuples(index=False)]
    # a refit carries its candidate label, published or not; a literature equation has none;
    # the combined posterior of several proxies (apply with posterior=True) is its own kind
    cand = t["candidate"].fillna("") if "candidate" in t else pd.Series("", index=t.index)
    t["origin"] = np.where(cand.astype(str) != "", "refit", "literature")
    t.loc[t["function_id"].astype(str) == "posterior", "origin"] = "posterior"
    t["width"] = t["upper"].astype(float) - t["lower"].astype(float)
    return t.reindex(columns=TABLE_COLUMNS).reset_index(drop=True)


def fit_label(r) -> str:
    """Short row label: a literature equation by its short citation and what it is of
    ("Retallack 1994, from bk_depth"; the part of its function id after ``_from_``, so a
    paper with several equations names each), a refit by function id, version and
    candidate (a run's candidate never published: "unpublished" in place of its placeholder
    version), the combined posterior by its proxies. A named variant
    (:func:`refit.coefficients.format.variant_of`; not the unnamed default) follows the
    version ("map_from_bk_depth 1.1.0 mixed linear__mixed__inverse__analytic"), so two
    variants at one version stay apart."""
    from refit.coefficients.format import CANDIDATE_VERSION

    if str(r.function_id) == "posterior":
        used = getattr(r, "predictors_used", "")
        used = used if isinstance(used, str) else ""
        names = " + ".join(part.split("=")[0] for part in used.split(" + ") if part)
        if names:
            return f"posterior {names}"
    variant = variant_label(getattr(r, "variant", ""))
    cite = getattr(r, "citation", "")
    if isinstance(cite, str) and cite and not getattr(r, "candidate", ""):
        fid = str(r.function_id)
        what = "from " + fid.split("_from_", 1)[1] if "_from_" in fid else fid
        return f"{cite}, {what}" + (f", {variant}" if variant else "")

    def text(value) -> str:
        missing = value is None or (isinstance(value, float) and math.isnan(value))
        return "" if missing else str(value).strip()

    what = text(getattr(r, "candidate", "")) or text(r.status)
    # a run's candidate that was never published carries a placeholder version: say so
    version = "unpublished" if text(r.version) == CANDIDATE_VERSION else text(r.version)
    # a missing part leaves no double space
    return " ".join(p for p in (text(r.function_id), version, variant, what) if p)


def variant_label(value) -> str:
    """The variant as a label shows it: its name, or ``""`` for the default variant, an
    unpublished candidate's none, or a missing value (a table from an older refit)."""
    from refit.coefficients.format import DEFAULT_VARIANT

    if not isinstance(value, str) or value in ("", DEFAULT_VARIANT):
        return ""
    return value


def coverage_text(coverage, scheme, level, interval) -> str:
    """What is printed beside an interval: the cross-validated coverage, or why none."""
    if coverage is None or (isinstance(coverage, float) and math.isnan(coverage)):
        if interval == "published" or str(interval).startswith("+-"):
            return "no cross-validation (interval = published ±1 SE)"
        return "no cross-validation" + (" (no interval given)" if interval == "none" else "")
    nominal = "" if level is None or pd.isna(level) else f" of {float(level):.0%}"
    return f"CV coverage {float(coverage):.0%}{nominal}" + (f" ({scheme})" if scheme else "")


def write_comparison(table: pd.DataFrame, folder) -> list:
    """Write ``comparison.csv`` and every page of the figure into ``folder`` (atomically,
    pages of an earlier, longer comparison removed). Each page carries the table's
    SHA-256 under :data:`TABLE_HASH_KEY`. Returns the page paths.

    Raises
    ------
    UsageError
        No paleosol has an estimate (nothing is written).
    """
    from pathlib import Path

    from refit._util.atomic import sha256_bytes, write_bytes_atomic, write_text_atomic

    folder = Path(folder)
    text = table.to_csv(index=False)
    pngs = figure_pngs(table, table_sha256=sha256_bytes(text.encode("utf-8")))
    folder.mkdir(parents=True, exist_ok=True)
    for old in folder.glob("comparison-*.png"):
        old.unlink()
    write_text_atomic(folder / FILE, text)
    pages = [folder / name for name in page_names(len(pngs))]
    for target, png in zip(pages, pngs):
        write_bytes_atomic(target, png)
    return pages


def page_count(table: pd.DataFrame) -> int:
    """How many figure pages :func:`figure_pngs` draws for ``table``."""
    return -(-len(panel_groups(table)) // MAX_PANELS)


def figure_pngs(table: pd.DataFrame, *, title: str = "",
                table_sha256: str | None = None) -> list[bytes]:
    """Every panel of the interval figure: one PNG per page of at most
    :data:`MAX_PANELS` panels, so no paleosol is left out. ``table_sha256`` (of the
    table's CSV bytes) is stored in each PNG under :data:`TABLE_HASH_KEY`.

    Raises
    ------
    UsageError
        No paleosol has an estimate.
    """
    panels = panel_groups(table)
    if not panels:
        raise UsageError("nothing to draw: no paleosol has an estimate")
    pages = [panels[i:i + MAX_PANELS] for i in range(0, len(panels), MAX_PANELS)]
    def page_title(k: int) -> str:
        if len(pages) == 1:
            return title
        return f"{title} (page {k + 1} of {len(pages)})" if title else \
            f"page {k + 1} of {len(pages)}"

    return [figure_png(table, title=page_title(k), panels=page, table_sha256=table_sha256)
            for k, page in enumerate(pages)]


def page_names(n: int) -> list[str]:
    """File names of ``n`` pages: ``comparison.png``, ``comparison-2.png``, ..."""
    return ["comparison.png"] + [f"comparison-{k}.png" for k in range(2, n + 1)]


def figure_png(table: pd.DataFrame, *, title: str = "", panels=None,
               table_sha256: str | None = None) -> bytes:
    """The interval figure as PNG bytes (matplotlib, Agg backend): :func:`comparison_figure`
    saved, with ``table_sha256`` stored under :data:`TABLE_HASH_KEY`."""
    import matplotlib.pyplot as plt

    fig = comparison_figure(table, title=title, panels=panels)
    buf = io.BytesIO()
    meta = {TABLE_HASH_KEY: table_sha256} if table_sha256 else {}
    fig.savefig(buf, format="png", dpi=DPI, metadata=meta)
    plt.close(fig)
    return buf.getvalue()


#: resolution of the figure's PNG [dots per inch]
DPI = 130
#: the figure's width [inch], and the narrowest and widest left margin (fractions of it)
#: that the longest fit label is given
WIDTH_IN, LEFT_MIN, LEFT_MAX = 11.0, 0.25, 0.40


def comparison_figure(table: pd.DataFrame, *, title: str = "", panels=None):
    """The interval figure as a matplotlib figure (Agg backend).

    One panel per paleosol (``panels`` from :func:`panel_groups`; default the first
    :data:`MAX_PANELS`, :func:`figure_pngs` draws them all), one row per fit: a bar from
    lower to upper, the estimate as a black diamond, the cross-validated coverage and
    flags printed at the right. Fits with a serious flag are drawn paler; fits without an
    interval show the estimate only. The left margin is as wide as the longest fit label
    (measured with the renderer, at most :data:`LEFT_MAX` of the width), and the page
    ``title`` sits in the top margin, clear of the first panel's labels.
    """
    import matplotlib

    matplotlib.use("Agg")
    import matplotlib.pyplot as plt

    panels = panel_groups(table)[:MAX_PANELS] if panels is None else panels
    if not panels:
        raise UsageError("nothing to draw: no paleosol has an estimate")
    heights = [max(1.2, ROW_IN * len(rows) * row_pitch(rows) + 0.9) for _, rows in panels]
    top_handles, notes = _legend_handles(pd.concat([rows for _, rows in panels]),
                                         split=True)
    below = 0.1 + 0.22 * len(notes) if notes else 0.0  # explanations under the panels
    title_in = 0.3 if title else 0.0  # a line of its own for the page title, over the legend
    above = title_in + 0.3 * (-(-len(top_handles) // 3) - 1)  # a 2nd legend line (posterior)
    total = sum(heights) + below + above
    fig, axes = plt.subplots(len(panels), 1, figsize=(WIDTH_IN, total), squeeze=False,
                             gridspec_kw={"height_ratios": heights})
    for ax, (pid, rows) in zip(axes[:, 0], panels):
        _panel(ax, rows, pid)
    if title:
        fig.text(0.01, 1 - 0.08 / total, title.strip(), ha="left", va="top", fontsize=11)
    fig.legend(handles=top_handles, loc="upper right",
               bbox_to_anchor=(0.985, 1 - (title_in + 0.01) / total),
               ncol=min(3, len(top_handles)), frameon=False, fontsize=FONT["legend"])
    if notes:  # what paler bars and the triangle of a limit cut at a bound mean
        fig.legend(handles=notes, loc="lower left", bbox_to_anchor=(0.01, 0.0),
                   frameon=False, fontsize=FONT["legend"])
    fig.subplots_adjust(left=_left_margin(fig, axes[:, 0]), right=0.61,
                        top=1 - (0.55 + above) / total, bottom=(0.55 + below) / total,
                        hspace=0.5)
    return fig


def _left_margin(fig, axes) -> float:
    """The left margin [fraction of the width] that shows the longest fit label whole."""
    renderer = fig.canvas.get_renderer()
    widest = max((t.get_window_extent(renderer).width for ax in axes
                  for t in ax.get_yticklabels()), default=0.0)
    need = (widest / fig.dpi + 0.2) / fig.get_figwidth()  # + tick, pad and a little air
    return min(LEFT_MAX, max(LEFT_MIN, need))


#: the legend's words for a limit cut at a physical bound (flag ``truncated-at-bound``)
TRUNCATED_TEXT = ("limit cut at a physical bound (flag truncated-at-bound, e.g. MAP >= 0 "
                  "mm); the limit before the cut is in the table (lower/upper_untruncated)")
#: the legend's words for a paler bar
FLAGGED_TEXT = "paler bar: flagged, the equation does not hold there (flags at right)"
#: the legend's words for the combined posterior's bar
POSTERIOR_TEXT = "posterior interval (Bayesian; prior in the table)"


def _legend_handles(rows: pd.DataFrame | None = None, *, split: bool = False):
    """What the colours, the diamond, a paler bar and the triangle of a limit cut at a
    physical bound mean (one legend for every panel). With ``rows``, only what those rows
    show; ``split=True`` returns the colours and the diamond apart from the notes on
    paler bars and cut limits."""
    from matplotlib.lines import Line2D
    from matplotlib.patches import Patch

    from refit.apply.estimates import truncated_sides

    rows_ = rows if rows is not None else pd.DataFrame({"origin": ["refit", "literature"]})
    origin = rows_["origin"] if "origin" in rows_ else pd.Series("refit", index=rows_.index)
    kinds = {k for k, o in (("refit", "refit"), ("published", "literature"))
             if (origin == o).any()}
    colours = [Patch(color=STYLE[k], label=text) for k, text in (
        ("refit", "fit made with refit (CV coverage at right)"),
        ("published", "published equation (±1 SE)")) if k in kinds]
    colours.append(Line2D([], [], ls="none", marker="D", color=STYLE["estimate"], ms=5,
                          label="estimate"))
    if rows is not None and has_posterior(rows):
        colours += [Patch(facecolor="white", edgecolor=STYLE["posterior"],
                          hatch=STYLE["posterior_hatch"], label=POSTERIOR_TEXT),
                    Line2D([], [], ls="none", marker="o", mfc="white",
                           mec=STYLE["posterior"], mew=1.5, ms=6, label="posterior median")]
    notes = []
    if rows is not None and rows.get("flags") is not None and rows["flags"].map(_serious).any():
        notes.append(Patch(color=STYLE["refit"], alpha=STYLE["flagged_alpha"],
                           label=FLAGGED_TEXT))
    if rows is not None and any(m.any() for m in truncated_sides(rows)):
        notes.append(Line2D([], [], ls="none", marker="<", color=STYLE["estimate"], ms=5,
                            label=TRUNCATED_TEXT))
    return (colours, notes) if split else colours + notes


def has_posterior(rows: pd.DataFrame) -> bool:
    """Whether any row carries a posterior (median or a combined posterior row)."""
    med = pd.to_numeric(rows["posterior_median"], errors="coerce") \
        if "posterior_median" in rows else pd.Series(dtype=float)
    return bool(np.isfinite(med.astype(float)).any()
                or ("origin" in rows and (rows["origin"] == "posterior").any()))


def panel_groups(table: pd.DataFrame) -> list[tuple[str, pd.DataFrame]]:
    """One panel per paleosol and response: fits of different quantities (MAP in mm, MAT in
    degC) never share an axis. A panel where no fit gave an estimate is left out (the table
    says why each was not evaluated); titles name the quantity when a paleosol has several."""
    from refit.curate.schema import notation

    out = []
    for pid in dict.fromkeys(table["paleosol_id"]):
        rows = table[table["paleosol_id"] == pid]
        groups = [grp for _, grp in rows.groupby(["response", "unit"], sort=False,
                                                 dropna=False)
                  if np.isfinite(grp["estimate"].astype(float)).any()]
        for grp in groups:
            title = str(pid) if len(groups) == 1 else \
                f"{pid}: {notation(str(grp['response'].iloc[0]), str(grp['unit'].iloc[0]))}"
            out.append((title, grp))
    return out


#: Flags that say the equation does not hold here (drawn paler); the others are notes.
SERIOUS_FLAGS = ("outside-calibration-range", "beyond-turning-point", "unbounded",
                 "two-roots", "open-below", "open-above", "setting-mismatch",
                 "beyond-search-window", "not-decompacted")


def _serious(flags) -> bool:
    return any(f in SERIOUS_FLAGS for f in str(flags or "").split(";"))


def _note(r) -> str:
    """What is printed at the right of a row: coverage (or why none), the posterior
    beside a forward file's interval, flags, or why the row was not evaluated; wrapped."""
    post = _posterior_of(r)
    note = coverage_text(r.cv_coverage, r.cv_scheme, r.level, r.interval)
    if r.origin == "posterior":
        note = "posterior (Bayesian), proxies multiplied"
    elif post is not None:
        med, lo, hi = reading_texts(*post)
        note += f"\nposterior {med} [{lo}, {hi}] (hatched)"
    if r.flags:
        note += "\nflags: " + str(r.flags).replace(";", ", ")
    if r.problem:
        note = "not evaluated: " + str(r.problem)[:90]
    return "\n".join(textwrap.fill(part, NOTE_WIDTH) for part in note.split("\n"))


#: height of one row of a panel [inch], and of one line of a row's note [row units]
ROW_IN, NOTE_LINE = 0.42, 0.45


def row_pitch(rows: pd.DataFrame) -> float:
    """Distance between rows of a panel [row units]: one, or more where a note has so many
    lines that it would reach the next row's."""
    lines = max((_note(r).count("\n") + 1 for r in rows.itertuples(index=False)),
                default=1)
    return max(1.0, NOTE_LINE * lines + 0.15)


def _panel(ax, rows: pd.DataFrame, pid: str) -> None:
    from refit.apply.estimates import truncated_sides

    rows = rows.reset_index(drop=True)
    y = np.arange(len(rows))[::-1] * row_pitch(rows)
    cols = ["lower", "upper", "estimate"] + [c for c in POSTERIOR_COLUMNS[:3] if c in rows]
    finite = pd.concat([pd.to_numeric(rows[c], errors="coerce") for c in cols]).astype(float)
    finite = finite[np.isfinite(finite)]
    lo_ax, hi_ax = (finite.min(), finite.max()) if len(finite) else (0.0, 1.0)
    # a lone estimate still gets a readable axis: +-10 % of its size (at least 1 unit)
    pad = 0.05 * (hi_ax - lo_ax) if hi_ax > lo_ax else max(0.1 * abs(hi_ax), 1.0)
    cuts = truncated_sides(rows)
    for i, (yi, r) in enumerate(zip(y, rows.itertuples(index=False))):
        colour = STYLE["published"] if r.origin == "literature" else STYLE["refit"]
        alpha = STYLE["flagged_alpha"] if _serious(r.flags) else 1.0
        lo, hi = float(r.lower), float(r.upper)
        if r.origin == "posterior":              # the combined posterior of several proxies
            _posterior_bar(ax, yi, lo, float(r.estimate), hi, 0.5)
        elif np.isfinite(lo) or np.isfinite(hi):
            a = lo if np.isfinite(lo) else lo_ax - pad
            b = hi if np.isfinite(hi) else hi_ax + pad
            ax.barh(yi, b - a, left=a, height=0.5, color=colour, alpha=alpha,
                    edgecolor=colour, linewidth=0.8)
        elif np.isfinite(float(r.estimate)):
            colour = STYLE["none"]
        if np.isfinite(float(r.estimate)) and r.origin != "posterior":
            ax.plot(float(r.estimate), yi, marker="D", color=STYLE["estimate"], ms=5,
                    zorder=3)
        for cut, limit, marker in zip(cuts, (lo, hi), "<>"):
            if cut[i]:  # a limit cut at a physical bound: a triangle at the bound
                ax.plot(limit, yi, marker=marker, color=STYLE["estimate"], ms=5, zorder=3,
                        gid="truncated")
        post = _posterior_of(r)
        if post is not None and r.origin != "posterior":   # beside a file's own interval
            _posterior_bar(ax, yi - 0.36, post[1], post[0], post[2], 0.22)
        ax.annotate(_note(r), xy=(1.01, yi), xycoords=("axes fraction", "data"),
                    va="center", fontsize=FONT["note"], color="#333333",
                    annotation_clip=False)
    ax.set_yticks(y, [str(f).replace(", ", "\n", 1) if ", " in str(f)
                      else str(f).replace(" ", "\n", 1) for f in rows["fit"]],
                  fontsize=FONT["fit"])
    ax.set_xlim(lo_ax - 2 * pad, hi_ax + 2 * pad)
    unit = rows["unit"].iloc[0] if len(rows) else ""
    from refit.curate.schema import notation

    ax.set_xlabel(notation(str(rows["response"].iloc[0]), str(unit)) if len(rows) else "",
                  fontsize=FONT["axis"])
    ax.tick_params(axis="x", labelsize=FONT["fit"])
    ax.set_title(str(pid), loc="left", fontsize=FONT["title"], fontweight="bold")
    ax.grid(axis="x", color=STYLE["grid"])
    ax.set_axisbelow(True)
    for side in ("top", "right"):
        ax.spines[side].set_visible(False)


def _posterior_of(r):
    """(median, lower, upper) of a row's posterior, or None."""
    try:
        med, lo, hi = (float(getattr(r, c)) for c in POSTERIOR_COLUMNS[:3])
    except (AttributeError, TypeError, ValueError):
        return None
    return (med, lo, hi) if np.isfinite(med) else None


def _posterior_bar(ax, y, lo, med, hi, height) -> None:
    """A posterior interval: hatched, outlined bar and an open circle at the median."""
    if np.isfinite(lo) and np.isfinite(hi):
        ax.barh(y, hi - lo, left=lo, height=height, color="white",
                edgecolor=STYLE["posterior"], hatch=STYLE["posterior_hatch"],
                linewidth=1.0, zorder=2)
    if np.isfinite(med):
        ax.plot(med, y, marker="o", mfc="white", mec=STYLE["posterior"], mew=1.5, ms=6,
                zorder=3)


def compare_files(coefficient_files, *, fossils=None, at=(), paleosols=(), level=None,
                  decompact=False, constants_file=None, seed=0, posterior=False, prior=None):
    """The comparison table and the :class:`refit.apply.estimates.ApplyResult` behind it.

    Exactly one of ``fossils`` (a table path) and ``at`` (``NAME=VALUE`` texts) is given;
    ``paleosols`` keeps only those ids (all when empty). ``posterior`` (and its ``prior``)
    as :func:`refit.apply.estimates.apply_files`: forward files' rows carry their posterior
    beside the frequentist interval, and a paleosol with two or more proxies gets the
    combined posterior's row.
    """
    from refit.apply.estimates import apply_files

    if (fossils is None) == (not at):
        raise UsageError("give either --fossils TABLE or --at NAME=VALUE (not both)")
    source = fossils if fossils is not None else at_frame(at)
    result = apply_files(coefficient_files, source, level=level, decompact=decompact,
                         constants_file=constants_file, seed=seed, posterior=posterior,
                         prior=prior)
    table = comparison_table(result.results)
    if paleosols:
        unknown = [p for p in paleosols if p not in set(table["paleosol_id"])]
        if unknown:
            raise UsageError(f"--paleosol {', '.join(unknown)}: not in the table; its ids "
                             "are " + ", ".join(dict.fromkeys(table["paleosol_id"])))
        table = table[table["paleosol_id"].isin(paleosols)].reset_index(drop=True)
    if not panel_groups(table):
        columns = [] if result.fossils is None else list(result.fossils.columns)
        raise UsageError(nothing_to_draw(coefficient_files, columns, at))
    return table, result


def nothing_to_draw(coefficient_files, columns, at=()) -> str:
    """Why no fit gave an estimate: the predictors each fit expects beside the names the
    input gives (``--at`` names or the fossil table's columns)."""
    from refit.coefficients import load

    needs: dict[tuple, list[str]] = {}
    for path in coefficient_files:
        eq = load(path)
        needs.setdefault(tuple(eq.predictor_names), []).append(eq.function_id)
    given = [str(t).partition("=")[0].strip() for t in at] if at else [str(c) for c in columns]
    missing = {p: ids for p, ids in needs.items() if not set(p) <= set(given)}
    if not missing:
        return ("nothing to draw: no paleosol has an estimate (each fit's problem is in the "
                "table's problem column and in `refit apply`'s output)")
    expect = "; ".join(f"{', '.join(p)} ({', '.join(dict.fromkeys(ids))})"
                       for p, ids in missing.items())
    first = next(iter(missing))[0]
    where = ("--at gives " + ", ".join(given)) if at else "the table has no such column"
    fix = f"e.g. --at {first}=100" if at else f"add a {first} column"
    return (f"nothing to draw: no fit gave an estimate; the fits expect {expect}, and {where}"
            f"; name the predictor as the fit does ({fix})")
