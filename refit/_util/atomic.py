"""Atomic file writes and content hashes.

A write goes to a temporary file in the same folder, is flushed and fsync'ed, then renamed
over the target (``os.replace`` is atomic on POSIX and Windows), and the folder is fsync'ed
so the rename survives a power cut. Readers therefore see the old file or the new one,
never half of either. Temporary names start with ``.tmp-`` so readers can skip them.
"""

from __future__ import annotations

import hashlib
import os
import tempfile
from pathlib import Path

TMP_PREFIX = ".tmp-"


def fsync_dir(folder: Path) -> None:
    """fsync a directory so a rename inside it is durable (no-op where unsupported)."""
    try:
        fd = os.open(folder, os.O_RDONLY)
    except OSError:
        return
    try:
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask


def write_bytes_atomic(path: Path | str, data: bytes) -> None:
    """Write ``data`` to ``path`` atomically (temporary file, fsync, rename).

    The file gets the usual permissions for a new file (0666 minus the umask), not the
    private 0600 that temporary files start with.
    """
    path = Path(path)
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        fd, tmp = tempfile.mkstemp(prefix=TMP_PREFIX + path.name + ".", dir=path.parent)
    except (FileNotFoundError, FileExistsError, NotADirectoryError, IsADirectoryError) as exc:
        from refit.errors import UsageError

        where = exc.filename or path.parent
        raise UsageError(f"{path} cannot be written: {exc.strerror or exc} ({where}); its "
                         "folder is not one files can be made in. Choose another output "
                         "path") from None
    try:
        os.fchmod(fd, 0o666 & ~_umask())
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        try:
            os.unlink(tmp)
        except FileNotFoundError:
            pass
        raise
    fsync_dir(path.parent)


def write_text_atomic(path: Path | str, text: str) -> None:
    """Write UTF-8 ``text`` to ``path`` atomically, with ``\\n`` line ends."""
    write_bytes_atomic(path, text.encode("utf-8"))


def sha256_bytes(data: bytes) -> str:
    """Hex SHA-256 of ``data``."""
    return hashlib.sha256(data).hexdigest()


def sha256_file(path: Path | str, chunk: int = 1 << 20) -> str:
    """Hex SHA-256 of a file's bytes, read in chunks."""
    h = hashlib.sha256()
    with open(path, "rb") as fh:
        while block := fh.read(chunk):
            h.update(block)
    return h.hexdigest()
