"""Checksums that let a reader refuse a damaged file instead of opening it with other numbers.

Two records, both written by :func:`saxsnb.save_series` (NetCDF and NXcanSAS):

- a checksum of each array, in the attribute :data:`ATTR` of its variable or dataset
  (``"sha256:<hex>"``, over the array's values in a canonical byte form: little-endian,
  C order, NaN with one bit pattern, strings as UTF-8 with their lengths). It stays
  valid when another program rewrites the file (copying attributes); the readers
  verify it for every array whose units are still those saxsnb wrote;
- a checksum of the whole file in its last :data:`TRAILER_SIZE` bytes
  (``"\\nsaxsnb-sha256:<hex>\\n"``, over every byte before it; HDF5 ignores bytes after
  the end of its data, and a program that changes the file in place removes them).
  It is verified in one pass over the bytes *before* the HDF5 library reads any of
  them, so a damaged file is refused in bounded time: damaged HDF5 metadata can
  otherwise make the library crash or loop.
"""

from __future__ import annotations

import hashlib
import json
import os

import numpy as np

from ..errors import SaxsFileError

__all__ = ["ATTR", "TRAILER_SIZE", "digest", "BlockDigest", "text_digest", "append_trailer", "check_trailer",
           "verify"]

#: Attribute that holds the checksum of an array.
ATTR = "saxsnb_sha256"
_MAGIC = b"\nsaxsnb-sha256:"
#: Bytes of the whole-file checksum record at the end of a file.
TRAILER_SIZE = len(_MAGIC) + 64 + 1
_BLOCK = 1 << 20


def _canonical(a: np.ndarray) -> np.ndarray:
    """The numeric array in the canonical byte form of :func:`digest`."""
    kind = a.dtype.kind
    if kind in "mM":
        a = a.view(np.int64)
    elif kind == "b":
        a = a.view(np.uint8)
    elif kind in "fc":
        a = np.where(np.isnan(a), np.array(np.nan, dtype=a.dtype), a)
    return np.ascontiguousarray(a, dtype=a.dtype.newbyteorder("<"))


def _is_dask(values) -> bool:
    return type(values).__module__.startswith("dask.") and hasattr(values, "numblocks")


def digest(values) -> str:
    """Checksum of an array's values (dtype kind, shape and canonical bytes).

    A dask array is hashed block by block along its first axis (each block computed on
    its own, in order: the bytes hashed are the same, memory stays one block).

    >>> digest(np.array([1.0, np.nan])) == digest(np.array([1.0, -np.nan]))
    True
    >>> digest(np.array([1.0, 2.0])) == digest(np.array([1.0, 2.0000001]))
    False
    """
    h = hashlib.sha256()
    if _is_dask(values) and values.ndim >= 1 and values.dtype.kind not in "USO":
        x = values
        if any(n > 1 for n in x.numblocks[1:]):
            x = x.rechunk({i: -1 for i in range(1, x.ndim)})
        h.update(f"{x.dtype.kind}:{tuple(int(n) for n in x.shape)}:".encode())
        for i in range(x.numblocks[0]):
            a = _canonical(np.asarray(x.blocks[i].compute()))
            if i == 0:
                h.update(a.dtype.str.encode())
            h.update(memoryview(a).cast("B"))
        if x.numblocks[0] == 0:
            h.update(_canonical(np.zeros(0, dtype=x.dtype)).dtype.str.encode())
        return "sha256:" + h.hexdigest()
    a = np.asarray(values)
    kind = a.dtype.kind
    h.update(f"{kind}:{a.shape}:".encode())
    if kind in "USO":
        for v in a.ravel().tolist():
            b = v if isinstance(v, bytes) else str(v).encode("utf-8", "surrogatepass")
            h.update(len(b).to_bytes(8, "little"))
            h.update(b)
    else:
        a = _canonical(a)
        h.update(a.dtype.str.encode())
        h.update(memoryview(a).cast("B"))
    return "sha256:" + h.hexdigest()


class BlockDigest:
    """:func:`digest` of a numeric array given block by block along its first axis (a
    writer hashes each block as it writes it: the data are read once).

    >>> a = np.arange(12.0).reshape(4, 3)
    >>> d = BlockDigest(a.dtype, a.shape)
    >>> d.update(a[:3]); d.update(a[3:])
    >>> d.hexdigest() == digest(a)
    True
    """

    def __init__(self, dtype, shape):
        self._dtype = np.dtype(dtype)
        self._h = hashlib.sha256()
        self._h.update(f"{self._dtype.kind}:{tuple(int(n) for n in shape)}:".encode())
        self._first = True

    def update(self, block) -> None:
        a = _canonical(np.asarray(block, dtype=self._dtype))
        if self._first:
            self._h.update(a.dtype.str.encode())
            self._first = False
        self._h.update(memoryview(a).cast("B"))

    def hexdigest(self) -> str:
        if self._first:
            self._h.update(_canonical(np.zeros(0, dtype=self._dtype)).dtype.str.encode())
        return "sha256:" + self._h.hexdigest()


def _canon(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    if isinstance(value, bytes):
        return value.decode("utf-8", "surrogateescape")
    raise TypeError(type(value).__name__)


def text_digest(obj) -> str:
    """Checksum of a JSON-like record (attrs), independent of key order and of numpy
    scalar types.

    >>> text_digest({"a": np.int64(1), "b": "x"}) == text_digest({"b": "x", "a": 1})
    True
    """
    text = json.dumps(obj, sort_keys=True, ensure_ascii=False, default=_canon)
    return "sha256:" + hashlib.sha256(text.encode("utf-8", "surrogatepass")).hexdigest()


def verify(values, expected, *, path, where: str) -> None:
    """Raise :class:`SaxsFileError` if ``values`` do not have the checksum ``expected``."""
    if isinstance(expected, bytes):
        expected = expected.decode("ascii", "replace")
    if not isinstance(expected, str) or digest(values) != expected:
        raise SaxsFileError(
            f"{where}: the values differ from the checksum stored with them ({ATTR}): the file "
            "is damaged, or another program changed the numbers but kept saxsnb's record",
            path=path,
        )


def _sha_of(f, n: int) -> bytes:
    h = hashlib.sha256()
    left = n
    while left > 0:
        block = f.read(min(_BLOCK, left))
        if not block:
            break
        h.update(block)
        left -= len(block)
    return h.hexdigest().encode()


def append_trailer(path) -> None:
    """Append the whole-file checksum record to the (closed, complete) file ``path``."""
    with open(path, "r+b") as f:
        size = os.fstat(f.fileno()).st_size
        hexd = _sha_of(f, size)
        f.seek(size)
        f.write(_MAGIC + hexd + b"\n")


def check_trailer(path) -> bool:
    """Verify the whole-file checksum record; False if the file has none.

    Raises :class:`SaxsFileError` if the record is there and the bytes before it differ.
    """
    try:
        with open(path, "rb") as f:
            size = os.fstat(f.fileno()).st_size
            if size < TRAILER_SIZE:
                return False
            f.seek(size - TRAILER_SIZE)
            tail = f.read(TRAILER_SIZE)
            if not (tail.startswith(_MAGIC) and tail.endswith(b"\n")):
                return False
            f.seek(0)
            if _sha_of(f, size - TRAILER_SIZE) != tail[len(_MAGIC) : -1]:
                raise SaxsFileError(
                    "the file's bytes differ from the checksum saxsnb wrote at its end: the file "
                    "is damaged (or was changed in place); it is not opened",
                    path=path,
                )
    except OSError as exc:
        raise SaxsFileError(f"cannot read the file: {exc.strerror or exc}", path=path) from exc
    return True
