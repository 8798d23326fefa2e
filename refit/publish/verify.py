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
    so an edit that leaves the content alone (a space, a line end) is caught too.

``reproduce`` (given a store)
    the recorded dataset version is rebuilt from the store (:meth:`refit.curate.store.Store.records_at`,
    which checks that version's recorded sha256), the recorded subset filters and recipe
    settings select the same rows, the same form, estimator and direction are refitted the
    way the run fitted them (:func:`refit.validate.candidates.fit_whole`) and every fitted number
    (coefficients, covariance, residual standard error, degrees of freedom, n, R^2, Duan's
    smearing factor and the interval's stored quantities) must agree within ``tol``:
    ``|a - b| <= tol * max(1, |b|)`` with ``tol = 1e-9``.

The first two are the reader's own checks in the reader's order, so a file that
:func:`refit.coefficients.load` or any command refuses fails here with the same message;
``bytes`` is verify's own, stricter check.

:func:`verify_registry` adds the agreement of a registry's index with its files.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from pathlib import Path

from refit.errors import InvalidDataError, RefitError, UnreadableInputError

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
def verify_file(path, *, store=None, tol: float = TOLERANCE) -> VerifyReport:
    """Check a coefficient file (see the module docstring).

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
    if store is not None and report.ok:
        report.checks.append(reproduce_check(content, store, tol=tol, name=str(path)))
    return report


def verify_bytes(raw: bytes, name: str = "<bytes>") -> VerifyReport:
    """:func:`verify_file` on a file's bytes, without a store (raises as it does)."""
    from refit.coefficients.format import parse_bytes

    return VerifyReport(name, integrity_checks(parse_bytes(raw, name), raw, name))


def integrity_checks(content: dict, raw: bytes, name: str) -> list:
    """``sha256``, ``schema``, ``bytes`` in order, stopping at the first failure."""
    from refit.coefficients.format import check_content_hash, check_schema, dumps

    steps = (("sha256", lambda: check_content_hash(content, name),
              f"content hash matches ({str(content.get('sha256'))[:12]}...)"),
             ("schema", lambda: check_schema(content, name), "schema valid"),
             ("bytes", lambda: _same_bytes(raw, dumps(content), name),
              "bytes are exactly as refit writes this content"))
    checks = []
    for check, fn, ok_message in steps:
        try:
            fn()
        except InvalidDataError as exc:
            checks.append(Check(check, False, str(exc), name))
            break
        checks.append(Check(check, True, ok_message, name))
    return checks


def _same_bytes(raw: bytes, text: str, path) -> None:
    want = text.encode("utf-8")
    if raw == want:
        return
    at = next((i for i, (a, b) in enumerate(zip(raw, want)) if a != b), min(len(raw), len(want)))
    line = raw[:at].count(b"\n") + 1
    raise InvalidDataError(
        f"{path}: the bytes differ from how refit writes this content (first at byte {at}, "
        f"line {line}); the content hash still matches, so the numbers are intact, but the "
        "file was edited by hand or re-formatted; take it again from its registry")


# ----------------------------------------------------------------------------- reproduce
def reproduce_check(content: dict, store, *, tol: float = TOLERANCE, name: str = "") -> Check:
    """Refit the file from ``store`` and compare (a failing :class:`Check` on mismatch)."""
    try:
        diffs, n_rows = reproduce(content, store, tol=tol)
    except InvalidDataError as exc:
        return Check("reproduce", False, str(exc), name)
    if diffs:
        shown = "; ".join(f"{k}: {a!r} in the file, {b!r} refitted" for k, a, b in diffs[:6])
        more = f" and {len(diffs) - 6} more" if len(diffs) > 6 else ""
        return Check("reproduce", False, f"{name}: the refit does not reproduce the file "
                     f"(tolerance {tol:g}): {shown}{more}", name)
    ds = content["provenance"]["dataset"]
    return Check("reproduce", True, f"refitted from store {ds.get('name')!r} version "
                 f"{ds.get('version')} ({n_rows} rows after the subset): every fitted number "
                 f"agrees within {tol:g}", name)


def reproduce(content: dict, store_dir, *, tol: float = TOLERANCE):
    """Refit a coefficient file's content from the store; returns (differences, rows).

    ``differences`` lists ``(field, in the file, refitted)`` beyond ``tol``.

    Raises
    ------
    UnreadableInputError
        The store is missing.
    InvalidDataError
        The file lacks what a refit needs (dataset version, recipe), the store is not the
        recorded one or its recorded version no longer rebuilds.
    """
    from refit.validate.candidates import fit_whole
    from refit.curate.store import open_store, typed_records

    prov = content.get("provenance") or {}
    ds = prov.get("dataset") or {}
    recipe = recipe_from_record(content)
    store_dir = Path(store_dir)
    if not (store_dir / "manifest.json").is_file():
        raise UnreadableInputError(f"store {store_dir} not found (no manifest.json); check "
                                   "the --store path")
    store = open_store(store_dir)
    version = ds.get("version")
    if ds.get("kind") not in (None, "store") or not isinstance(version, int):
        raise InvalidDataError(f"the file was fitted on {ds.get('kind')} {ds.get('name')!r} "
                               "without a store version (provenance.dataset.version); only "
                               "fits made from a store can be refitted")
    if ds.get("name") is not None and ds.get("name") != store.name:
        raise InvalidDataError(f"the file was fitted on store {ds.get('name')!r}, but "
                               f"{store_dir} is store {store.name!r}; name the recorded store")
    entry = next((e for e in store.manifest.get("changelog", []) if e["version"] == version),
                 None)
    if entry is None:
        raise InvalidDataError(f"store {store_dir} has no version {version} (it has 1 to "
                               f"{store.version}); provenance.dataset.version names another store")
    if ds.get("sha256") and entry["records_sha256"] != ds["sha256"]:
        raise InvalidDataError(
            f"store {store_dir} version {version} has records sha256 "
            f"{entry['records_sha256'][:12]}..., the file records {ds['sha256'][:12]}... "
            "(provenance.dataset.sha256): not the data the file was fitted on")
    frame = typed_records(store.records_at(version))
    sub = _select(recipe, frame, f"store {store.name!r} (version {version})")
    want = (prov.get("subset") or {}).get("rows_after")
    if want is not None and want != len(sub.frame):
        raise InvalidDataError(f"the recorded subset kept {want} rows, the rebuilt one keeps "
                               f"{len(sub.frame)} (provenance.subset.rows_after)")
    fit, _ = fit_whole(sub.frame.reset_index(drop=True), recipe, spec_from_record(content))
    return compare(content, refitted_numbers(fit, content, recipe), tol), len(sub.frame)


def _select(recipe, frame, source):
    from refit.select.subsets import select

    try:
        return select(recipe, frame, source)
    except RefitError as exc:
        raise InvalidDataError(f"the recorded subset cannot be rebuilt: {exc}") from None


def recipe_from_record(content: dict):
    """The :class:`refit.select.recipe.Recipe` recorded in ``provenance.recipe`` (its to_dict())."""
    from refit.select.recipe import Recipe
    from refit.select.subsets import parse_filter

    d = (content.get("provenance") or {}).get("recipe")
    if not isinstance(d, dict) or "function" not in d:
        raise InvalidDataError("the file does not record its recipe (provenance.recipe with "
                               "the recipe's settings), so it cannot be refitted; publish "
                               "it from a run of this refit version")
    fn, cand = d["function"], d.get("candidates", {})
    val, ivl = d.get("validation", {}), d.get("intervals", {})
    try:
        filters = tuple(parse_filter(f["column"], f["value"], where="provenance.recipe.subset")
                        for f in d.get("subset", []))
    except (RefitError, KeyError, TypeError) as exc:
        raise InvalidDataError(f"provenance.recipe.subset cannot be read: {exc}") from None
    return Recipe(
        path=Path(d.get("path") or "recipe.toml"), sha256=d.get("sha256", ""), table=None,
        store=None, subset=filters, function_id=fn["id"], response=fn["response"],
        predictors=tuple(fn["predictors"]), forms=tuple(cand.get("forms", ("linear",))),
        estimators=tuple(cand.get("estimators", ("ols",))),
        directions=tuple(cand.get("directions", ("inverse",))),
        scheme=val.get("scheme", "kfold"), folds=val.get("folds", 5),
        repeats=val.get("repeats", 1), groups=val.get("groups"), seed=val.get("seed", 0),
        level=ivl.get("level", 0.95), methods=tuple(ivl.get("methods", ("analytic",))))


def spec_from_record(content: dict):
    """The fit matrix's :class:`refit.validate.candidates.Spec` of a coefficient file."""
    from refit.validate.candidates import Spec
    from refit.select.recipe import form_degree

    label = content.get("form")
    if label == "polynomial" and content.get("degree"):
        label = f"polynomial-{content['degree']}"
    try:
        form, degree = form_degree(str(label))
        interval = content.get("interval") or {}
        return Spec(str(label), form, degree, content["estimator"], content["direction"],
                    interval.get("method", "analytic"), len(content["terms"]))
    except (RefitError, KeyError, TypeError) as exc:
        raise InvalidDataError(f"the file's form, estimator, direction or terms cannot be "
                               f"read for a refit: {exc}") from None


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
    ivl = content.get("interval") or {}
    if ivl.get("method"):
        level = ivl.get("level", recipe.level)
        out["interval"] = _interval_block(fit, ivl["method"], level,
                                          ivl.get("seed", recipe.seed))
    return co.plain(out)


def _interval_block(fit, method: str, level: float, seed: int) -> dict:
    """The interval block the run wrote, rebuilt by the same function."""
    try:
        from refit.coefficients.build import interval_record

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
def verify_registry(path, *, store=None, tol: float = TOLERANCE) -> VerifyReport:
    """Index consistency of a registry, then :func:`verify_file` on every file in it."""
    from refit.publish.registry import open_registry, registry_problems

    reg = open_registry(path)
    report = VerifyReport(str(path))
    problems = registry_problems(path)
    report.checks += [Check("index", False, p, str(reg.path / "index.json")) for p in problems]
    if not problems:
        n = sum(len(v) for v in reg.index.get("functions", {}).values())
        report.checks.append(Check("index", True, f"index.json agrees with the {n} file(s)",
                                   str(reg.path / "index.json")))
    for file in sorted(reg.path.glob("*/*.json")):
        try:
            sub = verify_file(file, store=store, tol=tol)
        except RefitError as exc:  # unreadable, or not a coefficient file at all
            report.checks.append(Check("read", False, str(exc), str(file)))
            continue
        report.checks += sub.checks
    return report
