"""One rebuild of a data set: from a recipe, or from a coefficient record's provenance.

A fit is made on a data set (a calibration store at one version, or a checked table) and
a subset of it. Three steps need those rows again: the fit itself (from the recipe), the
refit that verifies a coefficient file, and the report. All three use this module, so they
accept the same files and say the same things when the data are not the recorded ones:

:func:`dataset_from_recipe`
    open the store (at the recipe's ``[data] version``, default its current version) or
    the table the recipe names, apply the subset, check the weight and measurement-SD
    columns;
:func:`dataset_from_record`
    open the data a coefficient record names in ``provenance.dataset`` (store version ``k``
    = the first ``n_k`` rows of ``records.csv``, see :mod:`refit.curate.store`; or a table),
    check the recorded sha256, rebuild the recorded recipe and subset, and check the
    subset keeps the recorded number of rows.

Both return a :class:`Dataset`: every record of the data set, the
:class:`refit.select.subsets.SubsetResult`, a :class:`DataSource` (kind, name, version,
sha256; its :meth:`DataSource.to_dict` is the provenance a run records) and the recipe.
"""

from __future__ import annotations

from dataclasses import dataclass
from pathlib import Path

from refit.errors import InvalidDataError, RefitError, UnreadableInputError
from refit.select.recipe import Recipe, recipe_from_dict, suggest
from refit.select.schemes import NEEDS_COORDINATES
from refit.select.subsets import SubsetResult, apply_filters, drop_incomplete

#: how a user says where the recorded data are now (``refit verify`` and ``refit report``)
WHERE_HINT = ("pass --store PATH (the store folder or the table file the fit was made on) "
              "to say where the data are now")


@dataclass(frozen=True)
class DataSource:
    """Where a data set came from.

    Attributes
    ----------
    kind : str
        ``store`` or ``table``.
    path : Path
        The store folder or the table file.
    name : str
        The store's name, or the table's file name.
    version : int or None
        The store version (None for a table).
    sha256 : str
        The store version's records hash, or the table file's hash.
    rows : int
        Records in the data set (before the subset).
    sheet : str or None
        The worksheet of an xlsx table that was read, when a recipe's ``[data] sheet``
        named it (None: a store, a csv/parquet table, or a workbook's first visible sheet).
    """

    kind: str
    path: Path
    name: str
    version: int | None
    sha256: str
    rows: int
    sheet: str | None = None

    def describe(self) -> str:
        """``store 'demo' (version 2)`` or ``table 'soils.csv'``, for messages."""
        if self.kind == "store":
            return f"store {self.name!r} (version {self.version})"
        return f"table {self.name!r}" + (f" (sheet {self.sheet!r})" if self.sheet else "")

    def to_dict(self) -> dict:
        """The provenance a run records (``kind``, ``path``, ``name``, ``version``,
        ``sha256``, ``rows``; and ``sheet`` when a worksheet was named)."""
        out = {"kind": self.kind, "path": str(self.path), "name": self.name,
               "version": self.version, "sha256": self.sha256, "rows": int(self.rows)}
        if self.sheet is not None:
            out["sheet"] = self.sheet
        return out


@dataclass
class Dataset:
    """A rebuilt data set: every record, the subset a recipe keeps, the source, the recipe."""

    records: object          # pandas.DataFrame, every record of the data set
    subset: SubsetResult     # the rows the recipe keeps (original index)
    source: DataSource
    recipe: Recipe

    @property
    def frame(self):
        """The subset's rows (shorthand for ``subset.frame``)."""
        return self.subset.frame


# ----------------------------------------------------------------------------- the subset
def check_columns(recipe: Recipe, columns, *, source: str) -> None:
    """Refuse a response, predictor or group column that the data do not have.

    Raises
    ------
    InvalidDataError
        Naming the recipe line, the key, the missing column and the columns present.
    """
    have = [str(c) for c in columns]
    wanted = [("function.response", recipe.response)]
    wanted += [("function.predictors", p) for p in recipe.predictors]
    if recipe.groups is not None:
        wanted.append(("validation.groups", recipe.groups))
    wanted += [(f"function.{k}", getattr(recipe, k)) for k in ("weights", "x_sd", "y_sd")
               if getattr(recipe, k) is not None]
    for key, name in wanted:
        if name not in have:
            section, k = key.split(".")
            raise InvalidDataError(
                f"{recipe.where(key)}: [{section}] {k} names column {name!r}, which {source} "
                f"does not have{suggest(name, have)}; its columns are: " + ", ".join(have))


def select(recipe: Recipe, frame, source: str) -> SubsetResult:
    """Apply a recipe's filters and keep rows with every column the fit needs.

    The needed columns are the response, the predictors, the group column of a grouped
    scheme and latitude/longitude for spatial blocks.
    """
    check_columns(recipe, frame.columns, source=source)
    result = apply_filters(frame, recipe.subset, source=source)
    needed = [recipe.response, *recipe.predictors]
    if recipe.groups:
        needed.append(recipe.groups)
    if recipe.scheme in NEEDS_COORDINATES:
        needed += ["latitude", "longitude"]
    return drop_incomplete(result, needed)


# ----------------------------------------------------------------------------- opening
def _open_store(path: Path, where: str, fix: str):
    from refit.curate.store import open_store

    from refit._util.paths import outside

    if not (path / "manifest.json").is_file():
        raise UnreadableInputError(f"{where}store {str(path)!r} is not found or is not a refit "
                                   f"store (no manifest.json); {fix}")
    for name in ("manifest.json", "records.csv"):
        real = outside(path, path / name)
        if real is not None:
            raise InvalidDataError(f"{where}store {str(path)!r}: {name} is a symbolic link "
                                   f"that leads outside the store, to {real}; a store's "
                                   "files live in its folder: replace the link by the file")
    return open_store(path)


def _checked_table(path: Path, where: str, sheet: str | None = None):
    """The table's checked frame and row count; refused when the check finds errors.

    ``sheet`` names the worksheet of an xlsx table (default the first visible one; the
    callers have made sure the workbook has it).
    """
    from refit.curate.checks import check_file

    if not path.is_file():
        raise UnreadableInputError(f"{where}table {str(path)!r} is not found: no such file; "
                                   "check the path")
    report = check_file(path, sheet=sheet)
    if not report.ok:
        raise InvalidDataError(
            f"{where}table {str(path)!r} has {len(report.errors)} error(s) in "
            f"{len(report.bad_rows())} row(s); run `refit check {path}` to see them, then fix "
            "the table or admit it to a store (bad rows are quarantined there)")
    return report.frame, int(report.n_rows)


def _store_at(recipe: Recipe):
    """The store's records at the recipe's ``[data] version`` (default the latest)."""
    from refit.curate.store import typed_records

    store = _open_store(recipe.store, f"{recipe.where('data.store')}: [data] ",
                        "check the path, relative to the recipe's folder")
    version = recipe.version
    if version is None or version == store.version:
        return store.records, DataSource("store", recipe.store, store.name, store.version,
                                         store.manifest.get("records_sha256"),
                                         int(len(store.records)))
    entry = next((e for e in store.manifest.get("changelog", []) if e["version"] == version),
                 None)
    if entry is None:
        raise InvalidDataError(f"{recipe.where('data.version')}: [data] version = {version}, "
                               f"but store {store.name!r} has versions 1 to {store.version}; "
                               "name one of them, or remove the key for the latest")
    frame = typed_records(store.records_at(version))
    return frame, DataSource("store", recipe.store, store.name, version,
                             entry["records_sha256"], int(len(frame)))


def _sheet_missing(path: Path, sheet: str, shown: str | None = None) -> str:
    """"" when the xlsx workbook at ``path`` has a worksheet named ``sheet``; else why not,
    with the workbook's sheets and the nearest name (for the caller's message; the
    workbook named as ``shown``, default its file name)."""
    from refit.curate.tables import workbook_sheets

    names, _ = workbook_sheets(path)
    if sheet in names:
        return ""
    return (f"workbook {(shown or path.name)!r} has no such worksheet; its sheets are "
            f"{', '.join(map(repr, names))}{suggest(sheet, names)}")


def open_recipe_data(recipe: Recipe):
    """The records a recipe names and their :class:`DataSource`.

    A store is read at the recipe's ``[data] version`` (dataset version k: the first
    ``n_k`` rows of ``records.csv``, checked against version k's recorded sha256; default
    the current version); a table is read, its units and column names normalised and
    checked, and refused if the check finds errors.

    Raises
    ------
    UnreadableInputError
        The store or table is not found.
    InvalidDataError
        The table has errors, the store has no such version, or the store's records do
        not match its manifest.
    """
    from refit._util.atomic import sha256_file

    if recipe.store is not None:
        return _store_at(recipe)
    where = f"{recipe.where('data.table')}: [data] "
    if recipe.sheet is not None and recipe.table.is_file():
        why = _sheet_missing(recipe.table, recipe.sheet)
        if why:
            raise UnreadableInputError(f"{recipe.where('data.sheet')}: [data] sheet = "
                                       f"{recipe.sheet!r}: {why}: name one of them")
    frame, rows = _checked_table(recipe.table, where, recipe.sheet)
    source = DataSource("table", recipe.table, recipe.table.name, None,
                        sha256_file(recipe.table), rows, sheet=recipe.sheet)
    return frame, source


def _sha_mismatch(what: str, found: str, recorded: str) -> InvalidDataError:
    return InvalidDataError(
        f"{what} has sha256 {str(found)[:12]}..., but the fit was made on data with sha256 "
        f"{str(recorded)[:12]}... (provenance.dataset.sha256): not the data it was fitted "
        f"on; {WHERE_HINT}")


def _recorded_store(ds: dict, path: Path):
    from refit.curate.store import typed_records

    store = _open_store(path, "", WHERE_HINT)
    version = ds.get("version")
    if isinstance(version, bool) or not isinstance(version, int):
        raise InvalidDataError(f"the fit records no store version (provenance.dataset.version "
                               f"is {version!r}), so its data cannot be rebuilt")
    if ds.get("name") is not None and ds.get("name") != store.name:
        raise InvalidDataError(f"the fit was made on store {ds.get('name')!r}, but {path} is "
                               f"store {store.name!r}; {WHERE_HINT}")
    entry = next((e for e in store.manifest.get("changelog", []) if e["version"] == version),
                 None)
    if entry is None:
        raise InvalidDataError(f"store {store.name!r} at {path} has no version {version} (it "
                               f"has 1 to {store.version}): not the store the fit was made "
                               f"on; {WHERE_HINT}")
    if entry["records_sha256"] != ds["sha256"]:
        raise _sha_mismatch(f"store {store.name!r} version {version} at {path}",
                            entry["records_sha256"], ds["sha256"])
    frame = typed_records(store.records_at(version))
    return frame, DataSource("store", path, store.name, version, ds["sha256"], len(frame))


def _recorded_table(ds: dict, path: Path):
    from refit._util.atomic import sha256_file

    if (path / "manifest.json").is_file():
        raise InvalidDataError(f"the fit was made on table {ds.get('name')!r}, but {path} is "
                               f"a store; {WHERE_HINT}")
    if not path.is_file():
        raise UnreadableInputError(f"table {str(path)!r} is not found: no such file; "
                                   f"{WHERE_HINT}")
    sheet = ds.get("sheet")
    if sheet is not None and (not isinstance(sheet, str) or not sheet):
        raise InvalidDataError(f"provenance.dataset.sheet is {sheet!r}; a worksheet name "
                               "(text) or none is needed to rebuild the data")
    if sheet is not None:       # before the hash: the wrong kind of file is a usage error
        _recorded_sheet_there(path, sheet, ds.get("name"))
    found = sha256_file(path)
    if found != ds["sha256"]:
        raise _sha_mismatch(f"table {str(path)!r}", found, ds["sha256"])
    frame, rows = _checked_table(path, "", sheet)
    return frame, DataSource("table", path, path.name, None, found, rows, sheet=sheet)


def _recorded_sheet_there(path: Path, sheet: str, name) -> None:
    """Refuse (exit 2) a table that is not a workbook, or a workbook without ``sheet``,
    for a fit that records the worksheet it was made on."""
    # the sheet is the file's (provenance.dataset.sheet) or one given with verify --sheet
    made_on = (f"the fit is rebuilt from sheet {sheet!r} of workbook {name!r} (recorded in "
               "the file, or given with --sheet)")
    from refit.curate.tables import is_workbook

    if not is_workbook(path):
        raise UnreadableInputError(f"{made_on}, but {str(path)!r} "
                                   "is not an xlsx workbook, so it has no sheets; give the "
                                   "workbook the fit was made on")
    why = _sheet_missing(path, sheet, str(path))
    if why:
        raise UnreadableInputError(f"{made_on}, but {why}; give the workbook the fit was "
                                   "made on")


def open_recorded_data(ds: dict, location=None):
    """The records a coefficient record names in ``provenance.dataset``, checked.

    Parameters
    ----------
    ds : dict
        ``kind`` (``store`` or ``table``; absent means store), ``name``, ``version`` (a
        store's), ``sha256`` and optionally ``path``.
    location : str or Path, optional
        Where the data are now (a store folder or a table file); default ``ds["path"]``.

    Returns
    -------
    (pandas.DataFrame, DataSource)

    Raises
    ------
    UnreadableInputError
        No location is known, or the store or table is not found there.
    InvalidDataError
        The data there are not the recorded ones (name, version or sha256 differ, or the
        store's records were edited), or the provenance lacks what a rebuild needs.
    """
    if not isinstance(ds, dict) or not ds:
        raise InvalidDataError("the fit does not record its data set (provenance.dataset), so "
                               "its data cannot be rebuilt")
    kind = ds.get("kind") or "store"
    if kind not in ("store", "table"):
        raise InvalidDataError(f"provenance.dataset.kind is {kind!r}; a rebuild needs "
                               "'store' or 'table'")
    if not ds.get("sha256"):
        raise InvalidDataError("the fit records no dataset sha256 (provenance.dataset.sha256), "
                               "so its data cannot be checked")
    where = location if location is not None else ds.get("path")
    if not where:
        raise UnreadableInputError(f"the fit does not say where its {kind} "
                                   f"{ds.get('name')!r} is; {WHERE_HINT}")
    path = Path(where)
    return (_recorded_store if kind == "store" else _recorded_table)(ds, path)


# ----------------------------------------------------------------------------- data sets
def _subset(recipe: Recipe, frame, source: str, *, recorded: bool) -> SubsetResult:
    try:
        return select(recipe, frame, source)
    except RefitError as exc:
        if not recorded:
            raise
        raise InvalidDataError(f"the recorded subset cannot be rebuilt: {exc}") from None


def check_positive_columns(recipe: Recipe, frame) -> None:
    """Refuse empty or non-positive weights and measurement SDs in the subset.

    ``[function] weights`` (relative inverse variances), ``x_sd`` and ``y_sd``
    (measurement standard deviations) must be numbers > 0 in every row the fit uses.

    Raises
    ------
    InvalidDataError
        Naming the recipe line, the column and the first offending rows (profile ids).
    """
    import numpy as np
    import pandas as pd

    ids = frame["profile_id"] if "profile_id" in frame.columns else pd.Series(frame.index)
    for key in ("weights", "x_sd", "y_sd"):
        col = getattr(recipe, key)
        if col is None:
            continue
        values = pd.to_numeric(frame[col], errors="coerce").to_numpy(float)
        for bad, what in ((np.isnan(values), "no number"),
                          (~np.isnan(values) & ~(values > 0), "a value <= 0")):
            if bad.any():
                rows = ", ".join(map(str, ids.to_numpy()[bad][:8]))
                more = f" and {int(bad.sum()) - 8} more" if bad.sum() > 8 else ""
                raise InvalidDataError(
                    f"{recipe.where(f'function.{key}')}: [function] {key} = {col!r} has "
                    f"{what} in {int(bad.sum())} row(s) of the subset ({rows}{more}); "
                    f"{key} must be > 0 in every row: fill or correct them, or leave those "
                    "rows out with [subset]")


def dataset_from_recipe(recipe: Recipe) -> Dataset:
    """Open the data a recipe names and apply its subset (see :func:`open_recipe_data`)."""
    frame, source = open_recipe_data(recipe)
    sub = _subset(recipe, frame, source.describe(), recorded=False)
    check_positive_columns(recipe, sub.frame)
    return Dataset(frame, sub, source, recipe)


def recipe_from_record(content: dict) -> Recipe:
    """The :class:`Recipe` a coefficient record holds in ``provenance.recipe``.

    Raises
    ------
    InvalidDataError
        The record holds no recipe, or its subset filters cannot be read.
    """
    return recipe_from_dict((content.get("provenance") or {}).get("recipe"),
                            where="provenance.recipe")


def dataset_from_record(content: dict, location=None, *, dataset: dict | None = None
                        ) -> Dataset:
    """Rebuild the data set and subset a coefficient record was fitted on.

    Parameters
    ----------
    content : dict
        A coefficient record (``provenance.dataset``, ``provenance.recipe`` and
        ``provenance.subset.rows_after`` are read).
    location : str or Path, optional
        Where the data are now; default the recorded ``path`` (a run's ``run.json`` keeps
        it, published files do not).
    dataset : dict, optional
        Provenance of the data set to use instead of ``provenance.dataset`` (e.g. a run's
        ``run.json``, which also holds the path).

    Raises
    ------
    UnreadableInputError, InvalidDataError
        As :func:`open_recorded_data`; and when the rebuilt subset does not keep the
        recorded number of rows.
    """
    prov = content.get("provenance") or {}
    recipe = recipe_from_record(content)
    frame, source = open_recorded_data(prov.get("dataset") if dataset is None else dataset,
                                       location)
    sub = _subset(recipe, frame, source.describe(), recorded=True)
    want = (prov.get("subset") or {}).get("rows_after")
    if want is not None and want != len(sub.frame):
        raise InvalidDataError(f"the recorded subset kept {want} rows, rebuilding it from "
                               f"{source.describe()} keeps {len(sub.frame)} "
                               "(provenance.subset.rows_after): not the data it was fitted on")
    return Dataset(frame, sub, source, recipe)
