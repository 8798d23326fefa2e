"""Climate through a section: estimates against stratigraphic level or age, as a table.

:func:`section_files` applies coefficient files to a fossil table
(:func:`refit.apply.estimates.apply_files`) and lays the results out along each section:
one row per paleosol and fit, with the section, the level [m] and, where asked, the age
of the level and its standard deviation. The figure is drawn from this table by
:mod:`refit.report.section`, so figure and table always agree.

Age comes either from a column of the fossil table (read as written in the file, so its
unit is the one its name says) or from an age model: a table of dated levels, turned into
an age for every level by linear interpolation between the dated levels
(:func:`numpy.interp`); an age standard deviation given in the model is interpolated the
same way. Levels outside the dated range get no age (no extrapolation); the note says
which.

Choices made for awkward sections (each is said in ``SectionResult.notes``):

* a section with one paleosol is drawn as points only (no line joins one level);
* paleosols with no level are kept in the table (``level_m`` empty) but not drawn;
* levels out of order in the table are sorted by level (the table keeps its order);
* repeated levels are kept: both paleosols are drawn at that level;
* a table without a ``section`` column is one section named after the file.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd

from refit.errors import InvalidDataError, UsageError

#: columns of the long-format section table (one row per paleosol and fit)
TABLE_COLUMNS = [
    "section", "paleosol_id", "row", "level_m", "age", "age_sd", "age_unit", "fit",
    "function_id", "version", "variant", "origin", "response", "unit", "estimate", "lower", "upper",
    "lower_untruncated", "upper_untruncated", "level", "interval_kind", "flags", "problem",
    "coefficient_file",
]
#: what an interval is, for the figure's line styles
PREDICTION, PUBLISHED_SE, NO_INTERVAL = "prediction", "published ±1 SE", "none"
#: a posterior's median and equal-tailed interval (``apply --posterior``)
POSTERIOR = "posterior"
UNNAMED_SECTION = "(no section given)"


@dataclass
class SectionResult:
    """Outcome of :func:`section_files`.

    ``table`` is the long-format table (:data:`TABLE_COLUMNS`), ``axis`` what the figure's
    vertical axis is (``"level_m"`` or ``"age"``) and ``age_label`` its label; ``notes``
    the choices made and what the levels can resolve; ``applied`` the
    :class:`refit.apply.estimates.ApplyResult` behind it.
    """

    table: pd.DataFrame
    axis: str = "level_m"
    age_label: str = ""
    notes: list[str] = field(default_factory=list)
    applied: object = None

    def sections(self) -> list[str]:
        """The sections, in the order of the fossil table."""
        return list(dict.fromkeys(self.table["section"]))


# ----------------------------------------------------------------------------- age
def read_age_model(path) -> tuple[pd.DataFrame, str]:
    """An age model: dated levels of a section.

    The table (csv, tsv, xlsx or parquet) has ``level_m``, one age column whose name
    carries its unit (``age_ma``, ``age_ka`` or ``age_yr``), optionally its standard
    deviation (``age_sd_ma`` ...) and a ``section`` column (without it the model serves
    every section).

    Returns
    -------
    (pandas.DataFrame, str)
        Columns ``section`` (or absent), ``level_m``, ``age``, ``age_sd``; and the age
        column's name (its unit).

    Raises
    ------
    UnreadableInputError
        The file cannot be read.
    InvalidDataError
        A column is missing or a value is not a number (naming it).
    """
    from refit.curate.tables import read_table

    frame = read_table(path, as_text=False, digest=False).frame
    ages = [c for c in frame.columns if str(c) in ("age_ma", "age_ka", "age_yr")]
    if "level_m" not in frame.columns or len(ages) != 1:
        raise InvalidDataError(
            f"{path}: an age model needs the columns level_m and one of age_ma, age_ka, "
            f"age_yr (found: {', '.join(map(str, frame.columns))}); rename the columns")
    name = ages[0]
    sd_name = name.replace("age_", "age_sd_")
    out = pd.DataFrame({"level_m": _numbers(frame["level_m"], path, "level_m"),
                        "age": _numbers(frame[name], path, name)})
    out["age_sd"] = (_numbers(frame[sd_name], path, sd_name) if sd_name in frame.columns
                     else np.nan)
    if "section" in frame.columns:
        out.insert(0, "section", frame["section"].astype("string").fillna("").str.strip())
    return out, name


def _numbers(col: pd.Series, path, name: str) -> pd.Series:
    vals = pd.to_numeric(col, errors="coerce")
    bad = col.notna() & (col.astype(str).str.strip() != "") & vals.isna()
    if bad.any():
        raise InvalidDataError(f"{path}: {name} = {col[bad].iloc[0]!r} is not a number; "
                               "write plain decimals")
    return vals.astype(float)


def interpolate_age(levels, model_levels, model_ages, model_sd=None, *, where: str = ""):
    """Age [model unit] of each level by linear interpolation between dated levels.

    Parameters
    ----------
    levels : array_like [m]
        Levels to date.
    model_levels, model_ages : array_like [m], [age unit]
        The dated levels and their ages: at least two distinct levels, ages strictly
        monotonic with level (older down-section, or the reverse).
    model_sd : array_like, optional [age unit]
        Standard deviation of each dated age, interpolated the same way (NaN where
        none is given).
    where : str
        Named in messages (the file and section).

    Returns
    -------
    (numpy.ndarray, numpy.ndarray)
        Ages and their standard deviations; NaN outside the dated range (no
        extrapolation) or where the level is missing.

    Raises
    ------
    InvalidDataError
        Fewer than two dated levels, a level dated twice, or ages not monotonic.
    """
    lv = np.asarray(model_levels, float)
    ag = np.asarray(model_ages, float)
    sd = np.full(lv.shape, np.nan) if model_sd is None else np.asarray(model_sd, float)
    keep = np.isfinite(lv) & np.isfinite(ag)
    lv, ag, sd = lv[keep], ag[keep], sd[keep]
    if lv.size < 2:
        raise InvalidDataError(f"{where}: the age model has {lv.size} dated level(s); "
                               "interpolation needs at least two. Add a dated level or "
                               "give ages in a column (--age-column)")
    order = np.argsort(lv, kind="stable")
    lv, ag, sd = lv[order], ag[order], sd[order]
    if np.any(np.diff(lv) == 0):
        twice = lv[1:][np.diff(lv) == 0][0]
        raise InvalidDataError(f"{where}: level {twice:g} m is dated twice in the age "
                               "model; keep one age per level")
    step = np.sign(np.diff(ag))
    if not (np.all(step > 0) or np.all(step < 0)):
        i = int(np.flatnonzero(step != step[0])[0]) if np.any(step != step[0]) else 0
        raise InvalidDataError(
            f"{where}: the ages are not monotonic with level ({ag[i]:g} at {lv[i]:g} m, "
            f"{ag[i + 1]:g} at {lv[i + 1]:g} m); an age model must get steadily older "
            "down-section. Correct the dates or split the section at a hiatus")
    x = np.asarray(levels, float)
    inside = np.isfinite(x) & (x >= lv[0]) & (x <= lv[-1])
    age = np.where(inside, np.interp(x, lv, ag), np.nan)
    age_sd = np.where(inside, np.interp(x, lv, sd), np.nan)
    return age, age_sd


def _raw_with_age(path, column: str):
    """The fossil table as written in the file, refused unless it has the age column."""
    from refit.curate.tables import read_table

    raw = read_table(path, as_text=False, digest=False)
    if column not in raw.frame.columns:
        raise UsageError(f"--age-column {column}: no such column in {path}; its columns "
                         "are " + ", ".join(map(str, raw.frame.columns)))
    return raw


def _age_from_column(raw, path, column: str, sd_column: str | None, rows) -> tuple:
    """Ages (and SDs) of the file rows ``rows`` from a column as written in the file."""
    by_row = pd.Series(np.arange(len(raw.frame)), index=np.asarray(raw.source_rows))
    pos = by_row.reindex(rows).to_numpy()
    pick = (lambda c: np.array([np.nan if pd.isna(p) else v for p, v in zip(
        pos, _numbers(raw.frame[c], path, c).to_numpy()[np.nan_to_num(pos).astype(int)])]))
    sd = pick(sd_column) if sd_column and sd_column in raw.frame.columns else \
        np.full(len(rows), np.nan)
    return pick(column), sd


# ----------------------------------------------------------------------------- table
def interval_kind(flags, lower, upper) -> str:
    """What an interval is: a prediction interval, a published ±1 SE, or none."""
    from refit.apply.estimates import FLAG_PUBLISHED

    if not (np.isfinite(lower) or np.isfinite(upper)):
        return NO_INTERVAL
    return PUBLISHED_SE if FLAG_PUBLISHED in str(flags or "").split(";") else PREDICTION


def section_table(results: pd.DataFrame, fossils: pd.DataFrame, *,
                  name: str = UNNAMED_SECTION) -> pd.DataFrame:
    """The long-format section table from ``apply`` results and the checked fossils.

    Parameters
    ----------
    results : pandas.DataFrame
        :attr:`refit.apply.estimates.ApplyResult.results` (the numbers are copied, never
        recomputed).
    fossils : pandas.DataFrame
        :attr:`refit.apply.estimates.ApplyResult.fossils` (indexed by file row).
    name : str
        Section name for a table without a ``section`` column.

    Returns
    -------
    pandas.DataFrame
        :data:`TABLE_COLUMNS`, sorted by section (table order), level, then fit; the age
        columns empty (see :func:`add_ages`).
    """
    from refit.apply.compare import fit_label

    t = results[results["function_id"] != "combined"].copy()
    sec = (fossils["section"].astype("string").fillna("").str.strip()
           if "section" in fossils.columns else pd.Series("", index=fossils.index))
    sec = sec.mask(sec == "", name)
    lvl = (pd.to_numeric(fossils["level_m"], errors="coerce") if "level_m" in fossils
           else pd.Series(np.nan, index=fossils.index))
    t["section"] = sec.reindex(t["row"]).to_numpy(dtype=object)
    t["level_m"] = lvl.reindex(t["row"]).to_numpy(dtype=float)
    t["fit"] = [fit_label(r) for r in t.itertuples(index=False)]
    t["origin"] = np.where(t["candidate"].fillna("").astype(str) != "", "refit",
                           "literature")
    for c in ("estimate", "lower", "upper", "lower_untruncated", "upper_untruncated"):
        t[c] = t[c].astype(float)
    t["interval_kind"] = [interval_kind(f, lo, hi) for f, lo, hi in
                          zip(t["flags"], t["lower"], t["upper"])]
    t = with_posteriors(t)
    t["age"], t["age_sd"], t["age_unit"] = np.nan, np.nan, ""
    order = {s: i for i, s in enumerate(dict.fromkeys(t["section"]))}
    fits = {f: i for i, f in enumerate(dict.fromkeys(t["fit"]))}
    t = t.assign(_s=t["section"].map(order), _f=t["fit"].map(fits))
    t = t.sort_values(["_s", "level_m", "row", "_f"], kind="stable", na_position="last")
    return t.reindex(columns=TABLE_COLUMNS).reset_index(drop=True)


def with_posteriors(t: pd.DataFrame) -> pd.DataFrame:
    """The section rows plus, for each forward file's row with a posterior, a row of the
    fit ``"<fit> posterior"`` holding its posterior median and interval; the combined
    posterior rows (``function_id`` ``posterior``) are of interval kind posterior too.
    A table without posterior columns is returned as it is."""
    if "posterior_median" not in t.columns:
        return t
    t = t.copy()
    combined = (t["function_id"] == "posterior").to_numpy()
    t.loc[combined, "interval_kind"] = POSTERIOR
    t.loc[combined, "origin"] = "refit"
    med = pd.to_numeric(t["posterior_median"], errors="coerce").to_numpy(float)
    one = t[np.isfinite(med) & ~combined].copy()
    if one.empty:
        return t
    one["fit"] = one["fit"] + " posterior"
    one["estimate"] = one["posterior_median"].astype(float)
    one["lower"] = one["posterior_lower"].astype(float)
    one["upper"] = one["posterior_upper"].astype(float)
    one[["lower_untruncated", "upper_untruncated"]] = np.nan  # the posterior's own limits
    one["flags"] = one["posterior_flags"].fillna("")
    one["interval_kind"] = POSTERIOR
    return pd.concat([t, one], ignore_index=True)


def add_ages(table: pd.DataFrame, ages, sds, unit: str) -> pd.DataFrame:
    """``table`` with ``age``, ``age_sd`` [unit] and ``age_unit`` filled in row order."""
    out = table.copy()
    out["age"], out["age_sd"], out["age_unit"] = np.asarray(ages, float), \
        np.asarray(sds, float), unit
    return out


def ages_from_model(table: pd.DataFrame, model: pd.DataFrame, where: str):
    """Ages and SDs of every row of ``table`` from an age model (per section when the
    model has a ``section`` column; a section the model does not date gets none)."""
    ages = np.full(len(table), np.nan)
    sds = np.full(len(table), np.nan)
    for sec in dict.fromkeys(table["section"]):
        rows = (table["section"] == sec).to_numpy()
        m = model[model["section"] == sec] if "section" in model.columns else model
        if m.empty:
            continue
        ages[rows], sds[rows] = interpolate_age(
            table.loc[rows, "level_m"], m["level_m"], m["age"], m["age_sd"],
            where=f"{where} ({sec})" if "section" in model.columns else where)
    return ages, sds


# ----------------------------------------------------------------------------- notes
def layout_notes(table: pd.DataFrame, fossils: pd.DataFrame, axis: str) -> list[str]:
    """The choices made for awkward sections (see the module docstring), as sentences."""
    notes = []
    for sec, t in table.groupby("section", sort=False):
        ids = t.drop_duplicates("paleosol_id")
        no_level = ids.loc[ids["level_m"].isna(), "paleosol_id"].tolist()
        if no_level:
            notes.append(f"{sec}: {', '.join(no_level)} ha{'s' if len(no_level) == 1 else 've'}"
                         " no level_m: in the table, not in the figure.")
        if axis == "age":
            undated = ids.loc[ids["level_m"].notna() & ids["age"].isna(), "paleosol_id"]
            if len(undated):
                notes.append(f"{sec}: {', '.join(undated)} lie outside the age model's dated "
                             "levels (no extrapolation): no age, not in the figure.")
        placed = ids[ids["level_m"].notna()]
        if len(placed) == 1:
            notes.append(f"{sec}: one paleosol; drawn as points, no line joins the levels.")
        rep = placed[placed.duplicated("level_m", keep=False)]
        for lv, g in rep.groupby("level_m"):
            notes.append(f"{sec}: {' and '.join(g['paleosol_id'])} share level {lv:g} m; "
                         "both are drawn at it.")
        file_order = placed.sort_values("row")["level_m"].to_numpy()
        if len(file_order) > 1 and np.any(np.diff(file_order) < 0):
            notes.append(f"{sec}: the fossil table lists its levels out of order; they are "
                         "drawn sorted by level.")
    return notes


def resolution_notes(table: pd.DataFrame, axis: str = "level_m") -> list[str]:
    """Where adjacent paleosols differ by less than their intervals can resolve.

    For each section and fit, the steps between paleosols adjacent along the section
    (by level) are counted where each estimate lies inside the other's interval: the
    change between those levels is within the uncertainty, so the curve's wiggle there
    is not a resolved change of climate. A note, not a model: no smoothing is done.
    """
    notes = []
    for sec, t in table.groupby("section", sort=False):
        t = t[t[axis].notna() & np.isfinite(t["estimate"])]
        parts, example = [], None
        for fit, g in t.groupby("fit", sort=False):
            g = g.sort_values(axis)
            if len(g) < 2 or g["interval_kind"].eq(NO_INTERVAL).any():
                continue
            a, b = g.iloc[:-1], g.iloc[1:]
            same = ((b["estimate"].to_numpy() >= a["lower"].to_numpy())
                    & (b["estimate"].to_numpy() <= a["upper"].to_numpy())
                    & (a["estimate"].to_numpy() >= b["lower"].to_numpy())
                    & (a["estimate"].to_numpy() <= b["upper"].to_numpy()))
            parts.append(f"{fit}: {int(same.sum())} of {len(same)}")
            if example is None and same.any():
                i = int(np.flatnonzero(same)[0])
                example = (a["paleosol_id"].iloc[i], b["paleosol_id"].iloc[i],
                           a["level_m"].iloc[i], b["level_m"].iloc[i])
        if parts:
            text = (f"{sec}: steps between adjacent paleosols that lie within their "
                    "intervals (each estimate inside its neighbour's interval), so the "
                    "change there is not resolved - " + "; ".join(parts) + ".")
            if example:
                text += (f" E.g. {example[0]} ({example[2]:g} m) to {example[1]} "
                         f"({example[3]:g} m).")
            notes.append(text)
    return notes


# ----------------------------------------------------------------------------- files
def section_files(coefficient_files, fossils, *, age_column: str | None = None,
                  age_sd_column: str | None = None, age_model=None, level=None,
                  decompact: bool = False, constants_file=None,
                  seed: int = 0, posterior: bool = False, prior=None) -> SectionResult:
    """Apply coefficient files to a fossil table and lay the estimates out by section.

    Parameters
    ----------
    coefficient_files : list of str or Path
    fossils : str or Path
        The fossil table (``section`` and ``level_m`` columns).
    age_column : str, optional
        A column of the fossil table holding each paleosol's age (as written in the
        file; its name should carry its unit, e.g. ``age_ma``).
    age_sd_column : str, optional
        Its standard deviation; default ``age_sd_<unit>`` when the table has it.
    age_model : str or Path, optional
        An age model table (:func:`read_age_model`); not with ``age_column``.
    level, decompact, constants_file, seed, posterior, prior
        As :func:`refit.apply.estimates.apply_files` (with ``posterior`` the forward
        files' posteriors are drawn beside their frequentist intervals).

    Returns
    -------
    SectionResult

    Raises
    ------
    UsageError
        Both ``age_column`` and ``age_model``, or an unknown age column.
    InvalidDataError
        A bad age model, or a table with no paleosol that has a level.
    """
    from refit.apply.estimates import apply_files
    from refit.curate.fossils import sd_column

    if age_column and age_model:
        raise UsageError("give either --age-column or --age-model, not both")
    # the age column and its SD are the section's own: not measurements to apply
    own = [c for c in (age_column, age_sd_column or (age_column and sd_column(age_column)))
           if c]
    raw = _raw_with_age(fossils, age_column) if age_column else None
    applied = apply_files(coefficient_files, fossils, level=level, decompact=decompact,
                          posterior=posterior, prior=prior, constants_file=constants_file,
                          seed=seed, consumed=own)
    table = section_table(applied.results, applied.fossils, name=Path(str(fossils)).stem)
    axis, label = "level_m", "level [m]"
    if age_column:
        sd_col = age_sd_column or sd_column(age_column)
        ages, sds = _age_from_column(raw, fossils, age_column, sd_col,
                                     table["row"].to_numpy())
        table, axis, label = add_ages(table, ages, sds, age_column), "age", age_column
    elif age_model:
        model, name = read_age_model(age_model)
        ages, sds = ages_from_model(table, model, str(age_model))
        table, axis, label = add_ages(table, ages, sds, name), "age", name
    if table.empty or not table["level_m"].notna().any():
        raise InvalidDataError(f"{fossils}: no paleosol has a level_m, so there is no "
                               "section to draw; fill in level_m (metres above the base "
                               "of the section)")
    notes = layout_notes(table, applied.fossils, axis) + resolution_notes(table, axis)
    return SectionResult(table, axis, label, notes, applied)
