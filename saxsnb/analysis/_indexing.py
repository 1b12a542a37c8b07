"""From a peak table to phases: the whole chain, one function for numpy and accessor users.

:func:`index_phases` takes the per-frame peak table of :func:`~saxsnb.analysis._peaks.find_peaks`
(frames in any order, with the scan order given) and runs every step:

1. :func:`~saxsnb.analysis.index_peaks` sets aside what is not a Bragg reflection
   (spikes narrower than the q step, features broader than ``max_relative_width``,
   split features, form-factor-like spacings: ``n_rejected``, ``rejected``; a frame
   with only such peaks gets ``"no_bragg_peaks"``) and explains the remaining peaks of
   every frame by one phase or a coexisting pair, jointly along the scan;
3. frames the peak finder could not use keep ``"no_data"``;
4. the peaks are re-tracked so a track ends where its assignment changes;
5. frames set by hand (``overrides``) are indexed again with the chosen phase only, or
   given the chosen lattice, and marked ``"override"``.

``ds.saxs.index_phases`` is a thin wrapper of this function, so both routes give the
same numbers.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np

from ..errors import SaxsInputError
from ._lattice import index_peaks
from ._reflections import PHASES
from ._status import STATUS_DTYPE
from ._tracking import track_peaks

__all__ = ["index_phases", "PHASE_OUTPUTS"]

#: Dims (after frame) and units of the outputs of :func:`index_phases`.
PHASE_OUTPUTS = {
    "phase": (("slot",), None),
    "lattice": (("slot",), "nm"),
    "lattice_sigma": (("slot",), "nm"),
    "score": (("slot",), "1"),
    "hkl": (("peak",), None),
    "peak_phase": (("peak",), None),
    "track": (("peak",), "1"),
    "alternative": ((), None),
    "status": ((), None),
    "caveat": ((), None),
    "cost": ((), "1"),
    "margin": ((), "1"),
    "n_unexplained": ((), "1"),
    "n_broad": ((), "1"),
    "n_rejected": ((), "1"),
    "rejected": ((), None),
}


def index_phases(
    position,
    position_sigma=None,
    fwhm=None,
    prominence=None,
    *,
    peak_status=None,
    order=None,
    q_min=None,
    q_step=None,
    resolution=None,
    phases: tuple[str, ...] = PHASES,
    max_phases: int = 2,
    tolerance: float = 0.01,
    use_scan_prior: bool = True,
    prior_weight: float = 1.0,
    max_relative_width: float = 0.1,
    overrides: Mapping[int, Mapping] | None = None,
) -> dict:
    """Assign each frame's peaks to one phase or two coexisting phases.

    Parameters
    ----------
    position, position_sigma, fwhm, prominence : arrays (n_frames, n_peaks), NaN padded
        The peak table of :func:`~saxsnb.analysis._peaks.find_peaks` (1/nm; prominence
        in noise units, used as the strength of a peak).
    peak_status : array (n_frames,) of str, optional
        The peak finder's status; frames with ``"no_data"`` keep it.
    order : int array (n_frames,), optional
        Frame order along the scan (e.g. ``np.argsort(temperature)``); the scan prior
        and the tracking run in this order. Default: as given.
    q_min : float or array (n_frames,), optional
        Lowest q searched (1/nm): reflections below it are not expected.
    q_step, resolution : float, optional
        The q grid step and the instrument resolution FWHM (1/nm): peaks narrower than
        1.5 steps or half the resolution are spikes, not reflections.
    phases, max_phases, tolerance, use_scan_prior, prior_weight
        See :func:`~saxsnb.analysis._lattice.index_peaks`.
    max_relative_width : float
        Peaks with FWHM / position above this are not taken as Bragg reflections and
        are left out of indexing (counted in ``n_broad``). Form-factor maxima of
        particles (relative widths ~0.2-0.6) would otherwise be indexed as a lattice;
        mesophase reflections are typically far sharper (the demo phase ramp:
        0.004-0.09). Common practice; raise it for small, disordered domains.
    overrides : mapping frame position -> {"phase": str, "lattice": float or None}, optional
        Frames set by hand. Without ``lattice`` the frame's peaks are indexed again
        with this phase only (no scan prior); with ``lattice`` (nm: d for lamellar, cell
        edge a otherwise) that value is taken as is, with no uncertainty and no hkl.
        Such frames get status ``"override"``, ``alternative`` names the automatic
        choice, ``caveat`` says how the lattice was obtained.

    Returns
    -------
    dict of arrays in the input frame order, named and shaped as in
    :data:`PHASE_OUTPUTS`: per (frame, slot) ``phase``, ``lattice``,
    ``lattice_sigma``, ``score``; per (frame, peak) ``hkl``, ``peak_phase``, ``track``;
    per frame ``alternative``, ``status`` (as :func:`~saxsnb.analysis._lattice.index_peaks`,
    e.g. "ambiguous_phase" when another explanation is about as good, plus "no_data" and
    "override"), ``caveat``, ``cost``, ``margin``, ``n_unexplained``, ``n_broad``. The
    prominence is also taken as each peak's signal-to-noise ratio, so an absent
    reflection where the phase's peaks barely stand above the noise costs less
    (``snr`` of index_peaks).

    Examples
    --------
    >>> from saxsnb.analysis._reflections import q_positions
    >>> pos = np.array([q_positions("Pn3m", 10.0, 4), q_positions("lamellar", 5.0, 4)])
    >>> res = index_phases(pos, 1e-4 * pos, 0.01 * pos, np.full(pos.shape, 50.0))
    >>> res["phase"][:, 0].tolist(), res["lattice"][:, 0].round(3).tolist(), res["status"].tolist()
    (['Pn3m', 'lamellar'], [10.0, 5.0], ['ok', 'ok'])
    >>> res = index_phases(pos, overrides={1: {"phase": "hexagonal", "lattice": 6.0}})
    >>> str(res["phase"][1, 0]), str(res["status"][1]), str(res["alternative"][1])
    ('hexagonal', 'override', 'automatic: lamellar')
    """
    pos0 = np.asarray(position, dtype=float)
    if pos0.ndim != 2:
        raise SaxsInputError(f"position must be (n_frames, n_peaks), got shape {pos0.shape}",
                             parameter="position")
    F = pos0.shape[0]
    idx = np.arange(F) if order is None else np.asarray(order)
    if sorted(idx.tolist()) != list(range(F)):
        raise SaxsInputError("order must be a permutation of the frame positions", parameter="order")
    take = lambda a: None if a is None else np.asarray(a)[idx]  # noqa: E731
    pos = pos0[idx]
    with np.errstate(invalid="ignore", divide="ignore"):
        broad = (np.asarray(fwhm, dtype=float)[idx] / pos > float(max_relative_width)
                 if fwhm is not None else np.zeros(pos.shape, dtype=bool))
    kept = np.where(broad, np.nan, pos)
    qm = q_min if q_min is None or np.ndim(q_min) == 0 else np.asarray(q_min)[idx]
    params = dict(phases=tuple(phases), max_phases=int(max_phases), tolerance=float(tolerance),
                  use_scan_prior=bool(use_scan_prior), prior_weight=float(prior_weight))
    res = index_peaks(pos, take(position_sigma), take(prominence), q_min=qm, fwhm=take(fwhm), q_step=q_step,
                      resolution=resolution, max_relative_width=float(max_relative_width),
                      snr=take(prominence), **params)
    res["n_broad"] = broad.sum(axis=-1).astype(np.int64)
    status = res["status"].astype(STATUS_DTYPE)
    if peak_status is not None:
        status[np.asarray(peak_status).astype(str)[idx] == "no_data"] = "no_data"
    res["status"] = status
    inv = np.argsort(idx)
    out = {k: np.asarray(v)[inv] for k, v in res.items()}
    if overrides:
        _apply_overrides(out, kept[inv], position_sigma, prominence, overrides, q_min=q_min,
                         tolerance=float(tolerance))
    # one integer per (phase, hkl) label, 0 for an unindexed peak: equal where the words
    # "phase hkl" are equal, without building those strings for every peak of the series
    ph_code = np.unique(out["peak_phase"], return_inverse=True)[1].reshape(out["peak_phase"].shape)
    hkl_code = np.unique(out["hkl"], return_inverse=True)[1].reshape(out["hkl"].shape)
    labels = np.where(out["hkl"] != "", ph_code * (int(hkl_code.max(initial=0)) + 1) + hkl_code + 1, 0)
    out["track"] = track_peaks(pos0, position_sigma, fwhm, order=idx, labels=labels)
    return out


def _widen(a: np.ndarray, values) -> np.ndarray:
    """``a`` as a string array wide enough for ``values``."""
    width = max(a.dtype.itemsize // 4, *(len(str(v)) for v in np.atleast_1d(values)), 1)
    return a.astype(f"<U{width}") if width > a.dtype.itemsize // 4 else a


def _apply_overrides(out, position, position_sigma, prominence, overrides, *, q_min, tolerance):
    """Set frames by hand, in place on the result dict ``out`` (see :func:`index_phases`)."""
    F = position.shape[0]
    slots = out["phase"].shape[1]
    overrides = {int(f): v for f, v in overrides.items()}  # keys may come back from JSON as text
    for frame in sorted(overrides):
        choice = dict(overrides[frame])
        if not 0 <= frame < F:
            raise SaxsInputError(f"override frame {frame} outside 0..{F - 1}", parameter="overrides",
                                 frame=frame)
        phase = str(choice.get("phase", ""))
        lattice = choice.get("lattice")
        if phase not in PHASES:
            raise SaxsInputError(f"an override needs a phase name out of {list(PHASES)}, got {phase!r}",
                                 parameter="overrides", frame=frame)
        auto = ", ".join(p for p in np.atleast_1d(out["phase"][frame]) if p) or "none"
        hkl = None
        if lattice is None:
            one = slice(frame, frame + 1)
            pick = lambda a, one=one: None if a is None else np.asarray(a, dtype=float)[one]  # noqa: E731
            qm = q_min if q_min is None or np.ndim(q_min) == 0 else np.asarray(q_min)[one]
            fix = index_peaks(position[one], pick(position_sigma), pick(prominence), q_min=qm,
                              phases=(phase,), max_phases=1, tolerance=tolerance, use_scan_prior=False)
            found = str(fix["phase"][0, 0]) == phase
            lat = float(fix["lattice"][0, 0]) if found else np.nan
            lat_s = float(fix["lattice_sigma"][0, 0]) if found else np.nan
            score = float(fix["score"][0, 0]) if found else np.nan
            hkl = np.asarray(fix["hkl"][0]).astype(str) if found else None
            caveat = (f"set by hand to {phase}; lattice refitted on the peaks" if found
                      else f"set by hand to {phase}; the peaks do not index as {phase}: no lattice")
        else:
            lat, lat_s, score = float(lattice), np.nan, np.nan
            caveat = f"set by hand to {phase} with lattice {lat:g} nm (no fit, no uncertainty)"
        out["phase"] = _widen(out["phase"], phase)
        out["phase"][frame] = [phase] + [""] * (slots - 1)
        out["lattice"][frame] = [lat] + [np.nan] * (slots - 1)
        out["lattice_sigma"][frame] = [lat_s] + [np.nan] * (slots - 1)
        out["score"][frame] = [score] + [0.0] * (slots - 1)
        if hkl is not None:
            out["hkl"] = _widen(out["hkl"], hkl)
            out["hkl"][frame] = hkl
            out["peak_phase"] = _widen(out["peak_phase"], phase)
            out["peak_phase"][frame] = np.where(hkl != "", phase, "")
        out["status"][frame] = "override"
        for key, text in (("alternative", f"automatic: {auto}"), ("caveat", caveat)):
            out[key] = _widen(out[key], text)
            out[key][frame] = text
