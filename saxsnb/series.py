"""The series data model: one SAXS series is one :class:`xarray.Dataset`.

Layout (see DESIGN.md)::

    dims:    frame (N), q (M)
    coords:  q (q) float64, units "1/nm"; frame (frame) int64;
             any per-frame scan coordinate (temperature [degC], time [s], ...)
    vars:    intensity (frame, q) float64, units "1/cm" or "arb"
             sigma     (frame, q) float64 (flagged in attrs when estimated)
             mask      (frame, q) bool, optional, True = excluded
    attrs:   wavelength_nm (optional), sample, source_files, history (list of str)

Everything here builds or checks that layout; nothing else in the package invents
its own.
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import numpy as np
import xarray as xr

from ._jsonsafe import to_json_safe
from .errors import SaxsInputError

__all__ = [
    "from_arrays",
    "validate",
    "q_unit_factor",
    "normalize_q_unit",
    "estimate_sigma",
    "add_history",
    "scan_coords",
    "main_scan",
    "SCAN_UNITS",
]

CANONICAL_Q_UNIT = "1/nm"

#: Spellings of q units, mapped to (canonical spelling, factor to 1/nm).
_Q_UNITS = {
    "1/nm": ("1/nm", 1.0),
    "nm^-1": ("1/nm", 1.0),
    "nm-1": ("1/nm", 1.0),
    "1/nanometer": ("1/nm", 1.0),
    "1/a": ("1/A", 10.0),
    "1/å": ("1/A", 10.0),
    "a^-1": ("1/A", 10.0),
    "a-1": ("1/A", 10.0),
    "å^-1": ("1/A", 10.0),
    "å-1": ("1/A", 10.0),
    "1/angstrom": ("1/A", 10.0),
    "angstrom^-1": ("1/A", 10.0),
    "1/m": ("1/m", 1e-9),
    "m^-1": ("1/m", 1e-9),
}

#: Default units of scan coordinates a scientist is likely to use.
SCAN_UNITS = {
    "temperature": "degC",
    "time": "s",
    "position": "mm",
    "concentration": "mM",
    "pressure": "bar",
    "denaturant": "M",
    "exposure": "s",
}


def normalize_q_unit(unit: str) -> str:
    """Return the canonical spelling of a q unit ("1/nm", "1/A" or "1/m").

    >>> normalize_q_unit("A^-1")
    '1/A'
    >>> normalize_q_unit("nm-1")
    '1/nm'
    """
    key = str(unit).strip().lower().replace(" ", "").replace("**", "^")
    if key not in _Q_UNITS:
        raise SaxsInputError(
            f"unknown q unit {unit!r}; use one of '1/nm', '1/A' or '1/m'", parameter="q_unit"
        )
    return _Q_UNITS[key][0]


def q_unit_factor(unit: str) -> float:
    """Factor that converts q in ``unit`` to 1/nm.

    >>> q_unit_factor("1/A")
    10.0
    """
    return _Q_UNITS[normalize_q_unit(unit).lower()][1]


def estimate_sigma(intensity: np.ndarray, *, floor: float = 1e-3) -> np.ndarray:
    """Estimate sigma of curves that came without one, from point-to-point scatter.

    The local noise is taken from the second difference of neighbouring points,
    ``|I[i-1] - 2 I[i] + I[i+1]| / sqrt(6)`` (the standard deviation of that
    combination for independent noise of equal size), smoothed with a running
    median over 15 points so single spikes do not dominate, and floored at
    ``floor * |I|``. This is common practice for unweighted data; it is only an
    estimate and series built with it carry ``sigma_estimated = 1`` in attrs.

    Parameters
    ----------
    intensity : array (..., n_q)

    Returns
    -------
    sigma : array of the same shape, positive where intensity is finite.

    Examples
    --------
    >>> rng = np.random.default_rng(1234)
    >>> I = 100 + rng.normal(0, 1.0, (2, 2000))
    >>> s = estimate_sigma(I)
    >>> bool(0.8 < np.median(s) < 1.2)
    True
    """
    from scipy.ndimage import median_filter

    I = np.asarray(intensity, dtype=float)
    if I.shape[-1] < 3:
        return np.abs(I) * 0.05 + np.finfo(float).tiny
    d2 = np.abs(I[..., :-2] - 2 * I[..., 1:-1] + I[..., 2:]) / np.sqrt(6.0)
    d2 = np.concatenate([d2[..., :1], d2, d2[..., -1:]], axis=-1)
    d2 = np.where(np.isfinite(d2), d2, 0.0)
    size = [1] * (I.ndim - 1) + [15]
    # running median of the noise: unbiased for Gaussian noise after scaling by 1/0.6745*...;
    # the median of |N(0, s)| is 0.6745 s, so divide by it.
    local = median_filter(d2, size=size, mode="nearest") / 0.6745
    sig = np.maximum(local, floor * np.abs(I))
    tiny = np.finfo(float).tiny
    return np.where(np.isfinite(I), np.maximum(sig, tiny), np.nan)


def _as_scan(scan, n_frames: int) -> dict[str, tuple[np.ndarray, dict]]:
    out: dict[str, tuple[np.ndarray, dict]] = {}
    if scan is None:
        return out
    if not isinstance(scan, Mapping):
        raise SaxsInputError(
            "scan must map coordinate names to per-frame values, e.g. {'temperature': T}",
            parameter="scan",
        )
    for name, values in scan.items():
        attrs: dict[str, Any] = {}
        if isinstance(values, xr.DataArray):
            attrs = dict(values.attrs)
            values = values.values
        elif isinstance(values, tuple) and len(values) == 2 and isinstance(values[1], str):
            values, unit = values
            attrs["units"] = unit
        arr = np.asarray(values)
        if arr.ndim == 0:
            arr = np.full(n_frames, arr.item())
        if arr.shape != (n_frames,):
            raise SaxsInputError(
                f"scan coordinate {name!r} has shape {arr.shape}, expected ({n_frames},): "
                "one value per frame",
                parameter="scan",
            )
        if arr.dtype.kind in "iub":
            arr = arr.astype(np.float64)
        attrs.setdefault("units", SCAN_UNITS.get(str(name), ""))
        out[str(name)] = (arr, attrs)
    return out


def from_arrays(
    q,
    intensity,
    sigma=None,
    *,
    scan: Mapping | None = None,
    q_unit: str = "1/nm",
    intensity_unit: str = "arb",
    mask=None,
    **attrs,
) -> xr.Dataset:
    """Build a series Dataset from plain arrays.

    Parameters
    ----------
    q : array (n_q,)
        Scattering vector magnitude in ``q_unit``; converted to 1/nm.
    intensity : array (n_frames, n_q) or (n_q,)
        A single curve becomes a one-frame series.
    sigma : array like intensity, optional
        One standard deviation of intensity. When missing it is estimated with
        :func:`estimate_sigma` and ``attrs["sigma_estimated"] = 1``.
    scan : mapping, optional
        Per-frame scan coordinates, ``{"temperature": T}``; a value may be a
        ``(values, unit)`` pair or a DataArray with a ``units`` attr. Known names
        (temperature, time, position, ...) get default units.
    q_unit, intensity_unit : str
        Units of the input; intensity "1/cm" means absolute scale.
    mask : bool array like intensity, optional
        True marks excluded points.
    **attrs
        Stored in the Dataset attrs (sample, wavelength_nm, ...).

    Returns
    -------
    xarray.Dataset in the layout of this module's docstring. The inputs are copied.

    Examples
    --------
    >>> q = np.linspace(0.1, 2.0, 5)
    >>> ds = from_arrays(q, np.ones((3, 5)), np.full((3, 5), 0.1),
    ...                  scan={"temperature": [20.0, 25.0, 30.0]})
    >>> dict(ds.sizes)
    {'frame': 3, 'q': 5}
    >>> ds.temperature.attrs["units"]
    'degC'
    """
    q = np.array(q, dtype=np.float64, copy=True)
    if q.ndim != 1:
        raise SaxsInputError(f"q must be one-dimensional, got shape {q.shape}", parameter="q")
    unit = normalize_q_unit(q_unit)
    q = q * q_unit_factor(unit)
    I = np.array(intensity, dtype=np.float64, copy=True)
    if I.ndim == 1:
        I = I[None, :]
    if I.ndim != 2 or I.shape[1] != q.size:
        raise SaxsInputError(
            f"intensity has shape {I.shape}; expected (n_frames, {q.size}) to match q",
            parameter="intensity",
        )
    n_frames = I.shape[0]
    attrs = dict(attrs)
    if sigma is None:
        S = estimate_sigma(I)
        attrs["sigma_estimated"] = 1
    else:
        S = np.array(sigma, dtype=np.float64, copy=True)
        if S.ndim == 1:
            S = S[None, :]
        if S.shape != I.shape:
            raise SaxsInputError(
                f"sigma has shape {S.shape}; expected {I.shape} like intensity",
                parameter="sigma",
            )
        attrs.setdefault("sigma_estimated", 0)
    coords: dict[str, Any] = {
        "frame": ("frame", np.arange(n_frames, dtype=np.int64)),
        "q": ("q", q, {"units": CANONICAL_Q_UNIT, "long_name": "scattering vector magnitude"}),
    }
    for name, (values, cattrs) in _as_scan(scan, n_frames).items():
        coords[name] = ("frame", values, cattrs)
    data_vars: dict[str, Any] = {
        "intensity": (("frame", "q"), I, {"units": intensity_unit, "long_name": "intensity"}),
        "sigma": (("frame", "q"), S, {"units": intensity_unit, "long_name": "sigma of intensity"}),
    }
    if mask is not None:
        M = np.asarray(mask)
        if M.dtype.kind not in "biu" or (M.dtype.kind != "b" and not bool(np.isin(M, (0, 1)).all())):
            raise SaxsInputError(
                f"mask must be boolean (or 0/1 integers), not {M.dtype} values", parameter="mask"
            )
        M = np.array(M, dtype=bool, copy=True)
        if M.ndim == 1:
            M = np.broadcast_to(M, I.shape).copy()
        if M.shape != I.shape:
            raise SaxsInputError(
                f"mask has shape {M.shape}; expected {I.shape}", parameter="mask"
            )
        data_vars["mask"] = (("frame", "q"), M, {"long_name": "excluded points"})
    attrs.setdefault("history", [])
    attrs["history"] = list(attrs["history"])
    ds = xr.Dataset(data_vars, coords=coords, attrs=attrs)
    if unit != CANONICAL_Q_UNIT:
        ds = add_history(ds, "convert_q_unit", source_unit=unit, target_unit=CANONICAL_Q_UNIT)
    return validate(ds)


def validate(ds: xr.Dataset) -> xr.Dataset:
    """Check that ``ds`` is a series in the saxsnb layout; return it unchanged.

    Raises :class:`~saxsnb.errors.SaxsInputError` naming what is wrong.

    >>> import numpy as np
    >>> ds = from_arrays([1.0, 2.0], [[1.0, 2.0]], [[0.1, 0.1]])
    >>> validate(ds) is ds
    True
    """
    if not isinstance(ds, xr.Dataset):
        raise SaxsInputError(f"expected an xarray.Dataset, got {type(ds).__name__}")
    for dim in ("frame", "q"):
        if dim not in ds.dims:
            raise SaxsInputError(f"the series has no {dim!r} dimension (dims: {tuple(ds.dims)})")
    for var in ("intensity", "sigma"):
        if var not in ds.data_vars:
            raise SaxsInputError(f"the series has no {var!r} variable", parameter=var)
        if ds[var].dims != ("frame", "q"):
            raise SaxsInputError(
                f"{var!r} has dims {ds[var].dims}; expected ('frame', 'q')", parameter=var
            )
    if "mask" in ds.data_vars and ds["mask"].dims != ("frame", "q"):
        raise SaxsInputError("'mask' must have dims ('frame', 'q')", parameter="mask")
    if "q" not in ds.coords:
        raise SaxsInputError("the series has no q coordinate", parameter="q")
    qunit = ds["q"].attrs.get("units")
    if qunit is None:
        raise SaxsInputError("the q coordinate has no 'units' attribute", parameter="q")
    normalize_q_unit(qunit)
    qv = ds["q"].values
    if qv.dtype.kind not in "fiu":
        raise SaxsInputError(f"q must hold numbers, not {qv.dtype} values", parameter="q")
    with np.errstate(invalid="ignore"):
        if qv.size and not bool((qv > 0).all() and np.isfinite(qv).all()):
            raise SaxsInputError("q must be finite and > 0", parameter="q")
    if qv.size > 1 and not np.all(np.diff(qv) > 0):
        raise SaxsInputError("q must be strictly increasing", parameter="q")
    if "mask" in ds.data_vars and ds["mask"].dtype != bool:
        raise SaxsInputError(
            f"'mask' must be boolean (True = point excluded), not {ds['mask'].dtype}", parameter="mask"
        )
    return ds


def scan_coords(ds: xr.Dataset) -> list[str]:
    """Names of the per-frame scan coordinates (non-index coords on ``frame``)."""
    return [
        str(n)
        for n, c in ds.coords.items()
        if c.dims == ("frame",) and n != "frame"
    ]


def main_scan(ds: xr.Dataset) -> str:
    """The scan coordinate to plot against: ``attrs["scan"]`` if set, else the first
    numeric scan coordinate, else ``"frame"``."""
    name = ds.attrs.get("scan")
    if name and name in ds.coords:
        return str(name)
    for n in scan_coords(ds):
        if ds[n].dtype.kind in "fiu":
            return n
    return "frame"


def add_history(ds: xr.Dataset, operation: str, **parameters) -> xr.Dataset:
    """Return a shallow copy of ``ds`` with one entry appended to ``attrs["history"]``.

    Each entry is a JSON string ``{"operation", "parameters", "version"}`` so that it
    survives NetCDF and HDF5 round trips unchanged. There is no time stamp: the same
    steps on the same data give identical Datasets (a re-run notebook reproduces them).
    """
    from . import __version__

    entry = json.dumps(
        {
            "operation": operation,
            "parameters": to_json_safe(parameters),
            "version": __version__,
        },
        sort_keys=True,
    )
    out = ds.copy(deep=False)
    out.attrs = dict(ds.attrs)
    out.attrs["history"] = list(ds.attrs.get("history", [])) + [entry]
    return out
