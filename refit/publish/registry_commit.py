"""How a publish lands safely: the registry lock, the publish journal, crash recovery.

Used by :mod:`refit.publish.registry` (which re-exports :data:`PENDING`,
:data:`LOCK_TIMEOUT_S` and :func:`open_registry`); imports only the layout
(:mod:`refit.publish.registry_layout`). A publish holds ``REGISTRY/.lock`` and then

1. writes the new index entry to the journal ``REGISTRY/.publishing.json``;
2. writes the signature ``<version>.json.sig`` if the publish is signed, then the
   coefficient file (atomically), and makes them read-only;
3. rewrites ``index.json`` (atomically) with the entry added;
4. removes the journal.

The next command that opens the registry (:func:`open_registry`, through
:func:`recover_locked`) finishes a publish whose file had landed (adds the entry to the
index) or drops one whose file had not, removes stale temporary files (``TMP_PREFIX*``) and
says what it did.
"""

from __future__ import annotations

import json
import os
from pathlib import Path

from refit._util.atomic import TMP_PREFIX, sha256_bytes, write_text_atomic
from refit.errors import RefitError
from refit.publish.registry_layout import (INDEX, INDEX_FORMAT, Registry, chain_name,
                                           empty_index, read_index)

PENDING = ".publishing.json"                 # journal of a publish in progress
LOCK_FILE = ".lock"
LOCK_TIMEOUT_S = 5.0


class RegistryLock:
    """Hold ``REGISTRY/.lock``; refuse after ``timeout`` [s] with a 'busy' error."""

    def __init__(self, folder: Path, timeout: float):
        from filelock import FileLock

        from refit.errors import UnreadableInputError

        try:
            folder.mkdir(parents=True, exist_ok=True)
        except OSError as exc:
            raise UnreadableInputError(f"registry {folder} cannot be created ({exc.strerror}); "
                                       "choose a writable place for it") from None
        self.folder = folder
        self.lock = FileLock(str(folder / LOCK_FILE), timeout=timeout)

    def __enter__(self):
        from filelock import Timeout

        from refit.errors import StoreBusyError

        try:
            self.lock.acquire()
        except OSError as exc:  # a read-only registry, or not a folder where the lock goes
            from refit.errors import UnreadableInputError

            raise UnreadableInputError(
                f"registry {self.folder} cannot be written ({exc.strerror or exc}: "
                f"{self.folder / LOCK_FILE}); a publish needs a writable registry: check its "
                "permissions, or use --dry-run to see what would be published") from None
        except Timeout:
            raise StoreBusyError(f"registry {self.folder} is busy: another refit process "
                                 "holds its lock; wait for it to finish, then run the "
                                 "command again") from None
        return self

    def __exit__(self, *exc):
        self.lock.release()


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
        is not readable JSON (:func:`refit.publish.registry_layout.read_index`).
    """
    path = Path(path)
    recovered = recover_locked(path, _held) if needs_recovery(path) else []
    reg = read_index(path, create)
    reg.recovered = recovered
    return reg


def write_index(reg) -> None:
    """Rewrite ``reg.path/index.json`` atomically from ``reg.index``."""
    text = json.dumps(reg.index, indent=1, ensure_ascii=False, sort_keys=False) + "\n"
    write_text_atomic(reg.path / INDEX, text)


def commit(reg, function_id: str, target: Path, text: str, entry: dict,
           signature: str | None = None) -> None:
    """Land one published file and its index entry (steps 1-4 of the module docstring).

    The caller holds the lock; ``reg`` is the registry opened under it.
    """
    journal = {"function_id": function_id, "entry": entry}   # entry["variant"]: its chain
    write_text_atomic(reg.path / PENDING, json.dumps(journal, ensure_ascii=False))
    if signature is not None:
        sig = target.parent / (target.name + ".sig")
        write_text_atomic(sig, signature)
        os.chmod(sig, 0o444)
    write_text_atomic(target, text)
    os.chmod(target, 0o444)
    reg.index["format"] = INDEX_FORMAT      # 1.1 reads every 1.x index: the newest minor
    reg.index.setdefault("functions", {})
    reg.add_entry(function_id, entry)
    write_index(reg)
    (reg.path / PENDING).unlink()


def _temporary_files(path: Path) -> list[Path]:
    """Temporary files in the registry, a function folder or a variant folder."""
    return [*path.glob(TMP_PREFIX + "*"), *path.glob("*/" + TMP_PREFIX + "*"),
            *path.glob("*/*/" + TMP_PREFIX + "*")]


def needs_recovery(path: Path) -> bool:
    """Whether a registry folder holds a publish journal or stale temporary files."""
    return path.is_dir() and ((path / PENDING).exists() or bool(_temporary_files(path)))


def recover_locked(path: Path, held: bool) -> list[str]:
    """:func:`recover` under the registry lock (taken here unless ``held``)."""
    if held:
        return recover(path)
    try:
        with RegistryLock(path, LOCK_TIMEOUT_S):
            return recover(path)
    except PermissionError:  # a read-only registry: nothing can be repaired; verify reports
        return []


def recover(path: Path) -> list[str]:
    """Finish or undo an interrupted publish, drop temporary files (lock held); say so."""
    out, marker = [], path / PENDING
    if marker.is_file():
        out += _replay_journal(path, marker)
        marker.unlink()
    tmps = _temporary_files(path)
    for tmp in tmps:
        tmp.unlink(missing_ok=True)
    if tmps:
        out.append(f"recovered after an interrupted write: removed {len(tmps)} temporary "
                   "file(s) ("
                   + ", ".join(sorted(t.name for t in tmps)) + ")")
    return out


def _replay_journal(path: Path, marker: Path) -> list[str]:
    """Add the journal's entry to the index if its file landed intact; say what happened."""
    try:
        plan = json.loads(marker.read_text("utf-8"))
        fid, entry = plan["function_id"], plan["entry"]
        variant = entry.get("variant")        # a journal written before variants: None
        target = Registry(path).file(fid, entry["version"], variant)
    except (OSError, ValueError, KeyError, TypeError, AttributeError, RefitError):
        return [f"removed an unreadable publish journal {PENDING}"]
    reg = read_index(path) if (path / INDEX).is_file() else Registry(path, empty_index())
    what = f"recovered an interrupted publish of {chain_name(fid, variant)} {entry['version']}"
    landed = target.is_file() and sha256_bytes(target.read_bytes()) == entry.get("file_sha256")
    if any(e.get("version") == entry["version"] for e in reg.versions(fid, variant)):
        return [f"{what}: it had completed"]
    if landed:
        os.chmod(target, 0o444)
        reg.index["format"] = INDEX_FORMAT   # as commit() writes it
        reg.add_entry(fid, entry)
        write_index(reg)
        return [f"{what}: its file had landed, so it was added to {INDEX}"]
    if not target.exists():   # a signature written before its file landed goes too
        (target.parent / (target.name + ".sig")).unlink(missing_ok=True)
    return [f"{what}: its file had not landed, so it was undone"]
