"""Linking Bragg peaks of consecutive frames into tracks along a scan.

Peaks are matched between frame t and t+1 (frames in scan order) by gated
minimum-cost matching computed for all frame pairs at once, and chains of links are
turned into track numbers by pointer jumping, so there is no Python loop over frames.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError

__all__ = ["link_peaks", "track_peaks"]


def link_peaks(
    position,
    position_sigma=None,
    fwhm=None,
    *,
    labels=None,
    n_sigma: float = 5.0,
    width_fraction: float = 0.5,
    max_rounds: int = 3,
):
    """Track numbers for peaks of consecutive frames.

    Parameters
    ----------
    position : array (n_frames, n_peaks), 1/nm, NaN padded; frames in scan order.
    position_sigma : array like position, optional, one-sigma position errors.
    fwhm : array like position, optional, peak widths (1/nm).
    labels : array like position, optional
        E.g. "Pn3m 211" from indexing: peaks are linked only when their labels are
        equal, so a track ends where its assignment changes.
    n_sigma : float
        Gate from the uncertainties: ``n_sigma * sqrt(sigma_a^2 + sigma_b^2)``.
    width_fraction : float
        Gate from the widths: ``width_fraction * max(fwhm_a, fwhm_b)``.
    max_rounds : int
        Rounds of mutual-nearest matching (see Notes).

    Returns
    -------
    track : int array (n_frames, n_peaks), -1 where there is no peak; tracks are
        numbered 0, 1, ... in order of their first frame, then position.
    previous : int array (n_frames, n_peaks), index of the linked peak in the previous
        frame, -1 at a track's birth.

    Notes
    -----
    Cost of linking peak i of frame t to peak j of frame t+1 is
    ``|q_j - q_i| / gate_ij`` with the gate the larger of the two terms above; pairs
    with a cost above 1 are never linked, so a reflection that fades out ends its track
    (death) and one that appears starts a new track (birth), even at a nearby q. The
    matching is the mutual-nearest-neighbour rule (each peak's cheapest partner chooses
    it back), repeated ``max_rounds`` times on the peaks still free: it equals the
    minimum-cost assignment (Kuhn 1955, Naval Res. Logist. Q. 2, 83) whenever gates of
    neighbouring peaks do not overlap, the usual case for Bragg peaks, and is computed
    for all frame pairs at once. A peak missing in one frame splits its track (no gap
    closing). Track labels follow the links by pointer jumping (log2(n_frames) array
    passes).

    Examples
    --------
    >>> pos = np.array([[1.00, 2.00], [1.01, np.nan], [1.02, 2.5]])
    >>> link_peaks(pos, np.full(pos.shape, 0.005))[0].tolist()
    [[0, 1], [0, -1], [0, 2]]
    """
    q = np.atleast_2d(np.asarray(position, dtype=float))
    F, P = q.shape
    ok = np.isfinite(q)
    sig = np.zeros_like(q) if position_sigma is None else np.asarray(position_sigma, dtype=float)
    wid = np.zeros_like(q) if fwhm is None else np.asarray(fwhm, dtype=float)
    if sig.shape != q.shape or wid.shape != q.shape:
        raise SaxsInputError("position_sigma and fwhm must have the shape of position", parameter="position")
    used = np.flatnonzero(ok.any(axis=0))
    n_used = int(used[-1]) + 1 if used.size else 0
    if F > 1 and 0 < n_used < P:  # trailing columns without peaks (NaN padding) cannot link
        if labels is not None and np.shape(labels) != q.shape:
            raise SaxsInputError("labels must have the shape of position", parameter="labels")
        track, prev = link_peaks(
            q[:, :n_used], sig[:, :n_used], wid[:, :n_used],
            labels=None if labels is None else np.asarray(labels)[:, :n_used],
            n_sigma=n_sigma, width_fraction=width_fraction, max_rounds=max_rounds,
        )
        pad = ((0, 0), (0, P - n_used))
        return np.pad(track, pad, constant_values=-1), np.pad(prev, pad, constant_values=-1)
    sig = np.where(np.isfinite(sig), sig, 0.0)
    wid = np.where(np.isfinite(wid), wid, 0.0)
    prev = np.full((F, P), -1, dtype=np.int64)
    if F > 1 and P > 0:
        code = None
        if labels is not None:
            lab = np.asarray(labels)
            if lab.shape != q.shape:
                raise SaxsInputError("labels must have the shape of position", parameter="labels")
            code = np.unique(lab.ravel(), return_inverse=True)[1].reshape(lab.shape)  # ints compare fast
        # frame pairs in blocks (a link depends on its two frames only): the (pairs, P, P)
        # cost arrays of one block stay a few MB however long the series
        step = max(1, BLOCK_PAIRS // (P * P))
        for a in range(0, F - 1, step):
            b = min(a + step, F - 1) + 1  # frames a .. b-1, pairs a .. b-2
            prev[a + 1:b] = _link_pairs(q[a:b], ok[a:b], sig[a:b], wid[a:b],
                                        None if code is None else code[a:b],
                                        n_sigma, width_fraction, max_rounds)
    # pointer jumping: root of every chain
    flat = np.arange(F * P).reshape(F, P)
    parent = flat.copy()
    has = prev >= 0
    parent[1:][has[1:]] = (flat[:-1][np.nonzero(has[1:])[0], prev[1:][has[1:]]])
    parent = parent.ravel()
    for _ in range(int(np.ceil(np.log2(max(F, 2)))) + 1):
        parent = parent[parent]
    roots = parent.reshape(F, P)
    # number tracks by first frame, then position
    is_root = ok & ~has
    order = np.lexsort((np.where(is_root, q, np.inf).ravel(), np.repeat(np.arange(F), P)))
    order = order[is_root.ravel()[order]]
    number = np.full(F * P, -1, dtype=np.int64)
    number[order] = np.arange(order.size)
    track = np.where(ok, number[roots.ravel()].reshape(F, P), -1)
    return track, prev


#: Frame pairs x peaks^2 of the block :func:`link_peaks` matches at once (about ten
#: arrays of this many elements: 2**18 -> ~20 MB).
BLOCK_PAIRS = 2**18


def _link_pairs(q, ok, sig, wid, code, n_sigma, width_fraction, max_rounds):
    """For frames 1.. of the block: the linked peak of the previous frame (-1 none)."""
    F, P = q.shape
    qa, qb = q[:-1, :, None], q[1:, None, :]
    gate = np.maximum(
        n_sigma * np.hypot(sig[:-1, :, None], sig[1:, None, :]),
        width_fraction * np.maximum(wid[:-1, :, None], wid[1:, None, :]),
    )
    with np.errstate(invalid="ignore", divide="ignore"):
        cost = np.abs(qb - qa) / gate
    allowed = ok[:-1, :, None] & ok[1:, None, :] & (cost <= 1.0) & (gate > 0)
    if code is not None:
        allowed &= code[:-1, :, None] == code[1:, None, :]
    cost = np.where(allowed, cost, np.inf)
    free_a = np.ones((F - 1, P), dtype=bool)
    free_b = np.ones((F - 1, P), dtype=bool)
    link = np.full((F - 1, P), -1, dtype=np.int64)  # for peak j of frame t+1: peak of frame t
    ar = np.arange(P)
    for _ in range(max(int(max_rounds), 1)):
        c = np.where(free_a[:, :, None] & free_b[:, None, :], cost, np.inf)
        best_b = np.argmin(c, axis=2)  # for each a, its cheapest b
        best_a = np.argmin(c, axis=1)  # for each b, its cheapest a
        fin = np.isfinite(np.take_along_axis(c, best_a[:, None, :], 1)[:, 0, :])
        mutual = fin & (np.take_along_axis(best_b, best_a, 1) == ar[None, :])
        if not mutual.any():
            break
        link = np.where(mutual, best_a, link)
        t_idx, b_idx = np.nonzero(mutual)
        free_b[t_idx, b_idx] = False
        free_a[t_idx, best_a[t_idx, b_idx]] = False
    return link


def track_peaks(position, position_sigma=None, fwhm=None, *, order=None, labels=None, **options):
    """Track numbers of a peak table whose frames are not in scan order.

    :func:`link_peaks` on the frames taken in the order ``order`` (an index array, e.g.
    ``np.argsort(temperature)``; default: as given), the numbers put back in the
    original frame order. ``options`` go to :func:`link_peaks`.

    Examples
    --------
    >>> pos = np.array([[2.0, np.nan], [1.0, 2.0], [1.0, 2.01]])
    >>> track_peaks(pos, fwhm=np.full(pos.shape, 0.05), order=np.array([1, 2, 0])).tolist()
    [[1, -1], [0, 1], [0, 1]]
    """
    pos = np.asarray(position, dtype=float)
    idx = np.arange(pos.shape[0]) if order is None else np.asarray(order)
    take = lambda a: None if a is None else np.asarray(a)[idx]  # noqa: E731
    t, _ = link_peaks(pos[idx], take(position_sigma), take(fwhm), labels=take(labels), **options)
    out = np.empty_like(t)
    out[idx] = t
    return out
