"""Verifying coefficient files: integrity, schema, and reproduction from the store.

:func:`verify_file` reads the file with the one coefficient-file reader
(:func:`refit.coefficients.format.read_file`: a missing path is exit code 2; empty, not JSON
or not an object is exit code 1, with the same message as every other command) and runs
these checks in order, stopping at the first integrity failure (a damaged file is never
evaluated):

``sha256``
    the content hash (keys sorted, compact, UTF-8, without ``sha256``) matches the field
    (:func:`refit.coefficients.format.check_content_hash`);
``schema``
    the schema version and the JSON Schema of coefficient files
    (:func:`refit.coefficients.format.check_schema`);
``bytes``
    the bytes are exactly as refit writes that content (:func:`refit.coefficients.format.dumps`),
    so an edit that leaves the content alone (a space, a line end) is caught too; a file of a
    schema version before 1.2.0 may instead be spelled as refit wrote it then, keys in the
    order they were built (:func:`refit.coefficients.format.legacy_dumps`).

``reproduce`` (given a store, or the table a fit was made on)
    the recorded data set is rebuilt by :func:`refit.select.dataset.dataset_from_record`
    (a store version from :meth:`refit.curate.store.Store.records_at`, or the table; the
    recorded sha256 must match), the recorded subset filters and recipe settings select
    the same rows, the same form, estimator and direction are refitted the
    way the run fitted them (:func:`refit.validate.candidates.fit_whole`; a file fitted
    with groups, a mixed fit or a group-level interval, is refitted with the recorded
    groups column and random-slope setting, :func:`refit.validate.refits.refit_record`) and every fitted
    number (coefficients, covariance, residual standard error, degrees of freedom, n, R^2,
    Duan's smearing factor, the ``between_source`` block and the interval's stored
    quantities) must agree within ``tol``:
    ``|a - b| <= tol * max(1, |b|)`` with ``tol = 1e-9``.

The first two are the reader's own checks in the reader's order, so a file that
:func:`refit.coefficients.load` or any command refuses fails here with the same message;
``bytes`` is verify's own, stricter check.

:func:`verify_registry` adds the agreement of a registry's index with its files.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

from refit.errors import InvalidDataError, RefitError, UsageError

TOLERANCE = 1e-9
#: Top-level fitted numbers compared on reproduction.
FITTED = ("coefficients", "covariance", "residual_std_error", "df_resid", "n", "r_squared")


@dataclass
class Check:
    """One check: its name, whether it passed, and what was found."""

    name: str
    ok: bool
    message: str
    file: str = ""

    def to_dict(self) -> dict:
        return {"check": self.name, "ok": self.ok, "message": self.message, "file": self.file}


@dataclass
class VerifyReport:
    """All checks of one file or one registry."""

    target: str
    checks: list = field(default_factory=list)

    @property
    def ok(self) -> bool:
        return all(c.ok for c in self.checks)

    def failures(self) -> list:
        return [c for c in self.checks if not c.ok]

    def to_dict(self) -> dict:
        return {"target": self.target, "ok": self.ok,
                "checks": [c.to_dict() for c in self.checks]}


# ----------------------------------------------------------------------------- one file
def verify_file(path, *, store=None, tol: float = TOLERANCE, trust=None,
                sheet: str | None = None) -> VerifyReport:
    """Check a coefficient file (see the module docstring).

    ``sheet`` (with ``store``, a workbook) reads that worksheet instead of the one the file
    records in ``provenance.dataset.sheet`` (default: the recorded one; a file without it,
    the first visible sheet).

    Raises
    ------
    UnreadableInputError
        The file (or the store) is missing or cannot be read: nothing can be checked.
    InvalidDataError
        The file is empty, not UTF-8, not JSON or not a JSON object.
    """
    from refit.coefficients.format import read_file

    content, raw = read_file(path)
    report = VerifyReport(str(path), integrity_checks(content, raw, str(path)))
    if trust is not None:
        report.checks.append(signature_check(path, raw, trust))
    if store is not None and report.ok:
        report.checks.append(reproduce_check(content, store, tol=tol, name=str(path),
                                             sheet=sheet))
    return report


def verify_bytes(raw: bytes, name: str = "<bytes>") -> VerifyReport:
    """:func:`verify_file` on a file's bytes, without a store (raises as it does)."""
    from refit.coefficients.format import parse_bytes

    return VerifyReport(name, integrity_checks(parse_bytes(raw, name), raw, name))


def integrity_checks(content: dict, raw: bytes, name: str) -> list:
    """``sha256``, ``schema``, ``bytes`` in order, stopping at the first failure."""
    from refit.coefficients.format import (check_bytes, check_content_hash, check_schema,
                                           dumps, legacy_spelling)

    spelled = "bytes are exactly as refit writes this content"
    if legacy_spelling(content) and raw != dumps(content).encode("utf-8"):
        spelled = (f"bytes are exactly as refit wrote schema {content.get('schema_version')} "
                   "files (keys in the order they were built, so their order is not checked)")
    steps = (("sha256", lambda: check_content_hash(content, name),
              f"content hash matches ({str(content.get('sha256'))[:12]}...)"),
             ("schema", lambda: check_schema(content, name), "schema valid"),
             ("bytes", lambda: check_bytes(raw, content, name), spelled))
    checks = []
    for check, fn, ok_message in steps:
        try:
            fn()
        except InvalidDataError as exc:
            checks.append(Check(check, False, str(exc), name))
            break
        checks.append(Check(check, True, ok_message, name))
    return checks


def signature_check(path, raw: bytes, trust: list) -> Check:
    """``signature``: the file's bytes are signed by one of the trusted public keys
    (:func:`refit.publish.signing.check_signature`)."""
    from refit.publish.signing import check_signature

    try:
        return Check("signature", True, check_signature(path, raw, trust), str(path))
    except InvalidDataError as exc:
        return Check("signature", False, str(exc), str(path))


def trusted_keys(paths) -> list:
    """The Ed25519 public keys in ``paths`` (PEM files), for ``trust=``."""
    from refit.publish.signing import load_public_key

    return [load_public_key(p) for p in paths]


# ----------------------------------------------------------------------------- reproduce
def reproduce_check(content: dict, store, *, tol: float = TOLERANCE, name: str = "",
                    sheet: str | None = None) -> Check:
    """Refit the file from ``store`` and compare (a failing :class:`Check` on mismatch)."""
    try:
        diffs, data = reproduce(content, store, tol=tol, details=True, sheet=sheet)
    except InvalidDataError as exc:
        return Check("reproduce", False, str(exc), name)
    if diffs:
        shown = "; ".join(f"{k}: {a!r} in the file, {b!r} refitted" for k, a, b in diffs[:6])
        more = f" and {len(diffs) - 6} more" if len(diffs) > 6 else ""
        return Check("reproduce", False, f"{name}: the refit does not reproduce the file "
                     f"(tolerance {tol:g}): {shown}{more}", name)
    return Check("reproduce", True, f"refitted from {data.source.describe()}"
                 f"{_sheet_note(content, sheet)} "
                 f"({len(data.frame)} rows after the subset): every fitted number, the valid "
                 f"domain and the cross-validated skill "
                 f"agree within {tol:g}", name)


def _sheet_note(content: dict, sheet: str | None) -> str:
    """`` (given by --sheet; the file records ...)`` when ``sheet`` overrides the file's."""
    from refit.coefficients.format import recorded_sheet

    if sheet is None:
        return ""
    recorded = recorded_sheet(content)
    if recorded == sheet:
        return ""
    return (f" (given by --sheet; the file records sheet {recorded!r})" if recorded
            else " (given by --sheet; the file records no sheet)")


def reproduce(content: dict, store_dir, *, tol: float = TOLERANCE, details: bool = False,
              sheet: str | None = None):
    """Refit a coefficient file's content from its data; returns (differences, rows).

    ``store_dir`` is where the recorded data are now: the store folder, or the table file
    of a fit made on a table. The data set and subset are rebuilt by
    :func:`refit.select.dataset.dataset_from_record` (the same rebuild as the fit's and the
    report's) and the candidate refitted by :func:`refit.validate.refits.refit_record`.
    ``differences`` lists ``(field, in the file, refitted)`` beyond ``tol``; with
    ``details`` the second item is the rebuilt :class:`refit.select.dataset.Dataset`.
    The worksheet of a workbook is the one ``provenance.dataset.sheet`` records (schema
    1.4.0), or ``sheet`` when given (e.g. a 1.3.0 file fitted on a named sheet).

    Raises
    ------
    UnreadableInputError
        The store or table is missing.
    InvalidDataError
        The file lacks what a refit needs (dataset version, recipe), the data are not the
        recorded ones (name, version, sha256) or the recorded subset no longer rebuilds.
    """
    from refit.validate.refits import refit_record

    dataset = None
    if sheet is not None:
        ds = (content.get("provenance") or {}).get("dataset")
        if not isinstance(ds, dict) or ds.get("kind") != "table":
            name = ds.get("name") if isinstance(ds, dict) else None
            raise UsageError(f"--sheet {sheet!r} names a worksheet of a workbook, but the "
                             f"fit was made on store {name!r}, which has no sheets; "
                             "drop --sheet")
        dataset = {**ds, "sheet": sheet}
    data, fit = refit_record(content, store_dir, dataset=dataset)
    numbers = refitted_numbers(fit, content, data.recipe)
    numbers.update(recomputed_domain_and_skill(content, data, fit))
    diffs = compare(content, numbers, tol)
    return diffs, (data if details else len(data.frame))


def recomputed_domain_and_skill(content: dict, data, fit) -> dict:
    """The file's valid ranges, domain block and cross-validated skill, computed again.

    ``predictors`` (names with ``valid_min``/``valid_max``: the range the extrapolation
    flag tests), ``domain`` (ranges, turning point, broken-stick comparison) from the
    refitted :class:`refit.models.fitting.Fit`; ``cv`` (coverage, RMSEP, bias, interval
    score, ... and random k-fold's) by cross-validating again with the recorded scheme and
    seed (:func:`refit.validate.runfolder.recompute_cv`). A file without a ``cv`` block
    (none was recorded) is compared on its domain only.
    """
    from refit import coefficients as co
    from refit.errors import InvalidDataError

    out = {"predictors": [{"name": p, "valid_min": fit.ranges[p][0],
                           "valid_max": fit.ranges[p][1]} for p in fit.predictors]}
    try:
        dom = fit.domain
    except InvalidDataError:   # too few rows for the broken-stick comparison
        dom = None
    if dom is not None:
        out["domain"] = dom.to_dict() | {"data_side": int(dom.data_side)}
    if isinstance(content.get("cv"), dict):
        from refit.validate.runfolder import recompute_cv

        cv = recompute_cv(content, data)
        out["cv"] = {k: cv.get(k) for k in content["cv"] if k != "file_interval_note"}
    return co.plain(out)


def recipe_from_record(content: dict):
    """The :class:`refit.select.recipe.Recipe` recorded in ``provenance.recipe``."""
    from refit.select.dataset import recipe_from_record as rebuild

    return rebuild(content)


def spec_from_record(content: dict):
    """The fit matrix's :class:`refit.validate.candidates.Spec` of a coefficient file."""
    from refit.validate.refits import spec_from_record as spec

    return spec(content)


def refitted_numbers(fit, content: dict, recipe) -> dict:
    """The refitted counterparts of the file's fitted fields (plain JSON values)."""
    from refit import coefficients as co
    import numpy as np

    res = fit.result
    cov = res.covariance if np.all(np.isfinite(res.covariance)) else None
    out = {"coefficients": res.coefficients, "covariance": cov,
           "residual_std_error": fit.residual_std_error, "df_resid": fit.df_resid,
           "n": fit.n, "r_squared": fit.r_squared, "terms": list(fit.terms)}
    if fit.form.log_response:
        out["equation.smearing"] = fit.smearing
    if "between_source" in content:
        from refit.coefficients.build import between_source_record

        out["between_source"] = between_source_record(fit)
    ivl = content.get("interval") or {}
    if ivl.get("method"):
        level = ivl.get("level", recipe.level)
        out["interval"] = _interval_block(fit, ivl["method"], level,
                                          ivl.get("seed", recipe.seed), ivl.get("folds"))
    return co.plain(out)


def _interval_block(fit, method: str, level: float, seed: int, folds=None) -> dict:
    """The interval block the run wrote, rebuilt by the same function (group-cv+: with
    the recorded folds)."""
    try:
        from refit.coefficients.build import interval_record

        if folds is not None:
            return interval_record(fit, method, level, seed, folds=int(folds))
        return interval_record(fit, method, level, seed)
    except ImportError:  # the provisional candidate records
        from refit.coefficients.build import interval_record as old
        from refit.validate.candidates import INTERVAL_ENGINE

        return old(fit, method, INTERVAL_ENGINE.get(method, method), level, seed)


def _get(content: dict, key: str):
    value = content
    for part in key.split("."):
        value = value.get(part) if isinstance(value, dict) else None
    return value


def compare(content: dict, refitted: dict, tol: float = TOLERANCE) -> list:
    """``(field, file value, refitted value)`` for every number that differs beyond tol."""
    out = []
    for key, new in refitted.items():
        _walk(key, _get(content, key), new, tol, out, top=True)
    return out


def _walk(key, old, new, tol, out, *, top=False):
    if isinstance(new, dict):
        if not isinstance(old, dict):
            out.append((key, old, "an object"))
            return
        for k, v in new.items():
            if k in old or top is False:     # compare what the file stores
                _walk(f"{key}.{k}", old.get(k), v, tol, out)
        return
    if isinstance(new, list):
        if not isinstance(old, list) or len(old) != len(new):
            out.append((key, old, new))
            return
        for i, (a, b) in enumerate(zip(old, new)):
            _walk(f"{key}[{i}]", a, b, tol, out)
        return
    if _number(new) and _number(old):
        if not abs(old - new) <= tol * max(1.0, abs(new)):
            out.append((key, old, new))
    elif old != new:
        out.append((key, old, new))


def _number(v) -> bool:
    return isinstance(v, (int, float)) and not isinstance(v, bool) and math.isfinite(v)


# ----------------------------------------------------------------------------- a registry
def _version_span(entries: list) -> str:
    """``1.0.0`` or ``1.0.0 .. 1.2.0 (3 versions)`` of one chain's index entries."""
    from refit.publish.registry_layout import parse_version

    versions = sorted((e["version"] for e in entries), key=parse_version)
    if len(versions) == 1:
        return versions[0]
    return f"{versions[0]} .. {versions[-1]} ({len(versions)} versions)"


def verify_registry(path, *, store=None, tol: float = TOLERANCE, trust=None) -> VerifyReport:
    """Index consistency of a registry (every variant of every function), then
    :func:`verify_file` on every file in it (signatures too, with ``trust``)."""
    from refit.publish.registry import open_registry, registry_problems
    from refit.publish.registry_layout import chain_name, check_inside

    reg = open_registry(path)
    report = VerifyReport(str(path))
    problems = registry_problems(path)
    report.checks += [Check("index", False, p, str(reg.path / "index.json")) for p in problems]
    if not problems:
        chains = reg.chains()
        n = sum(len(reg.versions(fid, v)) for fid, v in chains)
        listed = "; ".join(f"{chain_name(fid, v)} {_version_span(reg.versions(fid, v))}"
                           for fid, v in chains)
        report.checks.append(Check("index", True, f"index.json agrees with the {n} file(s)"
                                   + (f" ({listed})" if listed else ""),
                                   str(reg.path / "index.json")))
    # a function's default variant in REGISTRY/<id>/, named variants one folder deeper
    for file in sorted([*reg.path.glob("*/*.json"), *reg.path.glob("*/*/*.json")]):
        try:
            check_inside(reg.path, file)
            sub = verify_file(file, store=store, tol=tol, trust=trust)
        except RefitError as exc:  # unreadable, or not a coefficient file at all
            report.checks.append(Check("read", False, str(exc), str(file)))
            continue
        report.checks += sub.checks
    return report
