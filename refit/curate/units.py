"""Column synonyms and declared units: map an incoming table onto the canonical columns.

Researchers name columns their own way ("Latitude", "MAP (in)", "depth to Bk (cm)",
"bk_thickness_in", "MAT (°F)"). :func:`normalise_columns` recognises the quantity from the
name (case, spaces and punctuation do not matter), reads the unit declared in brackets or
as the last ``_token``, and converts the values to the canonical unit of
``schemas/calibration.table.json`` with pint (no hand-written factors). Cells that are not
numbers are left as they are, so ``check`` can report them with their row.
"""

from __future__ import annotations

import functools
import json
import re

import numpy as np
import pandas as pd

from refit.errors import InvalidDataError

# canonical column -> synonyms, written as normalised keys (lower case, "_" between words).
# A key may carry no unit (the canonical unit is then assumed) or carry one as a suffix.
SYNONYMS: dict[str, tuple[str, ...]] = {
    "profile_id": ("profile", "profileid", "profile_name", "profile_no", "profile_number",
                   "pedon", "pedon_id", "site_id", "sample_id", "soil_id", "id", "sample",
                   "sample_no", "sample_name", "sample_number", "profile_code"),
    "latitude": ("lat", "lat_dd", "decimal_latitude", "latitude_dd", "y_lat"),
    "longitude": ("lon", "long", "lng", "lon_dd", "decimal_longitude", "longitude_dd", "x_lon"),
    "source": ("reference", "ref", "citation", "citation_key", "source_key", "data_source"),
    "map": ("map", "mean_annual_precipitation", "mean_annual_precip", "annual_precipitation",
            "precip", "precipitation", "rainfall", "annual_rainfall", "mean_annual_rainfall"),
    "mat": ("mat", "mean_annual_temperature", "mean_annual_temp", "annual_temperature",
            "temperature", "mean_annual_air_temperature"),
    "mar": ("mar", "mean_annual_range_of_precipitation", "precipitation_range",
            "precip_range", "mean_annual_range_precipitation"),
    "bk_depth": ("bk_depth", "depth_to_bk", "depth_bk", "bk_top", "depth_to_top_of_bk",
                 "depth_to_calcic_horizon", "calcic_depth", "depth_to_carbonate",
                 "carbonate_depth"),
    "bk_thickness": ("bk_thickness", "bk_thick", "thickness_of_bk", "bk_horizon_thickness",
                     "calcic_thickness", "thickness_bk"),
    "by_depth": ("by_depth", "depth_to_by", "depth_by", "depth_to_gypsum", "gypsum_depth",
                 "depth_to_gypsic_horizon"),
    "vegetation": ("veg", "vegetation_type", "plant_cover"),
    "parent_material": ("parent", "parent_rock", "pm", "parentmaterial"),
    "landform": ("geomorphic_position", "landscape_position", "geomorphology"),
    "slope": ("slope", "slope_angle"),
    "age": ("age", "soil_age", "surface_age"),
    "soil_order": ("order", "usda_order", "taxonomic_order", "soil_taxonomy_order"),
    "elevation": ("elevation", "elev", "altitude", "alt"),
    "profile_depth": ("profile_depth", "depth_of_profile", "pit_depth", "described_depth",
                      "profile_bottom", "total_depth"),
    "sequence_id": ("sequence", "seq_id"),
    "sequence_kind": ("sequence_type", "seq_kind"),
    "added_on": ("date_added", "admitted_on"),
    "notes": ("note", "comment", "comments", "remarks"),
}
OXIDES = ("sio2", "tio2", "al2o3", "fe2o3", "mno", "mgo", "cao", "na2o", "k2o", "p2o5")

# quantity key -> (canonical column, canonical pint unit or None for text columns)
_QUANTITY = {
    "map": ("map_mm", "millimeter"), "mat": ("mat_c", "degC"), "mar": ("mar_mm", "millimeter"),
    "bk_depth": ("bk_depth_cm", "centimeter"), "bk_thickness": ("bk_thickness_cm", "centimeter"),
    "by_depth": ("by_depth_cm", "centimeter"), "slope": ("slope_deg", "degree"),
    "profile_depth": ("profile_depth_cm", "centimeter"),
    "age": ("age_ka", "kiloyear"), "elevation": ("elevation_m", "meter"),
    "latitude": ("latitude", "degree"), "longitude": ("longitude", "degree"),
    **{ox: (f"{ox}_wt", "percent") for ox in OXIDES},
}

# unit spellings seen in column names -> pint unit names
UNIT_WORDS = {
    "mm": "millimeter", "cm": "centimeter", "m": "meter", "km": "kilometer",
    "in": "inch", "inch": "inch", "inches": "inch", '"': "inch",
    "ft": "foot", "feet": "foot", "foot": "foot",
    "c": "degC", "degc": "degC", "deg_c": "degC", "celsius": "degC", "oc": "degC",
    "f": "degF", "degf": "degF", "deg_f": "degF", "fahrenheit": "degF", "of": "degF",
    "k": "kelvin", "kelvin": "kelvin",
    "%": "percent", "pct": "percent", "percent": "percent", "wt": "percent", "wt%": "percent",
    "wt_%": "percent", "wt_pct": "percent", "wtpct": "percent", "wt_percent": "percent",
    "ppm": "ppm",
    "deg": "degree", "degree": "degree", "degrees": "degree", "dd": "degree",
    "decimal_degrees": "degree",
    "ka": "kiloyear", "kyr": "kiloyear", "ky": "kiloyear", "kya": "kiloyear",
    "ma": "megayear", "myr": "megayear", "yr": "year", "years": "year", "a": "year",
}
ACCEPTED = {
    "[length]": "mm, cm, m, in, ft",
    "[temperature]": "°C (C, degC), °F (F, degF), K",
    "[dimensionless]": "%, wt%, ppm",
    "[time]": "ka, kyr, Ma, yr",
}
# suffixes that pint could read as units but that mean something else in a column name
NOT_UNITS = {"min", "max", "mean", "avg", "sd", "std", "se", "n", "id", "range", "top",
             "base", "bottom", "flag", "qc", "err", "error", "unc", "note", "notes", "source",
             "count", "class", "code", "type", "g"}
_PER_YEAR = re.compile(r"(/|_per_|_|\s)(yr|year|a|annum)$|(_yr|_a)\^?-1$|yr-1$|a-1$")


@functools.lru_cache(maxsize=1)
def ureg():
    """The module's pint UnitRegistry, created on first use."""
    import pint

    return pint.UnitRegistry()


@functools.lru_cache(maxsize=1)
def schema_fields() -> tuple[dict, ...]:
    """Fields of schemas/calibration.table.json, in schema order."""
    from refit._util.resources import schemas_dir

    with open(schemas_dir() / "calibration.table.json", encoding="utf-8") as fh:
        return tuple(json.load(fh)["fields"])


def canonical_columns() -> list[str]:
    """Canonical column names in schema order."""
    return [f["name"] for f in schema_fields()]


def key(text: str) -> str:
    """Normalise a name: lower case, '°' -> 'deg', words joined by '_'."""
    text = text.strip().lower().replace("°", "deg").replace("º", "deg")
    return re.sub(r"[^0-9a-z%]+", "_", text).strip("_")


@functools.lru_cache(maxsize=1)
def _alias_table() -> dict[str, str]:
    """Normalised synonym -> quantity key (of ``_QUANTITY``) or canonical text column."""
    table = {name: name for name in canonical_columns()}
    for quantity, words in SYNONYMS.items():
        for word in (quantity, *words):
            table.setdefault(word, quantity)
    for ox in OXIDES:
        table.setdefault(ox, ox)
    return table


def parse_name(name: str) -> tuple[str, str | None] | None:
    """(canonical column, declared unit text or None) for a column name, or None if unknown.

    >>> parse_name("MAP (in)")
    ('map_mm', 'in')
    >>> parse_name("bk_depth_m")
    ('bk_depth_cm', 'm')
    """
    aliases = _alias_table()
    raw = str(name).strip()
    bracket = re.match(r"^(.*?)[\s_]*[\(\[]([^\)\]]*)[\)\]]\s*$", raw)
    if bracket:
        base = key(bracket.group(1))
        if base in aliases:
            return _target(aliases[base]), bracket.group(2).strip()
    whole = key(raw)
    if whole in aliases:
        return _target(aliases[whole]), None
    parts = whole.split("_")
    for cut in (1, 2):
        if len(parts) <= cut:
            continue
        base, unit = "_".join(parts[:-cut]), "_".join(parts[-cut:])
        if base in aliases and aliases[base] in _QUANTITY and _is_unit_word(unit):
            return _target(aliases[base]), unit
    return None


def _target(alias: str) -> str:
    return _QUANTITY[alias][0] if alias in _QUANTITY else alias


def _is_unit_word(word: str) -> bool:
    word = _PER_YEAR.sub("", word) or word
    if word in UNIT_WORDS:
        return True
    if word in NOT_UNITS or len(word) < 2:
        return False
    try:
        ureg().parse_units(word)
    except Exception:  # pint raises several kinds for unknown names
        return False
    return True


def canonical_for(name: str) -> str | None:
    """The canonical column a name maps to (ignoring whether its unit converts), or None."""
    parsed = parse_name(name)
    return parsed[0] if parsed else None


def _canonical_unit(column: str) -> str | None:
    if "_sd_" in column:  # a measurement SD takes the unit of its measurement
        column = column.replace("_sd_", "_", 1)
    for canon, unit in _QUANTITY.values():
        if canon == column:
            return unit
    return None


def _pint_unit(text: str, column: str):
    """A pint unit for the unit text declared in a column name, or None if not a unit."""
    word = key(text) if text not in ('"', "%", "°") else text
    if column in ("map_mm", "mar_mm"):
        word = _PER_YEAR.sub("", word) or word
    word = {"deg": "degree", "°": "degree"}.get(word, word)
    if word in UNIT_WORDS:
        return ureg().parse_units(UNIT_WORDS[word])
    try:
        return ureg().parse_units(text.strip())
    except Exception:
        return None


def affine(src, dst) -> tuple[float, float]:
    """(factor, zero) such that ``value_dst = (value_src - zero) * factor``, both from pint.

    For offset scales (°C, °F) the factor comes from pint's temperature differences
    (``delta_degF`` -> ``delta_degC``) and the zero is the ``src`` reading at the ``dst``
    zero. Both are rounded to 12 significant digits to drop pint's floating-point residue
    (e.g. 31.999999999999936 -> 32, 30.479999999999997 -> 30.48); every unit accepted here
    is defined exactly with fewer digits (NIST SP 811, appendix B).
    """
    reg = ureg()
    if reg.Quantity(1.0, src)._is_multiplicative and reg.Quantity(1.0, dst)._is_multiplicative:
        return float(f"{reg.Quantity(1.0, src).to(dst).magnitude:.12g}"), 0.0

    def delta(unit):
        multiplicative = reg.Quantity(1.0, unit)._is_multiplicative
        return unit if multiplicative else reg.parse_units("delta_" + str(unit))

    factor = reg.Quantity(1.0, delta(src)).to(delta(dst)).magnitude
    zero = reg.Quantity(0.0, dst).to(src).magnitude
    return float(factor), float(f"{zero:.12g}")


def _describe(src, dst) -> str:
    factor, zero = affine(src, dst)
    if zero == 0:
        return f"{src:~P} to {dst:~P} (x {factor:.10g})"
    sign = "-" if zero > 0 else "+"
    return f"{src:~P} to {dst:~P} ((value {sign} {abs(zero):.10g}) x {factor:.10g})"


def convert_values(values: pd.Series, src, dst) -> pd.Series:
    """Convert the cells of ``values`` that parse as numbers from ``src`` to ``dst`` units.

    Other cells (text, blanks) are returned unchanged so that ``check`` can report them.
    A finite number whose converted value exceeds the float64 range (e.g. 1e308 in, which
    is 2.54e308 cm) becomes the largest float64 of its sign (about 1.8e308), without a
    warning, so that ``check`` reports it as out of range rather than as infinity;
    infinity in the file stays infinity.
    """
    factor, zero = affine(src, dst)
    numbers = pd.to_numeric(values, errors="coerce")
    mask = numbers.notna().to_numpy()
    raw = numbers.to_numpy(dtype=float)
    with np.errstate(over="ignore"):
        converted = (raw - zero) * factor if zero else raw * factor
    overflow = np.isinf(converted) & np.isfinite(raw)
    converted[overflow] = np.copysign(np.finfo(np.float64).max, converted[overflow])
    if mask.all():
        return pd.Series(converted, index=values.index, name=values.name)
    out = values.astype(object).copy()
    out.iloc[np.flatnonzero(mask)] = list(converted[mask])
    return out


def file_name_of(name: str, columns) -> str:
    """The column name as the file wrote it, undoing pandas' renaming of repeated headers.

    ``pandas.read_csv`` renames a repeated header ``X`` to ``X.1``, ``X.2``, ...; a name
    ``X.<k>`` that follows a column ``X`` is read as such a repeat.

    >>> file_name_of("bk_depth_cm.1", ["profile_id", "bk_depth_cm", "bk_depth_cm.1"])
    'bk_depth_cm'
    """
    names = [str(c) for c in columns]
    m = re.match(r"^(.*)\.[1-9]\d*$", name, flags=re.S)
    if m and m.group(1) in names and name in names \
            and names.index(m.group(1)) < names.index(name):
        return m.group(1)
    return name


def _two_columns(first: str, second: str, target: str, columns, positions=None) -> str:
    """The problem of two file columns mapping to one canonical column, in the file's words.

    ``positions`` maps a column name to its 1-based position in the file (default: its
    place in ``columns``); the message gives the positions and spreadsheet letters.
    """
    from refit.curate.headers import column_letter

    names = [str(c) for c in columns]
    at = {**{n: j for j, n in enumerate(names, start=1)}, **dict(positions or {})}
    i, j = at[first], at.get(second, names.index(second) + 1)
    fix = ("keep one of them and delete the other, or rename it if it holds another "
           "quantity")
    written = file_name_of(second, columns)
    if written == first:
        return (f"columns {i} and {j} are both named {first!r} (spreadsheet columns "
                f"{column_letter(i)} and {column_letter(j)}) and map to {target}; {fix}")
    return (f"columns {first!r} (column {i}, {column_letter(i)} in a spreadsheet) and "
            f"{written!r} (column {j}, {column_letter(j)}) both map to {target}; {fix}")


def normalise_columns(frame: pd.DataFrame, positions: dict | None = None, *,
                      parser=None, units: dict | None = None
                      ) -> tuple[pd.DataFrame, list[str]]:
    """Map synonyms and declared units onto the canonical columns.

    Parameters
    ----------
    frame : pandas.DataFrame
        A table as read (text or typed cells).
    positions : dict of str to int, optional
        1-based position of each column in the file (``Table.file_columns``), for the
        messages; default the place of the column in ``frame``.
    parser : callable, optional
        ``name -> (canonical column, unit text) or None``; default :func:`parse_name`
        (:func:`refit.curate.columns.parse_column` adds SD columns and fossil names).
    units : dict of str to str, optional
        Units confirmed by the user (``--unit COLUMN=UNIT``), keyed by the file's column
        name or the canonical name; they replace the unit the name declares (or assumes).
        Keys that name no column are for the caller to refuse
        (:func:`refit.curate.columns.check_unit_options`).

    Returns
    -------
    frame : pandas.DataFrame
        The same rows with canonical column names; values in canonical units where a unit was
        declared (cells that are not numbers are kept as they are); other columns unchanged.
    lines : list of str
        One line per renamed or converted column, e.g.
        ``"column 'MAP (in)' -> map_mm: inch to mm (x 25.4)"``.

    Raises
    ------
    InvalidDataError
        A declared unit cannot be converted to the canonical one (naming the column, the
        unit and the accepted units), or two columns map to the same canonical column.
    """
    plan: dict[str, str] = {}
    lines, problems = [], []
    claimed: dict[str, str] = {}
    converted = {}
    parser = parser or parse_name
    units = dict(units or {})
    for name in frame.columns:
        parsed = parser(file_name_of(str(name), frame.columns))
        if parsed is None:
            continue
        target, unit_text = parsed
        confirmed = units.get(str(name), units.get(target))
        if confirmed is not None:
            unit_text = confirmed
            lines.append(f"column {name!r}: unit {confirmed!r} confirmed with --unit")
        if target in claimed:
            problems.append(_two_columns(claimed[target], str(name), target, frame.columns,
                                         positions))
            continue
        claimed[target] = str(name)
        dst_name = _canonical_unit(target)
        if unit_text is None or dst_name is None:
            if unit_text is not None and dst_name is None:
                problems.append(f"column {name!r} maps to {target}, which takes no unit; "
                                f"remove '({unit_text})' from the name")
                continue
            plan[name] = target
            if str(name) != target:
                lines.append(f"column {name!r} -> {target} (renamed)")
            continue
        dst = ureg().parse_units(dst_name)
        src = _pint_unit(unit_text, target)
        if src is None or src.dimensionality != dst.dimensionality:
            dim = str(dst.dimensionality) if str(dst.dimensionality) != "dimensionless" \
                else "[dimensionless]"
            problems.append(
                f"column {name!r}: cannot convert {unit_text!r} to {target} ({dst:~P}); "
                f"accepted units for {target}: {ACCEPTED.get(dim, f'{dst:~P}')}")
            continue
        plan[name] = target
        if src == dst:
            if str(name) != target:
                lines.append(f"column {name!r} -> {target} (renamed; already in {dst:~P})")
            continue
        converted[name] = convert_values(frame[name], src, dst)
        lines.append(f"column {name!r} -> {target}: {_describe(src, dst)}")
    if problems:
        raise InvalidDataError("; ".join(problems) if len(problems) == 1 else
                               "column names that cannot be mapped:\n  - "
                               + "\n  - ".join(problems))
    out = frame.copy() if converted else frame
    for name, values in converted.items():
        out[name] = values
    return out.rename(columns=plan), lines


def column_origins(columns, parser=None) -> dict[str, tuple[str, str | None]]:
    """Where each canonical column came from in a file: ``{canonical: (file column, unit)}``.

    ``unit`` is the unit text declared in the file's column name when the values were
    converted (e.g. ``('Depth to Bk (in)', 'in')``), ``None`` when they were only renamed or
    kept. Columns refit does not know map to themselves.
    """
    out: dict[str, tuple[str, str | None]] = {}
    for name in columns:
        parsed = (parser or parse_name)(str(name))
        if parsed is None:
            out.setdefault(str(name), (str(name), None))
            continue
        target, unit_text = parsed
        dst_name = _canonical_unit(target)
        converted = None
        if unit_text is not None and dst_name is not None:
            src = _pint_unit(unit_text, target)
            if src is not None and src != ureg().parse_units(dst_name):
                converted = unit_text
        out.setdefault(target, (str(name), converted))
    return out


def add_file_context(problems: pd.DataFrame, original: pd.DataFrame,
                     source_rows) -> pd.DataFrame:
    """Say, for each problem, which column of the file it is about and what the file held.

    Adds a ``file_column`` column (the file's own column name, '' when the problem is not
    about a column of the file; ``a|b`` for problems about several columns) and, where the
    values were converted to canonical units, appends the file's original cell to the
    message, so a researcher sees the number they typed, not only the converted one.

    Parameters
    ----------
    problems : pandas.DataFrame
        A problems table (see :class:`refit.curate.checks.CheckReport`).
    original : pandas.DataFrame
        The table as read, with the file's own column names, rows in file order.
    source_rows : array of int
        File row number of each row of ``original``.
    """
    out = problems.copy()
    origins = column_origins(original.columns)
    if out.empty:
        out["file_column"] = pd.Series(dtype=object)
        return out
    position = {int(r): i for i, r in enumerate(np.asarray(source_rows))}
    file_cols, messages = [], []
    for col, row, msg in zip(out["column"], out["row"], out["message"]):
        parts = str(col).split("|") if isinstance(col, str) and col else []
        file_cols.append("|".join(origins[p][0] for p in parts if p in origins))
        if row is not pd.NA and row == row and int(row) in position:
            msg = _with_original(msg, parts, origins, original, position[int(row)])
        messages.append(msg)
    out["file_column"] = file_cols
    out["message"] = messages
    return out


def _with_original(message: str, parts, origins, original, i: int) -> str:
    """Append the file's own number and unit for cells that were converted."""
    from refit.curate.problems import column_hint

    said = []
    for canon in parts:
        fcol, unit = origins.get(canon, (None, None))
        if not unit:
            continue
        cell = original[fcol].iloc[i]
        number = pd.to_numeric(pd.Series([cell]), errors="coerce").iloc[0]
        if number != number:  # text stays text: the message already quotes it
            continue
        message = message.replace(column_hint(canon), "")
        suffix = canon.rsplit("_", 1)[-1]
        suffix = suffix if suffix != "c" else "°C"
        how = (f"which refit converted to {suffix}" if _converts(number, unit, canon) else
               f"beyond the largest number refit can hold once converted to {suffix}")
        said.append(f"the file's column {fcol!r} holds {number:g} {unit}, {how}")
    return message if not said else f"{message} (Note: {'; '.join(said)}.)"


def _converts(number: float, unit: str, canon: str) -> bool:
    """Whether a finite ``number`` in ``unit`` stays finite in ``canon``'s unit."""
    src, dst = _pint_unit(unit, canon), _canonical_unit(canon)
    if src is None or dst is None or not np.isfinite(number):
        return True
    factor, zero = affine(src, ureg().parse_units(dst))
    with np.errstate(over="ignore"):
        return bool(np.isfinite((number - zero) * factor))
