"""State-factor subsets: structured filters on calibration records.

A filter is one of three shapes, written in a recipe's ``[subset]`` section:

``column = "value"`` (or a number)
    keep rows whose value equals it (text compared without regard to case or surrounding
    spaces);
``column = ["a", "b"]``
    keep rows whose value is one of those;
``column = { min = 5, max = 40 }``
    keep rows whose number lies in the closed range (either end may be left out).

Nothing is evaluated as code. Filters run in the order written, and each reports how many
records it kept, so a researcher sees which state factor thins the set.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from refit.errors import InvalidDataError, UsageError
from refit.select.values import shown

#: Most values a one-of filter may list (README, "Recipes"; e.g. profile ids).
MAX_ONE_OF = 10_000

EXTRA_ROWS = 2  # rows beyond the coefficient count for a fit worth cross-validating


@dataclass(frozen=True)
class Filter:
    """One structured filter on a column.

    Attributes
    ----------
    column : str
        Column name.
    kind : str
        ``equals``, ``one-of`` or ``range``.
    value : object
        The scalar, the tuple of allowed values, or ``(min, max)`` with ``None`` for an
        open end.
    where : str
        Where it is written (``"recipe.toml, line 9"``), for messages.
    line : int or None
        Its line in the recipe.
    """

    column: str
    kind: str
    value: object
    where: str = ""
    line: int | None = None

    def describe(self) -> str:
        """The filter in words, e.g. ``age_ka >= 5``."""
        if self.kind == "equals":
            return f"{self.column} = {self.value!r}"
        if self.kind == "one-of":
            return f"{self.column} in [{', '.join(map(repr, self.value))}]"
        lo, hi = self.value
        if lo is not None and hi is not None:
            return f"{lo:g} <= {self.column} <= {hi:g}"
        return f"{self.column} >= {lo:g}" if lo is not None else f"{self.column} <= {hi:g}"

    def to_dict(self) -> dict:
        """JSON-ready form (as written in a recipe)."""
        if self.kind == "range":
            lo, hi = self.value
            value = {k: v for k, v in (("min", lo), ("max", hi)) if v is not None}
        elif self.kind == "one-of":
            value = list(self.value)
        else:
            value = self.value
        return {"column": self.column, "kind": self.kind, "value": value}


def _scalar(value) -> bool:
    if isinstance(value, bool):
        return False
    if isinstance(value, float):
        return math.isfinite(value)
    return isinstance(value, (str, int))


def _number(value) -> bool:
    return _scalar(value) and not isinstance(value, str)


def parse_filter(column: str, value, *, where: str = "", line: int | None = None) -> Filter:
    """Build a :class:`Filter` from a recipe value, refusing anything else.

    Raises
    ------
    UsageError
        A value that is not text, a number, a list of those or ``{min, max}``; an empty
        list; a range with unknown keys, no ends or min > max.
    """
    head = f"{where}: [subset] {column}"
    if _scalar(value):
        return Filter(column, "equals", value, where, line)
    if isinstance(value, list):
        if not value or not all(_scalar(v) for v in value):
            raise UsageError(f"{head} must list at least one text or number, e.g. "
                             f"{column} = [\"a\", \"b\"]; got {shown(value)}")
        if len(value) > MAX_ONE_OF:
            raise UsageError(f"{head} lists {len(value):,} values; refit's limit is "
                             f"{MAX_ONE_OF:,}: filter on a column that groups them instead")
        return Filter(column, "one-of", tuple(value), where, line)
    if isinstance(value, dict):
        unknown = sorted(set(value) - {"min", "max"})
        if unknown:
            raise UsageError(f"{head}: unknown key {unknown[0]!r} in the range; a range takes "
                             "only min and max, e.g. { min = 5, max = 40 }")
        if not value:
            raise UsageError(f"{head}: the range names neither min nor max")
        for k, v in value.items():
            if not _number(v):
                raise UsageError(f"{head}: {k} must be a number; got {shown(v)}")
        lo, hi = value.get("min"), value.get("max")
        if lo is not None and hi is not None and lo > hi:
            raise UsageError(f"{head}: min ({lo}) is larger than max ({hi})")
        return Filter(column, "range", (lo, hi), where, line)
    raise UsageError(f"{head} must be a value (\"loess\" or 5), a list of values "
                     f"([\"grassland\", \"savanna\"]) or a range ({{ min = 5, max = 40 }}); "
                     f"got {shown(value)}")


# ----------------------------------------------------------------------------- applying
@dataclass
class SubsetResult:
    """Rows kept and how each step thinned them.

    Attributes
    ----------
    frame : pandas.DataFrame
        The kept rows (original index).
    steps : list of dict
        One per step in order: ``step`` (words), ``kept`` (rows after it), ``removed``.
    notes : list of str
        Hints, e.g. a filter value that no record has.
    n_start : int
        Rows before the first step.
    """

    frame: object
    steps: list
    notes: list
    n_start: int

    def to_dict(self) -> dict:
        """JSON-ready summary."""
        return {"rows_before": self.n_start, "rows_after": int(len(self.frame)),
                "steps": list(self.steps), "notes": list(self.notes)}


def _text(series):
    return series.astype("string").str.strip().str.casefold()


def filter_mask(frame, flt: Filter, *, source: str = "the data") -> np.ndarray:
    """Boolean mask of the rows a filter keeps (missing values are never kept).

    Raises
    ------
    InvalidDataError
        The column is not in ``frame`` (the columns present are listed), or a range or a
        number is asked of a column that holds text.
    """
    import pandas as pd

    if flt.column not in frame.columns:
        raise InvalidDataError(
            f"{flt.where}: [subset] filters on column {flt.column!r}, which {source} does not "
            "have; its columns are: " + ", ".join(map(str, frame.columns)))
    col = frame[flt.column]
    if flt.kind == "range":
        num = pd.to_numeric(col, errors="coerce")
        if num.isna().all() and col.notna().any():
            raise InvalidDataError(f"{flt.where}: [subset] {flt.column} takes a range, but "
                                   "the column holds text, not numbers")
        lo, hi = flt.value
        keep = num.notna()
        if lo is not None:
            keep &= num >= lo
        if hi is not None:
            keep &= num <= hi
        return keep.to_numpy(dtype=bool)
    values = flt.value if flt.kind == "one-of" else (flt.value,)
    if all(_number(v) for v in values) and pd.api.types.is_numeric_dtype(col):
        return col.isin([float(v) for v in values]).to_numpy(dtype=bool)
    wanted = {str(v).strip().casefold() for v in values}
    return _text(col).isin(wanted).fillna(False).to_numpy(dtype=bool)


def _absent_values(frame, flt: Filter) -> list:
    if flt.kind == "range" or flt.column not in frame.columns:
        return []
    values = flt.value if flt.kind == "one-of" else (flt.value,)
    have = set(_text(frame[flt.column]).dropna())
    return [v for v in values if str(v).strip().casefold() not in have]


def apply_filters(frame, filters, *, source: str = "the data") -> SubsetResult:
    """Apply filters in order, counting the rows each keeps.

    Parameters
    ----------
    frame : pandas.DataFrame
        Calibration records.
    filters : sequence of Filter
    source : str
        What the data are, for messages (e.g. ``"store calib_demo/store (version 1)"``).

    Returns
    -------
    SubsetResult
    """
    steps, notes = [], []
    keep = np.ones(len(frame), dtype=bool)
    for flt in filters:
        before = int(keep.sum())
        keep &= filter_mask(frame, flt, source=source)
        steps.append({"step": flt.describe(), "kept": int(keep.sum()),
                      "removed": before - int(keep.sum())})
        missing = _absent_values(frame, flt)
        if missing:
            present = sorted(set(frame[flt.column].dropna().astype(str)))[:12]
            notes.append(f"{flt.where}: no record has {flt.column} = "
                         + ", ".join(map(repr, missing)) + "; values present: "
                         + ", ".join(present))
    return SubsetResult(frame[keep], steps, notes, len(frame))


def drop_incomplete(result: SubsetResult, columns) -> SubsetResult:
    """Leave out rows with an empty value in any of ``columns`` (one counted step)."""
    frame = result.frame
    cols = list(dict.fromkeys(columns))
    ok = frame[cols].notna().all(axis=1).to_numpy()
    steps = result.steps + [{"step": "with a value in " + ", ".join(cols),
                             "kept": int(ok.sum()), "removed": int((~ok).sum())}]
    return SubsetResult(frame[ok], steps, list(result.notes), result.n_start)


# ----------------------------------------------------------------------------- enough rows
def rows_needed(n_params: int, estimator: str) -> int:
    """Fewest rows for a candidate worth cross-validating.

    The form's coefficient count + :data:`EXTRA_ROWS` (at least two residual degrees of
    freedom on the whole subset: common practice, a fit with one residual degree of
    freedom has no useful error estimate), and never fewer than an estimator's own
    minimum (Theil-Sen and York need 3 points for a line with a scatter).
    """
    own = {"theil-sen": 3, "york": 3}.get(estimator, 0)
    return max(n_params + EXTRA_ROWS, own)


def check_enough(n: int, need: int, what: str, result: SubsetResult | None = None,
                 where: str = "") -> None:
    """Refuse when ``n`` rows are fewer than ``need``, showing how each step thinned them."""
    if n >= need:
        return
    trail = ""
    if result is not None and result.steps:
        trail = "; rows kept by each step: " + "; ".join(
            f"{s['step']} -> {s['kept']}" for s in result.steps)
    raise InvalidDataError(f"{where + ': ' if where else ''}the subset keeps {n} row(s), but "
                           f"{what} needs at least {need}{trail}; widen the [subset] filters "
                           "or add records")
