"""Saving and opening a series by file extension: NetCDF (.nc), NXcanSAS (.h5, .nxs) or a
Zarr store (.zarr, a folder of compressed chunks)."""

from __future__ import annotations

import os
from collections.abc import Mapping

import xarray as xr

from ..errors import SaxsFileError, SaxsInputError
from ..series import validate

__all__ = ["save_series", "open_series", "NETCDF_EXTENSIONS", "NXCANSAS_EXTENSIONS", "ZARR_EXTENSIONS"]

NETCDF_EXTENSIONS = (".nc", ".nc4", ".netcdf")
NXCANSAS_EXTENSIONS = (".h5", ".hdf5", ".nxs", ".hdf")
ZARR_EXTENSIONS = (".zarr",)


def _kind(path) -> str:
    ext = os.path.splitext(os.fspath(path).rstrip("/\\"))[1].lower()
    if ext in ZARR_EXTENSIONS:
        return "zarr"
    if ext in NETCDF_EXTENSIONS:
        return "netcdf"
    if ext in NXCANSAS_EXTENSIONS:
        return "nxcansas"
    raise SaxsInputError(
        f"unknown file extension {ext!r} of {os.fspath(path)!r}; use .nc (NetCDF), .h5/.nxs (NXcanSAS) "
        "or .zarr (Zarr store)",
        parameter="path",
    )


def _writing_bar(ds: xr.Dataset, progress: bool | None):
    """A dask callback showing the write of a dask-backed series as a tqdm bar (tasks
    done of all), or a no-op context."""
    import contextlib
    import sys

    if not ds.chunks:
        return contextlib.nullcontext()
    if progress is None:
        progress = sys.stderr.isatty() and max(len(c) for c in ds.chunks.values()) >= 20
    if not progress:
        return contextlib.nullcontext()
    from dask.callbacks import Callback
    from tqdm.auto import tqdm

    class _Bar(Callback):
        def _start_state(self, dsk, state):
            self._bar = tqdm(total=sum(len(state[k]) for k in ("ready", "waiting", "running")) or None,
                             desc="writing", unit="task")

        def _posttask(self, key, result, dsk, state, worker_id):
            self._bar.update(1)

        def _finish(self, dsk, state, errored):
            self._bar.close()

    return _Bar()


def save_series(ds: xr.Dataset, path, *, overwrite: bool = True, progress: bool | None = None) -> None:
    """Save a series, choosing the format by extension; the write is atomic.

    Parameters
    ----------
    ds : xarray.Dataset
        A series (see :mod:`saxsnb.series`), in memory or dask-backed; not modified.
    path : str or Path
        ``.nc`` gives NetCDF-4 (h5netcdf engine); ``.h5``, ``.hdf5`` or ``.nxs`` gives
        NXcanSAS (HDF5, the canSAS application definition of NeXus); ``.zarr`` gives a
        Zarr store (a folder), chunked along frame and compressed.
    overwrite : bool
        If False, an existing file is an error.
    progress : bool, optional
        Show a progress bar while a dask-backed series is computed and written (by
        default in an interactive terminal, for 20 chunks or more).

    Notes
    -----
    Attrs that the formats cannot hold natively (lists such as ``history``,
    bools, dicts, None) are stored as JSON strings with the prefix ``saxsnb-json:``
    and decoded by :func:`open_series`, so ``open_series(p)`` is identical to ``ds``.

    A dask-backed series is written chunk by chunk, never computed whole: to Zarr and
    NetCDF chunked along frame like the series (NetCDF checksums are computed chunk by
    chunk too, so the series is computed twice); to NXcanSAS into HDF5 datasets chunked
    along frame, one frame chunk of every variable computed, written and hashed at a
    time (computed once).
    With a dask progress bar active (``dask.diagnostics.ProgressBar``) it shows the
    writing.

    Examples
    --------
    >>> import tempfile, os, numpy as np, saxsnb, xarray as xr
    >>> ds = saxsnb.from_arrays([0.1, 0.2], [[2.0, 1.0]], [[0.1, 0.1]])
    >>> p = os.path.join(tempfile.mkdtemp(), "s.nc")
    >>> save_series(ds, p)
    >>> xr.testing.assert_identical(open_series(p), ds)
    >>> z = os.path.join(tempfile.mkdtemp(), "s.zarr")
    >>> save_series(ds.chunk({"frame": 1}), z)
    >>> lazy = open_series(z, chunks={})
    >>> lazy.intensity.chunks
    ((1,), (2,))
    >>> xr.testing.assert_identical(lazy.compute(), ds)
    """
    kind = _kind(path)
    validate(ds)
    if kind == "nxcansas":  # its own bar, over the chunks it writes one at a time
        import sys

        from .nxcansas import write_nxcansas

        if progress is None:
            progress = bool(ds.chunks) and sys.stderr.isatty() and len(ds.chunks.get("frame", ())) >= 20
        write_nxcansas(ds, path, overwrite=overwrite, progress=bool(progress) and bool(ds.chunks))
        return
    with _writing_bar(ds, progress):
        if kind == "zarr":
            from .zarrstore import write_zarr

            write_zarr(ds, path, overwrite=overwrite)
        else:
            from .netcdf import write_netcdf

            write_netcdf(ds, path, overwrite=overwrite)


def open_series(path, *, chunks: int | Mapping | None = None) -> xr.Dataset:
    """Open a series saved as NetCDF, Zarr or NXcanSAS (also NXcanSAS from other writers).

    Parameters
    ----------
    path : str or Path
    chunks : int or dict, optional
        Return a dask-backed Dataset (an int means frames per chunk; for Zarr ``{}``
        keeps the store's own chunks). Without it the data are loaded into memory and
        the file is closed at once. With it, a NetCDF file or a Zarr store is read
        lazily, chunk by chunk (a NetCDF file stays open until ``ds.close()``);
        NXcanSAS files are always read into memory first, then chunked.

    Returns
    -------
    xarray.Dataset, validated (see :func:`saxsnb.validate`).
    """
    kind = _kind(path)
    if kind == "zarr":
        if not os.path.isdir(os.fspath(path)):
            raise SaxsFileError("no such Zarr store (a folder)", path=path)
    elif not os.path.isfile(os.fspath(path)):
        raise SaxsFileError("no such file", path=path)
    if isinstance(chunks, int):
        chunks = {"frame": chunks}
    if kind == "zarr":
        from .zarrstore import read_zarr

        ds = read_zarr(path, chunks=chunks)
    elif kind == "netcdf":
        from .netcdf import read_netcdf

        ds = read_netcdf(path, chunks=chunks)
    else:
        from .nxcansas import read_nxcansas

        ds = read_nxcansas(path)
        if chunks is not None:
            ds = ds.chunk(dict(chunks))
    try:
        return validate(ds)
    except SaxsInputError as exc:
        raise SaxsFileError(f"not a saxsnb series: {exc}", path=path) from exc
