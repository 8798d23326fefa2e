"""A first recipe for a calibration table or store: what is there, and what to fit on it.

``refit init`` writes a commented recipe a researcher edits rather than writes from
nothing. :func:`survey` reads the data the way ``refit fit`` will (a table through
:func:`refit.curate.checks.check_file`, the one reader with its unit and column mapping;
a store through :func:`refit.curate.store.open_store`) and counts what a recipe chooses
from; :func:`suggest` picks a response, a predictor and a groups column, each with its
reason; :func:`render` writes the TOML text. Every default it writes comes from the code
that reads recipes (:class:`refit.select.recipe.Recipe` and
:func:`refit.select.defaults.resolve`), and every list of allowed values from the
constants :mod:`refit.select.recipe` checks against, so the text cannot drift from them.
The text is parsed back with :func:`refit.select.recipe.parse_recipe` before it is
returned, so what ``refit init`` writes always loads.
"""

from __future__ import annotations

import dataclasses
import json
import math
import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from refit.errors import InvalidDataError

#: values of a text column listed one per line under [subset] (the rest are counted)
MAX_LEVELS = 12
#: a groups column needs at least this many groups for whole groups to be held out
MIN_GROUPS = 3
#: with at most this many groups every group is held out in turn (leave-one-group-out)
LOGO_MAX_GROUPS = 10
#: columns whose values name the source or region of a soil, in order of preference
GROUP_COLUMNS = ("source", "region")
#: the first climate column of the schema (MAP, then MAT, MAR) is the response when this
#: share of the most soils any climate column has beside a feature have it too
NEAR_BEST = 0.8
#: characters per comment line
WIDTH = 92


@dataclass
class Survey:
    """What a table or store holds, as a recipe chooses from it.

    Attributes
    ----------
    kind : str
        ``table`` or ``store``.
    path : Path
        The table file or the store folder.
    frame : pandas.DataFrame
        The records with canonical column names (a table as checked, a store's records).
    n_rows : int
        Records read.
    mapped : list of str
        How the reader mapped file columns to canonical names (a table only).
    unmapped : list of dict
        Columns that map to no canonical name: ``column`` and ``how`` (what to do).
    n_errors : int
        Errors the check found in a table (``refit fit`` refuses such a table).
    version : int or None
        A store's dataset version.
    sheet : str or None
        The worksheet of an xlsx table that was read and that the recipe names: the one
        asked for, or the first visible one of a workbook with several visible sheets.
    sheets : list of str
        Every worksheet name of an xlsx table (empty for other data).
    """

    kind: str
    path: Path
    frame: object
    n_rows: int
    mapped: list = field(default_factory=list)
    unmapped: list = field(default_factory=list)
    n_errors: int = 0
    version: int | None = None
    sheet: str | None = None
    sheets: list = field(default_factory=list)


@dataclass
class Choice:
    """One suggested value and why: ``value`` (None when nothing fits) and ``reason``."""

    value: object
    reason: str


def survey(path, sheet: str | None = None) -> Survey:
    """Read a calibration table (csv/tsv/xlsx/parquet) or a store folder.

    Parameters
    ----------
    path : str or Path
        The table or the store folder.
    sheet : str, optional
        Worksheet of an xlsx table (a name); default the first visible one. A workbook
        with several visible sheets gets the sheet read named in ``Survey.sheet`` either
        way, so a later change of the workbook's sheet order cannot change the data.

    Raises
    ------
    UnreadableInputError
        Missing or unreadable file, a folder that is not a refit store, or no worksheet
        ``sheet`` in the workbook (its sheets are listed).
    UsageError
        ``sheet`` with a store or with a table that is not an xlsx workbook.
    """
    from refit.errors import UnreadableInputError, UsageError

    path = Path(path)
    if sheet is not None and (path.is_dir() or path.exists()):
        from refit.curate.tables import is_workbook

        if path.is_dir() or not is_workbook(path):
            what = "a store folder" if path.is_dir() else f"a {path.suffix or 'text'} file"
            raise UsageError(f"--sheet {sheet!r}: {path} is {what}, not an xlsx workbook; "
                             "only an .xlsx table has sheets (leave out --sheet)")
    if path.is_dir():
        from refit.select.dataset import _open_store

        store = _open_store(path, "", "give a calibration table (csv, xlsx, parquet) or a "
                                      "store folder made by `refit admit`")
        frame = store.records
        extra = [{"column": c, "how": "an extra column of the store (kept, unchecked)"}
                 for c in frame.columns if c not in _schema_names()]
        return Survey("store", path, frame, len(frame), unmapped=extra,
                      version=store.version)
    if not path.exists():
        raise UnreadableInputError(f"{path}: no such file or folder; give a calibration table "
                                   "(csv, xlsx, parquet) or a store folder")
    from refit.curate.checks import check_file
    from refit.curate.tables import is_workbook, workbook_sheets

    names: list = []
    if is_workbook(path):
        names, visible = workbook_sheets(path)
        if sheet is not None and sheet not in names:
            raise UnreadableInputError(f"{path}: --sheet {sheet!r}: no such worksheet; the "
                                       f"workbook has {', '.join(map(repr, names))}")
        if sheet is None and len(visible) > 1:
            sheet = visible[0]
    report = check_file(path, sheet=sheet)
    unmapped = report.problems[report.problems["rule"] == "unmapped-column"]
    return Survey("table", path, report.frame, int(report.n_rows),
                  mapped=[n for n in report.notes if n.startswith("column ")],
                  unmapped=[{"column": r.column, "how": _how(r.message)}
                            for r in unmapped.itertuples(index=False)],
                  n_errors=len(report.errors), sheet=sheet, sheets=list(names))


def _how(message: str) -> str:
    return str(message).split(": ", 1)[-1].rstrip(".")


def _schema_names() -> list[str]:
    from refit.curate.schema import field_names

    return field_names()


def _filled(frame, name: str) -> int:
    return int(frame[name].notna().sum()) if name in frame.columns else 0


def _stem(name: str) -> str:
    """``map_mm`` -> ``map``, ``bk_depth_cm`` -> ``bk_depth``; an index keeps its name."""
    from refit.curate.schema import fields

    return name.rpartition("_")[0] if fields().get(name, {}).get("unit") else name


# ----------------------------------------------------------------------------- choices
def climate_columns() -> list[str]:
    """Climate columns a calibration table may hold (``x-refit-rules`` of the schema)."""
    from refit.curate.schema import refit_rules

    return list(refit_rules()["climate_columns_any_of"])


def feature_candidates() -> list[str]:
    """Columns a transfer function is fitted on: the horizon depths and thicknesses of the
    fossil schema, then the weathering indices (:data:`refit.soil.indices.INDEX_COLUMNS`)."""
    from refit.curate.fossils import load_descriptor
    from refit.curate.schema import refit_rules
    from refit.soil.indices import INDEX_COLUMNS

    return list(refit_rules(load_descriptor())["decompacted_columns"]) + list(INDEX_COLUMNS)


def setting_columns() -> list[str]:
    """State-factor columns a subset filters on (the fossil schema's setting columns)."""
    from refit.curate.fossils import load_descriptor
    from refit.curate.schema import refit_rules

    return list(refit_rules(load_descriptor())["setting_columns"])


def suggest(sv: Survey) -> dict[str, Choice]:
    """The response, the predictor and the groups column to start from, with reasons.

    The response is the climate column with the most values (ties: schema order, MAP
    first); the predictor the feature with the most soils that also have the response;
    the groups column ``source`` (else ``region``) when it has at least
    :data:`MIN_GROUPS` groups among those soils.

    Raises
    ------
    InvalidDataError
        No climate column or no feature column has a value.
    """
    f = sv.frame
    climates = [c for c in climate_columns() if _filled(f, c)]
    if not climates:
        raise InvalidDataError(f"{sv.path}: no climate column ({', '.join(climate_columns())}) "
                               "has a value, so there is nothing to fit; add one (units in the "
                               "column name, e.g. 'MAP (mm)')")
    feats = [c for c in feature_candidates() if _filled(f, c)]
    pairs = {(y, x): int((f[y].notna() & f[x].notna()).sum()) for y in climates for x in feats}
    if not pairs or max(pairs.values()) == 0:
        raise InvalidDataError(
            f"{sv.path}: no feature column ({', '.join(feature_candidates())}) has a value "
            f"beside a climate column ({', '.join(climates)}), so there is nothing to fit on; "
            "add one (e.g. 'Depth to Bk (cm)'), or derive the weathering indices from the "
            "oxides first")
    best = max(pairs.values())
    response = next(y for y in climates for x in feats if pairs[y, x] >= NEAR_BEST * best)
    n_pairs = {x: pairs[response, x] for x in feats if pairs[response, x]}
    pred = max(n_pairs, key=n_pairs.get)
    others = ", ".join(f"{c} ({_filled(f, c)})" for c in climates if c != response)
    resp = Choice(response, f"{response} has a value in {_filled(f, response)} of "
                  f"{sv.n_rows} records" + (f"; also present: {others}" if others else "")
                  + ("" if response == climates[0] else
                     f" ({climates[0]} is preferred when nearly as many soils have it)"))
    rest = ", ".join(f"{c} ({n})" for c, n in n_pairs.items() if c != pred)
    pick = Choice(pred, f"{n_pairs[pred]} soils have {pred} and {response}"
                  + (f"; other features: {rest}" if rest else ""))
    has_y = f[response].notna()
    usable = f[has_y & f[pred].notna()]
    return {"response": resp, "predictor": pick, "groups": _groups(usable),
            "n_usable": Choice(len(usable), "")}


def _groups(usable) -> Choice:
    found = [(c, int(usable[c].dropna().nunique())) for c in GROUP_COLUMNS
             if c in usable.columns]
    text = ", ".join(f"{c} ({n} groups)" for c, n in found)
    for column, n in found:
        if n >= MIN_GROUPS:
            also = ", ".join(f"{c} ({k} groups)" for c, k in found if c != column)
            return Choice(column, f"groups: {column} has {n} groups among these soils"
                                  + (f" (also {also})" if also else "") + ": whole groups "
                                  "are held out, as a fossil's source is one the calibration "
                                  "never saw")
    return Choice(None, f"fewer than {MIN_GROUPS} groups in {text or 'no source column'}: "
                        "random k-fold instead (it flatters when soils of one source "
                        "resemble each other)")


# ----------------------------------------------------------------------------- rendering
def toml_string(text) -> str:
    """A TOML basic string (JSON's escapes are TOML's, plus DEL)."""
    return json.dumps(str(text), ensure_ascii=False).replace("\x7f", "\\u007f")


def _comment(text) -> str:
    """Text safe in a TOML comment (no control characters, one line)."""
    return re.sub(r"[\x00-\x08\x0a-\x1f\x7f]", " ", str(text))


def _wrap(text, prefix: str = "# ") -> list[str]:
    """A comment wrapped to lines of at most :data:`WIDTH` characters."""
    import textwrap

    return textwrap.wrap(_comment(text), width=WIDTH, initial_indent=prefix,
                         subsequent_indent=prefix + "  ", break_long_words=False,
                         break_on_hyphens=False) or [prefix.rstrip()]


def _recipe_default(name: str):
    from refit.select.recipe import Recipe

    return next(f.default for f in dataclasses.fields(Recipe) if f.name == name)


def _data_lines(sv: Survey, recipe_dir: Path) -> list[str]:
    key = "store" if sv.kind == "store" else "table"
    folder = os.path.abspath(recipe_dir)
    target = os.path.abspath(sv.path)
    out = ["[data]"]
    if os.path.commonpath([folder, target]) == folder:
        out.append(f"{key} = {toml_string(Path(os.path.relpath(target, folder)).as_posix())}")
    else:
        out += [f"# The {key} lies outside this recipe's folder, and a recipe names only data",
                "# inside its own folder: move the recipe next to it, or run",
                f"#   refit fit RECIPE --{key} {_comment(sv.path)}",
                f"# {key} = {toml_string(sv.path.name)}"]
    if sv.kind == "store":
        out.append(f"# version = {sv.version}   # a dataset version of the store; default "
                   "the latest")
    if sv.sheet is not None:
        others = [n for n in sv.sheets if n != sv.sheet]
        out += _wrap(f"sheet: the worksheet of {sv.path.name} that is read; "
                     + (f"its other sheets ({', '.join(map(repr, others))}) are ignored"
                        if others else "the workbook has no other sheet"))
        out.append(f"sheet = {toml_string(sv.sheet)}")
    return out + [""]


def _subset_lines(usable) -> list[str]:
    import pandas as pd

    out = ["[subset]",
           "# Keep the soils that match the fossils' setting. Each line below is one filter;",
           "# remove the '#' to use it. A value, a list of values, or a range:",
           "#   vegetation = [\"grassland\", \"savanna\"]     age_ka = { min = 5, max = 500 }",
           f"# Counts are of the {len(usable)} soils with the response and the predictor."]
    for col in setting_columns():
        if col not in usable.columns or not usable[col].notna().any():
            continue
        values = usable[col].dropna()
        if pd.api.types.is_numeric_dtype(values):
            q = values.quantile([0.0, 0.25, 0.5, 0.75, 1.0]).tolist()
            out.append(f"# {col}: {len(values)} soils, from {q[0]:g} to {q[4]:g} "
                       f"(quartiles {q[1]:g}, {q[2]:g}, {q[3]:g})")
            keep = int(values.between(q[1], q[3]).sum())
            out.append(f"# {col} = {{ min = {q[1]:g}, max = {q[3]:g} }}   # keeps "
                       f"{_soils(keep)}")
            continue
        counts = values.astype(str).value_counts()
        out.append(f"# {col}: {counts.size} value(s) in {len(values)} soils")
        for value, n in counts.head(MAX_LEVELS).items():
            out.append(f"# {col} = {toml_string(value)}   # {_soils(n)}")
        if counts.size > MAX_LEVELS:
            out.append(f"#   ... and {counts.size - MAX_LEVELS} more values "
                       f"({_soils(int(counts.iloc[MAX_LEVELS:].sum()))})")
    return out + [""]


def _soils(n: int) -> str:
    return f"{n} soil" + ("" if n == 1 else "s")


def _list(values) -> str:
    return "[" + ", ".join(toml_string(v) for v in values) + "]"


def _function_lines(pick: dict) -> list[str]:
    y, x = pick["response"].value, pick["predictor"].value
    return ["[function]",
            "# id: the function's name in files and registries (lower case, digits, '_')",
            f"id = {toml_string(_stem(y) + '_from_' + _stem(x))}",
            *_wrap(f"response: {pick['response'].reason}"),
            f"response = {toml_string(y)}",
            *_wrap(f"predictors: {pick['predictor'].reason}"),
            f"predictors = {_list([x])}",
            "# weights = \"<column>\"   # weights of the 'wls' estimator",
            "# x_sd = \"<column>\"      # measurement SD of the feature, for 'york'",
            "# y_sd = \"<column>\"      # measurement SD of the climate column, for 'york'",
            ""]


def _candidate_lines(resolved: dict, notes: dict) -> list[str]:
    from refit.select.recipe import DIRECTIONS, ESTIMATORS, FORMS, MAX_DEGREE

    forms, directions = _recipe_default("forms"), _recipe_default("directions")
    return ["[candidates]",
            f"# forms: {', '.join(FORMS)}, polynomial-N (N = 2..{MAX_DEGREE})",
            f"forms = {_list(forms)}",
            *_wrap(f"estimators: {', '.join(ESTIMATORS)}"
                   + (f"; {notes['estimators']}" if notes.get("estimators") else "")),
            f"estimators = {_list(resolved['estimators'])}",
            *_wrap(f"directions: {', '.join(DIRECTIONS)} (inverse: climate on the feature; "
                   "forward: the feature on climate, inverted)"),
            f"directions = {_list(directions)}",
            ""]


def _validation_lines(groups: Choice, n_groups: int, resolved: dict, notes: dict,
                      ) -> list[str]:
    from refit.select.schemes import SCHEMES

    out = ["[validation]", *_wrap(f"schemes: {', '.join(SCHEMES)}"), *_wrap(groups.reason)]
    if groups.value is not None:
        out.append(f"groups = {toml_string(groups.value)}")
        scheme = resolved["scheme"]
        if n_groups <= LOGO_MAX_GROUPS:
            scheme = "leave-one-group-out"
            out.append(f"# with {n_groups} groups each is held out in turn")
        elif notes.get("scheme"):
            out += _wrap(notes["scheme"])
    else:
        scheme = resolved["scheme"]
        out += _wrap("or hold out whole areas: scheme = \"spatial-block\" with block_km = 50 "
                     "(latitude and longitude)")
    folds = f"folds = {_recipe_default('folds')}"
    out += [f"scheme = {toml_string(scheme)}",
            folds if "kfold" in scheme else f"# {folds}   # k-fold schemes only",
            f"repeats = {_recipe_default('repeats')}",
            f"seed = {_recipe_default('seed')}   # every random step is seeded",
            ""]
    return out


def training_groups(n_groups: int, scheme: str, folds: int) -> int:
    """The fewest groups a fold trains on: all but one under leave-one-group-out, all but
    the largest fold's share under group k-fold."""
    if scheme == "leave-one-group-out":
        return n_groups - 1
    return n_groups - math.ceil(n_groups / max(1, min(folds, n_groups)))


def group_methods_note(methods, n_groups: int, scheme: str, level: float) -> str | None:
    """Why the group-level conformal methods are left out of a first recipe, or None:
    with too few training sources their limits are infinite at ``level``
    (:func:`refit.models.intervals.group_conformal.too_few_groups`), so they would only
    add candidates ranked last with unbounded intervals."""
    from refit.models.intervals.group_conformal import too_few_groups
    from refit.select.recipe import GROUP_METHODS

    group = [m for m in methods if m in GROUP_METHODS]
    if not group or n_groups < 2:
        return None
    train = training_groups(n_groups, scheme, int(_recipe_default("folds")))
    if too_few_groups(train, 1.0 - level) is None:
        return None
    need = math.ceil(level / (1.0 - level) - 1e-9)  # G / (G + 1) >= level
    return (f"{' and '.join(group)} left out: with {n_groups} sources each fold trains on "
            f"{train}, too few for a {100 * level:g}% group-level interval (it needs at "
            f"least {need}; the limits would be infinite). Add them with more sources or "
            "a lower level")


def _scheme(groups: Choice, n_groups: int, resolved: dict) -> str:
    """The scheme :func:`_validation_lines` writes."""
    if groups.value is not None and n_groups <= LOGO_MAX_GROUPS:
        return "leave-one-group-out"
    return resolved["scheme"]


def _interval_lines(resolved: dict, notes: dict, left_out: str | None = None) -> list[str]:
    from refit.select.recipe import GROUP_METHODS, METHODS

    methods = resolved["methods"]
    if left_out:
        methods = [m for m in methods if m not in GROUP_METHODS]
    return ["[intervals]",
            f"level = {_recipe_default('level')}",
            *_wrap(f"methods: {', '.join(METHODS)}"
                   + (f"; {notes['methods']}" if notes.get("methods") else "")),
            *(_wrap(left_out) if left_out else []),
            f"methods = {_list(methods)}"]


def _header(sv: Survey, pick: dict) -> list[str]:
    what = (f"store '{sv.path.name}' (dataset version {sv.version})" if sv.kind == "store"
            else f"table '{sv.path.name}'"
            + (f" (sheet '{sv.sheet}')" if sv.sheet is not None else ""))
    out = [f"# A first recipe for the {_comment(what)}, written by `refit init`: edit it, then",
           "#   refit fit THIS_FILE --out run",
           "# Every key and its default are in the README's recipe reference.",
           "#",
           f"# {sv.n_rows} records. Columns found, with the records that have a value:"]
    f = sv.frame
    origin = {}
    for note in sv.mapped:
        m = re.match(r"column (.+?) -> (\w+)(.*)$", note)
        if m:
            how = m.group(3).strip().removeprefix(":").strip()
            how = re.sub(r"^\(renamed(; )?(.*)\)$", r"\2", how)
            origin[m.group(2)] = f"from {m.group(1)}" + (f": {how}" if how else "")
    skip = {u["column"] for u in sv.unmapped}
    width = max([len(c) for c in f.columns if c not in skip] + [8])
    for c in (c for c in f.columns if c not in skip):
        text = f"#   {c:<{width}} {_filled(f, c):>6}"
        out.append(_comment(f"{text}   {origin[c]}" if c in origin else text))
    if sv.unmapped:
        out.append("# Columns that map to no canonical name (kept, never fitted on):")
        for u in sv.unmapped:
            out += _wrap(f"{u['column']!r}: {u['how']}", prefix="#   ")
    if sv.n_errors:
        out += _wrap(f"The check found {sv.n_errors} error(s): `refit fit` refuses this table "
                     f"until they are fixed (`refit check {sv.path.name}` lists them), or "
                     "admit it to a store (`refit admit`), which quarantines the bad rows.")
    return out + [""]


def render(sv: Survey, pick: dict, recipe_path) -> str:
    """The commented recipe text for a survey and the suggested choices.

    Raises
    ------
    RuntimeError
        The text does not load as a recipe (a bug of this module, never of the data).
    """
    from refit.select.defaults import resolve

    groups = pick["groups"]
    resolved, sentences = resolve({}, groups.value)
    starts = {"scheme": "scheme", "estimators": "estimators", "methods": "interval methods"}
    notes = {key: s for key, start in starts.items() for s in sentences
             if s.startswith(start)}
    usable = sv.frame[sv.frame[pick["response"].value].notna()
                      & sv.frame[pick["predictor"].value].notna()]
    n_groups = int(usable[groups.value].nunique()) if groups.value else 0
    lines = (_header(sv, pick) + _data_lines(sv, Path(recipe_path).parent)
             + _subset_lines(usable) + _function_lines(pick)
             + _candidate_lines(resolved, notes)
             + _validation_lines(groups, n_groups, resolved, notes)
             + _interval_lines(resolved, notes, group_methods_note(
                 resolved["methods"], n_groups, _scheme(groups, n_groups, resolved),
                 float(_recipe_default("level")))))
    text = "\n".join(lines) + "\n"
    _self_check(text, recipe_path)
    return text


def _self_check(text: str, recipe_path) -> None:
    import tomllib

    from refit.errors import RefitError
    from refit.select.recipe import parse_recipe

    doc = tomllib.loads(text)
    if "table" in doc["data"] or "store" in doc["data"]:
        try:
            parse_recipe(doc, path=Path(recipe_path), text=text)
        except RefitError as exc:  # pragma: no cover - a bug here, not in the data
            raise RuntimeError(f"refit init wrote a recipe that does not load: {exc}") from None


def scaffold(path, recipe_path, sheet: str | None = None) -> tuple[str, Survey, dict]:
    """Survey ``path`` (table or store; ``sheet``: worksheet of an xlsx table, see
    :func:`survey`) and the recipe text for ``recipe_path``.

    Returns
    -------
    (str, Survey, dict)
        The TOML text, the survey and the choices (:func:`suggest`).
    """
    sv = survey(path, sheet)
    pick = suggest(sv)
    return render(sv, pick, recipe_path), sv, pick
