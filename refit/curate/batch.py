"""The accounting of one admitted batch: its problems, reasons, quarantine bytes.

Internal to :mod:`refit.curate.store`. A row is quarantined for its errors (severity
``error``) or as a suspect (severity ``suspect``, see :mod:`refit.curate.consistency`); both
kinds of reason go into the quarantine file's ``_reasons``.
"""

from __future__ import annotations

import csv
import io

import numpy as np
import pandas as pd

#: Severities that hold a row back (quarantine).
HOLDING = ("error", "suspect")


def records_bytes(frame: pd.DataFrame) -> bytes:
    """records.csv bytes for a text frame (UTF-8, ``\\n`` line ends, minimal quoting)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    writer.writerow(list(frame.columns))
    writer.writerows(frame.itertuples(index=False, name=None))
    return buf.getvalue().encode("utf-8")


def _all_problems(report, dups: list[dict], source_rows: np.ndarray) -> pd.DataFrame:
    from refit.curate.problems import PROBLEM_COLUMNS

    ids = report.frame["profile_id"] if "profile_id" in report.frame else None
    extra = pd.DataFrame([{
        "severity": "error", "rule": d["rule"], "row": int(source_rows[d["pos"]]),
        "profile_id": None if ids is None else ids.iloc[d["pos"]],
        "column": d["column"], "value": d["value"], "message": d["message"]} for d in dups],
        columns=PROBLEM_COLUMNS)
    parts = [p for p in (report.problems[PROBLEM_COLUMNS], extra) if len(p)]
    if not parts:
        return report.problems[PROBLEM_COLUMNS].copy()
    out = pd.concat(parts, ignore_index=True)
    out["row"] = out["row"].astype("Int64")
    return out


def _reason_counts(problems: pd.DataFrame, rejected_rows: np.ndarray) -> dict[str, int]:
    """Rule -> number of rejected rows with an error of that rule."""
    err = problems[(problems["severity"] == "error") & problems["row"].isin(rejected_rows)]
    counts = err.drop_duplicates(["rule", "row"])["rule"].value_counts()
    return {str(k): int(v) for k, v in counts.items()}


def _warning_counts(problems: pd.DataFrame) -> dict[str, int]:
    counts = problems.loc[problems["severity"] == "warning", "rule"].value_counts()
    return {str(k): int(v) for k, v in counts.items()}


def _row_reasons(problems: pd.DataFrame) -> dict[int, list[str]]:
    """Source row -> "rule (column 'name in the file'): message" for each of its errors."""
    out: dict[int, list[str]] = {}
    err = problems[problems["severity"].isin(HOLDING) & problems["row"].notna()]
    for row, rule, col, message in zip(err["row"], err["rule"], err["file_column"],
                                       err["message"]):
        where = f" (column {col!r})" if col else ""
        out.setdefault(int(row), []).append(f"{rule}{where}: {message}")
    return out


def _rejected_rows(problems, frame, source_rows, rejected) -> list[dict]:
    reasons = _row_reasons(problems)
    ids = frame["profile_id"] if "profile_id" in frame else pd.Series(None, index=frame.index)
    return [{"row": int(source_rows[p]), "profile_id": _cell(ids.iloc[p]),
             "reasons": reasons.get(int(source_rows[p]), [])}
            for p in np.flatnonzero(rejected)]


def _quarantine_bytes(incoming, rejected, problems, source_rows) -> bytes:
    """The rejected rows exactly as read, plus ``_reasons`` and ``_source_row``."""
    reasons = _row_reasons(problems)
    rows = incoming.loc[rejected].astype(str).copy()
    rows["_reasons"] = ["; ".join(reasons.get(int(r), [])) for r in source_rows[rejected]]
    rows["_source_row"] = [str(int(r)) for r in source_rows[rejected]]
    return records_bytes(rows)


def _cell(value) -> str:
    """Text of one stored cell: '' for missing, numbers without float noise."""
    if value is None or value is pd.NA or value is pd.NaT:
        return ""
    if isinstance(value, (float, np.floating)):
        if value != value:
            return ""
        if float(value).is_integer() and abs(value) < 1e15:
            return str(int(value))
        return f"{float(value):.12g}"
    if isinstance(value, (np.integer,)):
        return str(int(value))
    return str(value)
