"""The section figure: climate against stratigraphic level (or age), one figure a section.

Drawn from the long-format table of :mod:`refit.apply.section` (never from anything
else, so figure and table agree). Per section, one panel per climate quantity (MAP in mm
and MAT in degC never share an axis), the level (or age) upward; more than five fits are
drawn as small multiples, at most five fits a panel, panels side by side on one level
axis, at most four a figure, further figures as pages (:mod:`refit.report.section_layout`
plans which fit goes where; :func:`section_pages` draws every page):

* one colour and marker per fit of a panel (Okabe-Ito colours, :mod:`refit.report.style`),
  the same fit in the same colour and panel in every section; estimates of one fit joined
  up-section by a thin line (not a model: straight segments between the paleosols);
* a prediction interval as a solid bar, a published ±1 standard error as a dashed, thinner
  bar with end ticks (it is not a prediction interval);
* a flagged estimate (the equation does not hold there) as a hollow marker; a label
  column right of every mark names each paleosol at its level and, under the id, the
  flags of each flagged estimate after its fit's marker, in its colour; labels near in
  level are pushed apart vertically, measured with the renderer, so no text touches
  another text or a mark (:func:`refit.report.section_marks.draw_labels`);
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
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from refit.report import style
from refit.report.section_marks import (  # noqa: F401  (public names of the figure)
    DODGE_PT, LABEL_SIZE, SERIOUS, SHORT, TRUNCATED_TEXT, column_width, common_flags,
    dodge, draw_labels, draw_panel, flag_label, serious_flags, style_handles, yvalues,
)

PREDICTION, PUBLISHED_SE = "prediction", "published ±1 SE"  # refit.apply.section
POSTERIOR = "posterior"  # refit.apply.section: a posterior's median and interval
#: characters per line of a legend entry (longer entries wrap)
LEGEND_WIDTH = 62
#: width of one panel in the split layout [in]
PANEL_WIDTH = 3.6
#: height kept for the axes, titles and tick labels [in], and per legend line [in]
AXES_HEIGHT, LINE_HEIGHT = 5.0, 0.155
FILE = "section.csv"
#: what a panel's frame, ticks and level label take of its width [in] (a panel's axes
#: are at least its width less this), the share of the axes' width kept beside the
#: label column (gaps and a marker), and the most the label column may take
AXES_MARGIN, COLUMN_MARGIN, MAX_COLUMN = 0.9, 0.05, 0.55


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
    """Colour and marker of each fit (:func:`refit.report.section_layout.colours`)."""
    from refit.report.section_layout import colours as plan_colours

    return plan_colours(table)


@dataclass
class SectionPage:
    """One figure of a section: its ``number`` of ``count`` pages, the panels drawn
    (:class:`refit.report.section_layout.Panel`, each naming its fits) and the
    matplotlib ``figure``."""

    section: str
    number: int
    count: int
    panels: tuple
    figure: object = None

    @property
    def fits(self) -> list[str]:
        """The fits drawn on this page, panel by panel."""
        return [f for p in self.panels for f in p.fits]


def section_plan(table, section: str, *, axis: str = "level_m") -> list[SectionPage]:
    """The pages of one section's figure and the fits of each panel, not drawn yet
    (:mod:`refit.report.section_layout`); empty when nothing can be drawn."""
    from refit.report.section_layout import is_split, pages, panels

    got = pages(panels(table, section, axis), is_split(table))
    return [SectionPage(section, k + 1, len(got), page) for k, page in enumerate(got)]


def section_pages(table, section: str, *, axis: str = "level_m",
                  y_label: str = "") -> list[SectionPage]:
    """Every figure (page) of one section, drawn: at most
    :data:`~refit.report.section_layout.FITS_PER_PANEL` fits a panel, panels side by
    side sharing the level (or age) axis, at most
    :data:`~refit.report.section_layout.PANELS_PER_PAGE` panels a figure.

    Parameters
    ----------
    table : pandas.DataFrame
        The section table (:data:`refit.apply.section.TABLE_COLUMNS`), every section
        (the plan of panels and the colours depend on all of it).
    section : str
        The section to draw.
    axis : {"level_m", "age"}
        The vertical axis.
    y_label : str
        Its label (default ``level [m]``, or the age column's name).
    """
    from refit.report.section_layout import is_split

    plan = section_plan(table, section, axis=axis)
    split = is_split(table)
    for page in plan:
        page.figure = _draw_page(table, page, split, axis=axis, y_label=y_label)
    return plan


def section_figure(table, section: str, *, axis: str = "level_m", y_label: str = "",
                   page: int = 1):
    """Page ``page`` of one section's figures (a matplotlib Figure; the only one unless
    the table has more fits than four panels hold), or None when there is no such page
    (nothing can be drawn). Parameters as :func:`section_pages`."""
    plan = section_plan(table, section, axis=axis)
    if not 1 <= page <= len(plan):
        return None
    from refit.report.section_layout import is_split

    return _draw_page(table, plan[page - 1], is_split(table), axis=axis, y_label=y_label)


def _wrapped(handles, width: int) -> int:
    """Wrap the legend labels of ``handles`` to ``width`` characters; returns the lines."""
    for h in handles:
        h.set_label(textwrap.fill(h.get_label(), width, subsequent_indent="  "))
    return sum(h.get_label().count("\n") + 1 for h in handles)


def _fit_handles(t, fits, style_of: dict, common: dict) -> list:
    """Legend entries of ``fits``: colour, marker (hollow when every estimate is
    flagged) and name."""
    from matplotlib.lines import Line2D

    return [Line2D([], [], color=style_of[f][0], marker=style_of[f][1], lw=1.0,
                   mfc="white" if common[f] else style_of[f][0],
                   label=fit_name(t[t["fit"] == f].iloc[0]) + (
                       "; all flagged: " + flag_label(";".join(common[f]))
                       if common[f] else ""))
            for f in fits]


def _draw_page(table, page: SectionPage, split: bool, *, axis: str, y_label: str):
    """Draw one page: in the joint layout one panel per quantity and one legend; in
    the split layout a subfigure per panel with its fits' legend, and the line styles'
    legend under them all (:mod:`refit.report.section_layout`)."""
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    from refit.report.labels import freeze_layout
    from refit.report.section_layout import drawable

    style_of = colours(table)
    whole = drawable(table[table["section"] == page.section], axis)
    t = whole[whole["fit"].isin(page.fits)]
    n, common = len(page.panels), common_flags(t)
    width = (PANEL_WIDTH if split else 4.6) * n + 0.4
    with style.styled():
        fit_handles = [_fit_handles(t, p.fits, style_of, common) for p in page.panels]
        kinds = style_handles(t, axis)
        room = int(width * 15)     # characters a legend line holds (7.5 pt, ~15 an inch)
        if split:
            per = int(PANEL_WIDTH * 15) - 6
            lines = max(_wrapped(h, min(LEGEND_WIDTH, per)) for h in fit_handles)
            ncol = max(1, min(len(kinds), room // (LEGEND_WIDTH + 6)))
            lines += -(-_wrapped(kinds, LEGEND_WIDTH) // ncol)
        else:
            ncol = 2 if room >= 2 * LEGEND_WIDTH + 6 else 1
            handles = [h for hs in fit_handles for h in hs] + kinds
            lines = -(-_wrapped(handles, min(LEGEND_WIDTH, room // ncol - 6)) // ncol)
        height = max(6.4, AXES_HEIGHT + LINE_HEIGHT * lines)
        fig = Figure(figsize=(width, height), layout="constrained")
        FigureCanvasAgg(fig)
        holders = list(fig.subfigures(1, n, squeeze=False).ravel()) if split else [fig] * n
        axes = [h.add_subplot(1, n if not split else 1, 1 if split else i + 1)
                for i, h in enumerate(holders)]
        if split:
            for h, hs in zip(holders, fit_handles):
                h.legend(handles=hs, loc="outside lower center", fontsize=7.5)
            fig.legend(handles=kinds, loc="outside lower center", ncol=ncol, fontsize=7.5)
        else:
            fig.legend(handles=handles, loc="outside lower center", ncol=ncol,
                       fontsize=7.5)
        every = common_flags(whole)     # a fit's flags said in its legend entry
        column = {r: column_width(fig, whole[whole["response"] == r], every, style_of,
                                  axis) for r in dict.fromkeys(whole["response"])}
        clips = _frame(axes, page, whole, axis, y_label, split, column)
        more = f" (page {page.number} of {page.count})" if page.count > 1 else ""
        fig.suptitle(f"{page.section}: climate up the section{more}", x=0.01, ha="left",
                     fontsize=11, fontweight="bold")
        renderer = freeze_layout(fig)
        for ax, p, clip in zip(axes, page.panels, clips):
            g = t[(t["response"] == p.response) & t["fit"].isin(p.fits)]
            draw_panel(ax, g, axis, clip, style_of)
            draw_labels(ax, renderer, g, axis, common, style_of)
    return fig


def _frame(axes, page: SectionPage, t, axis: str, y_label: str, split: bool,
           column: dict) -> list:
    """Limits, labels and titles of every panel of a page: one level (or age) range and
    one x range per quantity for the whole section ``t`` (every page alike), so panels
    side by side compare at a glance; ``column`` is the width [in] of each quantity's
    label column. Returns the x range the intervals of each panel are clipped to."""
    from refit.curate.schema import notation

    y_all = yvalues(t, axis)
    span = float(np.ptp(y_all)) or max(abs(float(y_all[0])) * 0.1, 1.0)
    clips = []
    for i, (ax, p) in enumerate(zip(axes, page.panels)):
        room = column.get(p.response, 0.0) / ((PANEL_WIDTH if split else 4.6) - AXES_MARGIN)
        clips.append(_limits(ax, t[t["response"] == p.response], axis, span, y_all, room))
        title = notation(p.response, "")
        if split:
            title += f" · fits {p.span} of {p.total}"
        ax.set_title(title)
        ax.set_xlabel(notation(p.response, p.unit))
        if i == 0 or not split:
            ax.set_ylabel("level [m]" if axis == "level_m" else age_axis_label(y_label))
        if axis == "age" and _ages_fall_upward(t):
            ax.invert_yaxis()
    return clips


def _ages_fall_upward(t) -> bool:
    """True when age decreases up-section (older at the base, as usual)."""
    ok = t[np.isfinite(t["age"].to_numpy(float))]
    if len(ok) < 2:
        return True
    return bool(np.corrcoef(ok["level_m"].to_numpy(float),
                            ok["age"].to_numpy(float))[0, 1] < 0)


def _limits(ax, g, axis: str, span: float, y_all, room: float) -> tuple[float, float]:
    """Axis limits of one panel: x from every row of its quantity ``g``, then the share
    ``room`` of the width (and a margin) kept free at the right for the label column;
    y from the page's levels ``y_all``; returns the x range the intervals are clipped
    to."""
    finite = np.concatenate([g[c].to_numpy(float) for c in ("estimate", "lower", "upper")])
    finite = finite[np.isfinite(finite)]
    lo_ax, hi_ax = float(finite.min()), float(finite.max())
    pad = 0.06 * (hi_ax - lo_ax) if hi_ax > lo_ax else max(abs(hi_ax) * 0.1, 1.0)
    free = min(room + COLUMN_MARGIN, MAX_COLUMN)
    right = lo_ax - pad + (hi_ax - lo_ax + 2 * pad) / (1.0 - free)
    ax.set_xlim(lo_ax - pad, right)
    ax.set_ylim(float(np.nanmin(y_all)) - 0.06 * span, float(np.nanmax(y_all)) + 0.06 * span)
    return lo_ax - pad, right


def slug(section: str) -> str:
    """A file-name-safe form of a section name."""
    return re.sub(r"[^A-Za-z0-9]+", "-", str(section)).strip("-").lower() or "section"


def section_png(table, section: str, **kwargs) -> bytes | None:
    """:func:`section_figure` as PNG bytes (None when nothing can be drawn)."""
    fig = section_figure(table, section, **kwargs)
    return None if fig is None else _png(fig)


def _png(fig) -> bytes:
    import io

    buf = io.BytesIO()
    with style.styled():
        fig.savefig(buf, format="png", dpi=150, metadata={"Software": None})
    return buf.getvalue()


def page_file(section: str, number: int) -> str:
    """File name of page ``number`` of a section's figure: ``section-<name>.png``, then
    ``section-<name>-2.png``, ..."""
    return f"section-{slug(section)}" + (f"-{number}" if number > 1 else "") + ".png"


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
    if "variant" not in table.columns:    # written before variants were shown
        table["variant"] = ""
    missing = [c for c in TABLE_COLUMNS if c not in table.columns]
    if missing:
        raise InvalidDataError(f"{target} lacks {', '.join(missing)}: rerun `refit section`")
    for c in ("section", "paleosol_id", "fit", "origin", "response", "unit", "flags",
              "problem", "interval_kind", "coefficient_file", "age_unit", "function_id",
              "variant"):
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
        for page in section_pages(table, sec, axis=axis, y_label=label):
            figures.append({"section": sec, "figure": page.figure,
                            "page_label": (f" (page {page.number} of {page.count})"
                                           if page.count > 1 else "")})
    return {"figures": figures, "notes": notes, "caption": caption(table),
            "source": str(folder / FILE), "n_rows": len(table)}


def caption(table) -> str:
    """What the section figures show, in words."""
    fits = list(dict.fromkeys(table["fit"]))
    return (f"Each figure is one section (or a page of one): the estimates of {len(fits)} fit(s) for every "
            "paleosol against its stratigraphic level (or age), one colour and marker per "
            f"fit{_split_words(table)}, the estimates of a fit joined up-section by thin straight lines (not a "
            "model). Solid bars are prediction intervals; dashed bars with end ticks are "
            "published ±1 standard errors, which are not prediction intervals and "
            "understate the uncertainty of a new estimate. Hollow markers are flagged: the "
            "equation does not hold there, and the flags are named at the right, under the "
            "paleosol's id, after the fit's marker. A "
            "triangle at the end of a bar marks a limit cut at a physical bound (e.g. "
            "MAP cannot fall below 0 mm); the limit before the cut is in the table. Fits "
            "at one level are set a little apart vertically so their bars stay visible. "
            "Every number is in the section table; the notes below say where adjacent "
            "levels differ by less than their intervals resolve.")


def figure_contents(result) -> list[tuple[str, str]]:
    """(file name, what it holds in words) of every figure :func:`write_section` writes
    for a :class:`refit.apply.section.SectionResult`, e.g. ``("section-a-2.png", "4 fits
    in 1 panel (MAP: fits 21-24 of 24, a panel each)")``; the plan only, nothing drawn."""
    from refit.curate.schema import notation
    from refit.report.section_layout import describe

    return [(page_file(sec, page.number),
             describe(page.panels, lambda r: notation(str(r), "")))
            for sec in result.sections()
            for page in section_plan(result.table, sec, axis=result.axis)]


def _split_words(table) -> str:
    """What the caption says of small multiples (nothing when one panel holds the fits)."""
    from refit.report.section_layout import FITS_PER_PANEL, PANELS_PER_PAGE, is_split

    if not is_split(table):
        return ""
    return (f" (at most {FITS_PER_PANEL} fits a panel; more fits in panels side by side "
            f"on the same level axis and x range, at most {PANELS_PER_PAGE} panels a "
            "figure, further figures as pages; each panel's legend names its fits)")


def write_section(result, folder, *, overwrite: bool = True) -> list[Path]:
    """Write a :class:`refit.apply.section.SectionResult` to ``folder``: ``section.csv``
    (the long table), ``notes.txt`` (the choices made and what the levels resolve) and
    ``section-<name>.png`` per section (``section-<name>-2.png``, ... when the fits
    need more than one figure, :mod:`refit.report.section_layout`; further pages of an
    earlier, longer run are removed). Returns the paths written (csv, notes, figures).

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
        pages = section_pages(result.table, sec, axis=result.axis, y_label=result.age_label)
        for page in pages:
            target = folder / page_file(sec, page.number)
            write_bytes_atomic(target, _png(page.figure))
            written.append(target)
        for old in folder.glob(f"section-{slug(sec)}-*.png"):   # an earlier, longer run
            if re.fullmatch(rf"section-{re.escape(slug(sec))}-(\d+)\.png", old.name) \
                    and int(old.stem.rpartition("-")[2]) > len(pages) \
                    and old not in written:
                old.unlink()
    return written
