"""The one archive container: a zip file of named members, written and read within bounds.

Chain files, session files and the skops artifacts inside them are zip archives. Reading one
from a stranger must never take unbounded memory or time, so ``ArchiveReader``:

* opens regular files only, and counts the members the archive declares before listing them;
* refuses a member named twice, an encrypted member, and any compression but stored and deflate;
* bounds what the members may inflate to together: at most ``MAX_INFLATION`` times the
  archive's own size (plus ``ARCHIVE_SLACK_BYTES``) and ``MAX_ARCHIVE_BYTES`` in all;
* inflates a member itself, a block at a time, and stops as soon as it passes the size declared
  for it (by the manifest when it records one, else by the archive): a member that claims
  1,000 bytes costs 1,000 bytes, whatever its compressed data would inflate to;
* streams the CRC-32 and SHA-256 of what it inflates and checks both at the end;
* reads each member at most once (``claim``), so no two stages can share one member.

Every problem raises the caller's error class with a one-line message starting with the
archive's name. ``ArchiveWriter`` writes members with deflate and returns their checksums and
sizes for the manifest.
"""

from __future__ import annotations

import hashlib
import io
import os
import stat
import struct
import zipfile
import zlib
from typing import IO, Any

from . import limits
from .errors import RemnantError

_BLOCK = 1 << 20
_EOCD = b"PK\x05\x06"
_ZIP64_LOCATOR = b"PK\x06\x07"
_LOCAL_HEADER = b"PK\x03\x04"
_METHODS = {zipfile.ZIP_STORED: "stored", zipfile.ZIP_DEFLATED: "deflate"}


def sha256_hex(payload: bytes) -> str:
    """Return the SHA-256 of ``payload`` as 64 hex digits."""
    return hashlib.sha256(payload).hexdigest()


def size_text(n: int) -> str:
    """Return a byte count for messages: ``8 MiB``, ``2 GiB``, ``1,000 bytes``."""
    if n >= 1024**3:
        return f"{n / 1024**3:.3g} GiB"
    return f"{n / 1024**2:.3g} MiB" if n >= 1024**2 else f"{n:,} bytes"


class ArchiveReader:
    """A zip archive opened for bounded reading; use ``ArchiveReader.open`` or ``from_bytes``."""

    def __init__(self, source: IO[bytes], total: int, name: str, error: type[RemnantError],
                 what: str = "archive") -> None:
        self.name, self.error, self.what = name, error, what
        self._source = source
        self._claimed: set[str] = set()
        self.allowance = min(limits.MAX_ARCHIVE_BYTES, limits.MAX_INFLATION * total + limits.ARCHIVE_SLACK_BYTES)
        self.inflated = 0
        self._check_member_count(total)
        try:
            self._zip = zipfile.ZipFile(source)
        except (zipfile.BadZipFile, EOFError, ValueError, struct.error, OSError):
            raise self._fail(f"not a {what} (not a zip archive)") from None
        self._infos = self._checked_infos()

    @classmethod
    def open(cls, path: str | os.PathLike, name: str, error: type[RemnantError],
             what: str = "archive") -> ArchiveReader:
        """Return the archive at ``path``; raise ``error`` when it is not a readable regular file or zip."""
        text = os.fspath(path)
        try:
            info = os.stat(text)
        except FileNotFoundError:
            raise error(f"{name}: no such file") from None
        except OSError as exc:
            raise error(f"{name}: cannot be read ({exc.strerror or exc})") from None
        if stat.S_ISDIR(info.st_mode):
            raise error(f"{name}: is a folder, not a {what}")
        if not stat.S_ISREG(info.st_mode):
            from .atomic import node_kind

            raise error(f"{name}: is {node_kind(info.st_mode)}, not a {what} (remnant reads only regular files)")
        if info.st_size == 0:
            raise error(f"{name}: is empty, not a {what} (not a zip archive)")
        try:
            handle = open(text, "rb")  # noqa: SIM115 - kept open until close()
        except OSError as exc:
            raise error(f"{name}: cannot be read ({exc.strerror or exc})") from None
        try:
            return cls(handle, info.st_size, name, error, what)
        except BaseException:
            handle.close()
            raise

    @classmethod
    def from_bytes(cls, payload: bytes, name: str, error: type[RemnantError], what: str = "archive") -> ArchiveReader:
        """Return the archive held in ``payload`` (an archive inside another one)."""
        if not payload:
            raise error(f"{name}: is empty, not a {what}")
        return cls(io.BytesIO(payload), len(payload), name, error, what)

    def __enter__(self) -> ArchiveReader:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Close the archive and its file."""
        self._zip.close()
        self._source.close()

    def names(self) -> list[str]:
        """Return the member names, in archive order."""
        return list(self._infos)

    def has(self, member: Any) -> bool:
        """Return True when the archive holds a member called ``member``."""
        return isinstance(member, str) and member in self._infos

    def claim(self, member: Any, owner: str) -> None:
        """Record that ``owner`` (e.g. ``stage 3``) reads ``member``; raise when another already did."""
        if member in self._claimed:
            raise self._fail(f"{owner} names member {member!r}, which another entry already uses")
        self._claimed.add(member)

    def read(self, member: Any, sha256: str | None = None, size: int | None = None,
             limit: int = limits.MAX_MEMBER_BYTES) -> bytes:
        """Return the bytes of ``member``, checked against ``size`` and ``sha256`` when given.

        Refuse the member before inflating anything when its size (``size``, else the
        archive's) is above ``limit`` or the archive's allowance, and while inflating when it
        passes that size.
        """
        if not self.has(member):
            raise self._fail(f"member {member!r} is missing")
        info = self._infos[member]
        declared = info.file_size if size is None else size
        if size is not None and info.file_size != size:
            raise self._fail(f"member {member!r} fails its checksum: it holds {info.file_size:,} bytes, "
                             f"the manifest says {size:,} (the file was changed or damaged)")
        if declared > limit:
            raise self._fail(f"member {member!r} is too large ({size_text(declared)}; the limit is {size_text(limit)})")
        if self.inflated + declared > self.allowance:
            raise self._fail(f"member {member!r} would inflate the {self.what} past {size_text(self.allowance)} "
                             f"({limits.MAX_INFLATION} times its size): refused as a compression bomb")
        self.inflated += declared
        payload = self._inflate(info, member, declared)
        if sha256 is not None and sha256_hex(payload) != sha256:
            raise self._fail(f"member {member!r} fails its checksum (the file was changed or damaged)")
        return payload

    # ------------------------------------------------------------------------- internals
    def _fail(self, problem: str) -> RemnantError:
        return self.error(f"{self.name}: {problem}")

    def _check_member_count(self, total: int) -> None:
        """Refuse an archive that declares more than MAX_MEMBERS members, before listing them."""
        tail_size = min(total, 22 + 65535)
        self._source.seek(total - tail_size)
        tail = self._source.read(tail_size)
        at = tail.rfind(_EOCD)
        if at < 0 or len(tail) < at + 22:
            return  # not a zip: zipfile says so
        count = struct.unpack_from("<H", tail, at + 10)[0]
        if count == 0xFFFF and at >= 20 and tail[at - 20:at - 16] == _ZIP64_LOCATOR:
            offset = struct.unpack_from("<Q", tail, at - 20 + 8)[0]
            if offset + 56 <= total:
                self._source.seek(offset)
                record = self._source.read(56)
                if record[:4] == b"PK\x06\x06":
                    count = struct.unpack_from("<Q", record, 32)[0]
        if count > limits.MAX_MEMBERS:
            raise self._fail(f"the archive declares {count:,} members; at most {limits.MAX_MEMBERS:,} are read")

    def _checked_infos(self) -> dict[str, zipfile.ZipInfo]:
        infos: dict[str, zipfile.ZipInfo] = {}
        for info in self._zip.infolist():
            if info.filename in infos:
                raise self._fail(f"member {info.filename!r} appears twice in the archive")
            if info.flag_bits & 0x1:
                raise self._fail(f"member {info.filename!r} is encrypted")
            if info.compress_type not in _METHODS:
                raise self._fail(f"member {info.filename!r} uses compression method {info.compress_type} "
                                 "(only stored and deflate are read)")
            infos[info.filename] = info
        return infos

    def _raw_chunks(self, info: zipfile.ZipInfo, member: str):
        """Yield the member's compressed bytes, a block at a time, from its local header on."""
        source = self._source
        source.seek(info.header_offset)
        header = source.read(30)
        if len(header) != 30 or header[:4] != _LOCAL_HEADER:
            raise self._fail(f"member {member!r} cannot be read (its local header is damaged)")
        name_length, extra_length = struct.unpack_from("<HH", header, 26)
        source.seek(info.header_offset + 30 + name_length + extra_length)
        left = info.compress_size
        while left > 0:
            block = source.read(min(_BLOCK, left))
            if not block:
                raise self._fail(f"member {member!r} cannot be read (the archive ends inside it)")
            left -= len(block)
            yield block

    def _inflate(self, info: zipfile.ZipInfo, member: str, declared: int) -> bytes:
        digest_crc, parts, produced = 0, [], 0
        inflater = zlib.decompressobj(-15) if info.compress_type == zipfile.ZIP_DEFLATED else None
        try:
            for block in self._raw_chunks(info, member):
                pending = block
                while pending:
                    if inflater is None:
                        out, pending = pending, b""
                    else:
                        out = inflater.decompress(pending, declared - produced + 1)
                        pending = inflater.unconsumed_tail
                    produced += len(out)
                    if produced > declared:
                        raise self._fail(f"member {member!r} inflates past its declared size "
                                         f"({size_text(declared)}): refused as damaged or a compression bomb")
                    digest_crc = zlib.crc32(out, digest_crc)
                    parts.append(out)
                    if inflater is not None and inflater.eof:
                        break
                if inflater is not None and inflater.eof:
                    break  # whatever follows the end of the stream is never inflated
        except zlib.error as exc:
            raise self._fail(f"member {member!r} cannot be read (damaged deflate data: {exc})") from None
        except OSError as exc:
            raise self._fail(f"member {member!r} cannot be read ({exc.strerror or exc})") from None
        if inflater is not None and not inflater.eof:
            raise self._fail(f"member {member!r} cannot be read (its compressed data ends early)")
        if produced != declared:
            raise self._fail(f"member {member!r} holds {produced:,} bytes, not the {declared:,} declared")
        if digest_crc != info.CRC:
            raise self._fail(f"member {member!r} cannot be read (bad CRC-32: the file is damaged)")
        return b"".join(parts)


class ArchiveWriter:
    """Members written into a zip archive with deflate; ``add`` returns what a manifest records."""

    def __init__(self, handle: IO[bytes], compresslevel: int | None = None) -> None:
        self._zip = zipfile.ZipFile(handle, "w", zipfile.ZIP_DEFLATED, compresslevel=compresslevel)
        self._names: set[str] = set()

    def __enter__(self) -> ArchiveWriter:
        return self

    def __exit__(self, *exc: object) -> None:
        self._zip.close()

    def add(self, member: str, payload: bytes) -> dict[str, Any]:
        """Write ``payload`` as ``member``; return ``{"member", "sha256", "size"}``. A name is written once."""
        if member in self._names:
            raise ValueError(f"member {member!r} is written twice")
        self._names.add(member)
        self._zip.writestr(member, payload)
        return {"member": member, "sha256": sha256_hex(payload), "size": len(payload)}
