"""Checksums of a file's content (gatescope.checksum; docs/file-formats.md, "Checksums")."""

from __future__ import annotations

import hashlib
import struct

import h5py
import numpy as np
import pytest
from gatescope import checksum


def small_file(path):
    with h5py.File(path, "w") as f:
        f.attrs["format"] = "demo"
        g = f.create_group("estimate")
        g.attrs["converged"] = True
        g.create_dataset("choi", data=np.eye(2, dtype=complex))
        g.create_dataset("figure", data=np.float64(0.5))
        f.create_dataset("labels", data=np.array(["HH", "HV"], dtype=object),
                         dtype=h5py.string_dtype("utf-8"))
        checksum.write(f)
    return path


def test_the_encoding_is_the_documented_one():
    # kind letter, little-endian dtype, dimensions as 8-byte integers, then the data
    assert checksum.encode_value(np.array([1, 2], dtype=np.int64)) == (
        b"N<i8\0" + struct.pack("<QQ", 1, 2) + struct.pack("<qq", 1, 2))
    assert checksum.encode_value(np.array([1.5], dtype=">f8")) == (
        b"N<f8\0" + struct.pack("<QQ", 1, 1) + struct.pack("<d", 1.5))
    assert checksum.encode_value("é") == b"S" + struct.pack("<Q", 0) + struct.pack("<Q", 2) + "é".encode()
    assert checksum.encode_value(np.bool_(True)) == b"b" + struct.pack("<Q", 0) + b"\x01"


def test_a_digest_is_sha256_of_path_attributes_and_data(tmp_path):
    path = small_file(tmp_path / "f.h5")
    with h5py.File(path, "r") as f:
        expected = hashlib.sha256(b"D/estimate/figure\0" + checksum.encode_value(np.float64(0.5)))
        assert checksum.object_digest(f["estimate/figure"], "/estimate/figure") == expected.hexdigest()
        lines = [x.decode() if isinstance(x, bytes) else x for x in f[checksum.TABLE][()]]
        assert [line.split(" ")[1] for line in lines] == ["/", "/estimate", "/estimate/choi",
                                                           "/estimate/figure", "/labels"]
        table = hashlib.sha256("\n".join(lines).encode()).hexdigest()
        stored = f.attrs[checksum.TABLE_ATTRIBUTE]
        assert (stored.decode() if isinstance(stored, bytes) else stored) == table
        assert checksum.verify(f) == []


def test_the_same_content_gives_the_same_table(tmp_path):
    paths = [small_file(tmp_path / f"f{k}.h5") for k in range(2)]
    tables = []
    for p in paths:
        with h5py.File(p, "r") as f:
            tables.append(list(f[checksum.TABLE][()]))
    assert tables[0] == tables[1]


@pytest.mark.parametrize("change, part, what", [
    (lambda f: f["estimate/choi"].__setitem__((0, 1), 1e-12), "/estimate/choi", "changed"),
    (lambda f: f["estimate"].attrs.__setitem__("converged", False), "/estimate", "changed"),
    (lambda f: f.attrs.__setitem__("format", "other"), "/", "changed"),
    (lambda f: f.__delitem__("labels"), "/labels", "missing"),
    (lambda f: f.create_dataset("extra", data=1), "/extra", "unexpected"),
    (lambda f: f[checksum.TABLE].__setitem__(0, "0" * 64 + " /"), "/checksums", "changed"),
], ids=["data", "attribute", "root-attribute", "removed", "added", "table"])
def test_every_change_is_found_and_named(tmp_path, change, part, what):
    path = small_file(tmp_path / "f.h5")
    with h5py.File(path, "r+") as f:
        change(f)
    with h5py.File(path, "r") as f:
        problems = checksum.verify(f)
    assert problems and problems[0][0] == part and problems[0][1].startswith(what)


def test_a_file_without_checksums_says_so(tmp_path):
    with h5py.File(tmp_path / "f.h5", "w") as f:
        f.attrs["x"] = 1
    with h5py.File(tmp_path / "f.h5", "r") as f:
        assert checksum.verify(f) == [("/checksums", "missing: the file carries no checksums")]


def _collections(data: bytes):
    """(offset, size) of every global heap collection, found by its signature."""
    out, at = [], data.find(b"GCOL\x01\x00\x00\x00")
    while at >= 0:
        out.append((at, int.from_bytes(data[at + 8:at + 16], "little")))
        at = data.find(b"GCOL\x01\x00\x00\x00", at + 1)
    return out


def test_a_damaged_global_heap_is_found_before_the_library_reads_it(tmp_path, cz_result):
    import gatescope as gs

    good = cz_result[1]
    data = bytearray(good.read_bytes())
    assert checksum.heap_damage(bytes(data)) is None
    # the layout of a global heap collection (HDF5 File Format Specification 3.0,
    # section III.E): a 16-byte header with the collection size, objects with a 16-byte
    # header (index, reference count, reserved, size) and data padded to 8 bytes, the free
    # space (index 0) last, reaching the end of the collection
    start, size = max(_collections(bytes(data)), key=lambda c: c[1])
    first = start + 16
    assert int.from_bytes(data[first:first + 2], "little") != 0      # an object, not free space
    object_size = int.from_bytes(data[first + 8:first + 16], "little")
    data[first + 8:first + 16] = (object_size + 8).to_bytes(8, "little")   # one word longer
    bad = tmp_path / "bad.h5"
    bad.write_bytes(bytes(data))
    assert checksum.heap_damage(bytes(data)) is not None
    with pytest.raises(gs.InputError, match="global heap"):
        gs.load_result(bad)
