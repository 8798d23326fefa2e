"""Publisher signatures: who published a coefficient file (Ed25519, optional).

A hash proves a file is as it was written; it cannot prove *who* wrote it, because anyone
who edits a file can compute the new hash (and rewrite a registry's index to match). A
signature can: only the holder of the private key makes one, and anyone with the public
key checks it. refit signs with Ed25519 (RFC 8032) through the ``cryptography`` package.

Files::

    KEYFILE          the private key (PEM, PKCS#8, unencrypted; mode 0600): keep it secret
    KEYFILE.pub      the public key (PEM, SubjectPublicKeyInfo): give it to readers
    <version>.json.sig   beside a published file: the signature of its exact bytes

A signature file is JSON: ``{"format": "refit-signature/1", "algorithm": "ed25519",
"key_id": ..., "signed_file": "<version>.json", "signature": <base64>}``; ``key_id`` is
the first 16 hex digits of the SHA-256 of the raw 32-byte public key. It signs the file's
bytes, which are exactly :func:`refit.coefficients.format.dumps` of its content, so a
signature holds for the file and nothing else.
"""

from __future__ import annotations

import base64
import hashlib
import json
import os
from pathlib import Path

from refit.errors import InvalidDataError, UnreadableInputError, UsageError

SIG_FORMAT = "refit-signature/1"
SUFFIX = ".sig"


def signature_path(file) -> Path:
    """``<version>.json.sig`` beside ``file``."""
    file = Path(file)
    return file.parent / (file.name + SUFFIX)


def _raw_public(public_key) -> bytes:
    from cryptography.hazmat.primitives import serialization

    return public_key.public_bytes(serialization.Encoding.Raw, serialization.PublicFormat.Raw)


def key_id(public_key) -> str:
    """First 16 hex digits of the SHA-256 of the raw public key."""
    return hashlib.sha256(_raw_public(public_key)).hexdigest()[:16]


def new_key_pair(path) -> tuple[Path, Path, str]:
    """Make an Ed25519 key pair: ``path`` (private, mode 0600) and ``path.pub``.

    Returns
    -------
    (private key path, public key path, key id)

    Raises
    ------
    UsageError
        Either file exists already (a key is never overwritten).
    """
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    private = Path(path)
    public = private.parent / (private.name + ".pub")
    for p in (private, public):
        if p.exists() or p.is_symlink():
            raise UsageError(f"{p} exists already; a key is never overwritten: choose "
                             "another path")
    key = Ed25519PrivateKey.generate()
    pem = key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                            serialization.NoEncryption())
    pub = key.public_key().public_bytes(serialization.Encoding.PEM,
                                        serialization.PublicFormat.SubjectPublicKeyInfo)
    private.parent.mkdir(parents=True, exist_ok=True)
    fd = os.open(private, os.O_WRONLY | os.O_CREAT | os.O_EXCL, 0o600)
    with os.fdopen(fd, "wb") as fh:
        fh.write(pem)
    public.write_bytes(pub)
    return private, public, key_id(key.public_key())


def _read_pem(path, what: str) -> bytes:
    try:
        return Path(path).read_bytes()
    except OSError as exc:
        raise UnreadableInputError(f"{path}: cannot read the {what} ({exc.strerror}); check "
                                   "the path") from None


def load_private_key(path):
    """The Ed25519 private key in a PEM file (as :func:`new_key_pair` writes it)."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PrivateKey

    try:
        key = serialization.load_pem_private_key(_read_pem(path, "private key"), None)
    except (ValueError, TypeError) as exc:
        raise UnreadableInputError(f"{path}: not an unencrypted PEM private key ({exc}); "
                                   "make one with `refit keygen KEYFILE`") from None
    if not isinstance(key, Ed25519PrivateKey):
        raise UnreadableInputError(f"{path}: not an Ed25519 key; make one with "
                                   "`refit keygen KEYFILE`")
    return key


def load_public_key(path):
    """The Ed25519 public key in a PEM file (``KEYFILE.pub``)."""
    from cryptography.hazmat.primitives import serialization
    from cryptography.hazmat.primitives.asymmetric.ed25519 import Ed25519PublicKey

    try:
        key = serialization.load_pem_public_key(_read_pem(path, "public key"))
    except (ValueError, TypeError) as exc:
        raise UnreadableInputError(f"{path}: not a PEM public key ({exc}); give the "
                                   "KEYFILE.pub that `refit keygen` wrote") from None
    if not isinstance(key, Ed25519PublicKey):
        raise UnreadableInputError(f"{path}: not an Ed25519 public key; give the "
                                   "KEYFILE.pub that `refit keygen` wrote")
    return key


def signature_text(raw: bytes, file_name: str, keyfile) -> str:
    """The signature file's text for a file's exact bytes, signed with ``keyfile``."""
    key = load_private_key(keyfile)
    body = {"format": SIG_FORMAT, "algorithm": "ed25519", "key_id": key_id(key.public_key()),
            "signed_file": file_name,
            "signature": base64.b64encode(key.sign(raw)).decode("ascii")}
    return json.dumps(body, indent=1, sort_keys=True) + "\n"


def check_signature(file, raw: bytes, trusted: list) -> str:
    """Check ``file``'s signature against the trusted public keys; returns what passed.

    Parameters
    ----------
    file : Path
        The coefficient file (its signature is ``file.sig`` beside it).
    raw : bytes
        The file's bytes as read.
    trusted : list
        Ed25519 public keys (:func:`load_public_key`).

    Raises
    ------
    InvalidDataError
        No signature file, one of the wrong shape, signed by a key that is not trusted, or
        a signature that does not match the bytes.
    """
    from cryptography.exceptions import InvalidSignature

    sig_path = signature_path(file)
    try:
        body = json.loads(sig_path.read_text("utf-8"))
    except FileNotFoundError:
        raise InvalidDataError(f"{file}: no signature ({sig_path.name} is missing); the file "
                               "was not signed by a trusted publisher (publish with "
                               "--sign KEYFILE)") from None
    except (OSError, UnicodeDecodeError, ValueError, RecursionError) as exc:
        raise InvalidDataError(f"{sig_path}: unreadable signature ({exc})") from None
    if not isinstance(body, dict) or body.get("format") != SIG_FORMAT or \
            body.get("algorithm") != "ed25519" or not isinstance(body.get("signature"), str):
        raise InvalidDataError(f"{sig_path}: not a refit signature file ({SIG_FORMAT}, "
                               "ed25519)")
    by_id = {key_id(k): k for k in trusted}
    key = by_id.get(body.get("key_id"))
    if key is None:
        raise InvalidDataError(f"{file}: signed by key {str(body.get('key_id'))[:16]}, which "
                               "is not among the trusted keys (--trust); ask the publisher "
                               "for their KEYFILE.pub")
    try:
        key.verify(base64.b64decode(body["signature"], validate=True), raw)
    except (InvalidSignature, ValueError):
        raise InvalidDataError(f"{file}: the signature of key {body['key_id']} does not "
                               "match the file's bytes: the file was changed after it was "
                               "signed; take it again from its publisher") from None
    return f"signed by trusted key {body['key_id']}"
