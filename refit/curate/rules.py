"""Shared by the checks of calibration and fossil tables: the report and the common rules.

:class:`CheckReport` is the outcome of any check; :func:`run_pandera` runs a table
descriptor's column rules through pandera (with a fast pre-scan); :func:`check_oxide_total`
is the oxide-total rule both table kinds apply. :mod:`refit.curate.checks` (calibration
tables, and the entry points for every kind) and :mod:`refit.curate.fossils` both import
this module; it imports neither.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from refit.curate import schema as _schema
from refit.curate.problems import Problems, fmt_values
from refit.curate.vocabularies import VOCABULARY_COLUMNS


#: the key of the row's id in :meth:`CheckReport.to_dict` by table kind (the problems frame
#: calls it ``profile_id`` for both; a fossil table's rows are paleosols)
ID_KEY = {"fossil": "paleosol_id"}


@dataclass
class CheckReport:
    """The outcome of checking one table.

    The rules are listed in :mod:`refit.curate.checks` (calibration tables) and
    :mod:`refit.curate.fossils` (fossil tables); ``kind`` says which table it was.
    """

    problems: pd.DataFrame
    frame: pd.DataFrame
    n_rows: int
    path: str | None = None
    notes: list[str] = field(default_factory=list)
    source_rows: np.ndarray | None = field(default=None, repr=False)
    kind: str = "calibration"

    @property
    def errors(self) -> pd.DataFrame:
        return self.problems[self.problems["severity"] == "error"]

    @property
    def warnings(self) -> pd.DataFrame:
        return self.problems[self.problems["severity"] == "warning"]

    @property
    def ok(self) -> bool:
        """True when there is no error (warnings allowed)."""
        return not (self.problems["severity"] == "error").any()

    def table_errors(self) -> pd.DataFrame:
        """Errors about the whole table (row <NA>), e.g. missing required columns."""
        err = self.errors
        return err[err["row"].isna()]

    def bad_rows(self) -> pd.Index:
        """Index labels of ``frame`` rows that carry at least one row-level error."""
        rows = self.errors["row"].dropna().astype("int64").unique()
        source = self.source_rows if self.source_rows is not None else default_rows(
            self.n_rows)
        return self.frame.index[np.isin(source, rows)]

    def summary(self) -> pd.DataFrame:
        """Count of problems per rule: columns ``rule``, ``severity``, ``count``."""
        if self.problems.empty:
            return pd.DataFrame({"rule": [], "severity": [], "count": []}).astype(
                {"rule": "str", "severity": "str", "count": "int64"})
        out = (self.problems.groupby(["severity", "rule"], sort=False).size()
               .rename("count").reset_index())
        return out[["rule", "severity", "count"]].sort_values(
            ["severity", "count", "rule"], ascending=[True, False, True],
            ignore_index=True)

    def to_dict(self) -> dict[str, Any]:
        """A JSON-ready dict: path, counts, summary, every problem and the notes."""
        probs = self.problems.astype(object).where(self.problems.notna(), None)
        return {
            "path": self.path,
            "kind": self.kind,
            "n_rows": int(self.n_rows),
            "ok": bool(self.ok),
            "n_errors": int(len(self.errors)),
            "n_warnings": int(len(self.warnings)),
            "n_bad_rows": int(len(self.bad_rows())),
            "summary": [
                {"rule": r, "severity": s, "count": int(c)}
                for r, s, c in self.summary().itertuples(index=False)
            ],
            "problems": [
                {(ID_KEY.get(self.kind, k) if k == "profile_id" else k):
                 (int(v) if k == "row" and v is not None else v) for k, v in rec.items()}
                for rec in probs.to_dict(orient="records")
            ],
            "notes": list(self.notes),
        }


def default_rows(n: int) -> np.ndarray:
    """File rows ``2, 3, ...`` of ``n`` data rows read without a reader (a csv whose header
    is on row 1, so data start on row 2)."""
    return np.arange(n, dtype="int64") + 2


#: Let a vectorised pre-scan skip the columns that certainly pass (see run_pandera).
PRESCREEN = True


def run_pandera(work: pd.DataFrame, probs: Problems, desc: dict) -> None:
    """Column rules from the descriptor ``desc``, via pandera lazy validation; failures
    are added to ``probs``.

    For speed (a million rows in well under a second), checks whose outcome is already
    known are dropped at run time; the schema itself keeps them (tests/curate/test_schema.py)
    and a test asserts the same problems with and without this shortcut:

    - a column that certainly passes (a numpy pre-scan of the descriptor's bounds, its
      nullability and, for ``profile_id``, a hash count for duplicates) is not handed
      to pandera; pandera validates the columns that may fail and reports the failures;
    - when every required column is present and every column certainly passes, pandera
      has nothing to do and is not even imported (a clean table checks faster);
    - the closed-list ``isin`` checks, which :func:`check_vocabularies` already ran.
    """
    fields = _schema.fields(desc)
    keys = _schema.primary_key(desc)
    required = [n for n, f in fields.items() if _schema.is_required(f, keys)]
    if PRESCREEN and all(n in work.columns for n in required) and all(
            _surely_passes(work[n], f, keys) for n, f in fields.items() if n in work.columns):
        return
    import pandera.errors as pe

    from refit.curate.problems import translate_failures

    schema = _schema.build_schema(desc, columns=work.columns)
    updates, passing = {}, []
    for name, col in schema.columns.items():
        if name not in work.columns:
            continue  # a missing required column: pandera reports it
        if PRESCREEN and _surely_passes(work[name], fields[name], keys):
            passing.append(name)
            continue
        if col.unique and pd.Index(work[name]).is_unique:
            updates.setdefault(name, {})["unique"] = False
        if name in VOCABULARY_COLUMNS and any(str(c.name) == "isin" for c in col.checks):
            updates.setdefault(name, {})["checks"] = [
                c for c in col.checks if str(c.name) != "isin"]
    schema = schema.remove_columns(passing)
    if updates:
        schema = schema.update_columns(updates)
    try:
        schema.validate(work, lazy=True, inplace=True)
    except pe.SchemaErrors as exc:
        translate_failures(exc.failure_cases, work, probs, fields)


def _surely_passes(values: pd.Series, field: dict, keys: list[str]) -> bool:
    """True when the column certainly passes the pandera checks its descriptor field
    makes (:func:`refit.curate.schema.column_for`); a fast pre-scan that needs no pandera."""
    cons = field.get("constraints", {})
    if "enum" in cons and field["name"] not in VOCABULARY_COLUMNS:
        return False  # a closed list the pre-scan does not run: let pandera check it
    if _schema.is_required(field, keys) and values.isna().any():
        return False
    if _schema.is_unique(field, keys) and not pd.Index(values).is_unique:
        return False
    if field.get("type") in ("number", "integer"):
        if str(values.dtype) != "float64":
            return False
        arr = values.to_numpy()
        with np.errstate(invalid="ignore"):
            if "minimum" in cons and (arr < cons["minimum"]).any():
                return False
            if "maximum" in cons and (arr > cons["maximum"]).any():
                return False
    return True


def _rounded(values: np.ndarray, decimals: int) -> np.ndarray:
    """``values`` rounded to ``decimals`` (no float noise such as ...00001 in a message);
    a value too large to scale by 10**decimals is kept as it is (it has no decimals to
    round), never turned into inf with an overflow warning."""
    with np.errstate(over="ignore", invalid="ignore"):
        out = np.round(values, decimals)
    return np.where(np.isfinite(out), out, values)


def check_oxide_total(work: pd.DataFrame, probs: Problems, desc: dict) -> None:
    """Rule ``oxide-total``: the ``*_wt`` oxide columns of ``desc`` present in ``work`` add
    up to more than the descriptor's ``oxide_total_max_wt`` (default 101 wt%) in a row."""
    oxides = [c for c in _schema.fields(desc) if c.endswith("_wt") and c in work.columns]
    if not oxides:
        return
    limit = float(_schema.refit_rules(desc).get("oxide_total_max_wt", 101.0))
    total = np.zeros(len(work))
    for c in oxides:
        total += np.nan_to_num(work[c].to_numpy(dtype="float64"), nan=0.0)
    total = pd.Series(total, index=work.index)
    pos = np.flatnonzero((total > limit).to_numpy())
    if len(pos):
        shown = fmt_values(_rounded(total.iloc[pos].to_numpy(), 6))
        probs.add("error", "oxide-total", pos, "+".join(oxides), shown,
                  "the oxides add up to " + shown
                  + f" wt% (more than {limit:g}); check for a value in ppm or a "
                  "misplaced decimal point, and that the oxides are weight percent.")


__all__ = ["CheckReport", "default_rows", "run_pandera", "check_oxide_total", "PRESCREEN"]
