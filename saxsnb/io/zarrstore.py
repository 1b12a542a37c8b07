"""Zarr stores of a series: chunked along frame, compressed, read lazily with dask.

A Zarr store is a folder of compressed chunks (the open Zarr format, via xarray's
zarr backend and the zarr package); a series of 10^5 frames is written and read
chunk by chunk, never whole. The chunks span all q points and a run of frames: those
of a dask-backed series (made uniform where they are not), else about 8 MB each.
"""

from __future__ import annotations

import os
from collections.abc import Mapping

import numpy as np
import xarray as xr

from ..errors import SaxsError, SaxsFileError, SaxsInputError
from ._atomic import atomic_folder
from ._attrs import dataset_attrs, decode_attrs, encode_attrs, restore_coords

__all__ = ["write_zarr", "read_zarr", "ZARR_EXTENSIONS", "frame_chunks"]

ZARR_EXTENSIONS = (".zarr",)
_CHUNK_BYTES = 8 << 20
_DTYPE = "saxsnb_dtype"  # numpy dtype of a text variable (stored as variable-length strings)


def _zarr():
    try:
        import zarr
    except ImportError:
        raise SaxsInputError(
            "saving or opening a .zarr store needs the zarr package (pip install 'saxsnb[files]')",
            parameter="path",
        ) from None
    return zarr


def frame_chunks(ds: xr.Dataset) -> int:
    """Frames per chunk of the store: the largest dask chunk along frame of a
    dask-backed series, else as many frames as make about 8 MB of float64 intensity."""
    chunks = ds.chunks.get("frame") if ds.chunks else None
    if chunks:
        return max(1, int(max(chunks)))
    n_q = max(1, int(ds.sizes.get("q", 1)))
    return max(1, min(int(ds.sizes.get("frame", 1)), _CHUNK_BYTES // (8 * n_q)))


def _encoded(ds: xr.Dataset) -> tuple[xr.Dataset, dict]:
    out = ds.copy(deep=False)
    out.attrs = dataset_attrs(ds)
    n = frame_chunks(ds)
    encoding = {}
    for name in list(out.variables):
        var = out[name]
        var.attrs = encode_attrs(ds[name].attrs)
        var.encoding = {}
        if var.dtype.kind in "OUT":
            # strings: small, one chunk, variable-length (fixed-width text has no stable
            # Zarr 3 data type); the numpy dtype comes back from an attr
            if _DTYPE in var.attrs:
                raise SaxsFileError(f"variable {name!r} has an attr {_DTYPE!r}, which saxsnb reserves")
            attrs = {**var.attrs, _DTYPE: var.dtype.str}
            # (text is per frame at most: small, computed here even from dask)
            out[name] = var.copy(data=np.asarray(var.values).astype(object))
            out[name].attrs = attrs
            continue
        chunks = tuple(min(n, s) if d == "frame" else s for d, s in zip(var.dims, var.shape))
        if var.chunks is not None and any(d == "frame" for d in var.dims):
            # zarr chunks are uniform: dask chunks must be too (all but the last)
            out[name] = var.chunk({d: (n if d == "frame" else -1) for d in var.dims})
        if chunks:
            encoding[name] = {"chunks": chunks, **_compression()}
    return out, encoding


def _compression() -> dict:
    """Zstandard with a checksum of every chunk (zarr 3; a damaged chunk is refused on
    reading); zarr 2 keeps its default compressor (Blosc)."""
    zarr = _zarr()
    if int(zarr.__version__.split(".")[0]) < 3:
        return {}
    from zarr.codecs import ZstdCodec

    return {"compressors": (ZstdCodec(level=3, checksum=True),)}


def write_zarr(ds: xr.Dataset, path, *, overwrite: bool = True) -> None:
    """Write ``ds`` to a Zarr store (a folder) at ``path`` atomically: the store is
    written into a temporary folder beside it, which then replaces ``path`` as a
    whole. A dask-backed series is written chunk by chunk, never computed whole."""
    _zarr()
    target = os.fspath(path)
    if os.path.exists(target) and not overwrite:
        raise SaxsFileError("exists; pass overwrite=True to replace it", path=target)
    enc, encoding = _encoded(ds)
    with atomic_folder(target, overwrite=True) as tmp:
        try:
            enc.to_zarr(os.fspath(tmp), mode="w", encoding=encoding, consolidated=False)
            _sync_tree(os.fspath(tmp))
        except (OSError, ValueError, TypeError) as exc:
            raise SaxsFileError(f"cannot write the Zarr store: {exc}", path=target) from exc


def _sync_tree(root: str) -> None:
    """Flush every chunk file and folder of the new store to disk before it replaces
    the old one (the rename is atomic; this makes it durable too)."""
    from ._atomic import _fsync_dir, _fsync_file

    for folder, _, names in os.walk(root, topdown=False):
        for name in names:
            _fsync_file(os.path.join(folder, name))
        _fsync_dir(folder)


def read_zarr(path, *, chunks: int | Mapping | None = None) -> xr.Dataset:
    """Open a Zarr series: loaded into memory unless ``chunks`` (then dask-backed, read
    lazily; ``{}`` or ``"auto"`` keeps the store's own chunks)."""
    _zarr()
    spath = os.fspath(path)
    try:
        if chunks is None:
            with xr.open_zarr(spath, chunks=None, decode_timedelta=False, consolidated=False) as f:
                ds = f.load()
        else:
            ds = xr.open_zarr(spath, chunks=chunks, decode_timedelta=False, consolidated=False)
        ds = restore_coords(ds, spath)
        ds.attrs = decode_attrs(ds.attrs)
        for name in list(ds.variables):
            attrs = dict(ds[name].attrs)
            dtype = attrs.pop(_DTYPE, None)
            if dtype is not None and str(dtype) != str(ds[name].dtype):
                ds[name] = ds[name].astype(str(dtype))
            ds[name].attrs = decode_attrs(attrs)
            ds[name].encoding = {}
    except SaxsError:
        raise
    except Exception as exc:  # the libraries raise many types for damaged stores: named
        raise SaxsFileError(f"cannot read as a Zarr store: {type(exc).__name__}: {exc}", path=spath) from None
    return ds
