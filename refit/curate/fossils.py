"""Fossil (paleosol) measurement tables: schema, checks and decompaction per row.

The columns come from ``schemas/fossil.table.json`` (Frictionless Table Schema): the
paleosol's id, section and level, its features with the names and units of the calibration
table, optional measurement standard deviations (``<stem>_sd_<unit>``), the burial depth
and what decompaction needs, and the recorded setting. Checks reuse the calibration
machinery (:mod:`refit.curate.rules`: the report, pandera's column rules and the oxide total;
:mod:`refit.curate.cells` parsing, :mod:`refit.curate.vocabularies`) and add the fossil rules:

``sd-without-value``       (warning) a standard deviation beside an empty value
``burial-depth-missing``   (warning) depths are given but no burial depth (no decompaction)
``compaction-constants``   (warning) no compaction constants for the soil order/lithology
``partial-constants``      only one of ``initial_solidity`` and ``compaction_k_per_km``
``no-feature``             (warning) a row without any measured feature
``oxide-total``            oxides adding up to more than 101 wt%
``unmapped-column``        (warning) a column that maps to no fossil column (did-you-mean)
``unmapped-sd-column``     a column that looks like a measurement SD (``SD``, ``±``,
                           ``error``, ``1σ``) but maps to no feature's SD: stops ``apply``
                           unless ``--ignore-columns`` names it

plus ``required-column``, ``required-value``, ``unique-id``, ``not-a-number``, ``range``
(negative depths, burial depth outside 0-12 km, ...) and ``vocabulary``. In the problems
table the ``profile_id`` column holds the ``paleosol_id``.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pandas as pd

from refit.soil import decompaction as dc
from refit.curate import schema as _schema

DESCRIPTOR_NAME = "fossil.table.json"
ID = "paleosol_id"


def load_descriptor() -> dict:
    """The fossil-table descriptor (``schemas/fossil.table.json``)."""
    from refit._util.resources import schemas_dir

    return _schema.load_descriptor(schemas_dir() / DESCRIPTOR_NAME)


def sd_column(name: str) -> str:
    """Standard-deviation column of a feature: ``bk_depth_cm`` -> ``bk_depth_sd_cm``."""
    stem, _, unit = name.rpartition("_")
    return f"{stem}_sd_{unit}"


def feature_columns(desc: dict | None = None) -> list[str]:
    """Measured features of a fossil table (names as in the calibration table)."""
    return list(_schema.refit_rules(desc or load_descriptor())["feature_columns"])


def check_fossil_file(path, *, vocabularies=None, constants=None, ignore_columns=None,
                      consumed=(), sheet=None):
    """Read (csv/tsv/xlsx/parquet), map unit names, and check a fossil table.

    Every column that maps to no fossil column is reported (``unmapped-column``, a
    warning, with a did-you-mean); one that looks like a measurement SD (``SD``, ``±``,
    ``error``, ``1σ`` in its name) is an error, ``unmapped-sd-column``, which stops
    ``refit apply`` (it would propagate no measurement error and give intervals too
    narrow) unless ``ignore_columns`` names it.

    Parameters
    ----------
    ignore_columns : sequence of str, optional
        Unmapped columns to go on without (``refit apply --ignore-columns``); each must
        be a column of the file.
    consumed : sequence of str, optional
        Columns the caller reads itself (e.g. ``refit section``'s age column and its SD):
        not reported as unmapped where the file has them.

    Returns
    -------
    refit.curate.rules.CheckReport
        As for calibration tables; ``frame`` holds the parsed values.

    Raises
    ------
    InvalidDataError
        Column names that cannot be mapped (e.g. two columns for one feature), with the
        file named.
    """
    import functools

    from refit.curate.columns import (
        parse_column, unmapped_columns, unmapped_problems, with_problems,
    )
    from refit.errors import InvalidDataError, UsageError
    from refit.curate.tables import read_table
    from refit.curate.units import add_file_context, normalise_columns

    table = read_table(path, as_text=False, sheet=sheet)
    parser = functools.partial(parse_column, kind="fossil")
    try:
        frame, mapped = normalise_columns(table.frame, parser=parser)
    except InvalidDataError as exc:  # e.g. two columns mapping to one: say which file
        raise InvalidDataError(f"{path}: {exc}") from None
    report = check_fossil_frame(frame, source_rows=table.source_rows,
                                vocabularies=vocabularies, path=str(path),
                                notes=list(table.notes) + list(mapped), constants=constants)
    if mapped and not report.problems.empty:
        report.problems = add_file_context(report.problems, table.frame, table.source_rows)
    ignore = list(ignore_columns or ())
    unknown = [c for c in ignore if c not in [str(n) for n in table.frame.columns]]
    if unknown:
        raise UsageError(f"--ignore-columns names {', '.join(map(repr, unknown))}, which "
                         f"{path} does not have; its columns are: "
                         + ", ".join(map(str, table.frame.columns)))
    unmapped = unmapped_columns(table.frame.columns, "fossil")
    report.problems = with_problems(report.problems,
                                    unmapped_problems(unmapped, "fossil",
                                                      ignore + list(consumed)))
    return report


def check_fossil_frame(frame: pd.DataFrame, *, source_rows=None, vocabularies=None,
                       path=None, notes=None, constants=None):
    """Check a fossil table held in a DataFrame; see the module docstring for the rules.

    Parameters
    ----------
    frame : pandas.DataFrame
        Canonical column names; values as read.
    source_rows : array_like of int, optional
        File row of each frame row; default ``2, 3, ...``.
    vocabularies : dict, optional
        From :func:`refit.curate.vocabularies.load_vocabularies`.
    path : str, optional
        Shown in the report.
    notes : list of str, optional
        Reader notes passed through.
    constants : dict, optional
        Compaction constants by key (:func:`refit.soil.decompaction.constants_table`).

    Returns
    -------
    refit.curate.rules.CheckReport
    """
    from refit.curate.cells import parse_cells
    from refit.curate.rules import CheckReport, run_pandera
    from refit.curate.vocabularies import check_vocabularies, load_vocabularies

    n = len(frame)
    rows = (np.arange(n, dtype="int64") + 2 if source_rows is None
            else np.asarray(source_rows, "int64"))
    desc = load_descriptor()
    work, probs = parse_cells(frame, rows, desc)
    if ID in work.columns:
        probs.ids = work[ID]
    vocab = load_vocabularies() if vocabularies is None else vocabularies
    check_vocabularies(work, probs, vocab)
    run_pandera(work, probs, desc)
    _fossil_rules(work, probs, desc, dc.constants_table(constants))
    if n == 0:
        probs.add_table("warning", "no-rows", "", "the table has a header but no data "
                        "rows; check that the export holds the data.")
    return CheckReport(problems=probs.build(), frame=work.set_axis(frame.index),
                       n_rows=n, path=None if path is None else str(path),
                       notes=list(notes or []), source_rows=rows, kind="fossil")


def _fossil_rules(work: pd.DataFrame, probs, desc: dict, constants: dict) -> None:
    from refit.curate.problems import fmt_values
    from refit.curate.rules import check_oxide_total

    feats = [c for c in feature_columns(desc) if c in work.columns]
    for c in feats:
        sd = sd_column(c)
        if sd in work.columns:
            pos = np.flatnonzero((work[sd].notna() & work[c].isna()).to_numpy())
            probs.add("warning", "sd-without-value", pos, sd, fmt_values(work[sd].iloc[pos]),
                      f"a standard deviation is given but {c} is empty; the SD is unused. "
                      f"Fill in {c} or clear {sd}.")
    if feats:
        none = ~work[feats].notna().any(axis=1).to_numpy()
        probs.add("warning", "no-feature", np.flatnonzero(none), "|".join(feats),
                  [""] * int(none.sum()), "no measured feature in this row; no transfer "
                  "function can be applied to it. Fill in at least one feature.")
    # the oxide total over the features only (the *_sd_wt columns are not oxides)
    oxide_desc = dict(desc, fields=[f for f in desc["fields"] if "_sd_" not in f["name"]])
    check_oxide_total(work, probs, oxide_desc)
    _decompaction_rules(work, probs, constants)


def _decompaction_rules(work: pd.DataFrame, probs, constants: dict) -> None:
    from refit.curate.problems import fmt_values

    depths = [c for c in dc.DECOMPACTED_COLUMNS if c in work.columns]
    if not depths:
        return
    has_depth = work[depths].notna().any(axis=1)
    burial = _col(work, "burial_depth_km")
    pos = np.flatnonzero((has_depth & burial.isna()).to_numpy())
    probs.add("warning", "burial-depth-missing", pos, "burial_depth_km", [""] * len(pos),
              "depths are given but no burial depth; `refit apply --decompact` cannot "
              "decompact this row. Enter burial_depth_km (0 if never buried).")
    si, k = _col(work, "initial_solidity"), _col(work, "compaction_k_per_km")
    partial = (si.isna() != k.isna()).to_numpy()
    probs.add("error", "partial-constants", np.flatnonzero(partial),
              "initial_solidity|compaction_k_per_km", [""] * int(partial.sum()),
              "only one of initial_solidity and compaction_k_per_km is given; the "
              "compaction equation needs both. Fill in the other or clear both.")
    _, _, _, reason = resolve_constants(work, constants)
    need = (has_depth & burial.notna() & (burial > 0)).to_numpy() & ~partial
    miss = np.flatnonzero(need & (reason != ""))
    probs.add("warning", "compaction-constants", miss, "soil_order|lithology",
              fmt_values(pd.Series(reason[miss])), pd.Series(reason[miss]) +
              "; `refit apply --decompact` will skip this row. Give initial_solidity and "
              "compaction_k_per_km, or a constants file (--compaction-constants).")


def _col(work: pd.DataFrame, name: str) -> pd.Series:
    if name in work.columns:
        return pd.to_numeric(work[name], errors="coerce")
    return pd.Series(np.nan, index=work.index, dtype="float64")


def _text_col(work: pd.DataFrame, name: str) -> pd.Series:
    if name in work.columns:
        return work[name].astype("string").str.strip()
    return pd.Series(pd.NA, index=work.index, dtype="string")


def resolve_constants(work: pd.DataFrame, constants: dict):
    """Compaction constants per row: per-row values, else the soil order's, else the
    lithology's.

    Returns
    -------
    tuple of numpy.ndarray
        ``initial_solidity``, ``k_per_km`` (NaN where none), ``label`` (the key used and
        the status of the numbers) and ``reason`` (why there are none; "" where found).
    """
    n = len(work)
    si, k = _col(work, "initial_solidity").to_numpy(), _col(work, "compaction_k_per_km")
    k = k.to_numpy()
    label = np.full(n, "", dtype=object)
    reason = np.full(n, "", dtype=object)
    own = ~np.isnan(si) & ~np.isnan(k)
    label[own] = "per-row constants (" + dc.STATUS_USER + ")"
    si, k = si.copy(), k.copy()
    order, lith = _text_col(work, "soil_order"), _text_col(work, "lithology")
    for i in np.flatnonzero(~own):
        keys = [v for v in (order.iloc[i], lith.iloc[i]) if not pd.isna(v) and v]
        hit = next((constants[v] for v in keys if v in constants), None)
        if hit is None:
            reason[i] = _no_constants(keys, constants)
            continue
        si[i], k[i] = hit.initial_solidity, hit.k_per_km
        label[i] = f"{hit.key} ({hit.status}; {hit.source})"
    return si, k, label, reason


def _no_constants(keys: list, constants: dict) -> str:
    """Why a row has no compaction constants: what it names is not known, or it names
    nothing to look them up by."""
    known = ", ".join(sorted(constants)) or "none"
    if not keys:
        return ("neither soil_order nor lithology is given, so no compaction constants can "
                f"be looked up (constants are known for: {known})")
    named = " or ".join(repr(v) for v in keys)
    return f"no compaction constants for {named} (known: {known})"


def decompact_frame(work: pd.DataFrame, constants: dict | None = None):
    """Decompact the depths and thicknesses of a checked fossil frame.

    Parameters
    ----------
    work : pandas.DataFrame
        Checked fossil frame (``CheckReport.frame``).
    constants : dict, optional
        Extra compaction constants by key (user constants win over the built-in ones).

    Returns
    -------
    frame : pandas.DataFrame
        Copy of ``work`` with the depths and thicknesses decompacted.
    record : pandas.DataFrame
        Per row: ``paleosol_id``, for each column ``<col>_measured`` and ``<col>``
        (decompacted) [cm], ``burial_depth_km``, ``compaction_constants`` (key and status),
        ``initial_solidity``, ``compaction_k_per_km``, ``compaction_ratio`` and
        ``decompaction_problem`` (why a row was not decompacted; "" if it was).
    """
    table = dc.constants_table(constants)
    cols = [c for c in dc.DECOMPACTED_COLUMNS if c in work.columns]
    si, k, label, reason = resolve_constants(work, table)
    burial = _col(work, "burial_depth_km").to_numpy()
    reason = reason.copy()
    no_burial = np.isnan(burial)
    reason[no_burial] = "no burial depth (burial_depth_km is empty)"
    # never buried: no constants needed, nothing changes
    zero = burial == 0
    si = np.where(zero & np.isnan(si), 1.0, si)
    k = np.where(zero & np.isnan(k), 0.0, k)
    label = np.where(zero & (label == ""), "not buried (no change)", label)
    reason[zero] = ""
    ratio = dc.compaction_ratio(burial, si, k)
    out = work.copy()
    rec = {ID: _text_col(work, ID).to_numpy(dtype=object)}
    for c in cols:
        measured = _col(work, c).to_numpy()
        rec[f"{c}_measured"] = measured
        out[c] = measured / ratio
        rec[c] = out[c].to_numpy()
    rec.update({"burial_depth_km": burial, "compaction_constants": label,
                "initial_solidity": si, "compaction_k_per_km": k,
                "compaction_ratio": ratio, "decompaction_problem": reason})
    return out, pd.DataFrame(rec, index=work.index)


def read_fossils(path: str | Path, *, vocabularies=None, constants=None,
                 ignore_columns=None, consumed=()):
    """Check a fossil table for ``apply``/``compare``; see :func:`check_fossil_file`.

    Raises
    ------
    InvalidDataError
        A column looks like a measurement SD but maps to no feature (``unmapped-sd-column``)
        and is not in ``ignore_columns``: the intervals would silently be too narrow.
    """
    from refit.errors import InvalidDataError

    report = check_fossil_file(path, vocabularies=vocabularies, constants=constants,
                               ignore_columns=ignore_columns, consumed=consumed)
    stop = report.problems[report.problems["rule"] == "unmapped-sd-column"]
    if len(stop):
        raise InvalidDataError(f"{path}: " + " ".join(stop["message"]) + " Nothing was "
                               "applied.")
    return report
