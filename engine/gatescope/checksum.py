"""Checksums of an HDF5 file's content: one SHA-256 per group and dataset.

What is hashed is the content as HDF5 gives it back (paths, attributes,
data), not the file's bytes, so that the digests do not depend on the HDF5
library's layout choices and name the part that changed. The definition
(docs/file-formats.md, "Checksums"):

* Every group and dataset of the file, the root group ``/`` included, has a
  digest, SHA-256 over: ``b"G"`` (group) or ``b"D"`` (dataset), its path in
  UTF-8, a zero byte; then for each attribute in the order of their names
  (sorted by code point; the root's `TABLE_ATTRIBUTE` excluded): the name in
  UTF-8, a zero byte and the attribute's value; then, for a dataset, its
  data.
* A value (attribute or data) is encoded as: a kind letter (``S`` text,
  ``b`` boolean, ``N`` number), for numbers the NumPy dtype string in
  little-endian form (``<f8``, ``<c16``, ``<i8``...) and a zero byte, the
  number of dimensions and each dimension as 8-byte little-endian
  integers, then the elements in C order: text as UTF-8, each preceded by
  its length (8-byte little-endian); booleans one byte each; numbers in
  little-endian byte order.
* The table `TABLE` (``/checksums``) is a 1-D dataset of UTF-8 strings
  ``"<sha256 hex> <path>"``, one per object (itself excluded), sorted by
  path; the root attribute `TABLE_ATTRIBUTE` (``checksums_sha256``) is the
  SHA-256 of the table's lines joined by newlines (UTF-8).

`verify` recomputes every digest and names each part that differs, is
missing or was added. `heap_damage` checks, before the HDF5 library reads
anything, the one structure it trusts blindly: the collections of its
global heap, where variable-length text (attributes and text datasets) is
kept; a damaged object size there makes the library loop instead of fail.
"""

from __future__ import annotations

import hashlib
import struct

import h5py
import numpy as np

#: The signature and version of a global heap collection (HDF5 File Format Specification,
#: version 3.0, section III.E "Global Heap"): "GCOL", version 1, three reserved bytes, the
#: collection's size (8 bytes with the default length size), then its objects, each with a
#: 16-byte header (index 2, reference count 2, reserved 4, size 8) and its data padded to a
#: multiple of 8; the object of index 0 is the free space and ends the list.
_HEAP_HEADER = b"GCOL\x01\x00\x00\x00"
#: The smallest collection the library writes (same section).
_HEAP_MIN_SIZE = 4096

TABLE = "checksums"
TABLE_ATTRIBUTE = "checksums_sha256"
_STR = h5py.string_dtype("utf-8")


def _text(x) -> bytes:
    if isinstance(x, bytes):
        return x
    return str(x).encode("utf-8")


def encode_value(value) -> bytes:
    """The canonical bytes of an attribute value or of a dataset's data (see the module)."""
    a = np.asarray(value)
    shape = struct.pack("<Q", a.ndim) + b"".join(struct.pack("<Q", n) for n in a.shape)
    if a.dtype.kind in "OSU":
        body = b"".join(struct.pack("<Q", len(t)) + t for t in (_text(x) for x in a.reshape(-1)))
        return b"S" + shape + body
    if a.dtype.kind == "b":
        return b"b" + shape + a.astype(np.uint8).tobytes()
    if a.dtype.names is not None or a.dtype.kind not in "iufc":
        raise TypeError(f"values of type {a.dtype} are not part of a gatescope file")
    little = a.dtype.newbyteorder("<")
    return b"N" + little.str.encode("ascii") + b"\0" + shape + np.ascontiguousarray(
        a, dtype=little).tobytes()


def object_digest(obj, path: str) -> str:
    """SHA-256 (hex) of one group or dataset: its path, attributes and data."""
    h = hashlib.sha256()
    is_dataset = isinstance(obj, h5py.Dataset)
    h.update((b"D" if is_dataset else b"G") + path.encode("utf-8") + b"\0")
    for name in sorted(obj.attrs):
        if path == "/" and name == TABLE_ATTRIBUTE:
            continue
        h.update(name.encode("utf-8") + b"\0" + encode_value(obj.attrs[name]))
    if is_dataset:
        h.update(encode_value(obj[()]))
    return h.hexdigest()


#: What reading a damaged object can raise (h5py turns HDF5 errors into these).
READ_ERRORS = (OSError, KeyError, ValueError, TypeError, RuntimeError, IndexError,
               AttributeError, UnicodeDecodeError, struct.error)
#: The digest recorded for an object that cannot be read.
UNREADABLE = "unreadable"


def digests(f: h5py.File, *, tolerant: bool = False) -> dict[str, str]:
    """{path: digest} of every group and dataset of ``f`` except the table itself.

    With ``tolerant`` an object that cannot be read gets the digest `UNREADABLE`
    instead of raising.
    """
    def digest(obj, path):
        if not tolerant:
            return object_digest(obj, path)
        try:
            return object_digest(obj, path)
        except READ_ERRORS:
            return UNREADABLE

    out = {"/": digest(f, "/")}

    def visit(name, obj):
        path = "/" + name
        if path != "/" + TABLE:
            out[path] = digest(obj, path)

    f.visititems(visit)
    return out


def _table_hash(lines) -> str:
    return hashlib.sha256("\n".join(lines).encode("utf-8")).hexdigest()


def write(f: h5py.File) -> None:
    """Store the table of digests of ``f`` (opened for writing, otherwise complete)."""
    lines = [f"{digest} {path}" for path, digest in sorted(digests(f).items())]
    f.create_dataset(TABLE, data=np.array(lines, dtype=object), dtype=_STR)
    f.attrs[TABLE_ATTRIBUTE] = _table_hash(lines)


def heap_damage(data) -> int | None:
    """The byte offset of the first global heap object whose size does not fit in its
    collection, or None when every collection is consistent.

    ``data`` is the file's bytes (bytes or an mmap). A candidate collection is a
    `_HEAP_HEADER` with a size of at least `_HEAP_MIN_SIZE` that fits in the file; its
    objects are walked from the first to the free-space object (index 0), which must
    end exactly where the collection ends (its size counts its header). A candidate
    whose size is implausible is not a collection of this file and is skipped.
    """
    at = data.find(_HEAP_HEADER)
    while at >= 0:
        size = int.from_bytes(data[at + 8:at + 16], "little")
        end = at + size
        if _HEAP_MIN_SIZE <= size and end <= len(data):
            offset = at + 16
            while offset + 16 <= end:
                index = int.from_bytes(data[offset:offset + 2], "little")
                object_size = int.from_bytes(data[offset + 8:offset + 16], "little")
                if index == 0:                   # free space: exactly the rest of the collection
                    if offset + object_size != end:
                        return offset
                    break
                next_offset = offset + 16 + (object_size + 7) // 8 * 8
                if next_offset > end:
                    return offset
                offset = next_offset
        at = data.find(_HEAP_HEADER, at + 1)
    return None


def verify(f: h5py.File) -> list[tuple[str, str]]:
    """The parts of ``f`` that do not match the stored table: [(path, what)], empty when all do.

    ``what`` is "changed", "missing" (in the table, not in the file) or
    "unexpected" (in the file, not in the table); a damaged or absent table
    is reported as ("/checksums", ...); an object that cannot be read as
    "unreadable".
    """
    if TABLE not in f or TABLE_ATTRIBUTE not in f.attrs:
        return [("/" + TABLE, "missing: the file carries no checksums")]
    raw = f[TABLE][()]
    lines = [x.decode("utf-8") if isinstance(x, bytes) else str(x) for x in np.asarray(raw).reshape(-1)]
    stored_hash = f.attrs[TABLE_ATTRIBUTE]
    stored_hash = stored_hash.decode("utf-8") if isinstance(stored_hash, bytes) else str(stored_hash)
    if _table_hash(lines) != stored_hash:
        return [("/" + TABLE, "changed: the table of checksums is damaged")]
    stored = {}
    for line in lines:
        digest, _, path = line.partition(" ")
        stored[path] = digest
    actual = digests(f, tolerant=True)
    problems = []
    for path in sorted(set(stored) | set(actual)):
        if path not in actual:
            problems.append((path, "missing"))
        elif path not in stored:
            problems.append((path, "unexpected"))
        elif actual[path] == UNREADABLE:
            problems.append((path, "unreadable"))
        elif stored[path] != actual[path]:
            problems.append((path, "changed"))
    return problems


__all__ = ["TABLE", "TABLE_ATTRIBUTE", "READ_ERRORS", "UNREADABLE", "encode_value", "object_digest",
           "digests", "write", "verify"]
