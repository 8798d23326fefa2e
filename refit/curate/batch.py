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

from refit.errors import InvalidDataError


class AlreadyAdmittedError(InvalidDataError):
    """The file's SHA-256 is already in the store's changelog (exit code 1)."""


#: Severities that hold a row back (quarantine).
HOLDING = ("error", "suspect")


def records_bytes(frame: pd.DataFrame, *, header: bool = True) -> bytes:
    """records.csv bytes for a text frame (UTF-8, ``\\n`` line ends, minimal quoting);
    ``header=False`` gives the rows alone (to append to a file with the same columns)."""
    buf = io.StringIO()
    writer = csv.writer(buf, lineterminator="\n")
    if header:
        writer.writerow(list(frame.columns))
    writer.writerows(frame.to_numpy(dtype=object).tolist())
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


def _refuse_readmit(store, table, again: bool) -> None:
    """Stop when the file's sha256 is already in the changelog (unless ``again``)."""
    earlier = [e for e in store.manifest.get("changelog", [])
               if e.get("source_sha256") == table.sha256]
    if not earlier or again:
        return
    e = earlier[-1]
    what = ("an attempt that accepted nothing" if e.get("kind") == "attempt" else
            f"version {e['version']}")
    raise AlreadyAdmittedError(
        f"{table.path} was already admitted into {store.path}: the same file (sha256 "
        f"{table.sha256[:12]}...) came in as {e.get('source_file')!r} on {e.get('date')} "
        f"({what}: {e.get('accepted')} accepted, {e.get('rejected')} rejected). Nothing was "
        "written; pass --again to admit it once more (its rows would then be caught as "
        "duplicates of the stored ones).")


def _screen(report, records, incoming, table, rejected, problems, units, accept_suspect):
    """The consistency test of the rows not already rejected: (suspect mask, problems
    with the suspects added, the AdmitResult fields it fills); ``records``: the store's
    typed records (the columns of the tests at least)."""
    from refit.curate.columns import parse_column, unmapped_columns
    from refit.curate.problems import PROBLEM_COLUMNS, group_problems
    from refit.curate.slips import screen_batch
    from refit.curate.units import column_origins

    n = len(report.frame)
    origins = column_origins(incoming.columns, parse_column)
    confirmed = {origins_target for origins_target, (col, _) in origins.items()
                 if col in units or origins_target in units}
    # every row is scored (a slip also trips range and plausibility errors: the score then
    # says which unit the value fits in); only rows without errors count as suspect
    suspects, notes = screen_batch(report.frame.reset_index(drop=True), records,
                                   origins, confirmed, np.ones(n, dtype=bool), table.path,
                                   table.source_rows)
    suspect = np.zeros(n, dtype=bool)
    rows = []
    for item in suspects:
        suspect[item["pos"]] = not accept_suspect and not rejected[item["pos"]]
        ids = report.frame["profile_id"] if "profile_id" in report.frame else None
        rows.append({"severity": "suspect" if suspect[item["pos"]] or rejected[item["pos"]]
                     else "warning",
                     "rule": "suspect-residual",
                     "row": int(table.source_rows[item["pos"]]),
                     "profile_id": None if ids is None else ids.iloc[item["pos"]],
                     "column": item["column"], "value": f"{item['value']:g}",
                     "message": item["message"],
                     "file_column": origins.get(item["column"], (item["column"],))[0],
                     "outcome": "quarantined" if suspect[item["pos"]] or rejected[item["pos"]]
                     else "admitted"})
    held_rows = table.source_rows[suspect]
    problems["outcome"] = np.where(problems["row"].isin(held_rows), "quarantined",
                                   problems["outcome"])
    if rows:
        extra = pd.DataFrame(rows, columns=[*PROBLEM_COLUMNS, "file_column", "outcome"])
        extra["row"] = extra["row"].astype("Int64")
        problems = pd.concat([problems, extra], ignore_index=True)
    unmapped = unmapped_columns(incoming.columns, "calibration")
    quarantined = problems["outcome"] == "quarantined"
    shown = problems[problems["row"].isna() | (quarantined & problems["severity"].isin(
        ("error", "suspect"))) | (~quarantined & (problems["severity"] == "warning"))]
    fields = {"suspect": int(suspect.sum()),
              "suspect_accepted": len({i["pos"] for i in suspects if not rejected[i["pos"]]})
              if accept_suspect else 0,
              "suspect_rows": suspects, "unmapped": unmapped, "consistency": notes,
              "problem_groups": group_problems(shown).to_dict(orient="records")}
    return suspect, problems, fields
