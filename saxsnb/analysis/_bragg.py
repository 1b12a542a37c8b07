"""Evidence that a fitted peak is a Bragg reflection (and a frame's peaks a lattice).

A peak table (from :func:`saxsnb.analysis._peaks.find_peaks`) holds whatever stands
above the baseline: Bragg reflections, but also single-point spikes (zingers, hot
pixels), the maxima of a particle's form factor and the oscillations of a vesicle's
shell. Indexing any of those gives a confident wrong phase, so every peak is tested
before indexing, on the peak table alone, vectorised over frames:

========================  ==============================================================
reason (code)             test
========================  ==============================================================
``spike`` (1)             FWHM below ``spike_steps`` (1.5) q steps, or below half the
                          instrument resolution FWHM when given: no real reflection is
                          narrower than the instrument (common practice).
``broad`` (2)             FWHM / position above ``max_relative_width`` (0.1): form-factor
                          maxima of particles have relative widths ~0.2-0.6, mesophase
                          reflections are far sharper (common practice).
``overlapping`` (3)       the weaker of two peaks closer than their mean FWHM: one broad
                          feature split into a peak and a shoulder, not two reflections
                          (two Gaussians of equal width are resolved only beyond about
                          0.85 FWHM; common practice).
``form_factor_like`` (4)  frame test on all peaks found (3 or more): the median of
                          FWHM / distance to the nearest other peak above
                          ``max_width_to_gap`` (0.5). Oscillations of a form factor are
                          as wide as half their period; reflections of a lattice are
                          narrow against their spacing. Every peak of such a frame is
                          set aside.
========================  ==============================================================

Peaks without a width (NaN FWHM) pass the width tests. The thresholds are ours,
documented above, and chosen on curves built from closed forms (tests/validation).
"""

from __future__ import annotations

import numpy as np

__all__ = ["REJECT_REASONS", "bragg_evidence", "describe_rejections"]

#: Per-peak reason codes of :func:`bragg_evidence` (0 = kept).
REJECT_REASONS = {0: "", 1: "spike", 2: "broad", 3: "overlapping", 4: "form_factor_like"}



def bragg_evidence(
    position,
    fwhm=None,
    prominence=None,
    *,
    q_step=None,
    resolution=None,
    spike_steps: float = 1.5,
    max_relative_width: float | None = 0.1,
    max_width_to_gap: float = 0.5,
):
    """Which peaks of a peak table may be Bragg reflections, and why others are not.

    Parameters
    ----------
    position : array (n_frames, n_peaks), 1/nm, NaN padded.
    fwhm : array like ``position``, 1/nm, optional. Without it only positions are
        checked (nothing is rejected).
    prominence : array like ``position``, optional; decides which of two overlapping
        peaks is the weaker (default: the broader one is set aside).
    q_step : float or array (n_frames,), 1/nm, optional; the q grid step, for the spike test.
    resolution : float or array (n_frames,), 1/nm, optional; instrument resolution FWHM.
    spike_steps, max_relative_width, max_width_to_gap : float
        Thresholds of the tests (module table); ``max_relative_width=None`` switches the
        broad-peak test off.

    Returns
    -------
    keep : bool array (n_frames, n_peaks), True for a peak that may be a reflection
        (False also for padding).
    reason : int array (n_frames, n_peaks), codes of :data:`REJECT_REASONS` (0 kept or padding).
    frame_reason : str array (n_frames,), "form_factor_like" for a frame set aside as a
        whole, else "".

    Examples
    --------
    >>> pos = np.array([[1.0, 1.5, 2.0], [1.0, 2.0, np.nan]])
    >>> fw = np.array([[0.002, 0.02, 0.02], [0.3, 0.02, np.nan]])
    >>> keep, why, _ = bragg_evidence(pos, fw, q_step=0.003)
    >>> keep.tolist(), why.tolist()
    ([[False, True, True], [False, True, False]], [[1, 0, 0], [2, 0, 0]])
    """
    pos = np.atleast_2d(np.asarray(position, dtype=float))
    F, P = pos.shape
    present = np.isfinite(pos) & (pos > 0) if P else np.zeros((F, 0), dtype=bool)
    reason = np.zeros((F, P), dtype=np.int64)
    frame_reason = np.full(F, "", dtype="<U20")
    if fwhm is None or P == 0:
        return present.copy(), reason, frame_reason
    fw = np.broadcast_to(np.asarray(fwhm, dtype=float), (F, P))
    has_w = present & np.isfinite(fw)
    with np.errstate(invalid="ignore", divide="ignore"):
        narrow = np.zeros((F, P), dtype=bool)
        if q_step is not None:
            dq = np.broadcast_to(np.asarray(q_step, dtype=float), (F,))[:, None]
            narrow |= has_w & (fw < spike_steps * dq)
        if resolution is not None:
            res = np.broadcast_to(np.asarray(resolution, dtype=float), (F,))[:, None]
            narrow |= has_w & (fw < 0.5 * res)
        broad = np.zeros((F, P), dtype=bool)
        if max_relative_width is not None:
            broad = has_w & ~narrow & (fw / pos > float(max_relative_width))
    reason[narrow] = 1
    reason[broad] = 2
    # neighbours in q (peaks sorted per frame; padding last)
    order = np.argsort(np.where(present, pos, np.inf), axis=1, kind="stable")
    ps = np.take_along_axis(np.where(present, pos, np.nan), order, 1)
    ws = np.take_along_axis(np.where(has_w & ~narrow, fw, np.nan), order, 1)
    prm = None if prominence is None else np.take_along_axis(
        np.broadcast_to(np.asarray(prominence, dtype=float), (F, P)), order, 1)
    gap_r = np.full((F, P), np.inf)
    gap_l = np.full((F, P), np.inf)
    if P > 1:
        d = ps[:, 1:] - ps[:, :-1]
        gap_r[:, :-1] = np.where(np.isfinite(d), d, np.inf)
        gap_l[:, 1:] = gap_r[:, :-1]
    gap = np.minimum(gap_l, gap_r)
    # overlapping pairs (both with widths, neither a spike): the weaker is set aside
    over_sorted = np.zeros((F, P), dtype=bool)
    if P > 1:
        with np.errstate(invalid="ignore"):
            mean_w = 0.5 * (ws[:, 1:] + ws[:, :-1])
            close = d < mean_w
            if prm is not None:
                left_weaker = np.nan_to_num(prm[:, :-1], nan=-np.inf) < np.nan_to_num(prm[:, 1:], nan=-np.inf)
            else:
                left_weaker = ws[:, :-1] > ws[:, 1:]
        over_sorted[:, :-1] |= close & left_weaker
        over_sorted[:, 1:] |= close & ~left_weaker
    over = np.zeros((F, P), dtype=bool)
    np.put_along_axis(over, order, over_sorted, 1)
    over &= reason == 0
    reason[over] = 3
    # frame test: widths against the spacing of all peaks found (spikes excluded)
    with np.errstate(invalid="ignore", divide="ignore"):
        ratio = np.where(np.isfinite(ws) & np.isfinite(gap), ws / gap, np.nan)
    n_w = np.isfinite(ratio).sum(1)
    with np.errstate(invalid="ignore"):
        med = np.full(F, np.nan)
        rows = n_w >= 3
        if rows.any():
            med[rows] = np.nanmedian(ratio[rows], axis=1)
    ff = rows & (med > max_width_to_gap)
    frame_reason[ff] = "form_factor_like"
    reason[ff[:, None] & present & (reason == 0)] = 4
    keep = present & (reason == 0)
    return keep, reason, frame_reason


def describe_rejections(reason, q_step=None) -> np.ndarray:
    """Plain words per frame for the codes of :func:`bragg_evidence` ("" when none).

    >>> describe_rejections(np.array([[1, 1, 0], [0, 0, 0]])).tolist()
    ['2 peak(s) set aside as not Bragg: 2 spike', '']
    """
    reason = np.atleast_2d(np.asarray(reason))
    out = np.full(reason.shape[0], "", dtype=object)
    for i in np.nonzero((reason > 0).any(1))[0]:  # frames with rejections: words only there
        parts = []
        for code in (1, 2, 3, 4):
            n = int((reason[i] == code).sum())
            if n:
                parts.append(f"{n} {REJECT_REASONS[code].replace('_', '-')}")
        out[i] = f"{int((reason[i] > 0).sum())} peak(s) set aside as not Bragg: " + ", ".join(parts)
    return out.astype(str)
