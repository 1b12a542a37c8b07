"""Encoding of attrs that NetCDF and HDF5 cannot hold natively.

NetCDF and HDF5 attributes hold numbers, strings and flat numeric arrays. Lists of
strings (``history``, ``source_files``), bools, dicts and ``None`` are stored as a
JSON string behind a marker prefix and decoded again on open, so a round trip gives
back exactly the same Python values.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import numpy as np

from .._jsonsafe import from_json_safe, to_json_safe
from ..errors import SaxsFileError

__all__ = ["encode_attrs", "decode_attrs", "scalar_json", "MARKER", "COORDS", "dataset_attrs",
           "restore_coords"]

#: Prefix of an attribute value that holds JSON-encoded data.
MARKER = "saxsnb-json:"


def _native(value: Any) -> bool:
    """True if NetCDF/HDF5 store ``value`` and give it back unchanged."""
    if isinstance(value, (bool, np.bool_)):
        return False
    if isinstance(value, str):
        return not value.startswith(MARKER)
    if isinstance(value, (int, float, np.integer, np.floating)):
        return True
    return False


def scalar_json(value: Any) -> str:
    """``default=`` of :func:`json.dumps` for numpy scalars: a marked string that
    :func:`decode_attrs` turns back into the same numpy scalar.

    >>> decode_attrs({"n": scalar_json(np.int32(3))})["n"].dtype
    dtype('int32')
    """
    if isinstance(value, np.generic):
        return MARKER + json.dumps({"__scalar__": value.item(), "dtype": value.dtype.str})
    raise TypeError(f"cannot store a {type(value).__name__} in an attr")


def encode_attrs(attrs: Mapping[str, Any]) -> dict[str, Any]:
    """Return attrs where every non-native value is a marked JSON string.

    >>> encode_attrs({"a": 1.5, "history": ["x"], "flag": True})
    {'a': 1.5, 'history': 'saxsnb-json:["x"]', 'flag': 'saxsnb-json:true'}
    """
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if _native(value):
            out[str(key)] = value
        else:
            out[str(key)] = MARKER + json.dumps(to_json_safe(value, exact=True), ensure_ascii=False)
    return out


def decode_attrs(attrs: Mapping[str, Any]) -> dict[str, Any]:
    """Inverse of :func:`encode_attrs`; also turns bytes into str.

    >>> decode_attrs({"history": 'saxsnb-json:["x"]', "n": 2})
    {'history': ['x'], 'n': 2}
    """
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if isinstance(value, bytes):
            value = value.decode("utf-8")
        if isinstance(value, np.ndarray) and value.dtype.kind in "SO" and value.size == 1:
            value = value.reshape(()).item()
            if isinstance(value, bytes):
                value = value.decode("utf-8")
        if isinstance(value, str) and value.startswith(MARKER):
            value = from_json_safe(json.loads(value[len(MARKER) :]))
        out[str(key)] = value
    return out


#: Attr holding the names of the non-index coordinates (stores keep coordinates as
#: variables; the names come back as coordinates on open).
COORDS = "saxsnb_coordinates"


def dataset_attrs(ds) -> dict:
    """The encoded attrs of ``ds`` for a store, with the names of its coordinates."""
    if COORDS in ds.attrs:
        raise SaxsFileError(f"the series has an attr {COORDS!r}, which saxsnb reserves")
    out = encode_attrs(ds.attrs)
    out[COORDS] = json.dumps([str(c) for c in ds.coords if c not in ds.dims], ensure_ascii=False)
    return out


def restore_coords(ds, path):
    """``ds`` opened from a store, with its coordinates set again from :data:`COORDS`."""
    coords = ds.attrs.pop(COORDS, None)
    if coords is None:
        return ds
    names = json.loads(coords)
    if not (isinstance(names, list) and all(isinstance(n, str) for n in names)):
        raise SaxsFileError(f"malformed attr {COORDS!r}", path=path)
    return ds.set_coords([n for n in names if n in ds.data_vars])
