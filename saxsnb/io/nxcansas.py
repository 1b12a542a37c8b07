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
dims and attrs so that :func:`read_nxcansas` rebuilds the identical Dataset. Files
from other writers (one SASentry or SASdata per frame, or a stacked SASdata) are read
from the standard fields alone.
"""

from __future__ import annotations

import json
from typing import Any

import numpy as np
import xarray as xr

from .. import __version__
from ..errors import SaxsFileError, SaxsInputError
from ..series import main_scan
from ._assemble import Curve, build_series
from ._atomic import atomic_path
from ._attrs import decode_attrs, encode_attrs

__all__ = ["write_nxcansas", "read_nxcansas"]

_LAYOUT = "saxsnb_layout"


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


def write_nxcansas(ds: xr.Dataset, path, *, overwrite: bool = True) -> None:
    """Write a series as one NXcanSAS entry with a stacked SASdata (see module doc)."""
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
            for name, var in [*ds.data_vars.items(), *ds.coords.items()]:
                name = str(name)
                if name in names:
                    h5name = names[name]
                else:
                    h5name = name
                    while h5name in used or h5name in ("I", "Q"):
                        h5name = "saxsnb_" + h5name
                used.add(h5name)
                values = np.asarray(var.values)
                if values.dtype == bool:
                    data = values.astype(np.int8)
                elif values.dtype.kind in "UO":
                    data = np.array([str(v) for v in values.ravel()], dtype=object).reshape(values.shape)
                else:
                    data = values
                dset = d.create_dataset(
                    h5name, data=data, dtype=string if values.dtype.kind in "UO" else None
                )
                if "units" in var.attrs:
                    dset.attrs["units"] = str(var.attrs["units"])
                layout["variables"][name] = {
                    "path": h5name,
                    "dims": list(var.dims),
                    "attrs": encode_attrs(var.attrs),
                    "dtype": values.dtype.str if values.dtype.kind not in "UO" else "str",
                    "coord": name in ds.coords,
                }
            d["I"].attrs["units"] = _nx_intensity_unit(str(ds["intensity"].attrs.get("units", "arb")))
            d["I"].attrs["uncertainties"] = "Idev"
            d["Idev"].attrs["units"] = d["I"].attrs["units"]
            if "Mask" in d:
                d.attrs["mask"] = "Mask"
            if "Qdev" in d:
                d["Q"].attrs["resolutions"] = "Qdev"
            d.attrs[_LAYOUT] = json.dumps(layout, ensure_ascii=False)
            s = e.create_group("sassample")
            s.attrs.update({"NX_class": "NXsample", "canSAS_class": "SASsample"})
            s.create_dataset("name", data=str(ds.attrs.get("sample", "")), dtype=string)
            p = e.create_group("sasprocess")
            p.attrs.update({"NX_class": "NXprocess", "canSAS_class": "SASprocess"})
            p.create_dataset("name", data="saxsnb", dtype=string)
            p.create_dataset("version", data=__version__, dtype=string)
            for k, entry in enumerate(ds.attrs.get("history", []) or []):
                p.create_dataset(f"note{k + 1:03d}", data=str(entry), dtype=string)


def _read_layout(d, layout: dict) -> xr.Dataset:
    data_vars: dict[str, Any] = {}
    coords: dict[str, Any] = {}
    for name, spec in layout["variables"].items():
        dset = d[spec["path"]]
        if spec["dtype"] == "str":
            values = np.asarray(dset.asstr()[()], dtype=object).astype(str)
        else:
            values = np.asarray(dset[()]).astype(np.dtype(spec["dtype"]))
        item = (tuple(spec["dims"]), values, decode_attrs(spec["attrs"]))
        (coords if spec["coord"] else data_vars)[name] = item
    return xr.Dataset(data_vars, coords=coords, attrs=decode_attrs(layout["attrs"]))


def _cls(obj, name: str) -> bool:
    return (
        _str(obj.attrs.get("canSAS_class", "")) == name
        or (name == "SASentry" and _str(obj.attrs.get("NX_class", "")) == "NXentry")
        or (name == "SASdata" and _str(obj.attrs.get("NX_class", "")) == "NXdata")
    )


def _axes(d) -> list[str]:
    raw = d.attrs.get("I_axes", "Q")
    if isinstance(raw, np.ndarray):
        return [_str(x) for x in raw.tolist()]
    return [a.strip() for a in _str(raw).split(",")]


def _entry_meta(e) -> tuple[dict[str, str], dict[str, str]]:
    """Numeric and text metadata of one entry: title, sample name and scalar sample fields."""
    import h5py

    meta: dict[str, str] = {}
    units: dict[str, str] = {}
    if "title" in e and isinstance(e["title"], h5py.Dataset):
        meta["title"] = _str(e["title"][()])
    for key in e:
        g = e[key]
        if isinstance(g, h5py.Group) and _str(g.attrs.get("canSAS_class", "")) in (
            "SASsample",
            "SASenvironment",
        ):
            for k in g:
                v = g[k]
                if not isinstance(v, h5py.Dataset) or v.size != 1:
                    continue
                name = "sample" if k == "name" else k
                val = v[()]
                meta[name] = _str(val) if not isinstance(val, (np.number, int, float)) else repr(float(val))
                if "units" in v.attrs:
                    units[name] = _str(v.attrs["units"])
    return meta, units


def _curves_from_sasdata(path: str, label: str, d, meta, units) -> list[Curve]:
    for need in ("I", "Q"):
        if need not in d:
            raise SaxsFileError(f"{label} has no {need!r} dataset (required by NXcanSAS)", path=path)
    signal = _str(d.attrs.get("signal", "I"))
    I = np.asarray(d[signal if signal in d else "I"][()], dtype=float)
    Qd = d["Q"]
    if "units" not in Qd.attrs:
        raise SaxsFileError(f"{label}/Q has no 'units' attribute (required by NXcanSAS)", path=path)
    q_unit = _str(Qd.attrs["units"])
    Q = np.asarray(Qd[()], dtype=float)
    unc = _str(d[signal].attrs.get("uncertainties", "Idev")) if signal in d else "Idev"
    S = np.asarray(d[unc][()], dtype=float) if unc in d else None
    res = _str(Qd.attrs.get("resolutions", "Qdev"))
    D = np.asarray(d[res][()], dtype=float) if res in d and d[res].shape[-1:] == Q.shape[-1:] else None
    mname = _str(d.attrs.get("mask", "Mask"))
    M = np.asarray(d[mname][()]).astype(bool) if mname in d else None
    i_unit = _str(d["I"].attrs.get("units", "arbitrary"))
    i_unit = "arb" if i_unit in ("arbitrary", "") else i_unit
    if I.ndim == 1:
        I, S = I[None], None if S is None else S[None]
        D = None if D is None else np.broadcast_to(D, I.shape)
        M = None if M is None else M[None]
    n = I.shape[0]
    scan_name, scan_vals, scan_unit = None, None, None
    axes = _axes(d)
    if I.shape[0] > 1 or len(axes) > 1:
        if len(axes) > 1 and axes[0] in d and axes[0] != "Q":
            scan_name = axes[0]
            scan_vals = np.asarray(d[axes[0]][()])
            scan_unit = _str(d[axes[0]].attrs.get("units", "")) or None
    out = []
    for i in range(n):
        qi = Q[i] if Q.ndim == 2 else Q
        Ii = np.array(I[i], dtype=float)
        m = dict(meta)
        u = dict(units)
        if scan_name is not None and scan_vals is not None and scan_vals.shape[0] == n:
            v = scan_vals[i]
            m[scan_name] = _str(v) if isinstance(v, (bytes, str)) else repr(float(v))
            if scan_unit:
                u[scan_name] = scan_unit
        out.append(
            Curve(
                name=f"{label}[{i}]" if n > 1 else label,
                q=np.asarray(qi, dtype=float),
                intensity=Ii,
                sigma=None if S is None else np.asarray(S[i], dtype=float),
                dq=None if D is None else np.asarray(D[i] if D.ndim == 2 else D, dtype=float),
                q_unit=q_unit,
                intensity_unit=i_unit,
                meta=m,
                units=u,
                path=path,
                mask=None if M is None else np.asarray(M[i], dtype=bool),
            )
        )
    return out


def read_nxcansas(path) -> xr.Dataset:
    """Read an NXcanSAS file into a series; always loads into memory and closes the file."""
    import h5py

    spath = str(path)
    try:
        f = h5py.File(spath, "r")
    except OSError as exc:
        raise SaxsFileError(f"cannot open as HDF5/NXcanSAS: {exc}", path=spath) from exc
    with f:
        entries = [(k, f[k]) for k in f if isinstance(f[k], h5py.Group) and _cls(f[k], "SASentry")]
        if not entries:
            raise SaxsFileError(
                "no NXcanSAS entry (a group with canSAS_class='SASentry' or NX_class='NXentry')",
                path=spath,
            )
        if len(entries) == 1:
            datas = [
                k
                for k in entries[0][1]
                if isinstance(entries[0][1][k], h5py.Group) and _cls(entries[0][1][k], "SASdata")
            ]
            if len(datas) == 1 and _LAYOUT in entries[0][1][datas[0]].attrs:
                d = entries[0][1][datas[0]]
                try:
                    return _read_layout(d, json.loads(_str(d.attrs[_LAYOUT])))
                except (KeyError, ValueError, TypeError) as exc:
                    raise SaxsFileError(f"damaged saxsnb layout record: {exc}", path=spath) from exc
        curves: list[Curve] = []
        for ename, e in entries:
            meta, units = _entry_meta(e)
            datas = [k for k in e if isinstance(e[k], h5py.Group) and _cls(e[k], "SASdata")]
            if not datas:
                raise SaxsFileError(f"entry {ename!r} has no SASdata group", path=spath)
            for dname in datas:
                label = f"{ename}/{dname}" if len(datas) > 1 else ename
                curves.extend(_curves_from_sasdata(spath, label, e[dname], meta, units))
    try:
        ds = build_series(curves, origin="open_series")
    except SaxsInputError as exc:
        raise SaxsFileError(str(exc), path=spath) from exc
    ds.attrs["source_entries"] = ds.attrs["source_files"]
    ds.attrs["source_files"] = [str(path).replace("\\", "/").rsplit("/", 1)[-1]]
    return ds
