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
"billion laughs" document) and external entities cannot happen. The parse streams:
the rows' values are kept as numbers only (8 bytes each), and files over
:data:`MAX_BYTES` bytes or :data:`MAX_ELEMENTS` elements are refused.

Strictness: a row (``<Idata>``) holds each value element at most once; a value
element holds text only (``<I>1<b>9</b>2</I>`` is refused); a unit that changes from
row to row is refused; non-finite or non-positive uncertainties are masked (with a
warning), like the other readers.
"""

from __future__ import annotations

import os
import xml.parsers.expat as expat
from array import array
from collections.abc import Mapping

import numpy as np
import xarray as xr

from ..errors import SaxsFileError, SaxsInputError
from ._assemble import Curve, build_series

__all__ = ["read_cansas_xml"]


#: Largest file read (bytes) and most elements in one file: beyond them the file is
#: refused with a clear error (the parse streams; memory stays a small multiple of
#: the file size: about 8 bytes per value kept).
MAX_BYTES = 512 * 2**20
MAX_ELEMENTS = 20_000_000
MAX_DEPTH = 64
_VALUES = ("Q", "I", "Idev", "Qdev")
_BLOCK = 1 << 20


class _Node:
    """An element outside the data rows (entries, sample, title, ...)."""

    __slots__ = ("tag", "attrs", "children", "text", "line", "rows")

    def __init__(self, tag: str, attrs: dict, line: int):
        self.tag = tag
        self.attrs = attrs
        self.children: list[_Node] = []
        self.text: list[str] = []
        self.line = line
        self.rows: _Rows | None = None

    def find(self, tag: str):
        return next((c for c in self.children if c.tag == tag), None)

    def findall(self, tag: str):
        return [c for c in self.children if c.tag == tag]

    def value(self) -> str:
        return "".join(self.text).strip()


class _Rows:
    """The <Idata> rows of one <SASdata>, as columns of numbers (streamed)."""

    def __init__(self):
        self.cols = {tag: array("d") for tag in _VALUES}
        self.units: dict[str, tuple[str, int]] = {}
        self.lines = array("l")


def _local(name: str) -> str:
    return name.rsplit(" ", 1)[-1].rsplit(":", 1)[-1]


class _Refused(Exception):
    pass


def _number(text: str, tag: str) -> float:
    t = text.strip()
    try:
        if "_" in t:
            raise ValueError(t)
        return float(t)
    except ValueError:
        raise _Refused(f"<{tag}> holds {t!r}, not a number") from None


def _parse(path: str, f) -> _Node:
    """Stream-parse the open binary file ``f``; keep the tree outside <Idata> and the
    rows' values as numbers."""
    parser = expat.ParserCreate(namespace_separator=" ")
    parser.SetParamEntityParsing(expat.XML_PARAM_ENTITY_PARSING_NEVER)
    root = _Node("#document", {}, 0)
    stack: list[_Node] = [root]
    state = {"count": 0, "row": None, "value": None, "text": [], "vattrs": None}

    def refuse(*_args):
        raise _Refused("the file declares a DOCTYPE or ENTITY, which is refused (no entity expansion)")

    def start(name, attrs):
        state["count"] += 1
        if state["count"] > MAX_ELEMENTS:
            raise _Refused(f"more than {MAX_ELEMENTS} elements: the file is too large to read")
        tag = _local(name)
        row = state["row"]
        if state["value"] is not None:
            raise _Refused(f"<{state['value']}> holds an element <{tag}>: mixed content is refused")
        if row is not None:
            if "".join(state["text"]).strip():
                raise _Refused("<Idata> holds text outside its value elements")
            state["text"] = []
            state["value"] = tag
            state["vattrs"] = {_local(k): v for k, v in attrs.items()}
            if tag in row:
                raise _Refused(f"a second <{tag}> in one <Idata> row")
            return
        if tag == "Idata" and stack[-1].tag == "SASdata":
            if stack[-1].rows is None:
                stack[-1].rows = _Rows()
            state["row"] = {}
            state["rowline"] = parser.CurrentLineNumber
            state["text"] = []
            return
        if len(stack) > MAX_DEPTH:
            raise _Refused(f"elements nested more than {MAX_DEPTH} deep")
        node = _Node(tag, {_local(k): v for k, v in attrs.items()}, parser.CurrentLineNumber)
        stack[-1].children.append(node)
        stack.append(node)

    def end(_name):
        row = state["row"]
        if row is not None:
            tag = state["value"]
            if tag is not None:  # the end of a value element
                row[tag] = ("".join(state["text"]), state["vattrs"])
                state["value"] = None
                state["text"] = []
                return
            if "".join(state["text"]).strip():
                raise _Refused("<Idata> holds text outside its value elements")
            _add_row(stack[-1].rows, row, state["rowline"])
            state["row"] = None
            return
        stack.pop()

    def chars(text):
        if state["row"] is not None:
            state["text"].append(text)
        else:
            stack[-1].text.append(text)

    parser.StartDoctypeDeclHandler = refuse
    parser.EntityDeclHandler = refuse
    parser.UnparsedEntityDeclHandler = refuse
    parser.ExternalEntityRefHandler = refuse
    parser.StartElementHandler = start
    parser.EndElementHandler = end
    parser.CharacterDataHandler = chars
    try:
        while True:
            block = f.read(_BLOCK)
            parser.Parse(block, not block)
            if not block:
                break
    except _Refused as exc:
        raise SaxsFileError(str(exc), path=path, line=parser.CurrentLineNumber) from None
    except expat.ExpatError as exc:
        raise SaxsFileError(
            f"not well-formed XML: {expat.errors.messages[exc.code]}", path=path, line=exc.lineno
        ) from None
    return root


def _add_row(rows: _Rows, row: dict, line: int) -> None:
    for tag in ("Q", "I"):
        if tag not in row:
            raise _Refused(f"<Idata> has no <{tag}>")
    n = len(rows.lines)
    for tag in _VALUES:
        if tag not in row:
            continue
        text, attrs = row[tag]
        col = rows.cols[tag]
        if len(col) != n:
            raise _Refused(f"<{tag}> is missing in some <Idata> rows")
        col.append(_number(text, tag))
        unit = attrs.get("unit")
        if unit is not None:
            first = rows.units.setdefault(tag, (unit, line))
            if first[0] != unit:
                raise _Refused(f"<{tag}> is in {unit!r} here but in {first[0]!r} at line {first[1]}")
    for tag in ("Idev", "Qdev"):
        if tag not in row and len(rows.cols[tag]):
            raise _Refused(f"<{tag}> is missing in some <Idata> rows")
    rows.lines.append(line)


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
            size = os.fstat(f.fileno()).st_size
            if size > MAX_BYTES:
                raise SaxsFileError(
                    f"the file has {size} bytes; canSAS XML files over {MAX_BYTES} bytes are refused "
                    "(convert it to NXcanSAS or NetCDF)",
                    path=spath,
                )
            doc = _parse(spath, f)
    except OSError as exc:
        raise SaxsFileError(f"cannot read the file: {exc.strerror or exc}", path=spath) from exc
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
            rows = block.rows
            if rows is None or not len(rows.lines):
                raise SaxsFileError("<SASdata> has no <Idata> rows", path=spath, line=block.line)
            cols = {tag: np.frombuffer(rows.cols[tag], dtype=np.float64) for tag in _VALUES}
            unit = {tag: u for tag, (u, _line) in rows.units.items()}
            i_unit = unit.get("I")
            if i_unit in (None, "", "none", "arbitrary", "a.u."):
                i_unit = None
            elif i_unit.lower() in ("cm-1", "cm^-1", "1/cm"):
                i_unit = "1/cm"
            curves.append(
                Curve(
                    name=f"{name}:SASentry[{k}]/SASdata[{j}]",
                    q=cols["Q"].copy(),
                    intensity=cols["I"].copy(),
                    sigma=cols["Idev"].copy() if cols["Idev"].size else None,
                    dq=cols["Qdev"].copy() if cols["Qdev"].size else None,
                    q_unit=unit.get("Q"),
                    intensity_unit=i_unit,
                    meta=dict(meta),
                    units=dict(units),
                    lines=np.frombuffer(rows.lines, dtype=np.dtype("l")).copy(),
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
