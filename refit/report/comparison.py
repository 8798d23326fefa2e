"""The fossil-estimate comparison of a report: `refit compare`'s table, read back.

``refit compare`` (and ``refit demo``) write ``comparison.csv`` and ``comparison.png`` in
one folder, each figure page carrying the SHA-256 of the table it was drawn from. A report
given that folder embeds those pages when every one of them names the table's hash as it is
now, and otherwise redraws the figure from the table with
:func:`refit.apply.compare.figure_pngs`, so figure and table always agree; both are embedded,
so the report stays one self-contained file. Where apply produced the posterior for climate
(``refit compare --posterior``, ``refit demo``), the table shows its median and interval
beside each forward file's frequentist interval, and the combined posterior of several
proxies as a row of its own kind.
"""

from __future__ import annotations

import base64
from pathlib import Path

from refit.apply.compare import has_posterior
from refit.errors import InvalidDataError, UnreadableInputError

FILE = "comparison.csv"
#: columns the report needs (a subset of :data:`refit.apply.compare.TABLE_COLUMNS`)
NEEDED = ("paleosol_id", "fit", "response", "unit", "estimate", "lower", "upper", "level",
          "interval", "cv_coverage", "cv_scheme", "flags", "problem", "origin")
TEXT = ("paleosol_id", "fit", "response", "unit", "interval", "cv_scheme", "flags",
        "problem", "origin")
#: the posterior's columns, shown when apply produced them (optional in the table)
POSTERIOR = ("posterior_median", "posterior_lower", "posterior_upper")
#: shown width of the comparison figure per inch of its size [px], as the other figures
SCREEN_PX_PER_INCH = 100


def comparison_file(path) -> Path:
    """``comparison.csv`` in the folder ``path`` (or ``path`` itself when it is a file)."""
    p = Path(path)
    target = p / FILE if p.is_dir() else p
    if not target.is_file():
        raise UnreadableInputError(f"--compare {path}: no {FILE} there; name the folder "
                                   "written by `refit compare --out DIR` (or `refit demo`'s "
                                   "compare/ folder)")
    return target


def read_comparison(path):
    """The comparison table written by ``refit compare`` (a pandas DataFrame).

    Raises
    ------
    UnreadableInputError
        No ``comparison.csv``, or it is not a CSV file.
    InvalidDataError
        Columns the report needs are missing, or the table has no row.
    """
    import pandas as pd

    target = comparison_file(path)
    try:
        table = pd.read_csv(target, keep_default_na=False, na_values=[""])
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise UnreadableInputError(f"{target} cannot be read as CSV ({exc})") from None
    missing = [c for c in NEEDED if c not in table.columns]
    if missing:
        raise InvalidDataError(f"{target} lacks the column(s) {', '.join(missing)}: is it a "
                               "table written by `refit compare`? Rerun it to rewrite it")
    if table.empty:
        raise InvalidDataError(f"{target} has no rows: nothing to compare")
    for col in TEXT:
        table[col] = table[col].astype(object).fillna("").astype(str)
    for col in POSTERIOR:          # older tables (or apply without --posterior): empty
        if col not in table.columns:
            table[col] = float("nan")
    if "posterior_flags" not in table.columns:
        table["posterior_flags"] = ""
    table["posterior_flags"] = table["posterior_flags"].astype(object).fillna("").astype(str)
    for col in ("estimate", "lower", "upper", "level", "cv_coverage", *POSTERIOR):
        table[col] = pd.to_numeric(table[col], errors="coerce")
    return table


def drawn_pages(folder, table) -> list[bytes] | None:
    """The figure pages `refit compare` wrote in ``folder`` from the very table there now
    (every page's stored SHA-256 equals the table file's), or None: then redraw."""
    from io import BytesIO

    from PIL import Image

    from refit._util.atomic import sha256_file
    from refit.apply.compare import TABLE_HASH_KEY, page_count, page_names

    folder = Path(folder)
    n = page_count(table)
    if n == 0 or not (folder / FILE).is_file():
        return None
    digest = sha256_file(folder / FILE)
    pages = []
    for name in page_names(n):
        try:
            png = (folder / name).read_bytes()
            with Image.open(BytesIO(png)) as im:
                stored = getattr(im, "text", {}).get(TABLE_HASH_KEY)
        except (OSError, ValueError):
            return None
        if stored != digest:
            return None
        pages.append(png)
    return pages


def figure(table, folder=None) -> dict | None:
    """The interval figure as embeddable PNGs: ``pages`` (each ``uri`` and ``width``
    [px]; a page holds at most :data:`refit.apply.compare.MAX_PANELS` panels, so every
    paleosol is drawn), the first page's ``uri`` and ``width``, and ``panels`` drawn of
    ``of`` panels in all (always equal). None when no paleosol has an estimate."""
    from io import BytesIO

    from PIL import Image

    from refit.apply.compare import figure_pngs, panel_groups
    from refit.errors import UsageError

    panels = len(panel_groups(table))
    pngs = drawn_pages(folder, table) if folder is not None else None
    try:
        pngs = pngs or figure_pngs(table)
    except UsageError:
        return None
    pages = []
    for png in pngs:
        with Image.open(BytesIO(png)) as im:
            dpi = float((im.info.get("dpi") or (130.0, 130.0))[0])
            width = int(round(im.size[0] / dpi * SCREEN_PX_PER_INCH))
        pages.append({"uri": "data:image/png;base64," + base64.b64encode(png).decode("ascii"),
                      "width": width})
    return {**pages[0], "pages": pages, "panels": panels, "of": panels}


def _reading(*values) -> list[str]:
    """An estimate and its interval ends at one resolution, as the report writes numbers
    (blank when missing, ∞ when unbounded)."""
    from refit._util.numbers import reading_texts

    return reading_texts(*values, missing="", infinity="∞")


def _interval(r) -> str:
    if r.problem:
        return ""
    _, lo, hi = _reading(r.estimate, r.lower, r.upper)
    return f"{lo} to {hi}" if (lo or hi) else "none"


def _beside(r) -> str:
    """What the report says beside a row: its CV coverage, flags or why it has no estimate."""
    from refit.apply.compare import coverage_text

    if r.problem:
        return "not evaluated: " + r.problem
    text = coverage_text(r.cv_coverage, r.cv_scheme, r.level, r.interval)
    return text + (f"; flags: {r.flags.replace(';', ', ')}" if r.flags else "")


def _posterior(r) -> str:
    """The posterior median and interval of a row ('' without one): a forward file's own,
    or the combined posterior row's."""
    if r.problem or r.posterior_median != r.posterior_median:
        return ""
    med, lo, hi = _reading(r.posterior_median, r.posterior_lower, r.posterior_upper)
    text = f"{med} ({lo} to {hi})"
    return text + (f"; {r.posterior_flags.replace(';', ', ')}" if r.posterior_flags else "")


def _kind(r) -> str:
    return ("posterior (Bayesian, proxies multiplied)" if r.origin == "posterior"
            else "frequentist")


def rows(table) -> list[list[str]]:
    """One formatted row per paleosol and fit: paleosol, fit, estimate, interval (and its
    kind), the posterior median and interval beside it where apply produced one, unit,
    level, and what is beside it."""
    from refit.curate.schema import unit_notation
    from refit.report.context import pct

    return [[r.paleosol_id, r.fit, _reading(r.estimate, r.lower, r.upper)[0], _interval(r),
             _kind(r), _posterior(r), unit_notation(r.unit),
             pct(r.level, 0) if r.level == r.level else "", _beside(r)]
            for r in table.itertuples(index=False)]


def caption(table, fig: dict | None, source: str, function_id: str) -> str:
    """What the comparison figure shows, in words (and that it is for research use)."""
    fits = list(dict.fromkeys(table["fit"]))
    import pandas as pd

    from refit.apply.posterior import COMBINED_ID

    post = (table["function_id"].astype(str) == COMBINED_ID if "function_id" in table
            else pd.Series(False, index=table.index))
    n_refit = table.loc[(table["origin"] == "refit") & ~post, "fit"].nunique()
    text = (f"Estimates (black diamonds) and intervals (bars) of {len(fits)} fit(s) for "
            f"each of {table['paleosol_id'].nunique()} paleosol(s), from {source} "
            f"(written by refit compare): blue bars are the {n_refit} fit(s) made with refit, with "
            "their cross-validated coverage printed at the right; vermilion bars are "
            "published equations, whose interval is the published ±1 standard error and "
            "was not cross-validated; a diamond alone is a fit that gives no interval. "
            "Paler bars are flagged: the equation does not hold there (e.g. outside its "
            "calibration range). The narrowest interval is not necessarily the best: "
            "compare each coverage with its nominal level.")
    ids = set(table["function_id"].astype(str)) if "function_id" in table else set()
    if function_id not in ids:
        text += f" None of the compared fits is {function_id}, the function reported above."
    if has_posterior(table):
        text += (" Green hatched bars with an open circle are the posterior for climate "
                 "(Bayesian: the forward fit's predictive density times the prior recorded "
                 "in the table's posterior_prior), drawn under the forward file's own "
                 "frequentist interval, and as its own row where all proxies of a paleosol "
                 "are multiplied; the two kinds answer different questions and need not "
                 "agree.")
    if fig and len(fig["pages"]) > 1:
        text += (f" All {fig['of']} panels are drawn, on {len(fig['pages'])} images of at "
                 "most 12 panels each.")
    return text + (" Intervals are estimates for research use, not for engineering, "
                   "hazard or regulatory decisions.")


def section(path, function_id: str) -> dict:
    """Everything the report's comparison section shows, from the folder ``path``."""
    from refit.report.context import shown_path

    table = read_comparison(path)
    post = has_posterior(table)
    fig = figure(table, comparison_file(path).parent)
    source = shown_path(comparison_file(path))
    return {"figure": fig, "caption": caption(table, fig, source, function_id),
            "header": ["paleosol", "fit", "estimate", "interval", "kind",
                       "posterior median (interval)", "unit", "level",
                       "cross-validation, flags"],
            "rows": rows(table), "source": source, "n_rows": len(table),
            "posterior": post}
