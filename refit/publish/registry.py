"""The coefficient registry: published, immutable, versioned coefficient files.

The layout on disk and the index reader are in :mod:`refit.publish.registry_layout`;
landing a publish and crash recovery in :mod:`refit.publish.registry_commit`; the index
against the files in :mod:`refit.publish.registry_index`. This module holds the versions
and :func:`publish`, and re-exports the names callers use (:func:`open_registry`,
:class:`Registry`, :func:`registry_problems`, ...). Coefficient files are read by the one
reader, :func:`refit.coefficients.format.read_record`.

Each *variant* of a function (see :mod:`refit.publish.registry_layout`) has its own version
chain: alternative models of one function id (say an OLS line and a mixed-effects fit)
are published side by side as variants (``publish(..., variant="mixed")``), so a refit of
one never bumps the other. Within a chain, versions follow Semantic Versioning 2.0.0
(https://semver.org), read for equations:

* **major** -- the model changed: the response or the predictors (names or units), the
  form (or its terms), the direction, the estimator, the interval method, or the groups
  and random slope of a fit with groups (:data:`MAJOR_FIELDS`, :data:`MODEL_ITEMS`);
* **minor** -- the same model refitted: the dataset (name, version or sha256), the subset,
  the interval level, the validation, or any fitted quantity (coefficients, covariance,
  residual error, interval, domain, skill) changed;
* **patch** -- metadata only (cautions, notes, citation, software versions, ...).

:func:`required_bump` compares a candidate with the latest version of its chain and names
the smallest bump that is honest; :func:`publish` proposes it and refuses a smaller one.
Publishing a candidate identical to the latest version is refused too (nothing to add).
A major bump because the model changed says which model items changed
(:func:`model_changes`), so the publisher can choose a variant instead.

A published file is written once (atomically, then made read-only) and never replaced:
publishing over an existing version is refused. A publish first writes its index entry to
the journal ``REGISTRY/.publishing.json``; the next command that opens the registry
finishes a publish whose file had landed (adds the entry) or drops one whose file had not,
removes stale temporary files, and says so (all in :mod:`refit.publish.registry_commit`). The
file's bytes are exactly :func:`refit.coefficients.format.dumps` of its content, so any edit, even of one space,
is detectable (:mod:`refit.publish.verify`). The index is rewritten atomically after the file
lands; if the two ever disagree (a crash between the writes, a hand edit),
``refit verify REGISTRY`` says how.
"""

from __future__ import annotations

import datetime as _dt
import json
from dataclasses import dataclass, field
from pathlib import Path

from refit._util.atomic import sha256_bytes
from refit.coefficients.format import (DEFAULT_VARIANT, VARIANT_SCHEMA, check_schema,
                                       content_sha256, dumps, read_record, variant_name)
from refit.errors import InvalidDataError, UsageError
from refit.publish.registry_commit import LOCK_TIMEOUT_S, PENDING  # noqa: F401
from refit.publish.registry_commit import RegistryLock, commit, open_registry
from refit.publish.registry_index import function_problems, registry_problems  # noqa: F401
from refit.publish.registry_layout import (  # noqa: F401  (re-exported for callers)
    FUNCTION_ID, INDEX, INDEX_FORMAT, Registry, chain_name, empty_index, parse_version,
    read_index)

BUMPS = ("patch", "minor", "major")          # ordered: a larger index is a larger bump
FIRST_VERSION = "1.0.0"

#: Fields whose change is another model (major): another call (response, predictors, form,
#: terms, direction) or another way of fitting it (estimator, interval method, groups).
MAJOR_FIELDS = ("response", "predictors.name", "predictors.unit", "direction", "form",
                "degree", "terms", "equation.y", "equation.x", "equation.scale",
                "estimator", "interval.method", "provenance.groups",
                "provenance.random_slope")
#: Fields whose change alters the numbers of the same model (minor).
MINOR_FIELDS = ("provenance.dataset.name", "provenance.dataset.version",
                "provenance.dataset.sha256", "provenance.subset",
                "interval", "coefficients", "covariance", "residual_std_error", "df_resid",
                "n", "r_squared", "equation.smearing", "predictors.valid_min",
                "predictors.valid_max", "domain", "cv", "provenance.recipe.candidates",
                "provenance.recipe.validation", "provenance.recipe.intervals",
                "provenance.recipe.subset")
#: Fields that never count as a change (they differ between any two runs or files).
IGNORED_FIELDS = ("sha256", "version", "variant", "created", "status", "schema_version",
                  "provenance.dataset.path", "provenance.recipe.path",
                  "provenance.recipe.data", "provenance.subset.notes")


# ----------------------------------------------------------------------------- versions
def bumped(version: str, bump: str) -> str:
    """The version after a bump: ``bumped("1.4.2", "minor") == "1.5.0"``."""
    major, minor, patch = parse_version(version)
    if bump == "major":
        return f"{major + 1}.0.0"
    if bump == "minor":
        return f"{major}.{minor + 1}.0"
    if bump == "patch":
        return f"{major}.{minor}.{patch + 1}"
    raise UsageError(f"--bump must be one of {', '.join(BUMPS)}; got {bump!r}")


def _flatten(value, prefix: str = "") -> dict:
    """``{"a.b": leaf}``; lists of objects (predictors) are flattened by position."""
    out = {}
    if isinstance(value, dict):
        for k, v in value.items():
            out.update(_flatten(v, f"{prefix}.{k}" if prefix else str(k)))
    elif isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
        for i, v in enumerate(value):
            for k, leaf in _flatten(v).items():
                out[f"{prefix}.{k}"] = out.get(f"{prefix}.{k}", []) + [(i, leaf)]
    else:
        out[prefix] = value
    return out


def _matches(key: str, fields) -> bool:
    return any(key == f or key.startswith(f + ".") for f in fields)


def changed_fields(old: dict, new: dict) -> list[str]:
    """Dotted names of the fields that differ (ignoring :data:`IGNORED_FIELDS`)."""
    a, b = _flatten(old), _flatten(new)
    keys = sorted(set(a) | set(b))
    return [k for k in keys if not _matches(k, IGNORED_FIELDS) and a.get(k) != b.get(k)]


def _short(key: str) -> str:
    """A changed field as people name it: ``cv.rmsep`` -> ``cv``, but
    ``provenance.dataset.version`` and ``predictors.unit`` stay whole."""
    major = [f for f in MAJOR_FIELDS if key == f or key.startswith(f + ".")]
    if major:                       # interval.method, not interval (whose level is minor)
        return max(major, key=len)
    parts = key.split(".")
    keep = 3 if parts[0] == "provenance" else 2 if parts[0] in ("predictors", "equation") else 1
    return ".".join(parts[:keep])


def classify(key: str) -> str:
    """The bump a change of field ``key`` needs (``major``, ``minor`` or ``patch``)."""
    if _matches(key, MAJOR_FIELDS):
        return "major"
    if _matches(key, MINOR_FIELDS):
        return "minor"
    return "patch"


def required_bump(old: dict, new: dict) -> tuple[str | None, dict[str, list[str]]]:
    """The smallest honest bump from ``old`` to ``new`` and the changed fields by kind.

    Returns ``(None, {})`` when nothing but ignored fields differ.
    """
    by_kind: dict[str, list[str]] = {}
    for key in changed_fields(old, new):
        names = by_kind.setdefault(classify(key), [])
        if _short(key) not in names:
            names.append(_short(key))
    if not by_kind:
        return None, {}
    return max(by_kind, key=BUMPS.index), by_kind


def _get(content: dict, *keys):
    for k in keys:
        content = content.get(k) if isinstance(content, dict) else None
    return content


def _variable(v) -> str | None:
    if not isinstance(v, dict):
        return None
    return f"{v.get('name')} [{v['unit']}]" if v.get("unit") else v.get("name")


def _predictors(c: dict) -> str | None:
    preds = c.get("predictors")
    return ", ".join(_variable(p) or "?" for p in preds) if isinstance(preds, list) else None


def _form(c: dict) -> str | None:
    terms = c.get("terms")
    return f"{c.get('form')} ({' + '.join(terms)})" if isinstance(terms, list) else c.get("form")


#: What makes a model, as people name it, each with how it is read from a file; two files
#: of one function that agree on all of these are the same model (a refit of it on other
#: data is a minor bump, see the module docstring).
MODEL_ITEMS = (
    ("response", lambda c: _variable(c.get("response"))),
    ("predictors", _predictors),
    ("form", _form),
    ("estimator", lambda c: c.get("estimator")),
    ("direction", lambda c: c.get("direction")),
    ("interval method", lambda c: _get(c, "interval", "method")),
    ("groups", lambda c: _get(c, "provenance", "groups")),
    ("random slope", lambda c: _get(c, "provenance", "random_slope")),
)


def model_changes(old: dict, new: dict) -> list[tuple[str, object, object]]:
    """``(item, in old, in new)`` for each :data:`MODEL_ITEMS` entry that differs: empty
    when ``new`` is the same model as ``old`` (whatever data it was fitted on)."""
    out = []
    for name, get in MODEL_ITEMS:
        a, b = get(old), get(new)
        if a != b:
            out.append((name, a, b))
    return out


def model_summary(content: dict) -> str:
    """``linear/ols/inverse/analytic on bk_depth_cm``: the model in one line."""
    parts = [content.get("form"), content.get("estimator"), content.get("direction"),
             _get(content, "interval", "method")]
    names = [p.get("name") for p in content.get("predictors") or [] if isinstance(p, dict)]
    return "/".join(str(p) for p in parts if p) + (f" on {', '.join(names)}" if names else "")


# ----------------------------------------------------------------------------- resolve
def resolve(registry, function_id: str, version: str | None = None,
            variant: str | None = None) -> Path:
    """The file of one version of one variant of a function in a registry.

    Parameters
    ----------
    registry : str or Path
        The registry folder (an interrupted publish is finished or undone first).
    function_id : str
    version : str, optional
        ``MAJOR.MINOR.PATCH``; default the variant's latest version.
    variant : str, optional
        A variant name; ``None`` or ``"default"``: the function's default variant.

    Raises
    ------
    UsageError
        ``variant`` or ``version`` is not spelled as one.
    UnreadableInputError
        The registry, the function, the variant or the version is not there (the
        message lists what there is).
    """
    from refit.errors import UnreadableInputError

    variant = variant_name(variant)
    if version is not None:
        try:
            parse_version(version, where="version")
        except InvalidDataError as exc:
            raise UsageError(str(exc)) from None
    reg = open_registry(registry)
    chains = reg.chains()
    chain = chain_name(function_id, variant)
    if not any(fid == function_id for fid, _ in chains):
        held = ", ".join(dict.fromkeys(fid for fid, _ in chains)) or "nothing yet"
        raise UnreadableInputError(f"registry {reg.path} has no function {function_id!r}; "
                                   f"it holds: {held}")
    entries = reg.versions(function_id, variant)
    if not entries:
        there = [v or DEFAULT_VARIANT for f, v in chains if f == function_id]
        raise UnreadableInputError(f"registry {reg.path} has no variant "
                                   f"{variant or DEFAULT_VARIANT!r} of {function_id}; its "
                                   f"variants: {', '.join(there)} (name one with --variant)")
    if version is None:
        version = reg.latest(function_id, variant)["version"]
    elif not any(e["version"] == version for e in entries):
        have = ", ".join(sorted((e["version"] for e in entries), key=parse_version))
        elsewhere = [v or DEFAULT_VARIANT for f, v in chains if f == function_id
                     and v != variant
                     and any(e["version"] == version for e in reg.versions(f, v))]
        raise UnreadableInputError(
            f"registry {reg.path} has no version {version} of {chain}; its versions: {have}"
            + (f"; {version} is a version of variant {', '.join(elsewhere)}: name it "
               "with --variant" if elsewhere else ""))
    return reg.file(function_id, version, variant)


# ----------------------------------------------------------------------------- publish
@dataclass
class PublishResult:
    """What :func:`publish` did (or would do, for a dry run)."""

    function_id: str
    version: str
    previous: str | None
    required: str | None          # the smallest honest bump (None for a first version)
    bump: str | None              # the bump applied
    changes: dict                 # kind -> changed fields
    path: Path
    sha256: str
    dry_run: bool = False
    recovered: list = field(default_factory=list)
    variant: str | None = None    # None: the function's default variant
    model_changes: list = field(default_factory=list)   # (item, before, after)
    others: list = field(default_factory=list)   # names of the function's other variants

    @property
    def chain(self) -> str:
        """``function_id`` or ``function_id/variant``."""
        return chain_name(self.function_id, self.variant)

    def to_dict(self) -> dict:
        return {"function_id": self.function_id, "variant": self.variant,
                "chain": self.chain, "version": self.version,
                "previous": self.previous, "required_bump": self.required, "bump": self.bump,
                "changes": self.changes,
                "model_changes": [{"item": i, "before": a, "after": b}
                                  for i, a, b in self.model_changes],
                "other_variants": self.others, "path": str(self.path),
                "sha256": self.sha256, "dry_run": self.dry_run, "recovered": self.recovered}


def published_content(candidate: dict, version: str, variant: str | None = None) -> dict:
    """The candidate's content with its version and variant set (no ``variant`` field for
    the default variant; a named one needs schema 1.3.0 or later), marked published, hash
    recomputed."""
    out = {k: v for k, v in candidate.items() if k not in ("sha256", "variant")}
    if variant is not None:
        out["variant"] = variant
        if _schema_tuple(out.get("schema_version")) < _schema_tuple(VARIANT_SCHEMA):
            out["schema_version"] = VARIANT_SCHEMA
    out["version"] = version
    out["status"] = "published"
    out["sha256"] = content_sha256(out)
    return out


def _schema_tuple(text) -> tuple:
    """``"1.2.0"`` -> ``(1, 2, 0)`` (a schema version the reader accepted)."""
    try:
        return tuple(int(p) for p in str(text).split("."))
    except ValueError:
        return (0,)


def plan_version(previous: dict | None, prev_version: str | None, candidate: dict,
                 bump: str | None) -> tuple[str, str | None, dict]:
    """``(version, required bump, changes)`` for a candidate after ``previous``.

    Raises
    ------
    InvalidDataError
        Nothing changed since ``prev_version``, or ``bump`` is smaller than required.
    """
    if previous is None:
        return FIRST_VERSION, None, {}
    required, changes = required_bump(previous, candidate)
    if required is None:
        raise InvalidDataError(f"nothing to publish: the candidate is identical to the "
                               f"published version {prev_version} (apart from its date)")
    chosen = bump or required
    if BUMPS.index(chosen) < BUMPS.index(required):
        raise InvalidDataError(
            f"--bump {chosen} is too small: since {prev_version}, "
            + "; ".join(f"{k} change(s): {', '.join(v)}" for k, v in
                        sorted(changes.items(), key=lambda kv: -BUMPS.index(kv[0])))
            + f"; these need a {required} bump (version {bumped(prev_version, required)})")
    return bumped(prev_version, chosen), required, changes


def publish(candidate_path, registry, *, bump: str | None = None, create: bool = False,
            dry_run: bool = False, now: str | None = None,
            lock_timeout: float = LOCK_TIMEOUT_S, sign=None,
            variant: str | None = None) -> PublishResult:
    """Publish a candidate coefficient file into a registry.

    Parameters
    ----------
    candidate_path : str or Path
        A run folder's ``fits/<candidate>.json`` (or any valid coefficient file).
    registry : str or Path
        The registry folder.
    bump : {"major", "minor", "patch"}, optional
        The bump to apply; default the smallest honest one (see the module docstring).
    create : bool
        Start a new registry if the folder is missing or empty.
    dry_run : bool
        Work out the version and changes; write nothing.
    now : str, optional
        ISO 8601 publication time for the index (default: now, UTC).
    sign : str or Path, optional
        An Ed25519 private key file (:func:`refit.publish.signing.new_key_pair`): the
        file's bytes are signed and the signature lands beside it as ``<version>.json.sig``.
    variant : str, optional
        The variant (version chain) to publish into: a name such as ``"mixed"``, or
        ``"default"`` for the function's default variant. Not given: the candidate's own
        ``variant`` field if it has one (a file taken from another registry), else the
        default variant. The file lands in ``REGISTRY/<function_id>/<variant>/``.

    Raises
    ------
    UsageError
        A bump or variant name that is not one.
    UnreadableInputError
        Unreadable candidate or registry.
    InvalidDataError
        The candidate's hash or schema is wrong, the bump is too small, nothing changed,
        the version exists already, or the index disagrees with the chain's files.
    """
    if bump is not None and bump not in BUMPS:
        raise UsageError(f"--bump must be one of {', '.join(BUMPS)}; got {bump!r}")
    chosen_variant = variant_name(variant) if variant is not None else None
    if sign is not None:
        from refit.publish.signing import load_private_key

        load_private_key(sign)          # a bad key stops before anything is written
    candidate = read_record(candidate_path)
    fid = candidate.get("function_id")
    if not isinstance(fid, str) or not FUNCTION_ID.match(fid):
        raise InvalidDataError(f"{candidate_path}: field 'function_id' must be lower case "
                               f"letters, digits and '_'; found {fid!r}")
    if variant is None:
        chosen_variant = variant_name(candidate.get("variant"),
                                      where=f"{candidate_path}: $.variant")
    reg = open_registry(registry, create=create)
    if dry_run:
        result = _plan(reg, candidate, chosen_variant, bump, dry_run=True)[0]
        result.recovered = reg.recovered
        return result
    with RegistryLock(reg.path, lock_timeout):
        first = reg.recovered
        reg = open_registry(registry, create=create, _held=True)   # re-read under the lock
        result, content = _plan(reg, candidate, chosen_variant, bump, dry_run=False)
        result.recovered = first + reg.recovered
        _land(reg, result, content, candidate_path, now, sign)
    return result


def _plan(reg: Registry, candidate: dict, variant: str | None, bump, *, dry_run: bool):
    fid = candidate["function_id"]
    chain = chain_name(fid, variant)
    problems = function_problems(reg, fid, variant)
    if problems:
        raise InvalidDataError(f"registry {reg.path}: the index disagrees with the files of "
                               f"{chain!r}: " + "; ".join(problems)
                               + "; nothing was published; fix the registry first")
    latest = reg.latest(fid, variant)
    previous = None if latest is None else \
        read_record(reg.file(fid, latest["version"], variant))
    version, required, changes = plan_version(
        previous, None if latest is None else latest["version"], candidate, bump)
    target = reg.file(fid, version, variant)
    if target.exists():
        raise InvalidDataError(f"{target}: version {version} of {chain!r} is already "
                               "published and published versions never change; publish a "
                               "new version")
    content = published_content(candidate, version, variant)
    check_schema(content, str(target))
    others = [v or DEFAULT_VARIANT for v in [None, *reg.variants(fid)]
              if v != variant and reg.versions(fid, v)]
    result = PublishResult(fid, version, None if latest is None else latest["version"],
                           required, bump or required, changes, target, content["sha256"],
                           dry_run, variant=variant,
                           model_changes=[] if previous is None else
                           model_changes(previous, candidate), others=others)
    return result, content


def _land(reg: Registry, result: PublishResult, content: dict, source, now, sign) -> None:
    text = dumps(content)
    signature = None
    if sign is not None:
        from refit.publish.signing import signature_text

        signature = signature_text(text.encode("utf-8"), result.path.name, sign)
    rel = result.path.relative_to(reg.path).as_posix()
    entry = {"version": result.version, "file": rel,
             "published": now or _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
             "sha256": result.sha256, "file_sha256": sha256_bytes(text.encode("utf-8")),
             "bump": result.bump, "previous": result.previous,
             "changes": result.changes, "source_file": Path(source).name}
    if result.variant is not None:
        entry["variant"] = result.variant
    if signature is not None:
        entry["signed_by"] = json.loads(signature)["key_id"]
    commit(reg, result.function_id, result.path, text, entry, signature)
