"""Locking, staging, commit and recovery of a calibration store (see :mod:`refit.curate.store`).

Internal. An admit lands whole or not at all: the new files are staged in
``STORE/.pending-<id>/``, a ``COMMIT`` marker is written atomically once all are complete,
then each file is moved into place with ``os.replace``. :func:`recover` (called with the
lock held by every store operation) finishes a committed staging folder (roll forward) or
deletes an uncommitted one (roll back), and says so.
"""

from __future__ import annotations

import json
import os
import shutil
import uuid
from pathlib import Path

from refit._util.atomic import TMP_PREFIX, fsync_dir, write_bytes_atomic
from refit.errors import StoreBusyError, UnreadableInputError

#: A staging folder for a new store younger than this is left alone even when nobody holds
#: its lock: its process may be between making the folder and locking it [s].
STAGING_GRACE_S = 30.0


class StoreNotWritableError(UnreadableInputError):
    """The store's folder refuses writes (read-only file system or permissions)."""


class _locked:
    """Hold ``STORE/.lock`` (filelock); refuse with StoreBusyError after ``timeout`` s."""

    def __init__(self, store_dir: Path, timeout: float):
        from filelock import FileLock

        self.store_dir = store_dir
        self.lock = FileLock(str(store_dir / ".lock"), timeout=timeout)

    def __enter__(self):
        from filelock import Timeout

        lock = self.store_dir / ".lock"
        if lock.exists() and not lock.is_file():
            raise UnreadableInputError(
                f"{lock} is not a lock file (it is a folder or a special file); no refit "
                "process made it. Remove it, then run the command again")
        try:
            self.lock.acquire()
        except Timeout:
            raise StoreBusyError(
                f"store {self.store_dir} is busy: another refit process holds its lock "
                f"({self.store_dir / '.lock'}); wait for it to finish, then run the command "
                "again") from None
        except OSError as exc:  # a read-only store, or a folder that cannot hold the lock
            raise StoreNotWritableError(
                f"store {self.store_dir} cannot be written ({exc.strerror or exc}: {lock}); "
                "admitting needs a writable store: check its permissions or copy it to a "
                "writable place (--dry-run reads a read-only store)") from None
        return self

    def __exit__(self, *exc):
        self.lock.release()


def recover(store_dir: Path) -> list[str]:
    """Finish or undo interrupted admits (call with the lock held); say what was done."""
    messages = []
    for stage in sorted(store_dir.glob(".pending-*")):
        if (stage / "COMMIT").is_file():
            plan = json.loads((stage / "COMMIT").read_text(encoding="utf-8"))
            _move_into_place(store_dir, stage, plan["files"])
            messages.append(f"recovered an interrupted admit of {plan['source_file']}: it "
                            f"had been committed, so it was completed (version "
                            f"{plan['version']})")
        elif not any(stage.iterdir()):  # emptied by a finished admit, or never filled
            stage.rmdir()
            messages.append("recovered an interrupted admit: removed its empty staging "
                            f"folder {stage.name}; the store's files were not touched")
        else:
            shutil.rmtree(stage, ignore_errors=True)
            messages.append("recovered an interrupted admit that had not been committed: "
                            "it was undone and the store is as it was before it")
    leftovers = [*store_dir.glob(TMP_PREFIX + "*"),
                 *(store_dir / "quarantine").glob(TMP_PREFIX + "*")]
    for leftover in leftovers:
        leftover.unlink(missing_ok=True)
    if leftovers:
        messages.append(f"recovered after an interrupted write: removed {len(leftovers)} "
                        "temporary file(s) (" + ", ".join(sorted(p.name for p in leftovers))
                        + "); the store's files were not touched")
    return messages


def _commit(store_dir: Path, files: dict[str, bytes], info: dict) -> None:
    """Stage ``files`` (relative path -> bytes), mark them committed, move them into place."""
    stage = store_dir / f".pending-{uuid.uuid4().hex[:12]}"
    stage.mkdir()
    umask = os.umask(0)
    os.umask(umask)
    for rel, data in files.items():
        write_bytes_atomic(stage / rel, data)
        os.chmod(stage / rel, 0o666 & ~umask)  # readable like any other file the user makes
    fsync_dir(stage)
    order = sorted(files, key=lambda r: (r == "records.csv", r == "manifest.json", r))
    plan = json.dumps({**info, "files": order}, indent=1).encode("utf-8")
    write_bytes_atomic(stage / "COMMIT", plan)
    _move_into_place(store_dir, stage, order)


def _move_into_place(store_dir: Path, stage: Path, order: list[str]) -> None:
    """Move staged files over the store's (idempotent), then remove the staging folder."""
    (store_dir / "quarantine").mkdir(exist_ok=True)
    for rel in order:
        src = stage / rel
        if src.exists():
            (store_dir / rel).parent.mkdir(parents=True, exist_ok=True)
            os.replace(src, store_dir / rel)
            fsync_dir((store_dir / rel).parent)
    for path in sorted(stage.rglob("*"), reverse=True):
        if path.name != "COMMIT":
            path.rmdir() if path.is_dir() else path.unlink()
    (stage / "COMMIT").unlink(missing_ok=True)
    stage.rmdir()
    fsync_dir(store_dir)


def create_store(store_dir: Path, timeout: float, admit_into):
    """Create a store atomically: admit into a sibling staging folder, then rename it.

    ``admit_into(stage)`` runs the admit into the empty staging folder ``stage`` (locked)
    and returns its result. The finished folder is renamed to ``store_dir`` in one step, so
    another process sees no store or a whole one. When another process created
    ``store_dir`` first, the staging folder is removed and None is returned: the caller
    then admits into the existing store under its lock (the admits serialise). A failed
    admit removes only its own staging folder.
    """
    import errno

    parent = store_dir.parent
    try:
        parent.mkdir(parents=True, exist_ok=True)
        _sweep_stale_creations(store_dir)
        stage = parent / f".{store_dir.name}.creating-{uuid.uuid4().hex[:12]}"
        stage.mkdir()
    except OSError as exc:
        raise StoreNotWritableError(
            f"store {store_dir} cannot be created ({exc.strerror or exc}); choose a "
            "writable place for it") from None
    try:
        # renamed with its lock still held, so a sweep never sees a finished, unlocked stage
        with _locked(stage, timeout):
            result = admit_into(stage)
            try:
                os.rename(stage, store_dir)
            except OSError as exc:
                if exc.errno in (errno.EEXIST, errno.ENOTEMPTY, errno.EISDIR, errno.ENOTDIR):
                    return None
                raise
        fsync_dir(parent)
        result.store = str(store_dir)
        return result
    finally:
        if stage.exists():
            shutil.rmtree(stage, ignore_errors=True)


def _sweep_stale_creations(store_dir: Path) -> None:
    """Remove staging folders of new stores whose process is gone: nobody holds the
    folder's lock (the operating system releases a killed process's ``flock``) and it is
    older than :data:`STAGING_GRACE_S`. A live admit holds its stage's lock from just
    after making it until after renaming it into place."""
    import time

    from filelock import FileLock, Timeout

    for stage in store_dir.parent.glob(f".{store_dir.name}.creating-*"):
        try:
            if time.time() - stage.stat().st_mtime <= STAGING_GRACE_S:
                continue
            lock = FileLock(str(stage / ".lock"), timeout=0)
            try:
                lock.acquire()
            except Timeout:
                continue                    # its admit is still running
            try:
                shutil.rmtree(stage, ignore_errors=True)
            finally:
                lock.release()
        except OSError:
            pass
