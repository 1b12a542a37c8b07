"""The one converter of Python/numpy values to JSON-safe values (and back).

Used for provenance (``attrs["history"]``), the attrs NetCDF/HDF5 cannot hold, the
``attr.*`` header lines of exported text files and the demo truth records.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

import numpy as np

__all__ = ["to_json_safe", "from_json_safe"]


def to_json_safe(value: Any, *, exact: bool = False, nonfinite: str = "keep") -> Any:
    """Turn numpy scalars/arrays, tuples and mappings into plain JSON values.

    Parameters
    ----------
    exact : bool
        Keep arrays (with dtype) and tuples recognisable (``{"__ndarray__", "dtype"}``,
        ``{"__tuple__"}``) so :func:`from_json_safe` gives the same Python values back;
        otherwise both become lists and any other object becomes its ``repr``.
    nonfinite : {"keep", "str", "null"}
        What a non-finite float becomes: kept (JSON's NaN/Infinity extension), its
        text ("nan", "inf") or None.

    Examples
    --------
    >>> to_json_safe({"a": np.float64(1.5), "b": (1, 2), "c": np.arange(2)})
    {'a': 1.5, 'b': [1, 2], 'c': [0, 1]}
    >>> from_json_safe(to_json_safe((np.arange(2), 3), exact=True))
    (array([0, 1]), 3)
    >>> to_json_safe([float("nan")], nonfinite="null")
    [None]
    """
    again = lambda v: to_json_safe(v, exact=exact, nonfinite=nonfinite)  # noqa: E731
    if isinstance(value, np.ndarray):
        if exact:
            return {"__ndarray__": again(value.tolist()), "dtype": str(value.dtype)}
        return again(value.tolist())
    if isinstance(value, np.generic):
        return again(value.item())
    if isinstance(value, Mapping):
        return {str(k): again(v) for k, v in value.items()}
    if isinstance(value, tuple):
        return {"__tuple__": [again(v) for v in value]} if exact else [again(v) for v in value]
    if isinstance(value, list):
        return [again(v) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return {"keep": value, "str": str(value), "null": None}[nonfinite]
    if value is None or isinstance(value, (bool, int, float, str)):
        return value
    return value if exact else repr(value)


def from_json_safe(value: Any) -> Any:
    """Inverse of ``to_json_safe(..., exact=True)``."""
    if isinstance(value, dict):
        if set(value) == {"__scalar__", "dtype"}:
            return np.dtype(value["dtype"]).type(value["__scalar__"])
        if set(value) == {"__ndarray__", "dtype"}:
            return np.array(value["__ndarray__"], dtype=value["dtype"])
        if set(value) == {"__tuple__"}:
            return tuple(from_json_safe(v) for v in value["__tuple__"])
        return {k: from_json_safe(v) for k, v in value.items()}
    if isinstance(value, list):
        return [from_json_safe(v) for v in value]
    return value
