"""Input checks of :func:`refit.models.fitting.fit` (and the cross-validation driver): a table
to numeric columns, refused or dropped empty values, positivity, enough rows, a varying
predictor. Every message names the column, the rows and how to fix it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

import numpy as np

from refit.errors import InvalidDataError, UsageError

if TYPE_CHECKING:
    from refit.models.forms import Form

#: how many offending row labels a message lists before "and N more"
_MAX_LISTED = 10
STRAIGHT_LINE_ONLY = ("theil-sen", "york")


def as_frame(table, *, dicts: bool = True):
    """DataFrame, row labels ('file rows' from a refit Table, else the index) and the word
    for a row. ``dicts``: also take a dict of columns."""
    import pandas as pd

    if isinstance(table, pd.DataFrame):  # first: an attribute look-up on a frame is slow
        return table, np.asarray(table.index), "row"
    if hasattr(table, "frame") and isinstance(table.frame, pd.DataFrame):
        rows = getattr(table, "source_rows", None)
        labels = np.asarray(rows) if rows is not None else np.asarray(table.frame.index)
        return table.frame, labels, "file row"
    if dicts and isinstance(table, dict):
        frame = pd.DataFrame(table)
        return frame, np.asarray(frame.index), "row"
    if dicts:
        raise UsageError(f"table must be a pandas DataFrame, a refit Table or a dict of "
                         f"columns; got {type(table).__name__}")
    raise UsageError(f"the table must be a pandas DataFrame or a refit Table; got "
                     f"{type(table).__name__}")


def rows_text(labels, mask, kind: str) -> str:
    bad = [str(v) for v in np.asarray(labels)[mask][:_MAX_LISTED]]
    more = int(mask.sum()) - len(bad)
    return f"{kind}s " + ", ".join(bad) + (f" and {more} more" if more > 0 else "")


#: numpy dtypes whose values pass to float unchanged: no parsing, no "not a number" cells
_NUMERIC_KINDS = "iu"
_FLOAT_TYPES = (np.dtype(np.float64), np.dtype(np.float32))


def _plain_numeric(dtype) -> bool:
    """True for numpy integer and float32/float64 dtypes (not pandas extension types)."""
    return isinstance(dtype, np.dtype) and (dtype.kind in _NUMERIC_KINDS or dtype in _FLOAT_TYPES)


def _refuse_infinite(values: np.ndarray, name: str, labels, kind: str) -> np.ndarray:
    if np.isinf(values).any():
        raise InvalidDataError(f"column {name!r} holds infinite values at "
                               f"{rows_text(labels, np.isinf(values), kind)}; replace them "
                               "with finite numbers or drop those rows")
    return values


def numeric_column(frame, name: str, labels, kind: str) -> np.ndarray:
    """A numeric column as float; non-numbers and infinities are refused by row."""
    import pandas as pd

    if name not in frame.columns:
        raise UsageError(f"column {name!r} is not in the table; available columns: "
                         + ", ".join(map(str, frame.columns)))
    col = frame[name]
    if _plain_numeric(getattr(col, "dtype", None)):  # numbers already: nothing to parse
        return _refuse_infinite(col.to_numpy(dtype=float, na_value=np.nan), name, labels, kind)
    values = pd.to_numeric(col, errors="coerce").to_numpy(dtype=float, na_value=np.nan)
    not_number = np.isnan(values) & col.notna().to_numpy()
    if not_number.any():
        first = col[not_number].iloc[0]
        raise InvalidDataError(f"column {name!r} holds values that are not numbers at "
                               f"{rows_text(labels, not_number, kind)} (e.g. {first!r}); "
                               "correct them or leave the cells empty")
    return _refuse_infinite(values, name, labels, kind)


def _array_dict_rows(table, names) -> int | None:
    """Row count of a dict whose every column is a 1-D numpy array of plain numbers, all of
    one length, holding every name in ``names``; None otherwise (then a DataFrame is built)."""
    if not isinstance(table, dict) or not table or not all(nm in table for nm in names):
        return None
    lengths = set()
    for v in table.values():
        if not (isinstance(v, np.ndarray) and v.ndim == 1 and _plain_numeric(v.dtype)):
            return None
        lengths.add(v.shape[0])
    return lengths.pop() if len(lengths) == 1 else None


def fit_columns(table, names, vectors: dict):
    """The columns a fit uses as float arrays, the row labels and the word for a row.

    ``names``: the equation's columns; ``vectors``: weights, x_sd, y_sd (column names,
    values or None). A dict of equal-length numeric numpy arrays is read directly (the
    values are copied, as a DataFrame would); anything else goes through a DataFrame.
    Errors are raised in the order of ``names`` then ``vectors``.
    """
    n = _array_dict_rows(table, [*names, *(v for v in vectors.values() if isinstance(v, str))])
    if n is None:
        frame, labels, kind = as_frame(table)
        cols = {nm: numeric_column(frame, nm, labels, kind) for nm in names}
        for key, arg in vectors.items():
            cols[key] = _vector(arg, frame, labels, kind, key)
        return cols, labels, kind
    labels, kind = np.arange(n), "row"
    cols = {nm: _refuse_infinite(np.array(table[nm], dtype=float), nm, labels, kind)
            for nm in names}
    for key, arg in vectors.items():
        cols[key] = (_refuse_infinite(np.array(table[arg], dtype=float), arg, labels, kind)
                     if isinstance(arg, str) else _vector(arg, None, labels, kind, key, n=n))
    return cols, labels, kind


def _vector(arg, frame, labels, kind: str, what: str, *, n: int | None = None
            ) -> np.ndarray | None:
    """Weights or measurement SDs: a column name, a scalar or an array of row values
    (``n`` rows; default ``len(frame)``)."""
    if arg is None:
        return None
    if isinstance(arg, str):
        return numeric_column(frame, arg, labels, kind)
    v = np.broadcast_to(np.asarray(arg, dtype=float), (len(frame) if n is None else n,)).copy()
    if np.isinf(v).any():
        raise InvalidDataError(f"{what} hold infinite values at "
                               f"{rows_text(labels, np.isinf(v), kind)}")
    return v


def _drop_missing(cols: dict, labels, kind: str, missing: str):
    """Refuse (or drop, with missing='drop') rows with an empty value in a used column."""
    nan = np.zeros(len(labels), dtype=bool)
    for v in cols.values():
        if v is not None:
            nan |= np.isnan(v)
    if not nan.any():
        return cols, labels, 0
    if missing != "drop":
        names = [k for k, v in cols.items() if v is not None and np.isnan(v).any()]
        raise InvalidDataError(f"empty or NaN values in {', '.join(map(repr, names))} at "
                               f"{rows_text(labels, nan, kind)}; fill them, select rows "
                               "that have them, or pass missing='drop'")
    keep = ~nan
    return ({k: (None if v is None else v[keep]) for k, v in cols.items()}, labels[keep],
            int(nan.sum()))


def _check_positive(v, labels, kind, message):
    bad = ~(v > 0)
    if bad.any():
        raise InvalidDataError(message + f" at {rows_text(labels, bad, kind)}")


def _check_rows(form: Form, n: int, estimator: str) -> None:
    need = 3 if estimator in STRAIGHT_LINE_ONLY else form.min_rows
    if n < need:
        raise InvalidDataError(
            f"too few rows: form {form.name!r} with {len(form.predictors)} predictor(s) has "
            f"{form.n_params} coefficient(s) and needs at least {need} rows with values (one "
            f"more than the coefficients, to estimate the residual error); got {n}")


def _check_constant(x: np.ndarray, names, labels) -> None:
    for j, name in enumerate(names):
        col = x[:, j]
        if col.size and np.all(col == col[0]):
            raise InvalidDataError(
                f"predictor {name!r} is constant (every row = {col[0]:g}); a slope cannot be "
                "estimated from it: choose rows where it varies or drop it")


def group_codes_column(table, groups, n: int):
    """Group (source) labels for a mixed fit: float codes 0..G-1 with NaN where the label
    is missing, and the labels in code order.

    ``groups`` is a column name of ``table`` or ``n`` values (text or numbers).
    """
    import pandas as pd

    if isinstance(groups, str):
        if isinstance(table, dict) and groups in table:
            values = table[groups]
        else:
            frame, _, _ = as_frame(table)
            if groups not in frame.columns:
                raise UsageError(f"groups column {groups!r} is not in the table; available "
                                 "columns: " + ", ".join(map(str, frame.columns)))
            values = frame[groups]
    else:
        values = groups
    series = pd.Series(np.asarray(values, dtype=object).ravel())
    if len(series) != n:
        raise UsageError(f"groups must be a column name or one label per row ({n}); got "
                         f"{len(series)} values")
    text = series.map(lambda v: None if v is None or (isinstance(v, float) and np.isnan(v))
                      or (isinstance(v, str) and not v.strip()) else str(v))
    codes, uniques = pd.factorize(text, use_na_sentinel=True)
    out = codes.astype(float)
    out[codes < 0] = np.nan
    return out, [str(u) for u in uniques]
