"""Check a modern-soil calibration table: every problem at once, with row, column and fix.

The column rules (types, ranges, required columns and values, unique ``profile_id``,
closed vocabularies) come from ``schemas/calibration.table.json`` and run through pandera
(:mod:`refit.curate.schema`) with lazy validation; the cells are parsed first (``refit/curate/cells.py``:
text in a numeric column is reported as such, with the text), then this module adds the
rules that span columns, the controlled vocabularies, plausibility warnings and the
sequence checks (:mod:`refit.curate.sequences`), and gathers everything in one problems table
(:class:`CheckReport`). The report, the pandera run and the oxide-total rule live in
:mod:`refit.curate.rules`, shared with the fossil checks (:mod:`refit.curate.fossils`), to
which :func:`check_file` and :func:`check_frame` hand ``kind="fossil"``.

Rules (``rule`` ids; severity error unless noted):

``required-column``  a required column is absent (all absent ones are listed)
``duplicate-column`` two columns share a name
``climate-column``   none of ``map_mm``, ``mat_c``, ``mar_mm`` is present
``required-value``   an empty cell in a required column
``climate-missing``  a row without any climate value
``unique-id``        a ``profile_id`` used more than once
``not-a-number``     text in a numeric column
``not-finite``       infinity in a numeric column (empty cells and NaN mean "missing")
``not-a-date``       a date that is not ISO 8601 ``YYYY-MM-DD``
``range``            a number outside its column's range
``vocabulary``       a term outside the controlled vocabulary
``vocabulary-form``  (warning) a known term written in another case, separator or number
``mar-above-map``    ``mar_mm`` larger than ``map_mm``
``bk-depth-without-thickness``  (warning) a Bk depth without a positive Bk thickness:
                     many compilations record the depth to carbonate only; the row is
                     admitted and is simply not used by thickness equations
``oxide-total``      the sum of the ``*_wt`` oxides above 101 wt%
``gypsum-above-carbonate``, ``carbonate-in-wet-climate`` (warnings, common practice)
``formula-like-text`` (warning) text starting with =, +, -, @ (:mod:`refit.curate.text_cells`;
                     ids are normalised there too, before the unique-id rule)

Plausibility rules (:mod:`refit.curate.plausibility`; each with its source and why it is a
warning or an error): ``bk-too-shallow`` (error), ``bk-in-hyperarid-climate``
(warning), ``map-below-bk-minimum`` (error), ``horizon-below-profile`` (error).
``sequence-*``       (warnings) see :mod:`refit.curate.sequences`
``no-rows``          (warning) a header without data rows
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from refit.curate import schema as _schema
from refit.curate.cells import parse_cells
from refit.curate.plausibility import plausibility_problems
from refit.curate.problems import PROBLEM_COLUMNS, Problems, fmt_values
from refit.curate.rules import (  # CheckReport is re-exported: part of the checks API
    CheckReport, check_oxide_total, default_rows, run_pandera,
)
from refit.curate.text_cells import formula_like_problems, normalise_ids
from refit.errors import InvalidDataError, UsageError
from refit.curate.vocabularies import (  # noqa: F401  (re-exported: part of the checks API)
    VOCABULARY_COLUMNS, check_vocabularies, load_vocabularies, match_vocabulary, vocab_key,
)

KINDS = ("calibration", "fossil")

#: A Bk horizon in a soil wetter than this warns [mm]. Common practice: carbonate soils are
#: mostly drier than about 760 mm MAP (Royer 1999, Geology 27, 1123-1126); the boundary
#: varies by region, so this is a warning, not an error.
CARBONATE_WET_LIMIT_MM = 760.0


# --- checking ---------------------------------------------------------------------------

def check_file(path, *, kind: str = "calibration", vocabularies=None,
               sheet: str | None = None) -> CheckReport:
    """Read a table (csv/tsv/xlsx/parquet), map its units and column names, and check it.

    Parameters
    ----------
    path : str or Path
        The table.
    kind : {"calibration", "fossil"}
        Table kind; a fossil table is checked by :mod:`refit.curate.fossils`.
    vocabularies : dict, optional
        From :func:`load_vocabularies`; default the shipped vocabularies.
    sheet : str, optional
        Worksheet of an xlsx file; default the first visible one.

    Returns
    -------
    CheckReport
        With the reader's and the unit mapping's notes in ``notes``.

    Raises
    ------
    UnreadableInputError
        Missing, empty or unparseable file (exit code 2).
    """
    _check_kind(kind)
    try:
        return _check_file(path, kind, vocabularies, sheet)
    except InvalidDataError as exc:  # e.g. two columns mapping to one: say which file
        if Path(path).name in str(exc):
            raise
        raise InvalidDataError(f"{path}: {exc}") from None


def _check_file(path, kind: str, vocabularies, sheet=None) -> CheckReport:
    if kind == "fossil":
        from refit.curate.fossils import check_fossil_file

        return check_fossil_file(path, vocabularies=vocabularies, sheet=sheet)
    from refit.curate.columns import (
        parse_column, unmapped_columns, unmapped_problems, with_problems,
    )
    from refit.curate.tables import read_table
    from refit.curate.units import normalise_columns

    table = read_table(path, as_text=False, digest=False, sheet=sheet)
    frame, mapped = normalise_columns(table.frame, positions=table.file_columns,
                                      parser=parse_column)
    report = check_frame(frame, source_rows=table.source_rows, vocabularies=vocabularies,
                         path=str(path), kind=kind, notes=list(table.notes) + list(mapped))
    if mapped and not report.problems.empty:
        from refit.curate.units import add_file_context

        report.problems = add_file_context(report.problems, table.frame, table.source_rows)
    report.problems = with_problems(report.problems, unmapped_problems(
        unmapped_columns(table.frame.columns, "calibration"), "calibration"))
    return report


def _check_kind(kind: str) -> None:
    if kind not in KINDS:
        raise UsageError(f"unknown table kind {kind!r}; use one of: {', '.join(KINDS)}.")


def check_frame(frame: pd.DataFrame, *, source_rows=None, vocabularies=None, path=None,
                kind: str = "calibration", notes=None) -> CheckReport:
    """Check a calibration table held in a DataFrame against every rule.

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical column names (see ``schemas/calibration.table.json``); values as read.
    source_rows : array_like of int, optional
        File row number of each frame row; default ``2, 3, ...`` (header on row 1).
    vocabularies : dict, optional
        From :func:`load_vocabularies`; default the shipped vocabularies.
    path : str, optional
        Shown in the report.
    kind : {"calibration", "fossil"}
        Table kind; a fossil table is checked by :mod:`refit.curate.fossils`.
    notes : list of str, optional
        Reader and unit-mapping notes to pass through.

    Returns
    -------
    CheckReport
        ``frame`` holds the checked data with the same index as the input: numeric
        columns as float64 (cells that failed to parse, and infinities, become NaN),
        text stripped (empty text becomes missing), known vocabulary variants replaced by
        their canonical term, dates kept as ISO text.
    """
    _check_kind(kind)
    if kind == "fossil":
        from refit.curate.fossils import check_fossil_frame

        return check_fossil_frame(frame, source_rows=source_rows, vocabularies=vocabularies,
                                  path=path, notes=notes)
    from refit.curate import sequences
    n = len(frame)
    rows = default_rows(n) if source_rows is None else np.asarray(source_rows, "int64")
    if len(rows) != n:
        raise ValueError(f"source_rows has {len(rows)} entries for {n} rows")
    vocab = load_vocabularies() if vocabularies is None else vocabularies
    desc = _schema.load_descriptor()
    frame, id_notes = normalise_ids(frame, rows)
    work, probs = parse_cells(frame, rows, desc)
    formula_like_problems(work, probs, list(work.columns))
    vocab_lines = check_vocabularies(work, probs, vocab)
    run_pandera(work, probs, desc)
    _check_climate(work, probs, desc)
    _check_cross_columns(work, probs, desc)
    probs.add_frame(sequences.sequence_problems(work))
    if n == 0:
        probs.add_table("warning", "no-rows", "", "the table has a header but no data "
                        "rows; check that the export holds the data.")
    out_frame = work.set_axis(frame.index, axis=0)
    return CheckReport(problems=probs.build(), frame=out_frame, n_rows=n,
                       path=None if path is None else str(path),
                       notes=list(notes or []) + id_notes + vocab_lines, source_rows=rows)


def _check_climate(work: pd.DataFrame, probs: Problems, desc: dict) -> None:
    climate = _schema.refit_rules(desc).get("climate_columns_any_of",
                                            ["map_mm", "mat_c", "mar_mm"])
    present = [c for c in climate if c in work.columns]
    if not present:
        probs.add_table("error", "climate-column", "|".join(climate),
                        f"no climate column: a calibration table needs at least one of "
                        f"{', '.join(climate)}. Add the column (a unit in its name, e.g. "
                        "map_in, is converted).")
        return
    empty = np.ones(len(work), dtype=bool)
    for c in present:
        empty &= work[c].isna().to_numpy() & ~probs.flagged_mask(c, len(work))
    if empty.any():
        pos = np.flatnonzero(empty)
        probs.add("error", "climate-missing", pos, "|".join(present), [""] * len(pos),
                  f"no climate value in this row ({', '.join(present)} all empty); a "
                  "calibration profile needs at least one. Fill one in or remove the row.")


def _check_cross_columns(work: pd.DataFrame, probs: Problems, desc: dict) -> None:
    cols = work.columns
    if "mar_mm" in cols and "map_mm" in cols:
        mar, mapp = work["mar_mm"], work["map_mm"]
        pos = np.flatnonzero((mar > mapp).to_numpy())
        if len(pos):
            probs.add("error", "mar-above-map", pos, "mar_mm", fmt_values(mar.iloc[pos]),
                      "MAR " + fmt_values(mar.iloc[pos]) + " mm is larger than MAP "
                      + fmt_values(mapp.iloc[pos]) + " mm; the range of monthly "
                      "precipitation cannot exceed the annual total. Check that both are "
                      "in mm and not swapped.")
    if "bk_depth_cm" in cols:
        depth = work["bk_depth_cm"]
        thick = work["bk_thickness_cm"] if "bk_thickness_cm" in cols else pd.Series(
            np.nan, index=work.index)
        # a negative thickness is already a range error; here: missing or zero. A warning
        # by choice: many compilations give the depth to carbonate without a thickness.
        pos = np.flatnonzero((depth.notna() & (thick.isna() | (thick == 0))).to_numpy())
        if len(pos):
            probs.add("warning", "bk-depth-without-thickness", pos, "bk_thickness_cm",
                      fmt_values(thick.iloc[pos]),
                      "a Bk depth is given but no positive Bk thickness; the row is "
                      "admitted and used by depth equations only. Enter bk_thickness_cm "
                      "if it was measured, or leave bk_depth_cm empty if the profile has "
                      "no Bk horizon.")
    check_oxide_total(work, probs, desc)
    _warn_horizons(work, probs)
    plausibility_problems(work, probs)


def _warn_horizons(work: pd.DataFrame, probs: Problems) -> None:
    cols = work.columns
    if "bk_depth_cm" in cols and "by_depth_cm" in cols:
        bk, by = work["bk_depth_cm"], work["by_depth_cm"]
        # common practice: gypsic (By) horizons normally lie below the calcic (Bk)
        # horizon (gypsum is more soluble and is leached deeper; Bockheim 2014, from memory)
        pos = np.flatnonzero((by < bk).to_numpy())
        if len(pos):
            probs.add("warning", "gypsum-above-carbonate", pos, "by_depth_cm",
                      fmt_values(by.iloc[pos]),
                      "the gypsic (By) horizon at " + fmt_values(by.iloc[pos])
                      + " cm lies above the Bk at " + fmt_values(bk.iloc[pos])
                      + " cm; gypsum normally lies deeper. Check the depths and the "
                      "horizon names.")
    if "bk_depth_cm" in cols and "map_mm" in cols:
        bk, mapp = work["bk_depth_cm"], work["map_mm"]
        # common practice: carbonate soils are mostly drier than ~760 mm MAP (Royer 1999)
        pos = np.flatnonzero((bk.notna() & (mapp > CARBONATE_WET_LIMIT_MM)).to_numpy())
        if len(pos):
            probs.add("warning", "carbonate-in-wet-climate", pos, "map_mm",
                      fmt_values(mapp.iloc[pos]),
                      "a Bk horizon in a soil with MAP " + fmt_values(mapp.iloc[pos])
                      + f" mm; carbonate soils are mostly drier than about "
                      f"{CARBONATE_WET_LIMIT_MM:g} mm (Royer 1999). Check MAP and the "
                      "horizon; keep the row if the region is known for it.")


__all__ = [
    "CheckReport", "check_file", "check_frame", "load_vocabularies", "match_vocabulary",
    "vocab_key", "PROBLEM_COLUMNS", "CARBONATE_WET_LIMIT_MM",
]
