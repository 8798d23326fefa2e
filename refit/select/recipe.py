"""Fitting recipes: one TOML file that says which data, which soils, which equations and how
to judge them.

A recipe has these sections (every key is optional unless marked *required*)::

    [data]          table = "soils.csv"  or  store = "path/to/store"    (one of them, required)
                    version (a store's dataset version; default the latest)
                    sheet (a worksheet name of an xlsx table; default the first visible)
    [subset]        <column> = "value" | ["value", ...] | { min = ..., max = ... }
    [function]      id (required), response (required), predictors (required),
                    weights (wls), x_sd and y_sd (york)
    [candidates]    forms, estimators, directions, random_slope (mixed)
    [validation]    scheme, folds, repeats, groups, seed, block_km (spatial-block)
    [intervals]     level, methods

Paths in ``[data]`` are relative to the recipe file. The file is parsed with the standard
library's TOML reader (``tomllib``, TOML 1.0); nothing in it is ever evaluated as code.
Unknown sections or keys and bad values are errors that name the file, the line and the key.

Forms are ``linear``, ``quadratic``, ``cubic``, ``polynomial-N`` (N = 2..6) and
``exponential``; estimators ``ols``, ``wls`` (needs ``[function] weights``), ``huber``,
``theil-sen``, ``york`` (needs ``[function] x_sd`` and ``y_sd``: measurement SDs of the
feature and of the climate column), ``quantile``, ``mixed`` (needs ``[validation] groups``);
directions ``inverse`` and ``forward``;
schemes ``kfold``, ``loo`` (or ``leave-one-out``), ``group-kfold``, ``leave-one-group-out``,
``spatial-block`` (:mod:`refit.select.schemes`);
interval methods ``analytic``, ``bootstrap``, ``split-conformal``, ``jackknife+``, ``cv+``,
``quantile``, ``group-jackknife+``, ``group-cv+`` (whole groups left out; need ``groups``).
What a recipe leaves out gets the defaults of :mod:`refit.select.defaults`.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass, field
from pathlib import Path

from refit._util.paths import outside
from refit.errors import InvalidDataError, RefitError, UnreadableInputError, UsageError
from refit.select.defaults import resolve
from refit.select.values import Values, suggest  # noqa: F401  (suggest: public here too)
from refit.select.values import where as _where
from refit.select.schemes import ALIASES, NEEDS_GROUP_COLUMN, SCHEMES, canonical_scheme
from refit.select.subsets import Filter, parse_filter

SECTIONS = {
    "data": ("table", "store", "version", "sheet"),
    "subset": None,  # any column name
    "function": ("id", "response", "predictors", "weights", "x_sd", "y_sd"),
    "candidates": ("forms", "estimators", "directions", "random_slope"),
    "validation": ("scheme", "folds", "repeats", "groups", "seed", "block_km"),
    "intervals": ("level", "methods"),
}
FORMS = ("linear", "quadratic", "cubic", "exponential")  # plus polynomial-N
MAX_DEGREE = 6
#: Limits of recipe sizes (README, "Recipes"): each one well above any real use, so a
#: typo (repeats = 100000000) stops at once instead of running for days.
MAX_FOLDS = 1_000
MAX_REPEATS = 1_000
#: Seeds are 0 .. 2**32 - 1, the range numpy's legacy generators and scikit-learn's
#: random_state accept (common practice), so one seed drives every random step.
MAX_SEED = 2**32 - 1
ESTIMATORS = ("ols", "wls", "huber", "theil-sen", "york", "quantile", "mixed", "wls-power")
DIRECTIONS = ("inverse", "forward")
from refit.models.intervals.group_conformal import GROUP_INTERVALS as GROUP_METHODS  # noqa: E402
METHODS = ("analytic", "bootstrap", "split-conformal", "jackknife+", "cv+", "quantile",
           *GROUP_METHODS)
_ID = re.compile(r"^[a-z][a-z0-9_]*$")


@dataclass(frozen=True)
class Recipe:
    """A parsed, checked recipe (see the module docstring for the meaning of each field).

    ``lines`` maps ``"section"`` and ``"section.key"`` to the 1-based line of the file
    where it is written, so later steps (a column missing from the data, a subset that
    keeps too few rows) can point at the line too.
    """

    path: Path
    sha256: str
    table: Path | None
    store: Path | None
    subset: tuple[Filter, ...]
    function_id: str
    response: str
    predictors: tuple[str, ...]
    forms: tuple[str, ...] = ("linear",)
    estimators: tuple[str, ...] = ("ols",)
    directions: tuple[str, ...] = ("inverse",)
    scheme: str = "kfold"
    folds: int = 5
    repeats: int = 1
    groups: str | None = None
    seed: int = 0
    level: float = 0.95
    methods: tuple[str, ...] = ("analytic",)
    version: int | None = None
    weights: str | None = None
    x_sd: str | None = None
    y_sd: str | None = None
    random_slope: bool = False
    block_km: float | None = None
    sheet: str | None = None
    lines: dict = field(default_factory=dict, compare=False, repr=False)
    defaults: tuple[str, ...] = field(default=(), compare=False)

    def where(self, key: str) -> str:
        """``"recipe.toml, line 12"`` for a ``section.key`` (or the file alone)."""
        line = self.lines.get(key) or self.lines.get(key.split(".")[0])
        return f"{self.path}" + (f", line {line}" if line else "")

    def to_dict(self) -> dict:
        """JSON-ready content (paths as written relative to the recipe's folder)."""
        return {
            "path": self.path.name, "sha256": self.sha256,
            "data": {"table": _relative(self.table, self.path),
                     "store": _relative(self.store, self.path), "version": self.version},
            "subset": [f.to_dict() for f in self.subset],
            "function": {"id": self.function_id, "response": self.response,
                         "predictors": list(self.predictors), "weights": self.weights,
                         "x_sd": self.x_sd, "y_sd": self.y_sd},
            "candidates": {"forms": list(self.forms), "estimators": list(self.estimators),
                           "directions": list(self.directions),
                           "random_slope": self.random_slope},
            "validation": {"scheme": self.scheme, "folds": self.folds,
                           "repeats": self.repeats, "groups": self.groups, "seed": self.seed,
                           "block_km": self.block_km},
            "intervals": {"level": self.level, "methods": list(self.methods)},
            "defaults_applied": list(self.defaults),
        }


def _relative(target: Path | None, recipe_path: Path) -> str | None:
    """A data path as the recipe would write it: relative to the recipe's folder if inside
    it, else the folder's name only (no machine paths go into published files)."""
    if target is None:
        return None
    try:
        return Path(target).relative_to(Path(recipe_path).resolve().parent).as_posix()
    except ValueError:
        return Path(target).name


# ----------------------------------------------------------------------------- form names
def form_degree(name: str) -> tuple[str, int | None]:
    """Engine form and degree for a recipe form name.

    >>> form_degree("cubic")
    ('polynomial', 3)
    """
    if name in ("linear", "quadratic", "exponential"):
        return name, None
    if name == "cubic":
        return "polynomial", 3
    m = re.fullmatch(r"polynomial-(\d+)", name)
    if m and 2 <= int(m.group(1)) <= MAX_DEGREE:
        return "polynomial", int(m.group(1))
    raise ValueError(name)


def _valid_form(name) -> bool:
    try:
        form_degree(name)
    except (ValueError, TypeError):
        return False
    return True


# ----------------------------------------------------------------------------- lines
_HEADER = re.compile(r"^\s*\[\s*([^\[\]]+?)\s*\]\s*(#.*)?$")
_KEY = re.compile(r"""^\s*("[^"]*"|'[^']*'|[A-Za-z0-9_\-]+)\s*(\.|=)""")


def key_lines(text: str) -> dict[str, int]:
    """Map ``section`` and ``section.key`` to the line where each is written (1-based).

    A light scan of the text, good for error messages: it follows ``[section]`` headers
    and ``key = ...`` lines at the start of a line (bare or quoted keys). Keys inside
    inline tables are found by :func:`inline_key_line`.
    """
    out: dict[str, int] = {}
    section = ""
    for i, line in enumerate(text.splitlines(), start=1):
        h = _HEADER.match(line)
        if h:
            section = h.group(1).strip().strip("\"'")
            out.setdefault(section, i)
            continue
        k = _KEY.match(line)
        if k:
            key = k.group(1).strip("\"'")
            out.setdefault(f"{section}.{key}" if section else key, i)
    return out


# ----------------------------------------------------------------------------- reading
def read_recipe(path, *, data: dict | None = None) -> Recipe:
    """Read and check a recipe file.

    Parameters
    ----------
    path : str or Path
        The TOML file.
    data : dict, optional
        ``{"store": PATH}`` or ``{"table": PATH}`` given on the command line; replaces the
        recipe's ``[data]`` (which may then be absent). A path the user types may lie
        anywhere; a path written in a recipe may not leave the recipe's folder.

    Returns
    -------
    Recipe

    Raises
    ------
    UnreadableInputError
        The file is missing or unreadable, or is not valid TOML (line and column named).
    UsageError
        An unknown section or key, a value of the wrong type or outside its choices, a
        missing required key; the message names the file, the line and the key.
    """
    import tomllib

    from refit._util.atomic import sha256_bytes

    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UnreadableInputError(f"{path}: recipe file not found; check the path") from None
    except OSError as exc:
        raise UnreadableInputError(f"{path}: cannot read the recipe ({exc.strerror})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise UnreadableInputError(f"{path}: the recipe is not UTF-8 text (byte {exc.start}); "
                                   "save it as UTF-8") from None
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise UnreadableInputError(f"{path}: not valid TOML: {exc}; see the TOML 1.0 rules "
                                   "(strings in quotes, one key per line, [section] "
                                   "headers)") from None
    return parse_recipe(doc, path=path, text=text, sha256=sha256_bytes(raw), data=data)


def parse_recipe(doc: dict, *, path: Path, text: str = "", sha256: str = "",
                 data: dict | None = None) -> Recipe:
    """Check a parsed TOML document and build the :class:`Recipe` (see :func:`read_recipe`)."""
    given = data
    lines = key_lines(text)
    _check_keys(doc, path, lines)
    v = Values(path, lines)
    data = doc.get("data", {})
    table, store = _data_paths(data, path, lines) if given is None else _given_paths(given)
    sheet = _sheet(data, table, store, path, lines)
    fn = doc.get("function", {})
    for key in ("id", "response", "predictors"):
        if key not in fn:
            raise UsageError(f"{_where(path, lines, 'function')}: [function] needs {key!r} "
                             f"(e.g. {_EXAMPLES[key]})")
    fid = v.string("function.id", fn["id"])
    if not _ID.match(fid):
        raise UsageError(f"{_where(path, lines, 'function.id')}: function id {fid!r} must be "
                         "lower case letters, digits and '_', starting with a letter "
                         "(e.g. 'map_from_bk_depth')")
    response = v.string("function.response", fn["response"])
    predictors = v.names("function.predictors", fn["predictors"])
    if response in predictors:
        raise UsageError(f"{_where(path, lines, 'function.predictors')}: the response "
                         f"{response!r} is also a predictor; a column cannot predict itself")
    cand = doc.get("candidates", {})
    val = doc.get("validation", {})
    ivl = doc.get("intervals", {})
    groups = None
    if "groups" in val:
        groups = v.string("validation.groups", val["groups"])
    given = {k: sec[k] for sec, k in ((val, "scheme"), (cand, "estimators"), (ivl, "methods"))
             if k in sec}
    # each given value checked for its type before the defaults read it
    if "scheme" in given:
        given["scheme"] = v.string("validation.scheme", given["scheme"])
    if "estimators" in given:
        given["estimators"] = list(v.list_of("candidates.estimators", given["estimators"],
                                             ESTIMATORS))
    if "methods" in given:
        given["methods"] = list(v.list_of("intervals.methods", given["methods"], METHODS))
    filled, notes = resolve(given, groups)
    scheme = v.choice("validation.scheme", canonical_scheme(filled["scheme"]), SCHEMES,
                      aliases=tuple(ALIASES))
    _check_groups(scheme, groups, path, lines)
    estimators = v.list_of("candidates.estimators", filled["estimators"], ESTIMATORS)
    methods = v.list_of("intervals.methods", filled["methods"], METHODS)
    _needs_groups(groups, estimators, methods, path, lines)
    return Recipe(
        path=path, sha256=sha256, table=table, store=store,
        subset=tuple(parse_filter(col, value, where=_where(path, lines, f"subset.{col}"),
                                  line=lines.get(f"subset.{col}"))
                     for col, value in doc.get("subset", {}).items()),
        function_id=fid, response=response, predictors=predictors,
        forms=v.list_of("candidates.forms", cand.get("forms", ["linear"]), FORMS,
                        valid=_valid_form, extra="polynomial-N (N = 2..6)"),
        estimators=estimators,
        directions=v.list_of("candidates.directions", cand.get("directions", ["inverse"]),
                             DIRECTIONS),
        scheme=scheme,
        folds=v.integer("validation.folds", val.get("folds", 5), minimum=2,
                        maximum=MAX_FOLDS),
        repeats=v.integer("validation.repeats", val.get("repeats", 1), minimum=1,
                          maximum=MAX_REPEATS),
        groups=groups,
        seed=v.integer("validation.seed", val.get("seed", 0), minimum=0, maximum=MAX_SEED),
        level=v.level("intervals.level", ivl.get("level", 0.95)),
        methods=methods, lines=lines, defaults=tuple(notes), sheet=sheet,
        **_extras(v, doc, scheme, store, path, lines),
    )


def _extras(v, doc: dict, scheme: str, store, path: Path, lines: dict) -> dict:
    """``version``, ``weights``, ``x_sd``, ``y_sd``, ``random_slope`` and ``block_km``."""
    data, fn = doc.get("data", {}), doc.get("function", {})
    out = {k: v.string(f"function.{k}", fn[k]) for k in ("weights", "x_sd", "y_sd")
           if k in fn}
    version = data.get("version", "latest")
    if version != "latest":
        out["version"] = v.integer("data.version", version, minimum=1, maximum=2**31 - 1)
        if store is None:
            raise UsageError(f"{_where(path, lines, 'data.version')}: [data] version pins a "
                             "store's dataset version; a table has no versions (name a store, "
                             "or remove the key)")
    slope = doc.get("candidates", {}).get("random_slope", False)
    if not isinstance(slope, bool):
        v.fail("candidates.random_slope", "true or false", slope)
    out["random_slope"] = slope
    if "block_km" in doc.get("validation", {}):
        km = doc["validation"]["block_km"]
        if isinstance(km, bool) or not isinstance(km, (int, float)) or not 0 < km < 1e5:
            v.fail("validation.block_km", "a positive number of kilometres, e.g. 50", km)
        if scheme != "spatial-block":
            raise UsageError(f"{_where(path, lines, 'validation.block_km')}: block_km sets the "
                             f"size of spatial blocks; it has no effect with scheme "
                             f"{scheme!r} (use scheme = \"spatial-block\" or remove it)")
        out["block_km"] = float(km)
    return out


def _needs_groups(groups, estimators, methods, path: Path, lines: dict) -> None:
    if groups is not None:
        return
    for key, name in (("candidates.estimators", "mixed"),
                      *(("intervals.methods", m) for m in GROUP_METHODS)):
        if name in (estimators if key.startswith("candidates") else methods):
            raise UsageError(f"{_where(path, lines, key)}: {name!r} needs the groups of the "
                             "soils: add groups = \"<column>\" to [validation] (e.g. groups = "
                             "\"source\")")


_EXAMPLES = {"id": 'id = "map_from_bk_depth"', "response": 'response = "map_mm"',
             "predictors": 'predictors = ["bk_depth_cm"]'}


def _check_keys(doc: dict, path: Path, lines: dict) -> None:
    for section, value in doc.items():
        if section not in SECTIONS:
            raise UsageError(f"{_where(path, lines, section)}: unknown section [{section}]"
                             f"{suggest(section, SECTIONS)}; a recipe has the sections "
                             + ", ".join(f"[{s}]" for s in SECTIONS))
        if not isinstance(value, dict):
            raise UsageError(f"{_where(path, lines, section)}: {section!r} must be a "
                             f"[{section}] section, not a single value")
        allowed = SECTIONS[section]
        if allowed is None:
            continue
        for key in value:
            if key not in allowed:
                raise UsageError(
                    f"{_where(path, lines, f'{section}.{key}')}: unknown key {key!r} in "
                    f"[{section}]{suggest(key, allowed)}; the keys of [{section}] are: "
                    + ", ".join(allowed))
    if "data" not in doc:
        raise UsageError(f"{path}: the recipe needs a [data] section with table = \"...\" "
                         "or store = \"...\"")
    if "function" not in doc:
        raise UsageError(f"{path}: the recipe needs a [function] section with id, response "
                         "and predictors")


def _given_paths(given: dict):
    """(table, store) from the command line: exactly one, resolved, anywhere."""
    keys = [k for k in ("table", "store") if given.get(k)]
    if len(keys) != 1:
        raise UsageError("give either a table or a store on the command line, not both")
    full = Path(given[keys[0]]).resolve()
    return (full, None) if keys[0] == "table" else (None, full)


def _data_paths(data: dict, path: Path, lines: dict):
    given = [k for k in ("table", "store") if k in data]
    if len(given) != 1:
        what = "both" if given else "neither"
        raise UsageError(f"{_where(path, lines, 'data')}: [data] names {what} of 'table' and "
                         "'store'; give exactly one (table = \"soils.csv\" or store = "
                         "\"path/to/store\")")
    key = given[0]
    value = data[key]
    if not isinstance(value, str) or not value.strip():
        raise UsageError(f"{_where(path, lines, f'data.{key}')}: [data] {key} must be a "
                         f"path in quotes; got {value!r}")
    folder = os.path.abspath(path.parent)
    target = os.path.normpath(os.path.join(folder, value))  # lexical: '..' and absolute
    if os.path.commonpath([folder, target]) != folder:
        raise UsageError(
            f"{_where(path, lines, f'data.{key}')}: [data] {key} = {value!r} points outside "
            "the recipe's folder; a recipe may only name data inside its own folder (no '..' "
            "out of it, no absolute path elsewhere), so a recipe from elsewhere cannot read "
            "other files. Put the recipe in the folder that holds the data, or copy the data "
            "next to it")
    full = (path.parent / value).resolve()
    real = outside(folder, full)
    if real is not None:
        raise UsageError(
            f"{_where(path, lines, f'data.{key}')}: [data] {key} = {value!r} is a symbolic "
            f"link (or lies under one) that leads outside the recipe's folder, to {real}; a "
            "recipe may only name data inside its own folder. Name data elsewhere on the "
            f"command line instead: refit fit {path.name} --{key} PATH")
    return (full, None) if key == "table" else (None, full)


def _sheet(data: dict, table, store, path: Path, lines: dict) -> str | None:
    """``[data] sheet``: a worksheet name, only beside an xlsx ``table``.

    A name, never a 0-based position: a position silently names other data once the
    workbook's sheets are reordered. Checked for its type first, then against the data
    (also when ``--table``/``--store`` on the command line replaced the recipe's path).
    """
    from refit.curate.tables import is_workbook

    if "sheet" not in data:
        return None
    value = data["sheet"]
    at = _where(path, lines, "data.sheet")
    if not isinstance(value, str) or not value.strip():
        raise UsageError(f"{at}: [data] sheet must be a worksheet name in quotes, e.g. sheet = "
                         f"\"Data\" (a name, not a position); got {value!r}")
    if store is not None:
        raise UsageError(f"{at}: [data] sheet = {value!r} names a worksheet of an xlsx table, "
                         "but the data are a store, which has no sheets; remove the key (or "
                         "name the workbook with table = \"book.xlsx\")")
    if not is_workbook(table):
        raise UsageError(f"{at}: [data] sheet = {value!r} names a worksheet, but table "
                         f"{Path(table).name!r} is not an xlsx workbook; remove the key (only "
                         "an .xlsx table has sheets)")
    return value


def _check_groups(scheme: str, groups, path: Path, lines: dict) -> None:
    if scheme in NEEDS_GROUP_COLUMN and groups is None:
        raise UsageError(f"{_where(path, lines, 'validation.scheme')}: scheme {scheme!r} needs "
                         "groups = \"<column>\" in [validation] (e.g. groups = \"source\")")
    if scheme not in NEEDS_GROUP_COLUMN + ("spatial-block",) and groups is not None:
        raise UsageError(f"{_where(path, lines, 'validation.groups')}: groups = {groups!r} "
                         f"has no effect with scheme {scheme!r}; use scheme 'group-kfold' or "
                         "'leave-one-group-out' (the default when groups is named), or "
                         "remove the key")


def recipe_from_dict(d, *, where: str = "recipe") -> Recipe:
    """The :class:`Recipe` of :meth:`Recipe.to_dict` content (as coefficient files record it).

    Data paths are not restored (a recorded recipe names its data through the file's
    provenance); a scheme alias is read as its canonical name.

    Raises
    ------
    InvalidDataError
        ``d`` is not a recipe's content, or its subset filters cannot be read.
    """
    if not isinstance(d, dict) or not isinstance(d.get("function"), dict):
        raise InvalidDataError(f"the file does not record its recipe ({where} with the "
                               "recipe's settings), so it cannot be refitted; publish it from "
                               "a run of this refit version")
    fn, cand = d["function"], d.get("candidates") or {}
    val, ivl = d.get("validation") or {}, d.get("intervals") or {}
    try:
        filters = tuple(parse_filter(f["column"], f["value"], where=f"{where}.subset")
                        for f in d.get("subset") or [])
        return Recipe(
            path=Path(d.get("path") or "recipe.toml"), sha256=d.get("sha256", ""),
            table=None, store=None, subset=filters, function_id=fn["id"],
            response=fn["response"], predictors=tuple(fn["predictors"]),
            forms=tuple(cand.get("forms", ("linear",))),
            estimators=tuple(cand.get("estimators", ("ols",))),
            directions=tuple(cand.get("directions", ("inverse",))),
            scheme=canonical_scheme(val.get("scheme", "kfold")), folds=val.get("folds", 5),
            repeats=val.get("repeats", 1), groups=val.get("groups"), seed=val.get("seed", 0),
            level=ivl.get("level", 0.95), methods=tuple(ivl.get("methods", ("analytic",))),
            version=(d.get("data") or {}).get("version"), weights=fn.get("weights"),
            x_sd=fn.get("x_sd"), y_sd=fn.get("y_sd"),
            random_slope=bool(cand.get("random_slope", False)), block_km=val.get("block_km"),
            defaults=tuple(d.get("defaults_applied") or ()))
    except (RefitError, KeyError, TypeError, AttributeError) as exc:
        raise InvalidDataError(f"{where} cannot be read: {exc}") from None
