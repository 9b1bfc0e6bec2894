"""Optional integrity beyond checksums: an HMAC-SHA256 over a chain file's manifest.

The manifest holds every member's SHA-256 and size, so a signature over its exact bytes covers
the whole file. ``sign`` adds the member ``signature.json``; ``load(path, key=...)`` and
``verify`` refuse a file that has no signature, or one made with another key, before the
manifest is even parsed.

What a signature promises: the file is, byte for byte in every member it lists, one that a
holder of the key signed. What it does not: the key is shared (whoever can check a signature
can make one); it does not say which holder signed, nor when, and an older file signed with
the same key still verifies; it does not make a file safe to load (every check of an unsigned
file still applies), and without a key nothing is checked beyond the checksums.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import os
import stat

from ..atomic import write_atomic
from ..container import ArchiveReader, ArchiveWriter
from ..errors import ChainFileError, SignatureError

SIGNATURE = "signature.json"
ALGORITHM = "HMAC-SHA256"
#: the environment variable ``remnant sign`` and ``remnant verify`` read a key from
KEY_VARIABLE = "REMNANT_SIGNING_KEY"
MIN_KEY_BYTES = 16
_MAX_KEY_FILE_BYTES = 64 * 1024
_CONTEXT = b"remnant chain file signature v1\n"


def read_key(key_file: str | os.PathLike | None = None, *, from_environment: bool = True) -> bytes:
    """Return the signing key: the contents of ``key_file`` (surrounding whitespace removed), else the
    ``REMNANT_SIGNING_KEY`` environment variable. Raise SignatureError when there is none or it is short."""
    if key_file is not None:
        name = os.fspath(key_file)
        try:
            info = os.stat(name)
            if not stat.S_ISREG(info.st_mode) or info.st_size > _MAX_KEY_FILE_BYTES:
                raise SignatureError(f"{name}: a key file must be a regular file of at most 64 KiB")
            with open(name, "rb") as handle:
                key = handle.read().strip()
        except OSError as exc:
            raise SignatureError(f"{name}: the key file cannot be read ({exc.strerror or exc})") from None
        where = name
    elif from_environment and os.environ.get(KEY_VARIABLE):
        key, where = os.environ[KEY_VARIABLE].strip().encode("utf-8"), KEY_VARIABLE
    else:
        raise SignatureError(f"no signing key: give --key-file FILE or set {KEY_VARIABLE}")
    if len(key) < MIN_KEY_BYTES:
        raise SignatureError(f"{where}: the key is {len(key)} bytes; a signing key needs at least {MIN_KEY_BYTES}")
    return key


def signature_of(manifest: bytes, key: bytes | str) -> str:
    """Return the HMAC-SHA256 of a manifest's bytes under ``key``, as hex."""
    secret = key.encode("utf-8") if isinstance(key, str) else bytes(key)
    return hmac.new(secret, _CONTEXT + manifest, hashlib.sha256).hexdigest()


def check_signature(archive: ArchiveReader, manifest: bytes, key: bytes | str, path: str) -> None:
    """Raise SignatureError unless ``archive`` holds a signature of ``manifest`` made with ``key``."""
    if not archive.has(SIGNATURE):
        raise SignatureError(f"{path}: the chain file is not signed (a key was given, so a signature is required)")
    archive.claim(SIGNATURE, "the signature")
    raw = archive.read(SIGNATURE, limit=4096)
    try:
        stored = json.loads(raw.decode("utf-8"))
        algorithm, digest = stored["algorithm"], stored["hmac"]
    except (ValueError, KeyError, TypeError, UnicodeDecodeError):
        raise SignatureError(f"{path}: its signature cannot be read") from None
    if algorithm != ALGORITHM or not isinstance(digest, str):
        raise SignatureError(f"{path}: its signature is not {ALGORITHM}")
    if not hmac.compare_digest(digest, signature_of(manifest, key)):
        raise SignatureError(f"{path}: the signature does not match (another key, or the file was changed)")


def sign(path: str | os.PathLike, key: bytes | str) -> None:
    """Add (or replace) the signature of the chain file at ``path``, rewriting it atomically; return None.

    The file is loaded in full first, so that only a chain file this remnant reads is ever signed.
    """
    from .store import MANIFEST, load

    name = os.fspath(path)
    load(name)
    with ArchiveReader.open(name, name, ChainFileError, what="chain file") as archive:
        members = {member: archive.read(member) for member in archive.names() if member != SIGNATURE}
    if MANIFEST not in members:
        raise ChainFileError(f"{name}: not a chain file (no {MANIFEST} inside)")
    body = json.dumps({"algorithm": ALGORITHM, "hmac": signature_of(members[MANIFEST], key)}).encode("utf-8")

    def write(handle) -> None:
        with ArchiveWriter(handle) as out:
            for member, payload in members.items():
                out.add(member, payload)
            out.add(SIGNATURE, body)

    write_atomic(name, write, what="chain file", error=ChainFileError)


def verify(path: str | os.PathLike, key: bytes | str):
    """Return the FittedChain at ``path`` after checking its signature with ``key``; raise SignatureError
    (or ChainFileError) when the file is unsigned, signed with another key, or damaged."""
    from .store import load

    return load(path, key=key)
