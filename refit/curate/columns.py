"""Which column of an incoming table is which: SD columns, fossil names, and columns that
map to nothing (listed with a did-you-mean, never dropped silently).

:func:`parse_column` extends :func:`refit.curate.units.parse_name` with

- measurement standard deviations and errors: ``Bk depth SD (cm)``, ``bk_depth_sd_in``,
  ``± Bk depth (cm)``, ``Bk depth error (cm)``, ``Bk depth 1σ (cm)`` map to
  ``bk_depth_sd_cm`` (the unit converts by its factor alone) in a fossil table; a calibration
  table has no SD columns, so there they stay extra columns and are listed;
- fossil tables: the identifier synonyms (``ID``, ``sample``, ...) map to ``paleosol_id``.

:func:`unmapped_columns` lists every column that maps to no canonical column, each with
its nearest canonical name (``difflib``, a ratio of at least 0.75) and what it would take
to map it; :func:`looks_like_sd` says whether such a column looks like a measurement SD.
"""

from __future__ import annotations

import difflib
import functools
import re
from typing import TYPE_CHECKING

from refit.curate import units as _units
from refit.errors import UsageError

if TYPE_CHECKING:  # pandas is imported inside the functions (fast `import`)
    import pandas as pd

KINDS = ("calibration", "fossil")
#: Words that mark a column as a measurement SD or error (matched on the normalised key).
SD_WORDS = ("sd", "s_d", "std", "stdev", "std_dev", "stddev", "standard_deviation", "error",
            "err", "uncertainty", "unc", "1s", "1sd", "1sigma", "sigma", "1σ", "σ",
            "plus_minus")
_SD_SIGNS = re.compile(r"±|\+/-|\+-|1\s*σ|σ")
#: Columns refit writes itself and reads back (quarantine files); never listed.
OWN_COLUMNS = ("_reasons", "_source_row")


def _sd_key(text: str) -> tuple[str, bool]:
    """(text without its SD word or sign, whether it had one)."""
    signed = bool(_SD_SIGNS.search(text))
    text = _SD_SIGNS.sub(" ", text)
    bracket = re.match(r"^(.*?)[\s_]*([\(\[][^\)\]]*[\)\]])\s*$", text)
    head, tail = (bracket.group(1), " " + bracket.group(2)) if bracket else (text, "")
    words = _units.key(head).split("_")
    kept, found = [], signed
    i = 0
    while i < len(words):
        two = "_".join(words[i:i + 2])
        if len(words) > i + 1 and two in SD_WORDS:
            found, i = True, i + 2
            continue
        if words[i] in SD_WORDS:
            found, i = True, i + 1
            continue
        kept.append(words[i])
        i += 1
    return "_".join(kept) + tail, found


@functools.lru_cache(maxsize=1)
def _fossil_names() -> tuple[str, ...]:
    from refit._util.resources import schemas_dir
    from refit.curate import schema as _schema

    desc = _schema.load_descriptor(schemas_dir() / "fossil.table.json")
    return tuple(_schema.fields(desc))


def known_names(kind: str = "calibration") -> set[str]:
    """Canonical column names of a table kind (calibration schema; fossil schema too)."""
    names = set(_units.canonical_columns()) | {"profile_depth_cm"}
    return names | set(_fossil_names()) if kind == "fossil" else names


def parse_column(name: str, kind: str = "calibration") -> tuple[str, str | None] | None:
    """(canonical column, declared unit text or None) for a column name, or None.

    >>> parse_column("Bk depth SD (cm)", "fossil")
    ('bk_depth_sd_cm', 'cm')
    >>> parse_column("ID", "fossil")
    ('paleosol_id', None)
    """
    raw = str(name)
    if kind == "fossil" and raw in _fossil_names():
        return raw, None
    stripped, is_sd = _sd_key(raw)
    if is_sd:
        if kind != "fossil":
            return None
        parsed = _units.parse_name(stripped) if stripped.strip() else None
        if parsed is None or _units._canonical_unit(parsed[0]) is None:
            return None
        stem, _, unit = parsed[0].rpartition("_")  # as refit.curate.fossils.sd_column
        target = f"{stem}_sd_{unit}"
        return (target, parsed[1]) if target in _fossil_names() else None
    parsed = _units.parse_name(raw)
    if parsed is not None and kind == "fossil" and parsed[0] == "profile_id":
        return "paleosol_id", parsed[1]
    return parsed


def looks_like_sd(name: str) -> bool:
    """Whether a column name carries an SD or error word or sign (``SD``, ``±``, ``1σ``)."""
    return _sd_key(str(name))[1]


@functools.lru_cache(maxsize=2)
def _candidates(kind: str) -> dict[str, str]:
    """Normalised spelling -> canonical column, for the did-you-mean."""
    out = {_units.key(n): n for n in known_names(kind)}
    for alias, quantity in _units._alias_table().items():
        out.setdefault(alias, _units._target(quantity))
    return out


def nearest_name(name: str, kind: str = "calibration") -> str | None:
    """The canonical column nearest to ``name`` (difflib ratio at least 0.75), or None."""
    cands = _candidates(kind)
    stripped, _ = _sd_key(str(name))
    bracket = re.match(r"^(.*?)[\s_]*[\(\[][^\)\]]*[\)\]]\s*$", stripped)
    probe = _units.key(bracket.group(1) if bracket else stripped) or _units.key(str(name))
    hit = difflib.get_close_matches(probe, list(cands), n=1, cutoff=0.75)
    return cands[hit[0]] if hit else None


def unmapped_columns(columns, kind: str = "calibration") -> list[dict]:
    """Every column that maps to no canonical column, with a did-you-mean.

    Returns
    -------
    list of dict
        ``column`` (as in the file), ``nearest`` (canonical name or None), ``sd`` (looks
        like a measurement SD) and ``how`` (what it would take to map it).
    """
    known = known_names(kind)
    out = []
    for name in columns:
        name = str(name)
        if name in known or name in OWN_COLUMNS or parse_column(name, kind) is not None:
            continue
        nearest, sd = nearest_name(name, kind), looks_like_sd(name)
        out.append({"column": name, "nearest": nearest, "sd": sd,
                    "how": _how(name, nearest, sd, kind)})
    return out


def _how(name: str, nearest: str | None, sd: bool, kind: str) -> str:
    kept = ("refit keeps it as an extra column, unchecked" if kind == "calibration"
            else "refit does not use it")
    if sd and kind == "fossil":
        target = f"{nearest.rsplit('_', 1)[0]}_sd_{nearest.rsplit('_', 1)[1]}" \
            if nearest and "_sd_" not in nearest and "_" in nearest else nearest
        example = f" (e.g. {target})" if target else ""
        return (f"it looks like a measurement SD but matches no feature: name it after its "
                f"feature{example}, e.g. 'Bk depth SD (cm)', or pass --ignore-columns "
                f"{name!r} to `refit apply` to go on without it")
    if sd:
        return (f"{kept}; a calibration table has no SD columns (refit fits the values "
                "as given)")
    if nearest:
        return f"{kept}; did you mean {nearest}? Rename the header to {nearest!r} to map it"
    return f"{kept}; rename it to a canonical column (see schemas/) to have it checked"


def parse_unit_options(items) -> dict[str, str]:
    """``("MAP (in)=mm", "bk_depth_cm=in")`` -> ``{"MAP (in)": "mm", "bk_depth_cm": "in"}``.

    Raises
    ------
    UsageError
        An item without ``=``, or with an empty side.
    """
    out = {}
    for item in items or ():
        col, sep, unit = str(item).rpartition("=")
        if not sep or not col.strip() or not unit.strip():
            raise UsageError(f"--unit {item!r} is not COLUMN=UNIT; write e.g. "
                             "--unit 'MAP (in)=mm' or --unit bk_depth_cm=m")
        out[col.strip()] = unit.strip()
    return out


def check_unit_options(units: dict, columns, kind: str = "calibration") -> None:
    """Refuse ``--unit`` options that name no column of the table (by file or canonical
    name)."""
    names = [str(c) for c in columns]
    targets = {}
    for n in names:
        parsed = parse_column(n, kind)
        if parsed:
            targets[parsed[0]] = n
    for col in units:
        if col not in names and col not in targets:
            raise UsageError(f"--unit names the column {col!r}, which the table does not "
                             f"have; its columns are: {', '.join(names)}. Nothing was "
                             "written.")


__all__ = ["parse_column", "looks_like_sd", "nearest_name", "unmapped_columns",
           "parse_unit_options", "check_unit_options", "known_names", "SD_WORDS"]


def unmapped_problems(unmapped: list[dict], kind: str = "calibration",
                      ignore=()) -> "pd.DataFrame":
    """Problems about the unmapped columns (table level, in the problems-table columns).

    ``unmapped-column`` (warning) for each column; in a fossil table a column that looks
    like a measurement SD is an error, ``unmapped-sd-column``, unless ``ignore`` names it:
    applying without it would propagate no measurement error and give intervals too narrow.
    """
    import pandas as pd

    from refit.curate.problems import PROBLEM_COLUMNS

    ignore = set(ignore or ())
    recs = []
    for item in unmapped:
        stop = kind == "fossil" and item["sd"] and item["column"] not in ignore
        rule = "unmapped-sd-column" if stop else "unmapped-column"
        how = item["how"] if item["column"] not in ignore else "ignored with --ignore-columns"
        recs.append({"severity": "error" if stop else "warning", "rule": rule, "row": pd.NA,
                     "profile_id": None, "column": item["column"], "value": "",
                     "message": f"column {item['column']!r} maps to no canonical column: "
                                f"{how}."})
    out = pd.DataFrame(recs, columns=PROBLEM_COLUMNS)
    out["row"] = out["row"].astype("Int64")
    return out


def with_problems(problems: "pd.DataFrame", extra: "pd.DataFrame") -> "pd.DataFrame":
    """``problems`` with ``extra`` added: errors first, table-level problems before rows."""
    import pandas as pd

    if extra.empty:
        return problems
    if problems.empty:
        return extra.reset_index(drop=True)
    out = pd.concat([extra, problems], ignore_index=True)
    order = (out["severity"] != "error").astype(int) * 2 + out["row"].notna().astype(int)
    return out.iloc[order.argsort(kind="stable")].reset_index(drop=True)
