"""The calibration-table schema: the Frictionless descriptor in ``schemas/`` turned into pandera.

``schemas/calibration.table.json`` (a Frictionless Table Schema descriptor) is the single
source of truth for the columns of a calibration table: their names, types, units and
ranges. This module reads it and builds the equivalent :class:`pandera.DataFrameSchema`
with a small translator of our own, so the ``frictionless`` package is needed only by
the tests (which check that the descriptor is valid and that this translation agrees with
pandera's own ``from_frictionless_schema``).

Translation (Frictionless -> pandera):

========================  ==================================================
``type: number``          ``dtype float64`` (values are parsed before validation)
``type: string/date``     no dtype check (text; dates are checked in refit.curate.checks)
``minimum`` + ``maximum`` ``Check.in_range(minimum, maximum)``
``minimum`` alone         ``Check.greater_than_or_equal_to(minimum)``
``maximum`` alone         ``Check.less_than_or_equal_to(maximum)``
``enum``                  ``Check.isin(enum)`` (closed vocabularies)
``required: true``        the column must be present *and* every cell filled
``unique`` / primaryKey   ``unique=True``
========================  ==================================================

Rules spanning columns (``x-refit-rules``) are enforced in :mod:`refit.curate.checks`.
"""

from __future__ import annotations

import functools
import json
from pathlib import Path
from typing import Any

DESCRIPTOR_NAME = "calibration.table.json"


@functools.lru_cache(maxsize=8)
def _load_cached(path: str) -> str:
    return Path(path).read_text(encoding="utf-8")


def load_descriptor(path: str | Path | None = None) -> dict[str, Any]:
    """Read a Frictionless Table Schema descriptor.

    Parameters
    ----------
    path : str or Path, optional
        Descriptor file; default ``schemas/calibration.table.json`` shipped with refit.

    Returns
    -------
    dict
        The parsed descriptor (a fresh copy; callers may change it).
    """
    if path is None:
        from refit._util.resources import schemas_dir

        path = schemas_dir() / DESCRIPTOR_NAME
    return json.loads(_load_cached(str(Path(path).resolve())))


def fields(descriptor: dict[str, Any] | None = None) -> dict[str, dict[str, Any]]:
    """Fields of the descriptor by name, in schema order."""
    descriptor = descriptor or load_descriptor()
    return {f["name"]: f for f in descriptor["fields"]}


def field_names(descriptor: dict[str, Any] | None = None) -> list[str]:
    """Canonical column names in schema order."""
    return list(fields(descriptor))


def fields_of_type(kind: str, descriptor: dict[str, Any] | None = None) -> list[str]:
    """Names of the fields whose Frictionless ``type`` is ``kind`` (e.g. ``"number"``)."""
    return [n for n, f in fields(descriptor).items() if f.get("type", "string") == kind]


def required_fields(descriptor: dict[str, Any] | None = None) -> list[str]:
    """Fields that must be present as columns and filled in every row."""
    descriptor = descriptor or load_descriptor()
    keys = _primary_key(descriptor)
    return [
        n for n, f in fields(descriptor).items()
        if f.get("constraints", {}).get("required", False) or n in keys
    ]


def refit_rules(descriptor: dict[str, Any] | None = None) -> dict[str, Any]:
    """The cross-column rules block (``x-refit-rules``) of the descriptor."""
    descriptor = descriptor or load_descriptor()
    return dict(descriptor.get("x-refit-rules", {}))


def primary_key(descriptor: dict[str, Any]) -> list[str]:
    """The descriptor's primary key as a list of column names."""
    key = descriptor.get("primaryKey", [])
    return [key] if isinstance(key, str) else list(key)


_primary_key = primary_key


def is_required(field: dict[str, Any], keys: list[str]) -> bool:
    """A required column (present, never empty): ``required`` or part of the primary key."""
    return bool(field.get("constraints", {}).get("required", False)) or field["name"] in keys


def is_unique(field: dict[str, Any], keys: list[str]) -> bool:
    """Values must be unique: ``unique`` or the whole primary key."""
    return bool(field.get("constraints", {}).get("unique", False)) or keys == [field["name"]]


def checks_for(field: dict[str, Any]) -> list:
    """pandera checks for one descriptor field's constraints (see module table)."""
    import pandera.pandas as pa

    cons = field.get("constraints", {})
    out = []
    lo, hi = cons.get("minimum"), cons.get("maximum")
    if lo is not None and hi is not None:
        out.append(pa.Check.in_range(lo, hi))
    elif lo is not None:
        out.append(pa.Check.greater_than_or_equal_to(lo))
    elif hi is not None:
        out.append(pa.Check.less_than_or_equal_to(hi))
    if "enum" in cons:
        out.append(pa.Check.isin(list(cons["enum"])))
    return out


def column_for(field: dict[str, Any], primary_key: list[str]):
    """The pandera Column for one descriptor field."""
    import pandera.pandas as pa

    required = is_required(field, primary_key)
    unique = is_unique(field, primary_key)
    dtype = "float64" if field.get("type") in ("number", "integer") else None
    return pa.Column(
        dtype,
        checks=checks_for(field),
        nullable=not required,
        unique=unique,
        required=required,
        coerce=False,
        name=field["name"],
        title=field.get("title"),
        description=field.get("description"),
    )


def build_schema(descriptor: dict[str, Any] | None = None, *, columns=None):
    """Build the pandera DataFrameSchema of a calibration table from its descriptor.

    Parameters
    ----------
    descriptor : dict, optional
        A Frictionless Table Schema descriptor; default the calibration descriptor.
    columns : iterable of str, optional
        Keep only the optional fields among these columns (required fields are always
        kept, so their absence is reported). ``None`` keeps every field.

    Returns
    -------
    pandera.pandas.DataFrameSchema
        Not strict: extra columns are allowed and kept.
    """
    import pandera.pandas as pa

    descriptor = descriptor or load_descriptor()
    keys = _primary_key(descriptor)
    wanted = None if columns is None else set(columns)
    cols = {}
    for name, field in fields(descriptor).items():
        col = column_for(field, keys)
        if wanted is None or col.required or name in wanted:
            cols[name] = col
    return pa.DataFrameSchema(
        cols, strict=False, name=descriptor.get("name"), title=descriptor.get("title"),
        description=descriptor.get("$comment"),
    )


def notation(name: str, unit: str | None = None) -> str:
    """A column as figures and tables name it: ``MAP [mm]``, ``MAT [°C]``,
    ``Depth to Bk [cm]``, ``CIA-K``.

    The symbol comes from the descriptor's ``x-refit-notation`` (else the field's
    ``title``, else the name itself) and the unit is printed in its usual notation
    (``degC`` as ``°C``).

    Parameters
    ----------
    name : str
        A canonical column or derived-index name.
    unit : str, optional
        The unit to print (e.g. a coefficient file's); default the field's own.
    """
    desc = load_descriptor()
    note = desc.get("x-refit-notation", {})
    field = fields(desc).get(name, {})
    symbol = note.get("symbols", {}).get(name) or field.get("title") or name
    unit = unit_notation(field.get("unit", "") if unit is None else str(unit))
    return f"{symbol} [{unit}]" if unit else symbol


def unit_notation(unit: str) -> str:
    """A unit code as printed: ``degC`` -> ``°C``, ``percent`` -> ``wt%`` (the descriptor's
    ``x-refit-notation``); other codes unchanged."""
    units = load_descriptor().get("x-refit-notation", {}).get("units", {})
    return units.get(str(unit), str(unit))
