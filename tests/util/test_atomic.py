"""Atomic writes: the target holds the old bytes or the new ones, never a mix."""

from __future__ import annotations

import hashlib
import os
import stat

import pytest

from refit._util import atomic as _atomic
def test_write_replaces_content_and_leaves_no_temporary(tmp_path):
    target = tmp_path / "records.csv"
    target.write_bytes(b"old\n")
    _atomic.write_text_atomic(target, "new\n")
    assert target.read_bytes() == b"new\n"
    assert [p.name for p in tmp_path.iterdir()] == ["records.csv"]


def test_new_file_gets_ordinary_permissions(tmp_path):
    target = tmp_path / "manifest.json"
    _atomic.write_bytes_atomic(target, b"{}")
    mask = os.umask(0)
    os.umask(mask)
    assert stat.S_IMODE(target.stat().st_mode) == 0o666 & ~mask


def test_failed_write_keeps_old_file(tmp_path, monkeypatch):
    target = tmp_path / "records.csv"
    target.write_bytes(b"old\n")

    def boom(*_args):
        raise OSError("disk full")

    monkeypatch.setattr(_atomic.os, "replace", boom)
    with pytest.raises(OSError, match="disk full"):
        _atomic.write_bytes_atomic(target, b"new\n")
    assert target.read_bytes() == b"old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["records.csv"]


def test_sha256_matches_hashlib(tmp_path):
    # Reference: Python's hashlib (FIPS 180-4 SHA-256).
    data = os.urandom(3 * (1 << 20) + 17)
    path = tmp_path / "blob"
    path.write_bytes(data)
    expected = hashlib.sha256(data).hexdigest()
    assert _atomic.sha256_file(path) == expected
    assert _atomic.sha256_bytes(data) == expected
