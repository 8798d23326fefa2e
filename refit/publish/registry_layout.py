"""The registry's layout on disk and its index reader (no publishing, no recovery).

Layout::

    REGISTRY/index.json                      every function id, its versions, dates, hashes
    REGISTRY/<function_id>/<version>.json    one published coefficient file (read-only)
    REGISTRY/.lock                           held while a process publishes

The bottom of the registry modules: :mod:`refit.publish.registry_commit` (landing a
publish, recovery), :mod:`refit.publish.registry_index` (index against files) and
:mod:`refit.publish.registry` (versions, publish) import it; it imports none of them.
"""

from __future__ import annotations

import json
import re
from dataclasses import dataclass, field
from pathlib import Path

from refit.errors import InvalidDataError, UnreadableInputError

INDEX = "index.json"
INDEX_FORMAT = "refit-registry/1"
FUNCTION_ID = re.compile(r"^[a-z][a-z0-9_]*$")
_SEMVER = re.compile(r"^(0|[1-9]\d*)\.(0|[1-9]\d*)\.(0|[1-9]\d*)$")


def parse_version(text, where: str = "version") -> tuple[int, int, int]:
    """``"1.2.3"`` -> ``(1, 2, 3)``; anything else is refused (semver core, no pre-release)."""
    m = _SEMVER.match(str(text))
    if not m:
        raise InvalidDataError(f"{where}: {text!r} is not a published version MAJOR.MINOR.PATCH "
                               "(e.g. '1.0.0')")
    return tuple(int(g) for g in m.groups())  # type: ignore[return-value]


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
        if not isinstance(function_id, str) or not FUNCTION_ID.match(function_id):
            raise InvalidDataError(f"{self.path / INDEX}: function id {function_id!r} is not "
                                   "lower case letters, digits and '_'; the index was edited "
                                   "outside refit: restore it")
        parse_version(version, where=f"{self.path / INDEX}: {function_id} version")
        target = self.path / function_id / f"{version}.json"
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
        raise UnreadableInputError(f"registry {path} not found; check the path, or pass --init "
                                   "to start a new registry there")
    if not path.is_dir():
        raise UnreadableInputError(f"registry {path} is a file; name the registry folder")
    if not index_path.is_file():
        if create and not any(p for p in path.iterdir() if not p.name.startswith(".")):
            return Registry(path, empty_index())
        raise UnreadableInputError(
            f"{path} is not a refit registry (no {INDEX}); "
            + ("the folder is not empty, choose another" if create else
               "check the path, or pass --init to start a new registry in an empty folder"))
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
    problem = index_shape_problem(index)
    if problem:
        raise UnreadableInputError(f"{index_path}: not a refit registry index: {problem}; "
                                   "it was edited outside refit: restore it from a copy")
    return Registry(path, index)


#: Index entry fields that must be text when present.
_ENTRY_TEXT = ("version", "file", "published", "sha256", "file_sha256", "bump", "previous",
               "source_file")


def index_shape_problem(index: dict) -> str | None:
    """What is wrong with the shape of an index (None when every entry is an object with a
    text ``version``, as :func:`refit.publish.registry_commit.commit` writes them)."""
    for fid, entries in index["functions"].items():
        if not isinstance(entries, list):
            return f"'functions.{fid}' must be a list of versions; found {type(entries).__name__}"
        for i, entry in enumerate(entries):
            if not isinstance(entry, dict) or not isinstance(entry.get("version"), str):
                return (f"'functions.{fid}[{i}]' must be an object with a text 'version'; "
                        f"found {str(entry)[:60]}")
            bad = [k for k in _ENTRY_TEXT if k in entry and entry[k] is not None
                   and not isinstance(entry[k], str)]
            if bad:
                return f"'functions.{fid}[{i}].{bad[0]}' must be text"
    return None
