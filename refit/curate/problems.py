"""The problems table of a check: collecting, wording and translating pandera's failures.

Internal to :mod:`refit.curate.checks`. Problems are collected as arrays (only for failing cells,
so a clean million-row table costs nothing here) and turned into one DataFrame at the end.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

PROBLEM_COLUMNS = ["severity", "rule", "row", "profile_id", "column", "value", "message"]


def fmt_values(values) -> pd.Series:
    """Numbers as short text: 95 not 95.0, 12.5 stays 12.5, NaN as ''.

    Each distinct value is formatted once, so long runs of repeated values are cheap.
    """
    s = pd.Series(values) if not isinstance(values, pd.Series) else values
    v = pd.to_numeric(s, errors="coerce").to_numpy(dtype="float64")
    codes, uniques = pd.factorize(v)  # NaN gets code -1
    texts = np.array([_fmt_number(x) for x in uniques] + [""], dtype=object)
    return pd.Series(texts[codes], index=s.index, dtype=object)


def _fmt_number(x: float) -> str:
    if np.isfinite(x) and x == round(x) and abs(x) < 2**53:
        return str(int(x))
    return repr(float(x))


def column_hint(name: str) -> str:
    """A sentence on the column's unit and the usual mistakes (ends with a space)."""
    if name in ("latitude", "longitude"):
        return ("Coordinates are decimal degrees (e.g. -33.45), south and west negative; "
                "check that latitude and longitude are not swapped. ")
    if name.endswith("_cm"):
        return ("Depths and thicknesses are cm below the surface; a value in m, mm or "
                "inches needs that unit in the column name (e.g. bk_depth_m) so refit "
                "converts it. ")
    if name in ("map_mm", "mar_mm"):
        return ("Precipitation is mm per year; inches or cm need that unit in the column "
                "name (e.g. map_in) so refit converts it. ")
    if name == "mat_c":
        return "Temperature is degrees Celsius; Fahrenheit needs the column name mat_f. "
    if name.endswith("_wt"):
        return "Oxides are weight percent (0-100), not ppm or fractions. "
    if name == "slope_deg":
        return "Slope is in degrees (0-90), not percent. "
    if name == "age_ka":
        return "Age is in thousands of years (ka). "
    if name == "elevation_m":
        return "Elevation is metres above sea level. "
    return ""


class Problems:
    """Collects problems as arrays; :meth:`build` makes the problems table."""

    def __init__(self, rows: np.ndarray, ids: pd.Series | None) -> None:
        self.rows = rows
        self.ids = ids
        self._parts: list[dict[str, Any]] = []
        self._flagged: dict[str, list[np.ndarray]] = {}

    def add(self, severity, rule, pos, column, values, message) -> None:
        """Problems on cells at positions ``pos`` (0-based) of one column."""
        pos = np.asarray(pos, dtype="int64")
        if not len(pos):
            return
        vals = values.to_numpy(dtype=object) if isinstance(values, pd.Series) else \
            np.asarray(values, dtype=object)
        msg = (message.to_numpy(dtype=object) if isinstance(message, pd.Series)
               else np.full(len(pos), message, dtype=object))
        ids = (self.ids.iloc[pos].to_numpy(dtype=object) if self.ids is not None
               else np.full(len(pos), None, dtype=object))
        self._parts.append({
            "severity": np.full(len(pos), severity, dtype=object),
            "rule": np.full(len(pos), rule, dtype=object),
            "row": self.rows[pos].astype("float64"), "profile_id": ids,
            "column": np.full(len(pos), column, dtype=object), "value": vals,
            "message": msg, "_order": np.full(len(pos), len(self._parts))})

    def add_table(self, severity, rule, column, message, value="") -> None:
        """A problem about the whole table (row <NA>)."""
        self._parts.append({
            "severity": np.array([severity], dtype=object),
            "rule": np.array([rule], dtype=object), "row": np.array([np.nan]),
            "profile_id": np.array([None], dtype=object),
            "column": np.array([column], dtype=object),
            "value": np.array([value], dtype=object),
            "message": np.array([message], dtype=object),
            "_order": np.array([len(self._parts)])})

    def add_frame(self, frame: pd.DataFrame) -> None:
        """Add problems given as a frame with columns severity, rule, position (0-based,
        <NA> for table-level), column, value, message."""
        if frame.empty:
            return
        table = frame["position"].isna()
        for rec in frame[table].to_dict(orient="records"):
            self.add_table(rec["severity"], rec["rule"], rec["column"], rec["message"],
                           rec["value"])
        cells = frame[~table]
        for (sev, rule, col), grp in cells.groupby(["severity", "rule", "column"],
                                                   sort=False):
            self.add(sev, rule, grp["position"].to_numpy(dtype="int64"), col,
                     grp["value"], grp["message"])

    def flag(self, pos, column: str) -> None:
        """Remember cells already reported, so pandera's echo of them is dropped."""
        self._flagged.setdefault(column, []).append(np.asarray(pos, dtype="int64"))

    def is_flagged(self, pos: np.ndarray, column: str) -> np.ndarray:
        if column not in self._flagged:
            return np.zeros(len(pos), dtype=bool)
        return np.isin(pos, np.concatenate(self._flagged[column]))

    def flagged_mask(self, column: str, n: int) -> np.ndarray:
        mask = np.zeros(n, dtype=bool)
        for pos in self._flagged.get(column, []):
            mask[pos] = True
        return mask

    def build(self) -> pd.DataFrame:
        """The problems table: errors first, table-level before rows, then by row."""
        if not self._parts:
            out = pd.DataFrame({c: pd.Series(dtype="str") for c in PROBLEM_COLUMNS})
            out["row"] = out["row"].astype("Int64")
            return out
        cols = {k: np.concatenate([p[k] for p in self._parts]) for k in self._parts[0]}
        sev = (cols["severity"] != "error").astype(int)
        row_key = np.where(np.isnan(cols["row"]), -1.0, cols["row"])
        order = np.lexsort((cols["_order"], row_key, sev))
        out = pd.DataFrame({c: cols[c][order] for c in PROBLEM_COLUMNS})
        out["row"] = pd.array(out["row"].to_numpy(), dtype="Int64")
        value = out["value"]
        out["value"] = value.where(value.notna(), "").astype("str")
        return out


def translate_failures(fc: pd.DataFrame, work: pd.DataFrame, probs: Problems,
                       fields: dict[str, dict]) -> None:
    """Turn pandera's ``failure_cases`` into problems (skipping cells already reported)."""
    missing = fc.loc[fc["check"] == "column_in_dataframe", "failure_case"].astype(str)
    missing_list = ", ".join(missing)
    for name in missing:
        probs.add_table("error", "required-column", name,
                        f"required column {name!r} is missing (missing: {missing_list}); "
                        f"add it ({fields.get(name, {}).get('description', '').rstrip('.')}). A column "
                        "under another name or unit (e.g. 'Latitude', 'lat') is mapped "
                        "when it is a known synonym.")
    cells = fc[(fc["check"] != "column_in_dataframe") & fc["index"].notna()]
    for (column, check), grp in cells.groupby(["column", "check"], sort=False):
        pos = grp["index"].to_numpy(dtype="int64")
        keep = ~probs.is_flagged(pos, column)
        pos, values = pos[keep], grp["failure_case"].to_numpy(dtype=object)[keep]
        if len(pos):
            _translate_one(str(column), str(check), pos, values, work, probs,
                           fields.get(column, {}))


def _translate_one(column, check, pos, values, work, probs: Problems, field) -> None:
    if check == "not_nullable":
        probs.add("error", "required-value", pos, column, [""] * len(pos),
                  f"{column} is required but empty in this row; fill it in or remove "
                  "the row.")
    elif check == "field_uniqueness":
        _unique_problems(column, pos, values, probs)
    elif check.startswith(("in_range", "greater_than", "less_than")):
        text = fmt_values(pd.Series(values))
        probs.add("error", "range", pos, column, text,
                  f"{column} " + text + f" is outside {_range_text(field)}. "
                  + column_hint(column) + "Fix the value or remove the row.")
    elif check.startswith("isin"):
        allowed = ", ".join(field.get("constraints", {}).get("enum", []))
        probs.add("error", "vocabulary", pos, column, pd.Series(values).astype(str),
                  f"not an allowed {column}; allowed: {allowed}.")
    else:
        probs.add("error", "schema", pos, column, pd.Series(values).astype(str),
                  f"{column} fails the schema check {check}.")


def _range_text(field: dict) -> str:
    cons, unit = field.get("constraints", {}), field.get("unit", "")
    unit = {"degree": "degrees", "percent": "wt%", "degC": "°C"}.get(unit, unit)
    lo, hi = cons.get("minimum"), cons.get("maximum")
    if lo is not None and hi is not None:
        return f"the range {lo:g} to {hi:g} {unit}".rstrip()
    if lo is not None:
        return f"the range: at least {lo:g} {unit}".rstrip()
    return f"the range: at most {hi:g} {unit}".rstrip()


def _unique_problems(column, pos, values, probs: Problems) -> None:
    present = pd.notna(values)
    pos, values = pos[present], values[present].astype(str)
    if not len(pos):
        return
    rows = pd.Series(probs.rows[pos]).astype(str)
    listed = rows.groupby(values).agg(lambda r: ", ".join(r.iloc[:10]) + (
        f" and {len(r) - 10} more" if len(r) > 10 else ""))
    where = pd.Series(values).map(listed)
    probs.add("error", "unique-id", pos, column, values,
              f"{column} '" + pd.Series(values) + "' is used by rows " + where
              + f"; every {'paleosol' if column == 'paleosol_id' else 'profile'} needs its own "
              "id. Rename one or remove the duplicate.")


#: Row numbers listed in one group of problems before "and N more".
GROUP_ROWS_SHOWN = 10


def group_problems(problems: pd.DataFrame, rows_shown: int = GROUP_ROWS_SHOWN) -> pd.DataFrame:
    """One block per (severity, rule, column, value): its count, rows and one message.

    The per-row detail stays in the problems table (and in an admit's problems file); this
    is what people read: a vocabulary term misspelt in 156 rows is one block, its fix said
    once.

    Returns
    -------
    pandas.DataFrame
        ``severity``, ``rule``, ``column``, ``value``, ``count`` (distinct rows; 1 for a
        table-level problem), ``rows`` (text: the first ``rows_shown`` file rows, then "and
        N more"; "" for table-level problems), ``profile_id`` (of a single-row block, else
        ""), ``message`` (the first one; a single row's distinct messages joined, e.g. the
        same value held by two reference pairs), in the order of the problems table (errors
        first).
    """
    cols = ["severity", "rule", "column", "value", "count", "rows", "profile_id", "message"]
    if problems.empty:
        return pd.DataFrame({c: pd.Series(dtype="object") for c in cols})
    frame = problems.reset_index(drop=True)
    value = frame["value"].astype(str)
    table = frame["row"].isna().to_numpy()
    # table-level problems each stay a block of their own
    keys = pd.Series(np.where(table, "#" + frame.index.astype(str), ""), index=frame.index)
    grouped = frame.assign(_v=value, _k=keys).groupby(
        ["severity", "rule", "column", "_v", "_k"], sort=False, dropna=False)
    out = []
    for (sev, rule, col, val, _), grp in grouped:
        # a row found by two checks of one rule (e.g. two reference pairs) is one row
        rows = list(dict.fromkeys(grp["row"].dropna().astype("int64").tolist()))
        text = ", ".join(map(str, rows[:rows_shown]))
        if len(rows) > rows_shown:
            text += f" and {len(rows) - rows_shown} more"
        one = len(rows) == 1 or len(grp) == 1
        pid = grp["profile_id"].iloc[0] if one else ""
        messages = list(dict.fromkeys(grp["message"].astype(str)))
        message = " ".join(messages) if len(rows) == 1 else messages[0]
        out.append({"severity": sev, "rule": rule, "column": col, "value": val,
                    "count": len(rows) or len(grp), "rows": text,
                    "profile_id": "" if pid is None or pid != pid else str(pid),
                    "message": message, "_first": grp.index[0]})
    res = pd.DataFrame(out)
    sev_order = (res["severity"] != "error").astype(int)
    res = res.assign(_s=sev_order).sort_values(["_s", "_first"], kind="stable")
    return res[cols].reset_index(drop=True)
