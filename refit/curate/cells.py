"""Parse the cells of a table before the column rules run: numbers, dates and text.

Internal to :mod:`refit.curate.checks`. Text in a numeric column is reported as ``not-a-number``
with the text as typed, infinity as ``not-finite`` and a malformed date as ``not-a-date``;
the reported cells are flagged so that pandera's echo of them is dropped later.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from refit.curate import schema as _schema
from refit.curate.problems import Problems, column_hint, fmt_values


def _dup_mask(columns: pd.Index) -> np.ndarray:
    return np.asarray(columns.duplicated())


def parse_cells(frame: pd.DataFrame, rows: np.ndarray, desc: dict):
    """Copy with a RangeIndex, parsed cells and the problems collector."""
    work = frame.loc[:, ~_dup_mask(frame.columns)].copy(deep=False)
    work.index = pd.RangeIndex(len(work))
    ids = work["profile_id"] if "profile_id" in work.columns else None
    probs = Problems(rows, None)
    for name in pd.unique(frame.columns[_dup_mask(frame.columns)]):
        probs.add_table("error", "duplicate-column", str(name),
                        f"two or more columns are named {name!r}; refit checked the "
                        "first one. Rename or remove the others.")
    fields = _schema.fields(desc)
    missing_tokens = list(desc.get("missingValues", [""]))
    if ids is not None:
        work["profile_id"] = _parse_text(ids, missing_tokens)
        probs.ids = work["profile_id"]
    for name in work.columns:
        if name not in fields or name in ("profile_id", "notes"):  # notes: free text
            continue
        kind = fields[name].get("type", "string")
        if kind in ("number", "integer"):
            work[name] = _parse_number_column(work[name], name, missing_tokens, probs)
        elif kind == "date":
            work[name] = _parse_date_column(work[name], name, missing_tokens, probs)
        else:
            work[name] = _parse_text(work[name], missing_tokens)
    return work, probs


def _parse_text(s: pd.Series, missing_tokens: list[str]) -> pd.Series:
    """Text with surrounding spaces removed; missing tokens become NaN."""
    if pd.api.types.is_numeric_dtype(s) and not pd.api.types.is_bool_dtype(s):
        vals = s.astype("float64")
        finite = vals.dropna()
        if (finite == np.floor(finite)).all() and (finite.abs() < 2**53).all():
            return vals.astype("Int64").astype("str")
        return vals.astype("str").where(vals.notna())
    text = s.astype("str")
    if _few_distinct(text):  # clean the distinct values only (fast for vocabularies)
        seen = [v for v in text.unique() if isinstance(v, str)]
        fix = {v: (None if v.strip() in missing_tokens else v.strip()) for v in seen
               if v.strip() != v or v in missing_tokens}
        if not fix:
            return text
        mask = text.isin(list(fix))
        text = text.copy()
        text[mask] = text[mask].map(fix)
        return text
    text = text.str.strip()
    return text.where(~text.isin(missing_tokens))


def _few_distinct(text: pd.Series, sample: int = 10_000) -> bool:
    """True when a column looks like a vocabulary (few distinct values in a sample)."""
    head = text.iloc[:sample]
    return len(text) > sample and head.nunique() < sample // 20


def _parse_number_column(s, name, missing_tokens, probs: Problems) -> pd.Series:
    """float64 values; reports text ('not-a-number') and infinity ('not-finite')."""
    if pd.api.types.is_numeric_dtype(s):
        num = s.astype("float64")
    else:  # parse everything, then look closer only at the cells that failed
        num = pd.to_numeric(s, errors="coerce").astype("float64")
        failed = np.flatnonzero((num.isna() & s.notna()).to_numpy())
        text = s.iloc[failed].astype("str").str.strip()
        bad = ~text.isin(missing_tokens).to_numpy()
        if bad.any():
            pos, vals = failed[bad], text[bad]
            probs.add("error", "not-a-number", pos, name, vals,
                      "'" + vals + f"' in {name} is not a number. " + _number_fix(name))
            probs.flag(pos, name)
    inf = np.isinf(num.to_numpy())
    if inf.any():
        pos = np.flatnonzero(inf)
        probs.add("error", "not-finite", pos, name, fmt_values(num.iloc[pos]),
                  f"{name} is infinite; a measurement must be a finite number. Enter the "
                  "value, or leave the cell empty if it was not measured.")
        probs.flag(pos, name)
        num = num.where(~inf)
    return num


def _number_fix(name: str) -> str:
    return ("Write the number alone with a decimal point (e.g. 12.5, not '12,5' or "
            f"'12.5 cm'), put the unit in the column name. {column_hint(name)}Leave the "
            "cell empty if it was not measured.")


def _parse_date_column(s, name, missing_tokens, probs: Problems) -> pd.Series:
    """ISO text; reports cells that are not a YYYY-MM-DD date ('not-a-date')."""
    if pd.api.types.is_datetime64_any_dtype(s):
        return s.dt.strftime("%Y-%m-%d").where(s.notna())
    text = _parse_text(s, missing_tokens)
    if s.dtype == object:  # date or datetime objects from a spreadsheet or parquet
        text = text.str.replace(r"^(\d{4}-\d{2}-\d{2})[ T]00:00:00$", r"\1", regex=True)
    seen = pd.Series([v for v in text.unique() if isinstance(v, str)], dtype="str")
    parsed = pd.to_datetime(seen, format="%Y-%m-%d", errors="coerce")
    bad = text.isin(seen[parsed.isna().to_numpy()].tolist())
    if bad.any():
        pos = np.flatnonzero(bad.to_numpy())
        vals = text.iloc[pos]
        probs.add("error", "not-a-date", pos, name, vals,
                  "'" + vals + f"' in {name} is not a date; write it as YYYY-MM-DD "
                  "(ISO 8601), e.g. 2024-05-31.")
        probs.flag(pos, name)
    return text
