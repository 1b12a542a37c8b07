"""NetCDF-4 files of a series (via the h5netcdf engine; scipy's NetCDF-3 as fallback).

Every variable carries ``saxsnb_sha256``, the checksum of its values, and the file
ends with a checksum of all its bytes (see :mod:`._integrity`); both are verified on
reading, and the file's HDF5 links are checked before xarray reads it (see
:mod:`._h5guard`): a damaged file is refused, never opened with other numbers.
"""

from __future__ import annotations

import importlib.util
import warnings
from collections.abc import Mapping

import xarray as xr

from ..errors import SaxsError, SaxsFileError
from ._atomic import atomic_path
from ._attrs import dataset_attrs, decode_attrs, encode_attrs, restore_coords
from ._h5guard import Guard, run_bounded
from ._integrity import ATTR, append_trailer, check_trailer, digest, text_digest, verify

__all__ = ["write_netcdf", "read_netcdf", "engine"]


def _str(v) -> str:
    return v.decode("utf-8", "replace") if isinstance(v, bytes) else str(v)


def engine() -> str:
    """The xarray engine used for .nc files: "h5netcdf", else "scipy"."""
    return "h5netcdf" if importlib.util.find_spec("h5netcdf") else "scipy"


_ATTRS_SUM = "saxsnb_attrs_sha256"  # checksum of every attr (global and of each variable)


def _attrs_record(ds: xr.Dataset) -> dict:
    rec = {"": {k: v for k, v in ds.attrs.items() if k != _ATTRS_SUM}}
    for name in ds.variables:
        rec[str(name)] = {k: v for k, v in ds[name].attrs.items() if k != ATTR}
    return rec


def _encoded(ds: xr.Dataset) -> xr.Dataset:
    out = ds.copy(deep=False)
    out.attrs = dataset_attrs(ds)
    for name in list(out.variables):
        attrs = encode_attrs(ds[name].attrs)
        if ATTR in attrs:
            raise SaxsFileError(f"variable {name!r} has an attr {ATTR!r}, which saxsnb reserves")
        attrs[ATTR] = digest(ds[name].data)  # a dask array: block by block
        out[name].attrs = attrs
        out[name].encoding = {}
    if ds.chunks and ds.chunks.get("frame"):
        # a dask-backed series is written chunked along frame, chunk by chunk
        n = max(1, int(max(ds.chunks["frame"])))
        for name in list(out.variables):
            var = out[name]
            if "frame" in var.dims and var.dtype.kind not in "OUS":
                var.encoding = {
                    "chunksizes": tuple(min(n, s) if d == "frame" else s for d, s in zip(var.dims, var.shape))
                }
    out.attrs[_ATTRS_SUM] = text_digest(_attrs_record(out))
    return out


def write_netcdf(ds: xr.Dataset, path, *, overwrite: bool = True) -> None:
    """Write ``ds`` to NetCDF at ``path`` atomically; attrs that NetCDF cannot hold
    (lists, bools, dicts, None) are stored as marked JSON strings."""
    enc = _encoded(ds)
    with atomic_path(path, overwrite=overwrite) as tmp:
        try:
            with warnings.catch_warnings():
                # coordinate names with blanks are saved as variables; restored on reading
                warnings.filterwarnings("ignore", message=".*has a space in its name", category=Warning)
                enc.to_netcdf(tmp, engine=engine())
        except (OSError, ValueError, TypeError) as exc:
            raise SaxsFileError(f"cannot write NetCDF: {exc}", path=path) from exc
        if engine() == "h5netcdf":
            append_trailer(tmp)


def _precheck(path: str) -> None:
    """Checksum of the whole file, then the HDF5 links, before xarray reads anything; a
    file without saxsnb's checksum is read once in a child process first (bounded time,
    see :func:`._h5guard.run_bounded`)."""
    if not check_trailer(path):
        run_bounded(lambda: _read(path, None), path)
    _walk(path)


def _walk(path: str) -> None:
    with open(path, "rb") as fh:
        magic = fh.read(8)
    if magic != b"\x89HDF\r\n\x1a\n":
        return
    import h5py

    g = Guard(path)
    try:
        with h5py.File(path, "r") as f:
            g.walk(f)
    except SaxsError:
        raise
    except Exception as exc:  # whatever the library raises on a damaged file: named
        raise SaxsFileError(f"cannot read as NetCDF: {type(exc).__name__}: {exc}", path=path) from None


def read_netcdf(path, *, chunks: int | Mapping | None = None) -> xr.Dataset:
    """Open a NetCDF series; loaded into memory (file closed) unless ``chunks``.

    Each variable's checksum is verified (with ``chunks``, by reading each variable
    once, one at a time)."""
    spath = str(path)
    _precheck(spath)
    return _read(spath, chunks)


def _read(spath: str, chunks) -> xr.Dataset:
    if chunks is None:
        _walk(spath)
    kwargs = {"engine": engine(), "decode_timedelta": False}
    try:
        if chunks is None:
            with xr.open_dataset(spath, **kwargs) as f:
                ds = f.load()
        else:
            ds = xr.open_dataset(spath, chunks=chunks, **kwargs)
        expected = ds.attrs.pop(_ATTRS_SUM, None)
        sums = expected is not None
        if expected is not None and text_digest(_attrs_record(ds)) != _str(expected):
            raise SaxsFileError(
                "the attributes differ from the checksum stored with them: the file is damaged, or "
                "another program changed them but kept saxsnb's record",
                path=spath,
            )
        for name in list(ds.variables):
            expected = ds[name].attrs.pop(ATTR, None)
            if expected is None and sums:
                raise SaxsFileError(
                    f"variable {name!r} has lost its checksum attribute {ATTR!r}: the file is damaged",
                    path=spath,
                )
            if expected is not None:
                # lazily opened: verified block by block, never loaded whole
                verify(ds[name].data, expected, path=spath, where=f"variable {name!r}")
        ds = restore_coords(ds, spath)
        ds.attrs = decode_attrs(ds.attrs)
        for name in ds.variables:
            ds[name].attrs = decode_attrs(ds[name].attrs)
    except SaxsError:
        raise
    except Exception as exc:  # the libraries raise many types for damaged files: named
        raise SaxsFileError(f"cannot read as NetCDF: {type(exc).__name__}: {exc}", path=spath) from None
    return ds
