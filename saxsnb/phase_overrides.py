"""Hand-made corrections of a phase assignment, reproducible without widgets.

A scientist looking at the peaks panel may decide that a frame is, say, Im3m rather
than what the automatic indexing chose (:meth:`SaxsAccessor.index_phases`), for
example where the Im3m/Pn3m ambiguity (a missing sqrt(3) reflection) was decided
the other way. :func:`apply_phase_overrides` records such choices in the
assignment Dataset: the frame is re-indexed with that one phase (lattice and
hkl from the same indexing code, restricted to the phase), or given a lattice value
outright. Every changed frame gets ``status = "override"``, the automatic choice in
``alternative``, and the whole set of overrides is kept in ``attrs["overrides"]``
(JSON) so a saved result says it was edited by hand.
"""

from __future__ import annotations

import json
from collections.abc import Mapping

import numpy as np
import xarray as xr

from .errors import SaxsInputError

__all__ = ["apply_phase_overrides"]


def _set(da: xr.DataArray, where: dict, value) -> xr.DataArray:
    """Assign into a copy-safe DataArray, widening fixed-width strings if needed."""
    if da.dtype.kind == "U":
        width = max(da.dtype.itemsize // 4, *(len(str(v)) for v in np.atleast_1d(value)))
        if width > da.dtype.itemsize // 4:
            da = da.astype(f"<U{width}")
    da[where] = value
    return da


def apply_phase_overrides(
    ds: xr.Dataset,
    index: xr.Dataset,
    peaks: xr.Dataset,
    overrides: Mapping[int, Mapping],
) -> xr.Dataset:
    """Return a copy of a phase assignment with some frames set by hand.

    Parameters
    ----------
    ds : xarray.Dataset
        The series the assignment was made from.
    index : xarray.Dataset
        Result of ``ds.saxs.index_phases(peaks)``.
    peaks : xarray.Dataset
        Result of ``ds.saxs.find_peaks()`` used for ``index``.
    overrides : mapping frame position -> {"phase": str, "lattice": float or None}
        ``phase`` is one of the phase names of :data:`saxsnb.analysis.reflections.PHASES`.
        Without ``lattice`` the frame's peaks are indexed again with this phase only
        (``index_phases(..., phases=(phase,), max_phases=1, use_scan_prior=False)``);
        with ``lattice`` (nm: d for lamellar, cell edge a otherwise) that value is
        taken as is, with no uncertainty and no hkl.

    Returns
    -------
    xarray.Dataset like ``index``; for each overridden frame slot 0 holds the chosen
    phase (other slots empty), ``status`` is "override", ``alternative`` names the
    automatic choice and ``caveat`` says how the lattice was obtained.
    ``attrs["overrides"]`` lists the overrides (JSON).

    Examples
    --------
    >>> import saxsnb
    >>> from saxsnb.analysis.reflections import q_positions
    >>> q = np.linspace(0.3, 5.0, 600)
    >>> centres = q_positions("Pn3m", 10.0, 4)  # 110, 111, 200, 211
    >>> I = 1.0 + sum(50 * np.exp(-0.5 * ((q - c) / 0.01) ** 2) for c in centres)
    >>> ds = saxsnb.from_arrays(q, np.vstack([I, I]), 0.01 * np.vstack([I, I]) + 0.01)
    >>> pk = ds.saxs.find_peaks()
    >>> ix = ds.saxs.index_phases(pk)
    >>> out = apply_phase_overrides(ds, ix, pk, {1: {"phase": "lamellar", "lattice": 6.0}})
    >>> str(out.phase.values[1, 0]), float(out.lattice.values[1, 0]), str(out.status.values[1])
    ('lamellar', 6.0, 'override')
    >>> str(out.phase.values[0, 0]) == str(ix.phase.values[0, 0])
    True
    """
    out = index.copy(deep=True)
    n = out.sizes["frame"]
    record = {}
    for frame in sorted(int(f) for f in overrides):
        choice = dict(overrides[frame])
        if not 0 <= frame < n:
            raise SaxsInputError(
                f"override frame {frame} outside 0..{n - 1}", parameter="overrides", frame=frame
            )
        phase = str(choice.get("phase", ""))
        lattice = choice.get("lattice")
        if not phase:
            raise SaxsInputError("an override needs a phase name", parameter="overrides", frame=frame)
        auto = ", ".join(p for p in np.atleast_1d(index["phase"].values[frame]) if p) or "none"
        sel = {"frame": frame}
        hkl = np.full(out.sizes["peak"], "", dtype=object) if "peak" in out.dims else None
        if lattice is None:
            fix = ds.isel(frame=[frame]).saxs.index_phases(
                peaks.isel(frame=[frame]), phases=(phase,), max_phases=1, use_scan_prior=False
            )
            found = str(fix["phase"].values[0, 0]) == phase
            lat = float(fix["lattice"].values[0, 0]) if found else np.nan
            lat_s = float(fix["lattice_sigma"].values[0, 0]) if found else np.nan
            score = float(fix["score"].values[0, 0]) if found else np.nan
            if found and hkl is not None:
                hkl = fix["hkl"].values[0]
            caveat = (
                f"set by hand to {phase}; lattice refitted on the peaks"
                if found
                else f"set by hand to {phase}; the peaks do not index as {phase}: no lattice"
            )
        else:
            lat, lat_s, score = float(lattice), np.nan, np.nan
            caveat = f"set by hand to {phase} with lattice {lat:g} nm (no fit, no uncertainty)"
        slots = out.sizes["slot"]
        out["phase"] = _set(out["phase"], sel, [phase] + [""] * (slots - 1))
        out["lattice"] = _set(out["lattice"], sel, [lat] + [np.nan] * (slots - 1))
        out["lattice_sigma"] = _set(out["lattice_sigma"], sel, [lat_s] + [np.nan] * (slots - 1))
        out["score"] = _set(out["score"], sel, [score] + [0.0] * (slots - 1))
        if hkl is not None and "hkl" in out:
            hkl = np.asarray([str(h) for h in hkl])
            out["hkl"] = _set(out["hkl"], sel, hkl)
            if "peak_phase" in out:
                out["peak_phase"] = _set(out["peak_phase"], sel, np.where(hkl != "", phase, ""))
        out["status"] = _set(out["status"], sel, "override")
        if "alternative" in out:
            out["alternative"] = _set(out["alternative"], sel, f"automatic: {auto}")
        if "caveat" in out:
            out["caveat"] = _set(out["caveat"], sel, caveat)
        record[str(frame)] = {"phase": phase, "lattice": None if lattice is None else float(lattice)}
    if record:
        out.attrs = dict(out.attrs)
        out.attrs["overrides"] = json.dumps(record, sort_keys=True)
    return out
