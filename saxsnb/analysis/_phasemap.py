"""The phase map of a series: phases present per frame, transitions, coexistence.

Works on the output of :func:`saxsnb.analysis._lattice.index_peaks`; pure numpy.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._reflections import PHASES

__all__ = ["BONNET_RATIOS", "phase_map"]

#: Bonnet relation of the bicontinuous cubics, a(Pn3m) : a(Im3m) : a(Ia3d)
#: = 1 : 1.279 : 1.576 (Anderson, Gruner & Leibler 1988, PNAS 85, 5364; Hyde et al.
#: 1997). REFERENCES.md marks these constants as derived from values quoted from
#: memory: treat comparisons as indicative at the 1 % level.
BONNET_RATIOS = {"Pn3m": 1.0, "Im3m": 1.279, "Ia3d": 1.576}


def _runs(mask):
    """(start, stop) index pairs of the runs of True in a 1-D boolean array."""
    m = np.concatenate([[False], np.asarray(mask, dtype=bool), [False]])
    d = np.diff(m.astype(np.int8))
    return list(zip(np.nonzero(d == 1)[0].tolist(), np.nonzero(d == -1)[0].tolist()))


def phase_map(phase, scan, *, known=None, lattice=None, lattice_sigma=None, score=None, phases=PHASES):
    """Which phases are present along the scan, where they appear and vanish.

    Parameters
    ----------
    phase : str array (n_frames, n_slots), "" for an empty slot (from :func:`index_peaks`).
    scan : array (n_frames,), the scan coordinate (any order; sorted internally).
    known : bool array (n_frames,), optional
        False for frames that could not be indexed (no data, a single peak): they are
        left out when locating transitions instead of counting as "no phase".
    lattice, lattice_sigma, score : arrays (n_frames, n_slots), optional.
    phases : phase names, the columns of the presence table.

    Returns
    -------
    dict with ``presence`` (bool, (n_frames, n_phases)), ``share`` ((n_frames,
    n_phases), the phase's share of the explained peak strength, a rough indicator
    and not a volume fraction), ``lattice`` and ``lattice_sigma`` ((n_frames,
    n_phases), nm), ``bonnet_ratio``, ``bonnet_ratio_sigma``, ``bonnet_expected``
    ((n_frames,), for frames with two coexisting bicontinuous cubics: larger over
    smaller cell edge, and the Bonnet value), ``transitions`` (list of
    ``{"phase", "appears", "vanishes", "appears_between", "vanishes_between"}``),
    ``coexistence`` (list of ``{"phases", "start", "end"}``) and ``bonnet`` (list of
    per-window summaries).

    Notes
    -----
    A transition is placed half-way between the last frame without and the first
    frame with the phase (``appears``), and between the last frame with and the
    first frame without it (``vanishes``), so its uncertainty is half a step; the
    bracketing scan values are given as ``*_between``. None means the phase is
    present at the start (end) of the scan. Bonnet ratios a(Pn3m) : a(Im3m) : a(Ia3d)
    = 1 : 1.279 : 1.576 (Anderson, Gruner & Leibler 1988, PNAS 85, 5364; constants
    marked as recalled from memory in REFERENCES.md).

    Examples
    --------
    >>> ph = np.array([["lamellar", ""], ["lamellar", "Ia3d"], ["Ia3d", ""]])
    >>> m = phase_map(ph, np.array([20.0, 21.0, 22.0]))
    >>> [(t["phase"], t["appears"], t["vanishes"]) for t in m["transitions"]]
    [('lamellar', None, 21.5), ('Ia3d', 20.5, None)]
    >>> m["coexistence"]
    [{'phases': ['lamellar', 'Ia3d'], 'start': 20.5, 'end': 21.5}]
    """
    ph = np.asarray(phase).astype(str)
    if ph.ndim == 1:
        ph = ph[:, None]
    F = ph.shape[0]
    x = np.asarray(scan, dtype=float)
    if x.shape != (F,):
        raise SaxsInputError("scan must have one value per frame", parameter="scan")
    kn = np.ones(F, dtype=bool) if known is None else np.asarray(known, dtype=bool)
    phases = tuple(phases)
    n = len(phases)
    presence = np.zeros((F, n), dtype=bool)
    share = np.zeros((F, n))
    lat = np.full((F, n), np.nan)
    lsig = np.full((F, n), np.nan)
    for k, name in enumerate(phases):
        hit = ph == name
        presence[:, k] = hit.any(1)
        if score is not None:
            share[:, k] = np.where(hit, np.asarray(score, dtype=float), 0.0).sum(1)
        if lattice is not None:
            la = np.nan_to_num(np.asarray(lattice, dtype=float), nan=-np.inf)
            lat[:, k] = np.where(hit, la, -np.inf).max(1)
            lat[~np.isfinite(lat[:, k]), k] = np.nan
        if lattice_sigma is not None:
            ls = np.nan_to_num(np.asarray(lattice_sigma, dtype=float), nan=-np.inf)
            lsig[:, k] = np.where(hit, ls, -np.inf).max(1)
            lsig[~np.isfinite(lsig[:, k]), k] = np.nan
    order = np.argsort(x, kind="stable")
    order = order[kn[order]]
    xs = x[order]
    pres = presence[order]
    mid = lambda i, j: float(0.5 * (xs[i] + xs[j]))  # noqa: E731
    transitions = []
    for k, name in enumerate(phases):
        for a, b in _runs(pres[:, k]):
            transitions.append(
                {
                    "phase": name,
                    "appears": None if a == 0 else mid(a - 1, a),
                    "vanishes": None if b == len(xs) else mid(b - 1, b),
                    "appears_between": None if a == 0 else [float(xs[a - 1]), float(xs[a])],
                    "vanishes_between": None if b == len(xs) else [float(xs[b - 1]), float(xs[b])],
                }
            )
    transitions.sort(key=lambda t: (-np.inf if t["appears"] is None else t["appears"]))
    coexistence = []
    multi = pres.sum(1) >= 2
    for a, b in _runs(multi):
        # split the run where the set of phases changes
        start = a
        for i in range(a + 1, b + 1):
            if i == b or not np.array_equal(pres[i], pres[start]):
                names = [phases[k] for k in np.nonzero(pres[start])[0]]
                coexistence.append(
                    {
                        "phases": names,
                        "start": None if start == 0 else mid(start - 1, start),
                        "end": None if i == len(xs) else mid(i - 1, i),
                    }
                )
                start = i
    # Bonnet ratios of coexisting bicontinuous cubics
    ratio = np.full(F, np.nan)
    ratio_sig = np.full(F, np.nan)
    expected = np.full(F, np.nan)
    pair_name = np.full(F, "", dtype=object)
    cubics = [c for c in ("Pn3m", "Im3m", "Ia3d") if c in phases]
    bonnet = []
    for i1 in range(len(cubics)):
        for i2 in range(i1 + 1, len(cubics)):
            c1, c2 = cubics[i1], cubics[i2]
            k1, k2 = phases.index(c1), phases.index(c2)
            both = presence[:, k1] & presence[:, k2] & kn
            if not both.any():
                continue
            with np.errstate(invalid="ignore"):
                r = lat[:, k2] / lat[:, k1]
                rs = r * np.hypot(lsig[:, k1] / lat[:, k1], lsig[:, k2] / lat[:, k2])
            e = BONNET_RATIOS[c2] / BONNET_RATIOS[c1]
            ratio[both], ratio_sig[both], expected[both] = r[both], rs[both], e
            pair_name[both] = f"{c2}/{c1}"
            rb = r[both]
            bonnet.append(
                {
                    "phases": [c2, c1],
                    "n_frames": int(both.sum()),
                    "ratio_mean": float(np.nanmean(rb)) if np.isfinite(rb).any() else None,
                    "ratio_std": float(np.nanstd(rb)) if np.isfinite(rb).sum() > 1 else None,
                    "expected": float(e),
                    "relative_deviation": float(np.nanmean(rb) / e - 1) if np.isfinite(rb).any() else None,
                }
            )
    return {
        "presence": presence,
        "share": share,
        "lattice": lat,
        "lattice_sigma": lsig,
        "bonnet_ratio": ratio,
        "bonnet_ratio_sigma": ratio_sig,
        "bonnet_expected": expected,
        "bonnet_pair": pair_name.astype(str),
        "transitions": transitions,
        "coexistence": coexistence,
        "bonnet": bonnet,
    }
