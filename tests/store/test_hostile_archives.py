"""Crafted archives never take unbounded memory or time: bombs, shared members, lying headers, odd zips.

A chain file is a zip archive, and a stranger controls every byte of it: what a member
inflates to, what its header declares, how many members the directory claims, how they are
compressed. Every case below is built byte by byte and loaded in one guarded process (address
space capped at 1 GiB, a timeout that only catches a hang): each must be refused with a
one-line ChainFileError, and the whole process must stay within 500 MB, libraries included.
"""

from __future__ import annotations

import hashlib
import io
import json
import struct
import zipfile
import zlib

import pytest
from hostile import (
    deflate_zeros,
    deflated,
    entry_of,
    load_in_guarded_process,
    manifest_of,
    members_of,
    raw_zip,
    rezip_raw,
    with_manifest,
    with_member,
    write_members,
)

import stages

BOMB = 1900 * 1024**2  # 1.9 GB of zeros, about 2 MB once deflated
PEAK_BYTES = 500 * 1024**2


def _bomb_member(source, target, kind, declared, actual=BOMB, manifest_size=True):
    """Write a chain file whose ``kind`` artifact is a deflate stream of ``actual`` zeros whose header (and
    manifest, when ``manifest_size``) declares ``declared`` bytes."""
    member = entry_of(manifest_of(source), kind)["member"]

    def change(manifest):
        entry = entry_of(manifest, kind)
        entry["sha256"] = hashlib.sha256(b"").hexdigest()
        if manifest_size:
            entry["size"] = declared
        else:
            entry.pop("size")
    return rezip_raw(source, target, {member: (deflate_zeros(actual), 0, declared)}, change)


def _shared(manifest, members):
    for entry in manifest["stages"][1:9]:
        first = manifest["stages"][0]
        entry.update(member=first["member"], sha256=first["sha256"], size=first["size"], kind=first["kind"],
                     spec=first["spec"], fmt=first["fmt"], meta=first["meta"], params=first["params"])


def _zip64_count(source, target):
    """Write an archive whose end records claim ten million members."""
    body = raw_zip([("manifest.json", deflated(b"{}"), 8, zlib.crc32(b"{}"), 2)])
    end = body.rfind(b"PK\x05\x06")
    record = struct.pack("<4sQHHIIQQQQ", b"PK\x06\x06", 44, 45, 45, 0, 0, 10**7, 10**7, 0, 0)
    locator = struct.pack("<4sIQI", b"PK\x06\x07", 0, end, 1)
    eocd = struct.pack("<4sHHHHIIH", b"PK\x05\x06", 0, 0, 0xFFFF, 0xFFFF, 0xFFFFFFFF, 0xFFFFFFFF, 0)
    target.write_bytes(body[:end] + record + locator + eocd)
    return target


def _flagged(source, target, flags=0, method=None):
    """Write the chain file with every member's flag bits (and compression method) patched."""
    data = bytearray(source.read_bytes())
    for signature, flag_at, method_at in ((b"PK\x03\x04", 6, 8), (b"PK\x01\x02", 8, 10)):
        at = data.find(signature)
        while at >= 0:
            data[at + flag_at:at + flag_at + 2] = struct.pack("<H", flags)
            if method is not None:
                data[at + method_at:at + method_at + 2] = struct.pack("<H", method)
            at = data.find(signature, at + 4)
    target.write_bytes(bytes(data))
    return target


def _twice(source, target):
    members = members_of(source)
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        for name, payload in members.items():
            archive.writestr(name, payload)
        with pytest.warns(UserWarning):
            archive.writestr("manifest.json", b"{}")  # a second member of the same name
    target.write_bytes(buffer.getvalue())
    return target


def _inner_bomb(source, target):
    """Write the chain file with the tree stage's skops file holding one member that inflates to 1.9 GB."""
    inner = raw_zip([("schema.json", deflated(b"{}"), 8, zlib.crc32(b"{}"), 2),
                     ("big.npy", deflate_zeros(BOMB), 8, 0, BOMB)])
    return with_member(source, target, "tree", inner)


@pytest.fixture(scope="module")
def archive_cases(base_chain, tmp_path_factory):
    """Return (path, words of the refusal) for every crafted archive."""
    folder = tmp_path_factory.mktemp("hostile-archives")
    manifest = manifest_of(base_chain)
    cases = [
        (_bomb_member(base_chain, folder / "honest-bomb.chain", "tree", BOMB), "compression bomb"),
        (_bomb_member(base_chain, folder / "honest-bomb-no-size.chain", "tree", BOMB, manifest_size=False),
         "compression bomb"),
        (_bomb_member(base_chain, folder / "lying-header.chain", "tree", 1000), "inflates past its declared size"),
        (_bomb_member(base_chain, folder / "lying-header-no-size.chain", "tree", 1000, manifest_size=False),
         "inflates past its declared size"),
        (_bomb_member(base_chain, folder / "too-large.chain", "tree", 3 * 1024**3, actual=1000, manifest_size=False),
         "too large"),
        (_bomb_member(base_chain, folder / "too-large-in-manifest.chain", "tree", 3 * 1024**3, actual=1000),
         "stages[1].size"),
        (with_manifest(base_chain, folder / "shared-member.chain", _shared), "another entry already uses"),
        (_zip64_count(base_chain, folder / "ten-million-members.chain"), "declares 10,000,000 members"),
        (_flagged(base_chain, folder / "encrypted.chain", flags=1), "encrypted"),
        (_flagged(base_chain, folder / "bzip2.chain", method=12), "compression method 12"),
        (_twice(base_chain, folder / "twice.chain"), "appears twice"),
        (_inner_bomb(base_chain, folder / "inner-bomb.chain"), "compression bomb"),
    ]
    data = base_chain.read_bytes()
    cut = folder / "cut.chain"
    cut.write_bytes(data[: len(data) // 2])
    cases.append((cut, "not a zip archive"))
    member = entry_of(manifest, "forest")["member"]
    at = data.find(member.encode()) + 200  # inside the forest's compressed data
    flipped = bytearray(data)
    flipped[at] ^= 0xFF
    (folder / "flipped.chain").write_bytes(bytes(flipped))
    cases.append((folder / "flipped.chain", "stage"))
    return cases


def test_every_crafted_archive_is_refused_within_bounds(archive_cases):
    reports = load_in_guarded_process([path for path, _ in archive_cases])
    wrong = [(path.name, reports[str(path)]["outcome"], reports[str(path)]["message"][-200:])
             for path, words in archive_cases
             if reports[str(path)]["outcome"] != "ChainFileError" or words not in reports[str(path)]["message"]
             or "\n" in reports[str(path)]["message"]]
    assert not wrong, "\n".join(map(str, wrong))
    assert reports["peak_bytes"] < PEAK_BYTES, f"the loads held {reports['peak_bytes'] / 1024**2:.0f} MiB"


def test_eight_stages_sharing_one_member_are_refused_in_process(base_chain, tmp_path):
    path = with_manifest(base_chain, tmp_path / "shared.chain", _shared)
    with pytest.raises(stages.ChainFileError, match="stage 2 names member .* which another entry already uses"):
        stages.load(path)


def test_a_member_whose_manifest_size_differs_from_its_header_is_refused(base_chain, tmp_path):
    def change(manifest, members):
        entry_of(manifest, "linear")["size"] += 1
    path = with_manifest(base_chain, tmp_path / "c.chain", change)
    with pytest.raises(stages.ChainFileError, match="fails its checksum: it holds"):
        stages.load(path)


def test_an_archive_rewritten_without_the_probe_still_loads_and_checks_every_stage(base_chain, tmp_path):
    def change(manifest, members):
        members.pop(manifest["probe"]["member"])
        manifest["probe"] = None
    path = with_manifest(base_chain, tmp_path / "c.chain", change)
    assert len(stages.load(path).stages) == len(manifest_of(base_chain)["stages"])


def test_an_honest_file_needs_no_more_than_its_declared_sizes(base_chain, tmp_path):
    members = members_of(base_chain)
    manifest = json.loads(members["manifest.json"])
    assert all(entry["size"] == len(members[entry["member"]]) for entry in manifest["stages"])
    write_members(tmp_path / "copy.chain", members)
    assert len(stages.load(tmp_path / "copy.chain").stages) == len(manifest["stages"])
