"""The registry's layout on disk and its index reader (no publishing, no recovery).

Layout::

    REGISTRY/index.json                                every function id, its variants and
                                                       versions, dates, hashes
    REGISTRY/<function_id>/<version>.json              the default variant's versions
    REGISTRY/<function_id>/<variant>/<version>.json    a named variant's versions
    REGISTRY/.lock                                     held while a process publishes

A *variant* is one of several alternative models of one function id (say an OLS line
and a mixed-effects fit of MAP on depth to Bk) published side by side; each variant has
its own version chain. A function's default variant has no name and keeps the layout of
registries written before variants existed, so those stay readable as they are. A
variant name (:data:`refit.coefficients.format.VARIANT_NAME`) starts with a letter and a
version with a digit, so a variant folder never collides with a version file.

The index (``schemas/registry.index.schema.json``, format ``refit-registry/1.1``)::

    {"format": "refit-registry/1.1",
     "functions": {"<function_id>": [entry, ...]},                 default variants
     "variants": {"<function_id>": {"<variant>": [entry, ...]}}}   named variants

``variants`` is written only once a named variant is published; a reader of format
``refit-registry/1`` sees the default variants as before.

The bottom of the registry modules: :mod:`refit.publish.registry_commit` (landing a
publish, recovery), :mod:`refit.publish.registry_index` (index against files) and
:mod:`refit.publish.registry` (versions, publish) import it; it imports none of them.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from pathlib import Path

from refit.coefficients.format import DEFAULT_VARIANT, VARIANT_NAME
from refit.errors import InvalidDataError, UnreadableInputError

INDEX = "index.json"
INDEX_FORMAT = "refit-registry/1.1"
_INDEX_FORMAT = re.compile(r"^refit-registry/(\d+)(?:\.(\d+))?$")
FUNCTION_ID = re.compile(r"^[a-z][a-z0-9_]*$")
_SEMVER = re.compile(r"^(0|[1-9]\d*)\.(0|[1-9]\d*)\.(0|[1-9]\d*)$")


def parse_version(text, where: str = "version") -> tuple[int, int, int]:
    """``"1.2.3"`` -> ``(1, 2, 3)``; anything else is refused (semver core, no pre-release)."""
    m = _SEMVER.match(str(text))
    if not m:
        raise InvalidDataError(f"{where}: {text!r} is not a published version MAJOR.MINOR.PATCH "
                               "(e.g. '1.0.0')")
    return tuple(int(g) for g in m.groups())  # type: ignore[return-value]


def chain_name(function_id: str, variant: str | None = None) -> str:
    """How a version chain is named to people: ``map_from_bk_depth`` (default variant) or
    ``map_from_bk_depth/mixed``, as its folder in the registry."""
    return function_id if variant is None else f"{function_id}/{variant}"


@dataclass
class Registry:
    """A registry folder and its index (see the module docstring).

    ``variant`` arguments: ``None`` (or ``"default"``) is a function's default variant.
    """

    path: Path
    index: dict = field(default_factory=dict)
    recovered: list[str] = field(default_factory=list)

    def _chain(self, function_id: str, variant: str | None) -> list:
        if variant in (None, DEFAULT_VARIANT):
            return self.index.get("functions", {}).get(function_id, [])
        return self.index.get("variants", {}).get(function_id, {}).get(variant, [])

    def versions(self, function_id: str, variant: str | None = None) -> list[dict]:
        """Index entries of one variant of a function, oldest first."""
        return list(self._chain(function_id, variant))

    def latest(self, function_id: str, variant: str | None = None) -> dict | None:
        """The index entry of the highest version of one variant (None if unpublished)."""
        entries = self.versions(function_id, variant)
        return max(entries, key=lambda e: parse_version(e["version"])) if entries else None

    def variants(self, function_id: str) -> list[str]:
        """Names of the function's named variants in the index, sorted (the default
        variant, unnamed, is not listed)."""
        return sorted(self.index.get("variants", {}).get(function_id, {}))

    def chains(self) -> list[tuple[str, str | None]]:
        """Every ``(function_id, variant)`` with a version in the index, sorted; ``None``
        is the default variant."""
        out = [(fid, None) for fid, entries in self.index.get("functions", {}).items()
               if entries]
        out += [(fid, v) for fid, named in self.index.get("variants", {}).items()
                for v, entries in named.items() if entries]
        return sorted(out, key=lambda c: (c[0], c[1] or ""))

    def add_entry(self, function_id: str, entry: dict) -> None:
        """Append an index entry to its chain (``entry["variant"]``, absent: default)."""
        variant = entry.get("variant")
        if variant is None:
            self.index.setdefault("functions", {}).setdefault(function_id, []).append(entry)
        else:
            self.index.setdefault("variants", {}).setdefault(function_id, {}) \
                .setdefault(variant, []).append(entry)

    def folder(self, function_id: str, variant: str | None = None) -> Path:
        """``REGISTRY/<function_id>`` or ``REGISTRY/<function_id>/<variant>``; names that
        could leave the folder are refused (see :meth:`file`)."""
        if not isinstance(function_id, str) or not FUNCTION_ID.match(function_id):
            raise InvalidDataError(f"{self.path / INDEX}: function id {function_id!r} is not "
                                   "lower case letters, digits and '_'; the index was edited "
                                   "outside refit: restore it")
        if variant in (None, DEFAULT_VARIANT):
            return self.path / function_id
        if not isinstance(variant, str) or not VARIANT_NAME.match(variant):
            raise InvalidDataError(f"{self.path / INDEX}: variant {str(variant)[:60]!r} of "
                                   f"{function_id} is not a variant name (lower case "
                                   "letters, digits, '_' and '-'); the index was edited "
                                   "outside refit: restore it")
        return self.path / function_id / variant

    def file(self, function_id: str, version: str, variant: str | None = None) -> Path:
        """``REGISTRY/<function_id>[/<variant>]/<version>.json``; names that could leave
        the folder (``..``, ``/``, anything but an id, a variant name and a semver) are
        refused, and so is a path a symbolic link leads outside the registry."""
        folder = self.folder(function_id, variant)
        parse_version(version, where=f"{self.path / INDEX}: "
                      f"{chain_name(function_id, variant)} version")
        target = folder / f"{version}.json"
        check_inside(self.path, target)
        return target


def check_inside(registry: Path, target: Path) -> None:
    """Refuse a registry path that a symbolic link leads outside the registry.

    Raises
    ------
    InvalidDataError
        Naming the path and where it really leads.
    """
    from refit._util.paths import outside

    real = outside(registry, target)
    if real is not None:
        raise InvalidDataError(f"{target}: a symbolic link leads it outside the registry "
                               f"{registry}, to {real}; a registry's files live in its "
                               "folder: replace the link by the file (or restore the "
                               "registry from a copy)")


def empty_index() -> dict:
    """The index of a registry with nothing published yet."""
    return {"format": INDEX_FORMAT, "functions": {}}


def read_index(path, create: bool = False) -> Registry:
    """The registry at ``path`` with its index as it is on disk (no recovery).

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
    index_path = path / INDEX
    if not path.exists():
        if create:
            return Registry(path, empty_index())
        raise UnreadableInputError(f"registry {path} not found; check the path (a new registry "
                                   "is started by `refit publish FIT --to PATH --init`)")
    if not path.is_dir():
        raise UnreadableInputError(f"registry {path} is a file; name the registry folder")
    if not index_path.is_file():
        if create and not any(p for p in path.iterdir() if not p.name.startswith(".")):
            return Registry(path, empty_index())
        raise UnreadableInputError(
            f"{path} is not a refit registry (no {INDEX}); "
            + ("the folder is not empty, choose another" if create else
               "check the path (a new registry is started in an empty folder by `refit "
               "publish FIT --to PATH --init`)"))
    check_inside(path, index_path)
    try:
        index = json.loads(index_path.read_text("utf-8"))
    except RecursionError:
        raise UnreadableInputError(f"{index_path}: the registry index is nested too deeply "
                                   "to be one; restore it from a copy") from None
    except (OSError, UnicodeDecodeError, ValueError) as exc:
        raise UnreadableInputError(f"{index_path}: cannot read the registry index ({exc}); "
                                   "run `refit verify` on the registry to see what "
                                   "disagrees") from None
    if not isinstance(index, dict) or not isinstance(index.get("functions"), dict):
        raise UnreadableInputError(f"{index_path}: not a refit registry index (no "
                                   "'functions' object)")
    fmt = index.get("format")
    m = _INDEX_FORMAT.match(fmt) if isinstance(fmt, str) else None
    if m is not None and m.group(1) != INDEX_FORMAT.split("/")[1].split(".")[0]:
        raise UnreadableInputError(f"{index_path}: the registry index has format {fmt!r}, a "
                                   f"major version this refit does not read (it reads "
                                   f"{INDEX_FORMAT} and earlier); upgrade refit")
    problem = index_shape_problem(index)
    if problem:
        raise UnreadableInputError(f"{index_path}: not a refit registry index: {problem}; "
                                   "it was edited outside refit: restore it from a copy")
    return Registry(path, index)


#: Index entry fields that must be text when present.
_ENTRY_TEXT = ("version", "file", "published", "sha256", "file_sha256", "bump", "previous",
               "source_file", "variant")


def index_shape_problem(index: dict) -> str | None:
    """What is wrong with the shape of an index (None when every entry is an object with a
    text ``version``, as :func:`refit.publish.registry_commit.commit` writes them; named
    variants under ``variants``, each entry's ``variant`` its chain's name).

    ``format`` is not checked here: :func:`read_index` refuses a later major version
    (``refit-registry/2``) and reads any other spelling as before variants existed."""
    for fid, entries in index["functions"].items():
        problem = _chain_shape_problem(f"functions.{fid}", entries, None)
        if problem:
            return problem
    named = index.get("variants", {})
    if not isinstance(named, dict):
        return f"'variants' must be an object; found {type(named).__name__}"
    for fid, chains in named.items():
        if not isinstance(chains, dict):
            return f"'variants.{fid}' must be an object of variants; found " \
                   f"{type(chains).__name__}"
        for variant, entries in chains.items():
            if not VARIANT_NAME.match(variant) or variant == DEFAULT_VARIANT:
                return f"'variants.{fid}' names {variant[:60]!r}, which is not a variant name"
            problem = _chain_shape_problem(f"variants.{fid}.{variant}", entries, variant)
            if problem:
                return problem
    return None


def _chain_shape_problem(where: str, entries, variant: str | None) -> str | None:
    if not isinstance(entries, list):
        return f"'{where}' must be a list of versions; found {type(entries).__name__}"
    for i, entry in enumerate(entries):
        if not isinstance(entry, dict) or not isinstance(entry.get("version"), str):
            return (f"'{where}[{i}]' must be an object with a text 'version'; "
                    f"found {str(entry)[:60]}")
        bad = [k for k in _ENTRY_TEXT if k in entry and entry[k] is not None
               and not isinstance(entry[k], str)]
        if bad:
            return f"'{where}[{i}].{bad[0]}' must be text"
        if entry.get("variant") != variant:
            return (f"'{where}[{i}].variant' is {entry.get('variant')!r}; an entry of this "
                    f"chain has {'no variant' if variant is None else repr(variant)}")
    return None
