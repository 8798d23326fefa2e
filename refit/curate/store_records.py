"""The store's records.csv: read typed, and grown by new rows.

Internal to :mod:`refit.curate.store` (which re-exports :func:`typed_records` and
:func:`canonical_order`). :func:`typed_records` defines the typed records (text through
``pandas.to_numeric``); :func:`typed_from_bytes` gives the same frame in one parsing pass
(numbers read as float64) or None when only the text route is sure. :func:`records_after`
writes records.csv with the accepted rows of an admit, appending their bytes to the
stored ones when those are refit's own.
"""

from __future__ import annotations

import io

import numpy as np
import pandas as pd

from refit.curate.batch import _cell, records_bytes


def _numeric_columns() -> set[str]:
    from refit.curate.units import schema_fields

    return {f["name"] for f in schema_fields() if f.get("type") in ("number", "integer")}


def typed_records(text: pd.DataFrame) -> pd.DataFrame:
    """Stored text -> records: schema number columns as float64 (``pandas.to_numeric``,
    unparseable cells missing), empty cells missing."""
    numeric = _numeric_columns()
    out = text.replace("", np.nan)
    for col in out.columns:
        if col in numeric:
            out[col] = pd.to_numeric(out[col], errors="coerce").astype("float64")
    return out


def header_of(raw: bytes) -> pd.Index:
    """The column names of records.csv's bytes, as the table readers name them."""
    return pd.read_csv(io.BytesIO(raw), nrows=0, dtype=str, encoding="utf-8").columns


def typed_from_bytes(raw: bytes, columns: list[str] | None = None) -> pd.DataFrame | None:
    """``typed_records`` of records.csv's text (only ``columns``, in file order, when
    given), parsed in one pass with number columns read as float64 (several times faster
    than text first, then ``to_numeric``); None when a number cell is not a plain number,
    or is a negative zero, or there are no rows, or the header repeats a name: the caller
    then takes the text route, which is the definition (equal values and dtypes otherwise:
    tested)."""
    numeric = _numeric_columns()
    try:
        header = [str(c) for c in header_of(raw)]
        wanted = header if columns is None else [c for c in header if c in set(columns)]
        if len(set(header)) != len(header) or not wanted:
            return None
        dtypes = {c: ("float64" if c in numeric else str) for c in wanted}
        frame = pd.read_csv(io.BytesIO(raw), dtype=dtypes, keep_default_na=False,
                            na_values=[""], encoding="utf-8",
                            usecols=None if columns is None else wanted)
    except ValueError:  # a number cell that needs to_numeric's coercion (or a bad file)
        return None
    if not len(frame) or list(frame.columns) != wanted:
        return None
    for col in frame.columns:
        if col in numeric:
            v = frame[col].to_numpy()
            if np.signbit(v[v == 0]).any():  # "-0": to_numeric reads it as +0
                return None
    return frame


def canonical_order(columns) -> list[str]:
    """All schema columns in schema order, then the extra columns alphabetically."""
    from refit.curate.units import canonical_columns

    schema = canonical_columns()
    extras = sorted({str(c) for c in columns} - set(schema))
    return schema + extras


def records_after(store, accepted: pd.DataFrame, today: str,
                  grow: bool) -> tuple[bytes, list[str], int]:
    """(records.csv bytes, columns, row count) once ``accepted`` is appended (``grow``).

    When the store's bytes are refit's own (:attr:`refit.curate.store.Store.appendable`) and the columns do
    not change, the new rows' bytes are appended to them: the same bytes as rewriting the
    whole table (``records_bytes`` writes row by row; tested), without parsing the stored
    rows as text.
    """
    if store.appendable:
        old_columns = store.columns
        if not grow:
            return store.raw, old_columns, store.row_count
        columns = canonical_order([*old_columns, *accepted.columns])
        if columns == old_columns:
            new = _new_rows(accepted, columns, today)
            return (store.raw + records_bytes(new, header=False), columns,
                    store.row_count + len(new))
    records = (_new_records(store.records_text, accepted, today) if grow
               else store.records_text)
    return records_bytes(records), [str(c) for c in records.columns], len(records)


def _new_records(old: pd.DataFrame, accepted: pd.DataFrame, today: str) -> pd.DataFrame:
    columns = canonical_order([*old.columns, *accepted.columns])
    new = _new_rows(accepted, columns, today)
    old = old.reindex(columns=columns, fill_value="")
    return pd.concat([old, new], ignore_index=True).astype(str) if len(new) else old


def _new_rows(accepted: pd.DataFrame, columns: list[str], today: str) -> pd.DataFrame:
    """The accepted rows as stored text (:func:`_cell` of each cell; ``added_on`` today
    where empty)."""
    if not len(accepted):
        return pd.DataFrame(columns=columns, dtype=str)
    frame = accepted.reindex(columns=columns)
    cells = {c: _cells(frame[c]) for c in columns}
    cells["added_on"] = [v if v != "" else today for v in cells["added_on"]]
    return pd.DataFrame(cells, index=frame.index, columns=columns, dtype=object)


def _cells(column: pd.Series) -> list[str]:
    """``column.map(_cell)`` as a list, float64 columns without a Python call per cell."""
    if column.dtype != np.float64:  # text: a str cell is itself
        return [v if type(v) is str else _cell(v)
                for v in column.to_numpy(dtype=object).tolist()]
    v = column.to_numpy()
    out = np.full(len(v), "", dtype=object)
    finite = np.isfinite(v)
    whole = finite & (v == np.floor(v)) & (np.abs(v) < 1e15)
    out[whole] = v[whole].astype(np.int64).astype(str).astype(object)
    rest = ~whole & ~np.isnan(v)
    out[rest] = [f"{x:.12g}" for x in v[rest].tolist()]
    return out.tolist()
