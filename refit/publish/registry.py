"""The coefficient registry: published, immutable, versioned coefficient files.

Layout::

    REGISTRY/index.json                      every function id, its versions, dates, hashes
    REGISTRY/<function_id>/<version>.json    one published coefficient file (read-only)
    REGISTRY/.lock                           held while a process publishes

Versions follow Semantic Versioning 2.0.0 (https://semver.org), read for equations:

* **major** -- a consumer must change how it calls the equation: the form (or its terms),
  the predictors (names or units), the response (name or unit) or the direction changed;
* **minor** -- same call, different numbers: the dataset (name, version or sha256), the
  subset, the estimator, the interval method or level, the validation, or any fitted
  quantity (coefficients, covariance, residual error, interval, domain, skill) changed;
* **patch** -- metadata only (cautions, notes, citation, software versions, ...).

:func:`required_bump` compares a candidate with the latest published version and names
the smallest bump that is honest; :func:`publish` proposes it and refuses a smaller one.
Publishing a candidate identical to the latest version is refused too (nothing to add).

A published file is written once (atomically, then made read-only) and never replaced:
publishing over an existing version is refused. A publish first writes its index entry to
the journal ``REGISTRY/.publishing.json``; the next command that opens the registry
finishes a publish whose file had landed (adds the entry) or drops one whose file had not,
removes stale temporary files, and says so (all in :mod:`refit.publish.registry_commit`). The
file's bytes are exactly :func:`file_text` of its content, so any edit, even of one space,
is detectable (:mod:`refit.publish.verify`). The index is rewritten atomically after the file
lands; if the two ever disagree (a crash between the writes, a hand edit),
``refit verify REGISTRY`` says how.
"""

from __future__ import annotations

import datetime as _dt
import json
import re
from dataclasses import dataclass, field
from pathlib import Path

from refit._util.atomic import sha256_bytes
from refit.publish.registry_commit import LOCK_TIMEOUT_S, PENDING  # noqa: F401
from refit.publish.registry_commit import RegistryLock, commit, needs_recovery, recover_locked
from refit.publish.registry_index import function_problems, registry_problems  # noqa: F401
from refit.errors import InvalidDataError, UnreadableInputError, UsageError

INDEX = "index.json"
INDEX_FORMAT = "refit-registry/1"
_FUNCTION_ID = re.compile(r"^[a-z][a-z0-9_]*$")
BUMPS = ("patch", "minor", "major")          # ordered: a larger index is a larger bump
FIRST_VERSION = "1.0.0"
_SEMVER = re.compile(r"^(0|[1-9]\d*)\.(0|[1-9]\d*)\.(0|[1-9]\d*)$")

#: Fields whose change breaks a consumer's call (major).
MAJOR_FIELDS = ("response", "predictors.name", "predictors.unit", "direction", "form",
                "degree", "terms", "equation.y", "equation.x", "equation.scale")
#: Fields whose change alters the numbers, not the call (minor).
MINOR_FIELDS = ("provenance.dataset.name", "provenance.dataset.version",
                "provenance.dataset.sha256", "provenance.subset", "estimator",
                "interval", "coefficients", "covariance", "residual_std_error", "df_resid",
                "n", "r_squared", "equation.smearing", "predictors.valid_min",
                "predictors.valid_max", "domain", "cv", "provenance.recipe.candidates",
                "provenance.recipe.validation", "provenance.recipe.intervals",
                "provenance.recipe.subset")
#: Fields that never count as a change (they differ between any two runs or files).
IGNORED_FIELDS = ("sha256", "version", "created", "status", "schema_version",
                  "provenance.dataset.path", "provenance.recipe.path",
                  "provenance.recipe.data", "provenance.subset.notes")


# ----------------------------------------------------------------------------- reading
def file_text(content: dict) -> str:
    """The exact text of a coefficient file for ``content``.

    JSON, keys in the content's order, one-space indent, UTF-8 (no ``\\u`` escapes), a
    final newline: the layout of the run folder's candidate files.
    """
    from refit import coefficients as co
    if hasattr(co, "dumps"):
        return co.dumps(content)
    return json.dumps(co.plain(content), indent=1, ensure_ascii=False, allow_nan=False) + "\n"


def content_sha256(content: dict) -> str:
    """sha256 of the canonical content: keys sorted, compact, UTF-8, without ``sha256``."""
    from refit.coefficients import canonical_bytes

    return sha256_bytes(canonical_bytes({k: v for k, v in content.items() if k != "sha256"}))


def parse_record(path) -> tuple[dict, bytes]:
    """The JSON content and raw bytes of a coefficient file (nothing is executed).

    Raises
    ------
    UnreadableInputError
        Missing, unreadable, not UTF-8, not JSON (line and column named) or not an object.
    """
    path = Path(path)
    try:
        raw = path.read_bytes()
    except FileNotFoundError:
        raise UnreadableInputError(f"{path}: coefficient file not found; check the path") from None
    except IsADirectoryError:
        raise UnreadableInputError(f"{path}: is a folder; name a coefficient file "
                                   "(<function_id>/<version>.json)") from None
    except OSError as exc:
        raise UnreadableInputError(f"{path}: cannot read it ({exc.strerror})") from None
    return parse_bytes(raw, path), raw


def parse_bytes(raw: bytes, path) -> dict:
    """The JSON object in ``raw`` (see :func:`parse_record`); ``path`` names it in errors."""
    try:
        content = json.loads(raw.decode("utf-8"), parse_constant=_no_constant)
    except UnicodeDecodeError as exc:
        raise UnreadableInputError(f"{path}: not UTF-8 text (byte {exc.start}); the file is "
                                   "damaged: take it again from its registry") from None
    except ValueError as exc:
        raise UnreadableInputError(f"{path}: not valid JSON ({exc}); the file is truncated or "
                                   "damaged: take it again from its registry") from None
    if not isinstance(content, dict):
        raise UnreadableInputError(f"{path}: a coefficient file is a JSON object; found "
                                   f"{type(content).__name__}")
    return content


def _no_constant(name: str):
    raise ValueError(f"{name} is not allowed in a coefficient file (use null)")


def check_hash(content: dict, path) -> None:
    """Refuse content whose ``sha256`` field is missing or does not match (exit code 1)."""
    stated = content.get("sha256")
    if not isinstance(stated, str):
        raise InvalidDataError(f"{path}: field 'sha256' is missing; a coefficient file "
                               "carries the sha256 of its content")
    actual = content_sha256(content)
    if stated != actual:
        raise InvalidDataError(
            f"{path}: field 'sha256' does not match the content ({stated[:12]}... stated, "
            f"{actual[:12]}... computed): the file was edited after it was written; take it "
            "again from its registry or run")


def validate_schema(content: dict, path) -> None:
    """JSON Schema check of the coefficient file, when the format module provides one."""
    from refit import coefficients
    validate = getattr(coefficients, "validate", None)
    if validate is not None:
        validate(content, where=str(path), check_hash=False)


def read_record(path) -> dict:
    """Parse, check the hash and validate a coefficient file; returns its content."""
    content, _ = parse_record(path)
    check_hash(content, path)
    validate_schema(content, path)
    return content


# ----------------------------------------------------------------------------- versions
def parse_version(text, where: str = "version") -> tuple[int, int, int]:
    """``"1.2.3"`` -> ``(1, 2, 3)``; anything else is refused (semver core, no pre-release)."""
    m = _SEMVER.match(str(text))
    if not m:
        raise InvalidDataError(f"{where}: {text!r} is not a published version MAJOR.MINOR.PATCH "
                               "(e.g. '1.0.0')")
    return tuple(int(g) for g in m.groups())  # type: ignore[return-value]


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


# ----------------------------------------------------------------------------- index
@dataclass
class Registry:
    """A registry folder and its index (see the module docstring)."""

    path: Path
    index: dict = field(default_factory=dict)
    recovered: list[str] = field(default_factory=list)

    def versions(self, function_id: str) -> list[dict]:
        """Index entries of a function, oldest first."""
        return list(self.index.get("functions", {}).get(function_id, []))

    def latest(self, function_id: str) -> dict | None:
        """The index entry of the highest version of a function (None if unpublished)."""
        entries = self.versions(function_id)
        return max(entries, key=lambda e: parse_version(e["version"])) if entries else None

    def file(self, function_id: str, version: str) -> Path:
        """``REGISTRY/<function_id>/<version>.json``; names that could leave the folder
        (``..``, ``/``, anything but an id and a semver) are refused."""
        if not isinstance(function_id, str) or not _FUNCTION_ID.match(function_id):
            raise InvalidDataError(f"{self.path / INDEX}: function id {function_id!r} is not "
                                   "lower case letters, digits and '_'; the index was edited "
                                   "outside refit: restore it")
        parse_version(version, where=f"{self.path / INDEX}: {function_id} version")
        return self.path / function_id / f"{version}.json"


def _empty_index() -> dict:
    return {"format": INDEX_FORMAT, "functions": {}}


def open_registry(path, *, create: bool = False, _held: bool = False) -> Registry:
    """Read a registry's index, first finishing or undoing an interrupted publish.

    Parameters
    ----------
    path : str or Path
    create : bool
        Accept a folder that does not exist yet or is empty (a new registry).

    Raises
    ------
    UnreadableInputError
        The folder is missing (and ``create`` is false), is not a registry, or its index
        is not readable JSON.
    """
    path = Path(path)
    recovered = recover_locked(path, _held) if needs_recovery(path) else []
    reg = _open_index(path, create)
    reg.recovered = recovered
    return reg


def _open_index(path: Path, create: bool) -> Registry:
    index_path = path / INDEX
    if not path.exists():
        if create:
            return Registry(path, _empty_index())
        raise UnreadableInputError(f"registry {path} not found; check the path, or pass --init "
                                   "to start a new registry there")
    if not path.is_dir():
        raise UnreadableInputError(f"registry {path} is a file; name the registry folder")
    if not index_path.is_file():
        if create and not any(p for p in path.iterdir() if not p.name.startswith(".")):
            return Registry(path, _empty_index())
        raise UnreadableInputError(
            f"{path} is not a refit registry (no {INDEX}); "
            + ("the folder is not empty, choose another" if create else
               "check the path, or pass --init to start a new registry in an empty folder"))
    try:
        index = json.loads(index_path.read_text("utf-8"))
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise UnreadableInputError(f"{index_path}: cannot read the registry index ({exc}); "
                                   "run `refit verify` on the registry to see what "
                                   "disagrees") from None
    if not isinstance(index, dict) or not isinstance(index.get("functions"), dict):
        raise UnreadableInputError(f"{index_path}: not a refit registry index (no "
                                   "'functions' object)")
    return Registry(path, index)


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

    def to_dict(self) -> dict:
        return {"function_id": self.function_id, "version": self.version,
                "previous": self.previous, "required_bump": self.required, "bump": self.bump,
                "changes": self.changes, "path": str(self.path), "sha256": self.sha256,
                "dry_run": self.dry_run, "recovered": self.recovered}


def published_content(candidate: dict, version: str) -> dict:
    """The candidate's content with its version set, marked published, hash recomputed."""
    out = {k: v for k, v in candidate.items() if k != "sha256"}
    out["version"] = version
    out["status"] = "published"
    out["sha256"] = content_sha256(out)
    return out


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
            lock_timeout: float = LOCK_TIMEOUT_S) -> PublishResult:
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

    Raises
    ------
    UnreadableInputError
        Unreadable candidate or registry.
    InvalidDataError
        The candidate's hash or schema is wrong, the bump is too small, nothing changed,
        the version exists already, or the index disagrees with the function's files.
    """
    if bump is not None and bump not in BUMPS:
        raise UsageError(f"--bump must be one of {', '.join(BUMPS)}; got {bump!r}")
    candidate = read_record(candidate_path)
    fid = candidate.get("function_id")
    if not isinstance(fid, str) or not re.match(r"^[a-z][a-z0-9_]*$", fid):
        raise InvalidDataError(f"{candidate_path}: field 'function_id' must be lower case "
                               f"letters, digits and '_'; found {fid!r}")
    reg = open_registry(registry, create=create)
    if dry_run:
        result = _plan(reg, candidate, candidate_path, bump, dry_run=True)[0]
        result.recovered = reg.recovered
        return result
    with RegistryLock(reg.path, lock_timeout):
        first = reg.recovered
        reg = open_registry(registry, create=create, _held=True)   # re-read under the lock
        result, content = _plan(reg, candidate, candidate_path, bump, dry_run=False)
        result.recovered = first + reg.recovered
        _land(reg, result, content, candidate_path, now)
    return result


def _plan(reg: Registry, candidate: dict, source, bump, *, dry_run: bool):
    fid = candidate["function_id"]
    problems = function_problems(reg, fid)
    if problems:
        raise InvalidDataError(f"registry {reg.path}: the index disagrees with the files of "
                               f"{fid!r}: " + "; ".join(problems)
                               + "; nothing was published; fix the registry first")
    latest = reg.latest(fid)
    previous = None if latest is None else read_record(reg.file(fid, latest["version"]))
    version, required, changes = plan_version(
        previous, None if latest is None else latest["version"], candidate, bump)
    target = reg.file(fid, version)
    if target.exists():
        raise InvalidDataError(f"{target}: version {version} of {fid!r} is already published "
                               "and published versions never change; publish a new version")
    content = published_content(candidate, version)
    validate_schema(content, target)
    result = PublishResult(fid, version, None if latest is None else latest["version"],
                           required, bump or required, changes, target, content["sha256"],
                           dry_run)
    return result, content


def _land(reg: Registry, result: PublishResult, content: dict, source, now) -> None:
    text = file_text(content)
    entry = {"version": result.version, "file": f"{result.function_id}/{result.version}.json",
             "published": now or _dt.datetime.now(_dt.UTC).isoformat(timespec="seconds"),
             "sha256": result.sha256, "file_sha256": sha256_bytes(text.encode("utf-8")),
             "bump": result.bump, "previous": result.previous,
             "changes": result.changes, "source_file": Path(source).name}
    commit(reg, result.function_id, result.path, text, entry)
