"""2D detector images in: TIFF files and HDF5 / NeXus stacks, as one image series.

An **image series** is an :class:`xarray.Dataset` with

- ``counts`` (frame, y, x): the detector counts, integers or floats as stored (a dask
  array when read lazily);
- coords ``frame`` (int), ``y`` and ``x`` (pixel indices), and any per-frame scan
  coordinate (temperature, time, strain, ...);
- optional ``mask`` (y, x) bool, True = pixel excluded;
- attrs: the detector geometry in the ``geometry_*`` layout of
  :class:`saxsnb.analysis.DetectorGeometry` when known, ``source_files``, ``history``.

Readers
-------
:func:`read_images` takes one file, a folder, a glob or a list of files. A TIFF may hold
one image or a stack (pages); an HDF5 / NeXus file holds a stack in a dataset (default:
the NeXus signal of the first NXdata, else the first 3D dataset). Long series are read
lazily with dask (``lazy=None``: lazy above 64 frames), each file (or HDF5 chunk of
frames) read when needed. Compressed HDF5 detector data need the filter plugins of
``hdf5plugin``, imported when it is installed.

Per-file metadata: a TIFF written by :func:`write_tiff` carries a JSON description; its
numeric entries that every file has become per-frame scan coordinates, and its
``geometry_*`` entries the geometry. From NeXus, ``NXdetector`` fields ``distance``,
``x_pixel_size``, ``y_pixel_size``, ``beam_center_x``, ``beam_center_y`` and the
wavelength (``NXbeam/incident_wavelength`` or ``NXmonochromator/wavelength``) are read
with their ``units`` attrs when present.

Bad input (different image shapes, unreadable files, no image data) raises
:class:`saxsnb.errors.SaxsFileError` naming the file.
"""

from __future__ import annotations

import glob as _glob
import json
import os
from pathlib import Path

import numpy as np
import xarray as xr

from ..analysis._geometry import GEOMETRY_PREFIX, DetectorGeometry
from ..errors import SaxsFileError, SaxsInputError
from ..series import _as_scan, add_history
from ._atomic import atomic_path

__all__ = ["image_series", "read_images", "write_tiff", "geometry_of"]

_TIFF = (".tif", ".tiff")
_HDF5 = (".h5", ".hdf5", ".nxs", ".hdf", ".nx5")
LAZY_ABOVE = 64


def image_series(counts, *, geometry: DetectorGeometry | None = None, scan=None, mask=None,
                 **attrs) -> xr.Dataset:
    """Wrap a stack of images (frames, rows, columns) as an image series (module doc).

    ``counts`` may be a numpy or dask array (kept lazy; numpy input is not copied, the
    series never writes into it). ``scan`` as in :func:`saxsnb.from_arrays`.

    >>> ds = image_series(np.zeros((2, 3, 4), np.uint16), scan={"time": [0.0, 1.0]})
    >>> dict(ds.counts.sizes), ds.time.attrs["units"]
    ({'frame': 2, 'y': 3, 'x': 4}, 's')
    """
    shape = getattr(counts, "shape", None)
    if shape is None:
        counts = np.asarray(counts)
        shape = counts.shape
    if len(shape) == 2:
        counts = counts[None]
        shape = counts.shape
    if len(shape) != 3:
        raise SaxsInputError(f"counts must be (frames, rows, columns), got shape {shape}", parameter="counts")
    n = shape[0]
    coords = {"frame": np.arange(n), "y": np.arange(shape[1]), "x": np.arange(shape[2])}
    for name, (values, a) in _as_scan(scan, n).items():
        coords[name] = ("frame", values, a)
    data = {"counts": (("frame", "y", "x"), counts, {"units": "counts"})}
    if mask is not None:
        m = np.asarray(mask, bool)
        if m.shape != tuple(shape[1:]):
            raise SaxsInputError(f"mask shape {m.shape} differs from the images {tuple(shape[1:])}",
                                 parameter="mask")
        data["mask"] = (("y", "x"), m.copy())
    ds = xr.Dataset(data, coords=coords)
    if geometry is not None:
        if geometry.shape is not None and tuple(geometry.shape) != tuple(shape[1:]):
            raise SaxsInputError(f"geometry shape {geometry.shape} differs from the images "
                                 f"{tuple(shape[1:])}", parameter="geometry")
        ds.attrs.update(geometry.replace(shape=tuple(shape[1:])).to_attrs())
    ds.attrs.update(attrs)
    ds.attrs.setdefault("history", [])
    return ds


def geometry_of(ds: xr.Dataset) -> DetectorGeometry | None:
    """The geometry stored in an image series' attrs, or None."""
    if not any(k.startswith(GEOMETRY_PREFIX) for k in ds.attrs):
        return None
    return DetectorGeometry.from_attrs(ds.attrs)


# ---------------------------------------------------------------------------- TIFF
def write_tiff(path, image, *, metadata=None, compression: str | None = None) -> Path:
    """Write one image (or a stack as pages) to a TIFF, atomically, with ``metadata`` as a
    JSON description (read back by :func:`read_images`); ``compression="zlib"`` for
    lossless deflate (Python's zlib, no extra package)."""
    import tifffile

    from .._jsonsafe import to_json_safe

    path = Path(path)
    desc = json.dumps({"saxsnb": to_json_safe(dict(metadata or {}))}, sort_keys=True)
    with atomic_path(path) as tmp:
        tifffile.imwrite(tmp, np.asarray(image), description=desc, metadata=None, photometric="minisblack",
                         compression=compression)
    return path


def _tiff_info(path: Path):
    import tifffile

    try:
        with tifffile.TiffFile(path) as tf:
            series = tf.series[0]
            shape, dtype, axes = series.shape, series.dtype, series.axes
            desc = tf.pages[0].description if len(tf.pages) else ""
    except Exception as exc:   # tifffile raises many types on corrupt files
        raise SaxsFileError(f"not a readable TIFF image ({type(exc).__name__}: {exc})", path=path) from exc
    if "S" in axes:
        raise SaxsFileError(f"a colour TIFF (axes {axes}), not detector counts", path=path)
    meta = {}
    if desc:
        try:
            meta = json.loads(desc).get("saxsnb", {})
        except (ValueError, AttributeError):
            meta = {}
    if len(shape) == 2:
        shape = (1,) + tuple(shape)
    if len(shape) != 3:
        raise SaxsFileError(f"holds an array of shape {shape}, not images", path=path)
    return tuple(shape), np.dtype(dtype), meta


def _read_tiff(path: Path, shape) -> np.ndarray:
    import tifffile

    try:
        a = tifffile.imread(path)
    except Exception as exc:
        raise SaxsFileError(f"not a readable TIFF image ({type(exc).__name__}: {exc})", path=path) from exc
    a = a.reshape((-1,) + a.shape[-2:]) if a.ndim >= 2 else a
    if a.shape != tuple(shape):
        raise SaxsFileError(f"image shape {a.shape} differs from the expected {tuple(shape)}", path=path)
    return a


# ---------------------------------------------------------------------------- HDF5
def _h5py():
    import h5py

    try:   # filter plugins for compressed detector data, when installed
        import hdf5plugin  # noqa: F401
    except ImportError:
        pass
    return h5py


def _find_stack(f, dataset: str | None):
    h5py = _h5py()
    if dataset is not None:
        if dataset not in f:
            raise KeyError(f"no dataset {dataset!r}")
        return f[dataset]
    # NeXus: entry/<NXdata>@signal
    for entry in f.values():
        if not isinstance(entry, h5py.Group):
            continue
        for g in entry.values():
            if isinstance(g, h5py.Group) and _attr(g, "NX_class") == "NXdata":
                sig = _attr(g, "signal")
                if sig and sig in g and g[sig].ndim in (2, 3):
                    return g[sig]
    found = []

    def visit(name, obj):
        if isinstance(obj, h5py.Dataset) and obj.ndim in (2, 3) and obj.dtype.kind in "iuf" and not found:
            found.append(obj)

    f.visititems(visit)
    if not found:
        raise KeyError("no 2D or 3D numeric dataset")
    return found[0]


def _attr(obj, name):
    v = obj.attrs.get(name)
    if isinstance(v, bytes):
        v = v.decode()
    if isinstance(v, np.ndarray) and v.size == 1:
        v = v.item()
        v = v.decode() if isinstance(v, bytes) else v
    return v


_LENGTH_MM = {"mm": 1.0, "m": 1e3, "cm": 10.0, "um": 1e-3, "micron": 1e-3, "nm": 1e-6}
_WAVE_NM = {"nm": 1.0, "angstrom": 0.1, "a": 0.1, "Å": 0.1, "m": 1e9, "pm": 1e-3}


def _nexus_geometry(f, shape) -> dict:
    """Geometry fields of the first NXdetector (and the wavelength), as geometry_* attrs."""
    h5py = _h5py()
    out = {}
    det, wave = [], []

    def visit(name, obj):
        if isinstance(obj, h5py.Group):
            cls = _attr(obj, "NX_class")
            if cls == "NXdetector" and not det:
                det.append(obj)
            if cls in ("NXbeam", "NXmonochromator"):
                for key in ("incident_wavelength", "wavelength"):
                    if key in obj and not wave:
                        wave.append(obj[key])

    f.visititems(visit)

    def value(ds, table, default_unit):
        unit = str(_attr(ds, "units") or default_unit).strip().lower()
        if unit not in table:
            return None
        return float(np.asarray(ds[()]).ravel()[0]) * table[unit]

    if det:
        d = det[0]
        for key, name in (("distance", "distance_mm"), ("x_pixel_size", "pixel_size_x_mm"),
                          ("y_pixel_size", "pixel_size_y_mm")):
            if key in d:
                v = value(d[key], _LENGTH_MM, "m")
                if v is not None:
                    out[GEOMETRY_PREFIX + name] = v
        for key, name, px in (("beam_center_x", "beam_center_x_px", "pixel_size_x_mm"),
                              ("beam_center_y", "beam_center_y_px", "pixel_size_y_mm")):
            if key in d:
                unit = str(_attr(d[key], "units") or "pixel").strip().lower()
                v = float(np.asarray(d[key][()]).ravel()[0])
                if unit in ("pixel", "pixels", "px"):
                    out[GEOMETRY_PREFIX + name] = v
                elif unit in _LENGTH_MM and GEOMETRY_PREFIX + px in out:
                    out[GEOMETRY_PREFIX + name] = v * _LENGTH_MM[unit] / out[GEOMETRY_PREFIX + px]
    if wave:
        v = value(wave[0], _WAVE_NM, "angstrom")
        if v is not None:
            out[GEOMETRY_PREFIX + "wavelength_nm"] = v
    if out:
        out[GEOMETRY_PREFIX + "shape"] = list(shape)
    return out


def _h5_stack(path: Path, dataset: str | None, lazy: bool | None):
    h5py = _h5py()
    try:
        f = h5py.File(path, "r")
    except Exception as exc:
        raise SaxsFileError(f"not a readable HDF5 file ({type(exc).__name__}: {exc})", path=path) from exc
    try:
        d = _find_stack(f, dataset)
    except KeyError as exc:
        f.close()
        raise SaxsFileError(f"no image stack found: {exc.args[0]}", path=path) from exc
    shape = d.shape if d.ndim == 3 else (1,) + d.shape
    geom = _nexus_geometry(f, shape[1:])
    use_lazy = shape[0] > LAZY_ABOVE if lazy is None else lazy
    if use_lazy:
        import dask.array as da

        arr = da.from_array(d, chunks=(max(1, min(shape[0], 16)),) + tuple(shape[1:]))
        arr = arr.reshape(shape)
        return arr, geom, f          # the file stays open for the lazy reads
    try:
        arr = np.asarray(d[()]).reshape(shape)
    except Exception as exc:
        raise SaxsFileError(f"image data could not be read ({type(exc).__name__}: {exc})", path=path) from exc
    finally:
        f.close()
    return arr, geom, None


# ---------------------------------------------------------------------------- entry
def _expand(source) -> list[Path]:
    if isinstance(source, (list, tuple)):
        files = [Path(s) for s in source]
    else:
        p = Path(source)
        if p.is_dir():
            files = sorted(x for x in p.iterdir() if x.suffix.lower() in _TIFF + _HDF5 and x.is_file())
        elif p.exists():
            files = [p]
        else:
            files = [Path(x) for x in sorted(_glob.glob(str(source)))]
    if not files:
        raise SaxsFileError("no image files found", path=source)
    for f in files:
        if not f.is_file():
            raise SaxsFileError("no such file", path=f)
        if f.suffix.lower() not in _TIFF + _HDF5:
            raise SaxsFileError(f"unknown image file type {f.suffix!r} (TIFF or HDF5/NeXus expected)", path=f)
    return files


def read_images(source, *, scan=None, dataset: str | None = None, lazy: bool | None = None,
                geometry: DetectorGeometry | None = None, mask=None) -> xr.Dataset:
    """Read TIFF / HDF5 images (a file, folder, glob or list) into one image series.

    Parameters
    ----------
    source : path, folder, glob pattern or list of paths (sorted by name for a folder).
    scan : per-frame scan coordinates to attach (as :func:`saxsnb.from_arrays`); they
        override those read from the files' metadata.
    dataset : HDF5 path of the stack (default: the NeXus signal, else the first 3D dataset).
    lazy : dask-backed reads (None: lazily above 64 frames).
    geometry : overrides the geometry read from the files.
    mask : optional (rows, columns) bool mask to store.

    Returns
    -------
    image series (module doc), with ``source_files`` and one history entry.
    """
    files = _expand(source)
    geometry_given = geometry
    parts, metas, geoms = [], [], []
    shape0 = None
    tiff_files = [f for f in files if f.suffix.lower() in _TIFF]
    n_tiff_frames = 0
    infos = {}
    for f in tiff_files:
        infos[f] = _tiff_info(f)
        n_tiff_frames += infos[f][0][0]
    tiff_lazy = n_tiff_frames > LAZY_ABOVE if lazy is None else lazy
    for f in files:
        if f.suffix.lower() in _TIFF:
            shape, dtype, meta = infos[f]
            if tiff_lazy:
                import dask
                import dask.array as da

                arr = da.from_delayed(dask.delayed(_read_tiff)(f, shape), shape=shape, dtype=dtype)
            else:
                arr = _read_tiff(f, shape)
            geoms.append({k: v for k, v in meta.items() if k.startswith(GEOMETRY_PREFIX)})
        else:
            arr, geom, _handle = _h5_stack(f, dataset, lazy)   # a lazy stack keeps its file open
            shape, meta = arr.shape, {}
            geoms.append(geom)
        if shape0 is None:
            shape0 = tuple(shape[1:])
        elif tuple(shape[1:]) != shape0:
            raise SaxsFileError(f"image shape {tuple(shape[1:])} differs from {shape0} of {files[0].name}",
                                path=f)
        parts.append(arr)
        metas.append([meta] * shape[0])
    if any(hasattr(p, "dask") for p in parts):
        import dask.array as da

        counts = da.concatenate([da.asarray(p) for p in parts], axis=0)
    else:
        counts = parts[0] if len(parts) == 1 else np.concatenate(parts, axis=0)
    per_frame = [m for ms in metas for m in ms]
    found = {}
    keys = set.intersection(*(set(m) for m in per_frame)) if per_frame else set()
    for k in sorted(keys):
        if k.startswith(GEOMETRY_PREFIX):
            continue
        vals = [m[k] for m in per_frame]
        if all(isinstance(v, (int, float)) and not isinstance(v, bool) for v in vals):
            found[k] = np.asarray(vals, float)
    found.update(dict(scan or {}))
    if geometry is None:
        g_attrs = next((g for g in geoms if g), {})
        if g_attrs:
            try:
                geometry = DetectorGeometry.from_attrs(g_attrs)
            except SaxsInputError:
                geometry = None   # partial geometry in the files: the user gives it
    ds = image_series(counts, geometry=geometry, scan=found or None, mask=mask)
    ds.attrs["source_files"] = [str(f) for f in files]
    # the source as given (a folder or pattern stays one string, so a recipe reads the same
    # files again); arrays given for scan, geometry or mask are named only (no recipe)
    given = sorted(k for k, v in (("scan", scan), ("geometry", geometry_given), ("mask", mask))
                   if v is not None)
    record = {"source": str(source) if isinstance(source, (str, os.PathLike)) else [str(f) for f in files],
              "lazy": bool(hasattr(counts, "dask"))}
    if dataset is not None:
        record["dataset"] = dataset
    if given:
        record["given"] = given
    return add_history(ds, "read_images", **record)
