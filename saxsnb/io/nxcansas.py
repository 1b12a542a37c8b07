"""NXcanSAS (HDF5) files: the canSAS application definition of NeXus.

Written layout (one stacked entry; the scan axis is the first axis of ``I``)::

    /                       NX_class=NXroot, default="sasentry01"
    /sasentry01             NX_class=NXentry, canSAS_class=SASentry, version="1.1"
        definition          "NXcanSAS"
        title, run          sample name, ""
        sasdata01/          NX_class=NXdata, canSAS_class=SASdata, signal="I",
                            I_axes="<scan>,Q" (comma-separated, as the standard's
                            examples write it, from memory), Q_indices=1,
                            <scan>_indices=0
            I      (frame, q)   units "1/cm" or "arbitrary", uncertainties="Idev"
            Idev   (frame, q)
            Q      (q,)         units "1/nm" (resolutions="Qdev" when dq exists)
            Qdev   (frame, q)   q resolution, when the series has ``dq``
            Mask   (frame, q)   int8, 1 = point excluded (our reading of the
                                standard's Mask: true marks a point not to be used;
                                from memory)
            <scan coordinate>   (frame,) with units, one dataset per coordinate
        sassample/          NX_class=NXsample, canSAS_class=SASsample: name
        sasprocess/         NX_class=NXprocess, canSAS_class=SASprocess: history notes

``sasdata01`` also carries ``saxsnb_layout``, a JSON description of every variable's
dims and attrs so that :func:`read_nxcansas` rebuilds the identical Dataset. Every
dataset carries ``saxsnb_sha256``, the checksum of its values, and the file ends with a
checksum of all its bytes (see :mod:`._integrity`); both are verified on reading.

The standard's own attributes win over the private record: when a dataset's
``units`` differ from those the record gives (another program converted the file),
the record is ignored (with a :class:`~saxsnb.errors.SaxsWarning`) and the file is
read from the standard fields, in the units they state. Files from other writers
(one SASentry or SASdata per frame, or a stacked SASdata) are read from the standard
fields alone. Links to other files are never followed (see :mod:`._h5guard`).
"""

from __future__ import annotations

import json
import warnings
from typing import Any

import numpy as np
import xarray as xr

from .. import __version__
from ..errors import SaxsError, SaxsFileError, SaxsInputError, SaxsWarning
from ..series import main_scan
from ._assemble import Curve, build_series
from ._atomic import atomic_path
from ._attrs import decode_attrs, encode_attrs, scalar_json
from ._h5guard import Guard, run_bounded
from ._integrity import ATTR, BlockDigest, append_trailer, check_trailer, digest, text_digest, verify

__all__ = ["write_nxcansas", "read_nxcansas"]

_LAYOUT = "saxsnb_layout"
_LAYOUT_SUM = "saxsnb_layout_sha256"


def _str(v) -> str:
    if isinstance(v, bytes):
        return v.decode("utf-8")
    if isinstance(v, np.ndarray):
        if v.size == 1:
            return _str(v.reshape(()).item())
        return ",".join(_str(x) for x in v.tolist())
    return str(v)


def _nx_intensity_unit(unit: str) -> str:
    return "arbitrary" if unit in ("arb", "", "arbitrary", "a.u.") else unit


#: largest HDF5 chunk of a dataset written block by block (bytes): a frame read later
#: touches one chunk
_H5_CHUNK_BYTES = 4 << 20


def _stored(values: np.ndarray) -> np.ndarray:
    """The array as stored in HDF5: bools as int8, datetimes as int64, strings as str objects."""
    if values.dtype == bool:
        return values.astype(np.int8)
    if values.dtype.kind in "mM":
        return values.view(np.int64)  # the record keeps the datetime/timedelta dtype
    if values.dtype.kind in "UO":
        return np.array([str(v) for v in values.ravel()], dtype=object).reshape(values.shape)
    return values


def _by_blocks(ds: xr.Dataset) -> dict:
    """The dask-backed numeric variables on frame (first axis), each as a dask array cut
    like the series along frame and whole along its other axes: ``name -> array``."""
    from ..accessor._core import is_dask

    frame_chunks = (ds.chunks or {}).get("frame")
    if not frame_chunks:
        return {}
    out = {}
    for name, var in [*ds.data_vars.items(), *ds.coords.items()]:
        if is_dask(var) and var.dims[:1] == ("frame",) and var.dtype.kind not in "OUS":
            out[str(name)] = var.data.rechunk((frame_chunks, *[-1] * (var.ndim - 1)))
    return out


def _write_blocks(d, h5names: dict, arrays: dict, *, path, progress) -> dict:
    """Fill the chunked datasets ``d[h5names[name]]`` block by block along frame: each
    block of every variable computed together (one computation: the variables of one
    read share their tasks), written, and hashed. Returns ``name -> checksum``."""
    import dask

    names = list(arrays)
    sums = {n: BlockDigest(_stored(np.zeros(0, arrays[n].dtype)).dtype, arrays[n].shape) for n in names}
    chunks = arrays[names[0]].chunks[0]
    bar = None
    if progress:
        from tqdm.auto import tqdm

        bar = tqdm(total=len(chunks), desc="writing", unit="chunk")
    a = 0
    try:
        for i, n_rows in enumerate(chunks):
            blocks = dask.compute(*[arrays[n].blocks[i] for n in names])
            for n, blk in zip(names, blocks):
                data = _stored(np.asarray(blk))
                d[h5names[n]][a : a + n_rows] = data
                sums[n].update(data)
            a += n_rows
            if bar is not None:
                bar.update(1)
    finally:
        if bar is not None:
            bar.close()
    return {n: s.hexdigest() for n, s in sums.items()}


def write_nxcansas(ds: xr.Dataset, path, *, overwrite: bool = True, progress: bool = False) -> None:
    """Write a series as one NXcanSAS entry with a stacked SASdata (see module doc).

    A dask-backed series is written chunk by chunk: its (frame, ...) variables go to
    HDF5 datasets chunked along frame, filled one frame chunk at a time (every variable's
    block of that chunk computed together) and hashed as they are written, so memory
    holds one chunk and the data are computed once. ``progress``: a tqdm bar over the
    chunks.
    """
    import h5py

    scan = main_scan(ds)
    layout: dict[str, Any] = {"attrs": encode_attrs(ds.attrs), "variables": {}}
    names = {"intensity": "I", "sigma": "Idev", "mask": "Mask", "dq": "Qdev", "q": "Q"}
    string = h5py.string_dtype("utf-8")
    with atomic_path(path, overwrite=overwrite) as tmp:
        with h5py.File(tmp, "w") as f:
            f.attrs["NX_class"] = "NXroot"
            f.attrs["default"] = "sasentry01"
            f.attrs["creator"] = f"saxsnb {__version__}"
            e = f.create_group("sasentry01")
            e.attrs.update({"NX_class": "NXentry", "canSAS_class": "SASentry", "version": "1.1"})
            e.attrs["default"] = "sasdata01"
            e.create_dataset("definition", data="NXcanSAS", dtype=string)
            e.create_dataset("title", data=str(ds.attrs.get("sample", "")), dtype=string)
            e.create_dataset("run", data="", dtype=string)
            d = e.create_group("sasdata01")
            d.attrs.update({"NX_class": "NXdata", "canSAS_class": "SASdata", "signal": "I"})
            d.attrs["I_axes"] = f"{scan},Q"
            d.attrs["Q_indices"] = np.int32(1)
            d.attrs[f"{scan}_indices"] = np.int32(0)
            used = set(names.values())
            lazy = _by_blocks(ds)
            lazy_h5: dict[str, str] = {}
            for name, var in [*ds.data_vars.items(), *ds.coords.items()]:
                name = str(name)
                if name in names:
                    h5name = names[name]
                else:
                    h5name = name
                    while h5name in used or h5name in ("I", "Q"):
                        h5name = "saxsnb_" + h5name
                used.add(h5name)
                if name in lazy:  # filled block by block below
                    values = np.zeros(0, var.dtype)
                    x = lazy[name]
                    stored = _stored(values).dtype
                    row = max(1, int(np.prod(x.shape[1:])) * stored.itemsize)
                    rows = max(1, min(max(x.chunks[0]), _H5_CHUNK_BYTES // row))
                    dset = d.create_dataset(h5name, shape=x.shape, dtype=stored,
                                            chunks=(min(rows, max(x.shape[0], 1)), *x.shape[1:])
                                            if x.shape[0] else None)
                    lazy_h5[name] = h5name
                else:
                    values = np.asarray(var.values)
                    data = _stored(values)
                    try:
                        dset = d.create_dataset(
                            h5name, data=data, dtype=string if values.dtype.kind in "UO" else None
                        )
                    except (TypeError, ValueError) as exc:
                        raise SaxsFileError(
                            f"cannot store {name!r} ({values.dtype}) in NXcanSAS: {exc}", path=path
                        ) from None
                    dset.attrs[ATTR] = digest(data)
                if "units" in var.attrs:
                    dset.attrs["units"] = str(var.attrs["units"])
                layout["variables"][name] = {
                    "path": h5name,
                    "dims": list(var.dims),
                    "attrs": encode_attrs(var.attrs),
                    "dtype": values.dtype.str if values.dtype.kind not in "UO" else "str",
                    "coord": name in ds.coords,
                }
            if lazy:
                for name, checksum in _write_blocks(d, lazy_h5, lazy, path=path, progress=progress).items():
                    d[lazy_h5[name]].attrs[ATTR] = checksum
            d["I"].attrs["units"] = _nx_intensity_unit(str(ds["intensity"].attrs.get("units", "arb")))
            d["I"].attrs["uncertainties"] = "Idev"
            d["Idev"].attrs["units"] = d["I"].attrs["units"]
            if "Mask" in d:
                d.attrs["mask"] = "Mask"
            if "Qdev" in d:
                d["Q"].attrs["resolutions"] = "Qdev"
            try:
                text = json.dumps(layout, ensure_ascii=False, default=scalar_json)
                d.attrs[_LAYOUT] = text
                d.attrs[_LAYOUT_SUM] = text_digest(text)
            except (TypeError, ValueError) as exc:
                raise SaxsFileError(f"cannot store the attrs in NXcanSAS: {exc}", path=path) from None
            s = e.create_group("sassample")
            s.attrs.update({"NX_class": "NXsample", "canSAS_class": "SASsample"})
            s.create_dataset("name", data=str(ds.attrs.get("sample", "")), dtype=string)
            p = e.create_group("sasprocess")
            p.attrs.update({"NX_class": "NXprocess", "canSAS_class": "SASprocess"})
            p.create_dataset("name", data="saxsnb", dtype=string)
            p.create_dataset("version", data=__version__, dtype=string)
            for k, entry in enumerate(ds.attrs.get("history", []) or []):
                p.create_dataset(f"note{k + 1:03d}", data=str(entry), dtype=string)
        append_trailer(tmp)



class _Stale(Exception):
    """The private layout record disagrees with the standard attributes; ``changed``
    names the datasets whose units differ (their values were converted on purpose, so
    their checksums no longer apply)."""

    def __init__(self, message: str, changed: set[str] | None = None):
        super().__init__(message)
        self.changed = changed or set()


def _units_of(g: Guard, dset, where: str) -> str | None:
    u = g.attr(dset, "units", where)
    return None if u is None else _str(u)


def _read_layout(g: Guard, d, dpath: str, layout) -> xr.Dataset:
    if not (isinstance(layout, dict) and isinstance(layout.get("variables"), dict)):
        raise g.error("the saxsnb layout record is not a mapping of variables", f"{dpath}@{_LAYOUT}")
    data_vars: dict[str, Any] = {}
    coords: dict[str, Any] = {}
    paths = {n: sp.get("path") for n, sp in layout["variables"].items() if isinstance(sp, dict)}
    # the standard's pointers must name what the record names
    pointers = [
        (_str(g.attr(d, "signal", dpath, "I")), paths.get("intensity"), f"{dpath}@signal"),
        (
            _str(g.attr(d["I"], "uncertainties", f"{dpath}/I", "Idev")) if "I" in d else None,
            paths.get("sigma"),
            f"{dpath}/I@uncertainties",
        ),
    ]
    if "mask" in paths:
        pointers.append((_str(g.attr(d, "mask", dpath, "Mask")), paths["mask"], f"{dpath}@mask"))
    if "dq" in paths and "Q" in d:
        res = _str(g.attr(d["Q"], "resolutions", f"{dpath}/Q", ""))
        pointers.append((res, paths["dq"], f"{dpath}/Q@resolutions"))
    for have, want, where in pointers:
        if want is not None and have != want:
            raise _Stale(f"{where} names {have!r} where saxsnb's record says {want!r}")
    changed, first = set(), None
    for spec in layout["variables"].values():
        if not (isinstance(spec, dict) and isinstance(spec.get("path"), str) and spec["path"] in d):
            continue
        want = decode_attrs(spec.get("attrs") or {}).get("units")
        h5where = f"{dpath}/{spec['path']}"
        have = _units_of(g, d[spec["path"]], h5where)
        if want is not None and have is not None:
            expect = _nx_intensity_unit(str(want)) if spec["path"] in ("I", "Idev") else str(want)
            if have != expect:
                changed.add(spec["path"])
                first = first or f"{h5where} has units {have!r} where saxsnb's record says {expect!r}"
    if changed:
        raise _Stale(first, changed)
    for name, spec in layout["variables"].items():
        where = f"{dpath}@{_LAYOUT}[{name!r}]"
        if not (
            isinstance(spec, dict)
            and isinstance(spec.get("path"), str)
            and isinstance(spec.get("dims"), list)
            and all(isinstance(x, str) for x in spec["dims"])
            and isinstance(spec.get("attrs"), dict)
            and isinstance(spec.get("dtype"), str)
        ):
            raise g.error("malformed entry of the saxsnb layout record", where)
        h5where = f"{dpath}/{spec['path']}"
        dset = g.dataset(g.child(d, spec["path"], h5where), h5where)
        attrs = decode_attrs(spec["attrs"])
        want = attrs.get("units")
        have = _units_of(g, dset, h5where)
        if want is not None and have is not None:
            expect = _nx_intensity_unit(str(want)) if spec["path"] in ("I", "Idev") else str(want)
            if have != expect:
                raise _Stale(f"{h5where} has units {have!r} where saxsnb's record says {expect!r}")
        raw = g.read(dset, h5where, strings=spec["dtype"] == "str")
        expected = g.attr(dset, ATTR, h5where)
        if expected is not None:
            verify(raw, expected, path=g.path, where=h5where)
        elif g.attr(d, _LAYOUT_SUM, dpath) is not None:  # written with checksums: one is gone
            raise g.error(f"has lost its checksum attribute {ATTR!r}: the file is damaged", h5where)
        if raw.ndim != len(spec["dims"]):
            raise g.error(f"has {raw.ndim} dimensions where the record gives {spec['dims']}", h5where)
        if spec["dtype"] == "str":
            values = raw.astype(str)
        else:
            values = raw.astype(np.dtype(spec["dtype"]))
        item = (tuple(spec["dims"]), values, attrs)
        (coords if spec.get("coord") else data_vars)[name] = item
    attrs = layout.get("attrs", {})
    if not isinstance(attrs, dict):
        raise g.error("malformed dataset attrs in the saxsnb layout record", f"{dpath}@{_LAYOUT}")
    return xr.Dataset(data_vars, coords=coords, attrs=decode_attrs(attrs))


def _cls(g: Guard, obj, where: str, name: str) -> bool:
    cls = _str(g.attr(obj, "canSAS_class", where, ""))
    nx = _str(g.attr(obj, "NX_class", where, ""))
    return (
        cls == name
        or (name == "SASentry" and nx == "NXentry")
        or (name == "SASdata" and nx == "NXdata")
    )


def _axes(g: Guard, d, where: str) -> list[str]:
    raw = g.attr(d, "I_axes", where, "Q")
    if isinstance(raw, np.ndarray):
        return [_str(x) for x in raw.ravel().tolist()]
    return [a.strip() for a in _str(raw).split(",")]


def _entry_meta(g: Guard, e, epath: str) -> tuple[dict[str, str], dict[str, str]]:
    """Numeric and text metadata of one entry: title, sample name and scalar sample fields."""
    import h5py

    meta: dict[str, str] = {}
    units: dict[str, str] = {}
    members = dict(g.children(e, epath))
    title = members.get("title")
    if isinstance(title, h5py.Dataset) and title.size == 1:
        meta["title"] = _str(g.read(title, f"{epath}/title").reshape(()).item())
    for key, grp in members.items():
        gwhere = f"{epath}/{key}"
        if not isinstance(grp, h5py.Group) or _str(g.attr(grp, "canSAS_class", gwhere, "")) not in (
            "SASsample",
            "SASenvironment",
        ):
            continue
        for k, v in g.children(grp, gwhere):
            vwhere = f"{gwhere}/{k}"
            if not isinstance(v, h5py.Dataset) or v.size != 1:
                continue
            name = "sample" if k == "name" else k
            val = g.read(v, vwhere).reshape(()).item()
            if isinstance(val, (bool, np.bool_)):
                meta[name] = str(val)
            elif isinstance(val, (np.number, int, float)):
                meta[name] = repr(float(val))
            else:
                meta[name] = _str(val)
            u = g.attr(v, "units", vwhere)
            if u is not None:
                units[name] = _str(u)
    return meta, units


def _floats(g: Guard, d, name: str, where: str, skip: set[str]) -> np.ndarray:
    dset = g.dataset(g.child(d, name, where), where)
    raw = g.read(dset, where)
    if raw.dtype.kind not in "fiu":
        raise g.error(f"holds {raw.dtype} values, not numbers", where)
    expected = g.attr(dset, ATTR, where)
    if expected is not None and name not in skip:
        verify(raw, expected, path=g.path, where=where)
    return np.asarray(raw, dtype=float)


def _curves_from_sasdata(g: Guard, label: str, d, dpath: str, meta, units, skip: set[str]) -> list[Curve]:
    path = g.path
    for need in ("I", "Q"):
        if need not in d:
            raise g.error(f"has no {need!r} dataset (required by NXcanSAS)", dpath)
    signal = _str(g.attr(d, "signal", dpath, "I"))
    signal = signal if signal in d else "I"
    I = _floats(g, d, signal, f"{dpath}/{signal}", skip)
    Qd = g.dataset(g.child(d, "Q", f"{dpath}/Q"), f"{dpath}/Q")
    q_unit = _units_of(g, Qd, f"{dpath}/Q")
    if q_unit is None:
        raise g.error("has no 'units' attribute (required by NXcanSAS)", f"{dpath}/Q")
    Q = _floats(g, d, "Q", f"{dpath}/Q", skip)
    unc = _str(g.attr(d[signal], "uncertainties", f"{dpath}/{signal}", "Idev"))
    S = _floats(g, d, unc, f"{dpath}/{unc}", skip) if unc in d else None
    res = _str(g.attr(Qd, "resolutions", f"{dpath}/Q", "Qdev"))
    D = _floats(g, d, res, f"{dpath}/{res}", skip) if res in d else None
    mname = _str(g.attr(d, "mask", dpath, "Mask"))
    M = None
    if mname in d:
        mwhere = f"{dpath}/{mname}"
        mset = g.dataset(g.child(d, mname, mwhere), mwhere)
        raw = g.read(mset, mwhere)
        if raw.dtype.kind not in "biu":
            raise g.error(f"a mask must hold booleans or integers 0/1, not {raw.dtype} values", mwhere)
        if raw.dtype.kind != "b" and raw.size and not bool(np.isin(raw, (0, 1)).all()):
            raise g.error("a mask must hold 0 or 1 only", mwhere)
        expected = g.attr(mset, ATTR, mwhere)
        if expected is not None and mname not in skip:
            verify(raw, expected, path=path, where=mwhere)
        M = raw.astype(bool)
    i_unit = _str(g.attr(d[signal], "units", f"{dpath}/{signal}", "arbitrary"))
    i_unit = "arb" if i_unit in ("arbitrary", "") else i_unit
    if I.ndim == 1:
        I = I[None]
        S = None if S is None else S.reshape((1, -1)) if S.ndim == 1 else S
        M = None if M is None else M.reshape((1, -1)) if M.ndim == 1 else M
    if I.ndim != 2:
        raise g.error(f"has shape {I.shape}; expected (q,) or (frame, q)", f"{dpath}/{signal}")
    n, m = I.shape
    if not (Q.shape == (m,) or Q.shape == (n, m)):
        raise g.error(f"has shape {Q.shape}, which does not match I {I.shape}", f"{dpath}/Q")
    for arr, name in ((S, unc), (M, mname)):
        if arr is not None and arr.shape != I.shape:
            raise g.error(f"has shape {arr.shape} where I has {I.shape}", f"{dpath}/{name}")
    if D is not None:
        if D.shape == (m,):
            D = np.broadcast_to(D, I.shape)
        elif D.shape != I.shape:
            raise g.error(f"has shape {D.shape} where I has {I.shape}", f"{dpath}/{res}")
    scan_name, scan_vals, scan_unit = None, None, None
    axes = _axes(g, d, dpath)
    if len(axes) > 1 and axes[0] in d and axes[0] != "Q":
        swhere = f"{dpath}/{axes[0]}"
        sset = g.dataset(g.child(d, axes[0], swhere), swhere)
        scan_vals = g.read(sset, swhere)
        if scan_vals.shape != (n,):
            raise g.error(f"has shape {scan_vals.shape}; the scan axis needs ({n},)", swhere)
        scan_name = axes[0]
        scan_unit = _units_of(g, sset, swhere) or None
    out = []
    for i in range(n):
        qi = Q[i] if Q.ndim == 2 else Q
        mm = dict(meta)
        u = dict(units)
        if scan_name is not None and scan_vals is not None:
            v = scan_vals[i]
            if isinstance(v, (bytes, str)):
                mm[scan_name] = _str(v)
            else:
                try:
                    mm[scan_name] = repr(float(v))
                except (TypeError, ValueError):
                    raise g.error(f"scan value {v!r} is not a number", f"{dpath}/{scan_name}") from None
            if scan_unit:
                u[scan_name] = scan_unit
        out.append(
            Curve(
                name=f"{label}[{i}]" if n > 1 else label,
                q=np.asarray(qi, dtype=float),
                intensity=np.array(I[i], dtype=float),
                sigma=None if S is None else np.asarray(S[i], dtype=float),
                dq=None if D is None else np.asarray(D[i], dtype=float),
                q_unit=q_unit,
                intensity_unit=i_unit,
                meta=mm,
                units=u,
                path=path,
                mask=None if M is None else np.asarray(M[i], dtype=bool),
            )
        )
    return out


def read_nxcansas(path) -> xr.Dataset:
    """Read an NXcanSAS file into a series; always loads into memory and closes the file.

    Raises :class:`SaxsFileError`, naming the file and the path inside it, for a damaged
    file (checksums), a structure that is not NXcanSAS (a group where a dataset belongs,
    wrong shapes), external or dangling links and a malformed saxsnb record.
    """

    spath = str(path)
    if not check_trailer(spath):
        # not vouched for by saxsnb's checksum: read once in a child, in bounded time
        run_bounded(lambda: _read_nxcansas(spath), spath)
    return _read_nxcansas(spath)


def _read_nxcansas(spath: str) -> xr.Dataset:
    import h5py

    g = Guard(spath)
    try:
        f = h5py.File(spath, "r")
    except Exception as exc:  # h5py raises several types for non-HDF5 or damaged files
        raise SaxsFileError(f"cannot open as HDF5/NXcanSAS: {exc}", path=spath) from None
    try:
        with f:
            g.walk(f)
            ds, curves = _read_open(g, f)
    except SaxsError:
        raise
    except Exception as exc:  # whatever the library raises on a damaged file: named
        raise SaxsFileError(f"{g.where}: cannot read ({type(exc).__name__}: {exc})", path=spath) from None
    if ds is not None:
        return ds
    try:
        ds = build_series(curves, origin="open_series")
    except SaxsInputError as exc:
        raise SaxsFileError(str(exc), path=spath) from exc
    ds.attrs["source_entries"] = ds.attrs["source_files"]
    ds.attrs["source_files"] = [spath.replace("\\", "/").rsplit("/", 1)[-1]]
    return ds


def _read_open(g: Guard, f):
    import h5py

    entries = [
        (k, e) for k, e in g.children(f, "/") if isinstance(e, h5py.Group) and _cls(g, e, f"/{k}", "SASentry")
    ]
    if not entries:
        raise g.error("no NXcanSAS entry (a group with canSAS_class='SASentry' or NX_class='NXentry')", "/")
    skip: set[str] = set()
    if len(entries) == 1:
        ename, e = entries[0]
        datas = [
            (k, d)
            for k, d in g.children(e, f"/{ename}")
            if isinstance(d, h5py.Group) and _cls(g, d, f"/{ename}/{k}", "SASdata")
        ]
        if len(datas) == 1 and _LAYOUT in datas[0][1].attrs:
            dname, d = datas[0]
            dpath = f"/{ename}/{dname}"
            text = g.attr(d, _LAYOUT, dpath)
            expected = g.attr(d, _LAYOUT_SUM, dpath)
            if expected is not None and text_digest(_str(text)) != _str(expected):
                raise g.error(
                    "the saxsnb layout record differs from its checksum: the file is damaged",
                    f"{dpath}@{_LAYOUT}",
                )
            try:
                layout = json.loads(_str(text))
            except (ValueError, RecursionError, UnicodeError) as exc:
                raise g.error(f"damaged saxsnb layout record: {exc}", f"{dpath}@{_LAYOUT}") from None
            try:
                return _read_layout(g, d, dpath, layout), None
            except _Stale as exc:
                warnings.warn(
                    f"{g.path}: {exc}; the file was changed by another program, so saxsnb's private "
                    "record is ignored and the file is read from its NXcanSAS fields (some attrs may "
                    "be lost)",
                    SaxsWarning,
                    stacklevel=4,
                )
                skip = exc.changed
            except (ValueError, TypeError, KeyError) as exc:
                raise g.error(f"damaged saxsnb layout record: {exc}", f"{dpath}@{_LAYOUT}") from None
    curves: list[Curve] = []
    for ename, e in entries:
        epath = f"/{ename}"
        meta, units = _entry_meta(g, e, epath)
        datas = [
            (k, d)
            for k, d in g.children(e, epath)
            if isinstance(d, h5py.Group) and _cls(g, d, f"{epath}/{k}", "SASdata")
        ]
        if not datas:
            raise g.error("has no SASdata group", epath)
        for dname, d in datas:
            label = f"{ename}/{dname}" if len(datas) > 1 else ename
            dpath = f"{epath}/{dname}"
            with g.at(dpath):
                curves.extend(_curves_from_sasdata(g, label, d, dpath, meta, units, skip))
    return None, curves
