"""canSAS 1D XML files (the canSAS working group's open format for reduced 1D data).

Layout read::

    <SASroot xmlns="urn:cansas1d:1.1">          (the namespace is optional)
      <SASentry>                                 one or more; each SASdata is a frame
        <Title>...</Title>
        <SASsample><ID>name</ID><temperature unit="C">25</temperature></SASsample>
        <SASdata>
          <Idata><Q unit="1/A">0.01</Q><I unit="1/cm">12.0</I>
                 <Idev unit="1/cm">0.1</Idev><Qdev unit="1/A">0.001</Qdev></Idata>
          ...

Security: the document is parsed with expat directly and any DOCTYPE or ENTITY
declaration is refused before it can be used, so entity expansion (e.g. the
"billion laughs" document) and external entities cannot happen.
"""

from __future__ import annotations

import os
import xml.parsers.expat as expat
from collections.abc import Mapping

import numpy as np
import xarray as xr

from ..errors import SaxsFileError, SaxsInputError
from ._assemble import Curve, build_series

__all__ = ["read_cansas_xml"]


class _Node:
    __slots__ = ("tag", "attrs", "children", "text", "line")

    def __init__(self, tag: str, attrs: dict, line: int):
        self.tag = tag
        self.attrs = attrs
        self.children: list[_Node] = []
        self.text: list[str] = []
        self.line = line

    def find(self, tag: str):
        return next((c for c in self.children if c.tag == tag), None)

    def findall(self, tag: str):
        return [c for c in self.children if c.tag == tag]

    def value(self) -> str:
        return "".join(self.text).strip()


def _local(name: str) -> str:
    return name.rsplit(" ", 1)[-1].rsplit(":", 1)[-1]


class _Refused(Exception):
    pass


def _parse(path: str, data: bytes) -> _Node:
    parser = expat.ParserCreate(namespace_separator=" ")
    parser.SetParamEntityParsing(expat.XML_PARAM_ENTITY_PARSING_NEVER)
    root = _Node("#document", {}, 0)
    stack = [root]

    def refuse(*_args):
        raise _Refused("the file declares a DOCTYPE or ENTITY, which is refused (no entity expansion)")

    def start(name, attrs):
        node = _Node(_local(name), {_local(k): v for k, v in attrs.items()}, parser.CurrentLineNumber)
        stack[-1].children.append(node)
        stack.append(node)

    def end(_name):
        stack.pop()

    def chars(text):
        stack[-1].text.append(text)

    parser.StartDoctypeDeclHandler = refuse
    parser.EntityDeclHandler = refuse
    parser.UnparsedEntityDeclHandler = refuse
    parser.ExternalEntityRefHandler = refuse
    parser.StartElementHandler = start
    parser.EndElementHandler = end
    parser.CharacterDataHandler = chars
    try:
        parser.Parse(data, True)
    except _Refused as exc:
        raise SaxsFileError(str(exc), path=path, line=parser.CurrentLineNumber) from None
    except expat.ExpatError as exc:
        raise SaxsFileError(
            f"not well-formed XML: {expat.errors.messages[exc.code]}", path=path, line=exc.lineno
        ) from None
    return root


def _number(path: str, node: _Node) -> float:
    try:
        return float(node.value())
    except ValueError:
        raise SaxsFileError(
            f"<{node.tag}> holds {node.value()!r}, not a number", path=path, line=node.line
        ) from None


def _entry_meta(entry: _Node) -> tuple[dict[str, str], dict[str, str]]:
    meta: dict[str, str] = {}
    units: dict[str, str] = {}
    title = entry.find("Title")
    if title is not None and title.value():
        meta["title"] = title.value()
    for group in ("SASsample", "SASenvironment"):
        g = entry.find(group)
        if g is None:
            continue
        for c in g.children:
            if c.children or not c.value():
                continue
            key = "sample" if c.tag == "ID" else c.tag.lower()
            meta[key] = c.value()
            if "unit" in c.attrs:
                units[key] = c.attrs["unit"]
    return meta, units


def read_cansas_xml(
    path, *, q_unit: str | None = None, regrid: str | None = None, chunks: int | Mapping | None = None
) -> xr.Dataset:
    """Read a canSAS 1D XML file; every SASdata block of every SASentry is a frame.

    Parameters
    ----------
    path : str or Path
    q_unit : str, optional
        Unit of Q if the file's ``unit`` attributes do not give it.
    regrid : {None, "first", "log"}
        As in :func:`saxsnb.io.read_series`: frames on different q grids are an
        error unless a strategy is named.
    chunks : int or dict, optional
        Return a dask-backed Dataset.

    Returns
    -------
    xarray.Dataset, the series (q in 1/nm). Numeric SASsample/SASenvironment
    fields (e.g. temperature) become per-frame coordinates with their units.

    Raises
    ------
    SaxsFileError
        Malformed XML, a DOCTYPE/ENTITY declaration, a missing SASentry or value,
        naming the file and line.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "a.xml"
    >>> _ = p.write_text('<SASroot xmlns="urn:cansas1d:1.1"><SASentry><SASdata>'
    ...     '<Idata><Q unit="1/A">0.01</Q><I unit="1/cm">5</I><Idev unit="1/cm">0.1</Idev></Idata>'
    ...     '<Idata><Q unit="1/A">0.02</Q><I unit="1/cm">4</I><Idev unit="1/cm">0.1</Idev></Idata>'
    ...     '</SASdata></SASentry></SASroot>')
    >>> ds = read_cansas_xml(p)
    >>> ds.q.values.tolist(), ds.intensity.attrs["units"]
    ([0.1, 0.2], '1/cm')
    """
    spath = os.fspath(path)
    try:
        with open(spath, "rb") as f:
            data = f.read()
    except OSError as exc:
        raise SaxsFileError(f"cannot read the file: {exc.strerror or exc}", path=spath) from exc
    doc = _parse(spath, data)
    root = doc.find("SASroot")
    if root is None:
        raise SaxsFileError("no <SASroot> element: not a canSAS 1D XML file", path=spath)
    entries = root.findall("SASentry")
    if not entries:
        raise SaxsFileError("no <SASentry> element", path=spath, line=root.line)
    name = os.path.basename(spath)
    curves: list[Curve] = []
    for k, entry in enumerate(entries):
        meta, units = _entry_meta(entry)
        blocks = entry.findall("SASdata")
        if not blocks:
            raise SaxsFileError("<SASentry> has no <SASdata>", path=spath, line=entry.line)
        for j, block in enumerate(blocks):
            rows = block.findall("Idata")
            if not rows:
                raise SaxsFileError("<SASdata> has no <Idata> rows", path=spath, line=block.line)
            cols: dict[str, list[float]] = {"Q": [], "I": [], "Idev": [], "Qdev": []}
            unit: dict[str, str] = {}
            for row in rows:
                for tag in ("Q", "I"):
                    if row.find(tag) is None:
                        raise SaxsFileError(f"<Idata> has no <{tag}>", path=spath, line=row.line)
                for tag in cols:
                    node = row.find(tag)
                    if node is not None:
                        cols[tag].append(_number(spath, node))
                        if "unit" in node.attrs:
                            unit.setdefault(tag, node.attrs["unit"])
            n = len(rows)
            for tag in ("Idev", "Qdev"):
                if 0 < len(cols[tag]) < n:
                    raise SaxsFileError(
                        f"<{tag}> is missing in some <Idata> rows", path=spath, line=block.line
                    )
            i_unit = unit.get("I")
            if i_unit in (None, "", "none", "arbitrary", "a.u."):
                i_unit = None
            elif i_unit.lower() in ("cm-1", "cm^-1", "1/cm"):
                i_unit = "1/cm"
            curves.append(
                Curve(
                    name=f"{name}:SASentry[{k}]/SASdata[{j}]",
                    q=np.array(cols["Q"]),
                    intensity=np.array(cols["I"]),
                    sigma=np.array(cols["Idev"]) if cols["Idev"] else None,
                    dq=np.array(cols["Qdev"]) if cols["Qdev"] else None,
                    q_unit=unit.get("Q"),
                    intensity_unit=i_unit,
                    meta=dict(meta),
                    units=dict(units),
                    lines=np.array([r.line for r in rows]),
                    path=spath,
                )
            )
    try:
        ds = build_series(curves, q_unit=q_unit, regrid=regrid, origin="read_cansas_xml")
    except SaxsInputError as exc:
        if exc.parameter in ("q_unit",):
            raise SaxsFileError(str(exc), path=spath) from exc
        raise
    ds.attrs["source_entries"] = ds.attrs["source_files"]
    ds.attrs["source_files"] = [name]
    if chunks is not None:
        ds = ds.chunk({"frame": int(chunks)} if isinstance(chunks, int) else dict(chunks))
    return ds
