"""NetCDF-4 files of a series (via the h5netcdf engine; scipy's NetCDF-3 as fallback)."""

from __future__ import annotations

import importlib.util
from collections.abc import Mapping

import xarray as xr

from ..errors import SaxsFileError
from ._atomic import atomic_path
from ._attrs import decode_attrs, encode_attrs

__all__ = ["write_netcdf", "read_netcdf", "engine"]


def engine() -> str:
    """The xarray engine used for .nc files: "h5netcdf", else "scipy"."""
    return "h5netcdf" if importlib.util.find_spec("h5netcdf") else "scipy"


def _encoded(ds: xr.Dataset) -> xr.Dataset:
    out = ds.copy(deep=False)
    out.attrs = encode_attrs(ds.attrs)
    for name in list(out.variables):
        out[name].attrs = encode_attrs(ds[name].attrs)
        out[name].encoding = {}
    return out


def write_netcdf(ds: xr.Dataset, path, *, overwrite: bool = True) -> None:
    """Write ``ds`` to NetCDF at ``path`` atomically; attrs that NetCDF cannot hold
    (lists, bools, dicts, None) are stored as marked JSON strings."""
    enc = _encoded(ds)
    with atomic_path(path, overwrite=overwrite) as tmp:
        try:
            enc.to_netcdf(tmp, engine=engine())
        except (OSError, ValueError, TypeError) as exc:
            raise SaxsFileError(f"cannot write NetCDF: {exc}", path=path) from exc


def read_netcdf(path, *, chunks: int | Mapping | None = None) -> xr.Dataset:
    """Open a NetCDF series; loaded into memory (file closed) unless ``chunks``."""
    kwargs = {"engine": engine(), "decode_timedelta": False}
    try:
        if chunks is None:
            with xr.open_dataset(path, **kwargs) as f:
                ds = f.load()
        else:
            ds = xr.open_dataset(path, chunks=chunks, **kwargs)
    except (OSError, ValueError) as exc:
        raise SaxsFileError(f"cannot read as NetCDF: {exc}", path=path) from exc
    ds.attrs = decode_attrs(ds.attrs)
    for name in ds.variables:
        ds[name].attrs = decode_attrs(ds[name].attrs)
    return ds
