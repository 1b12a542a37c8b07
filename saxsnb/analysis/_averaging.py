"""Averaging repeated frames and rebinning in q, with sigma propagated.

Both are linear maps (a frame-group or a q-bin membership matrix applied to the curves),
so they are one matrix product over all frames. Uncertainties: the mean of k
independent values has ``sigma = sqrt(sum sigma_i^2) / k`` (first-order propagation,
common practice; e.g. Taylor 1997, An Introduction to Error Analysis, ch. 3), so k
repeats of equal sigma give ``sigma / sqrt(k)``.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames

__all__ = ["group_labels", "average_frames", "rebin"]


def group_labels(n_frames: int, *, by=None, every: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Group index of each frame: all in one, by equal values of ``by``, or blocks.

    Parameters
    ----------
    n_frames : int
    by : array (n_frames,), optional
        A label per frame (a sample name, a scan value); equal labels form a group,
        in order of first appearance.
    every : int, optional
        Blocks of ``every`` consecutive frames (the last block may be shorter).

    Returns
    -------
    labels : int array (n_frames,) of group indices 0..G-1
    keys : array (G,) the ``by`` value of each group, or the first frame of each block

    Examples
    --------
    >>> group_labels(5, every=2)[0].tolist()
    [0, 0, 1, 1, 2]
    >>> lab, keys = group_labels(4, by=["a", "b", "a", "b"])
    >>> lab.tolist(), keys.tolist()
    ([0, 1, 0, 1], ['a', 'b'])
    """
    if by is not None and every is not None:
        raise SaxsInputError("give by= or every=, not both", parameter="every")
    if every is not None:
        if int(every) != every or every < 1:
            raise SaxsInputError(f"every must be a positive integer, got {every!r}", parameter="every")
        lab = np.arange(n_frames) // int(every)
        return lab, np.arange(0, n_frames, int(every))
    if by is not None:
        by = np.asarray(by)
        if by.shape != (n_frames,):
            raise SaxsInputError(f"by has shape {by.shape}; expected ({n_frames},)", parameter="by")
        keys, first, inv = np.unique(by, return_index=True, return_inverse=True)
        order = np.argsort(first, kind="stable")
        rank = np.empty_like(order)
        rank[order] = np.arange(order.size)
        return rank[inv.ravel()], keys[order]
    return np.zeros(n_frames, dtype=np.int64), np.array([0])


def average_frames(q, intensity, sigma, *, labels=None, include=None) -> dict[str, np.ndarray]:
    """Mean curve of each group of frames, with propagated sigma.

    Parameters
    ----------
    q : array (n_q,)
    intensity, sigma : arrays (n_frames, n_q); NaN points are left out of their mean.
    labels : int array (n_frames,), optional
        Group index per frame (see :func:`group_labels`); default one group.
    include : bool array (n_frames,), optional
        Frames to use (e.g. not the outliers of :func:`compare_frames`).

    Returns
    -------
    dict with ``intensity`` and ``sigma`` (n_groups, n_q): the mean of the included
    frames and ``sqrt(sum sigma^2) / k`` with k the number of finite values at that
    point (NaN where k = 0); ``n_averaged`` (n_groups,) frames used; ``members``
    (n_groups, n_frames) bool, which frames went into each mean.

    Notes
    -----
    Straight (unweighted) mean of repeats, the usual choice for frames of one sample
    with similar counting statistics (common practice).

    Examples
    --------
    >>> out = average_frames([0.1, 0.2], [[1.0, 2.0], [3.0, 4.0]], [[0.2, 0.2], [0.2, 0.2]])
    >>> out["intensity"].tolist(), out["sigma"].round(6).tolist(), out["n_averaged"].tolist()
    ([[2.0, 3.0]], [[0.141421, 0.141421]], [2])
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    if S is None:
        raise SaxsInputError("sigma is needed to propagate the uncertainty", parameter="sigma")
    nf = I.shape[0]
    lab = np.zeros(nf, dtype=np.int64) if labels is None else np.asarray(labels, dtype=np.int64)
    if lab.shape != (nf,) or (nf and lab.min() < 0):
        raise SaxsInputError(f"labels must be {nf} non-negative group indices", parameter="labels")
    inc = np.ones(nf, bool) if include is None else np.asarray(include, dtype=bool)
    if inc.shape != (nf,):
        raise SaxsInputError(f"include has shape {inc.shape}; expected ({nf},)", parameter="include")
    G = int(lab.max()) + 1 if nf else 0
    members = np.zeros((G, nf), dtype=bool)
    members[lab, np.arange(nf)] = True
    members &= inc[None, :]
    # sums over the frames of each group: rows sorted by group, one reduceat per quantity
    rows = np.flatnonzero(inc)
    rows = rows[np.argsort(lab[rows], kind="stable")]
    k = np.zeros((G, I.shape[1]))
    total = np.zeros((G, I.shape[1]))
    var = np.zeros((G, I.shape[1]))
    if rows.size:
        g_of = lab[rows]
        starts = np.flatnonzero(np.r_[True, g_of[1:] != g_of[:-1]])
        in_order = rows.size == I.shape[0] and np.array_equal(rows, np.arange(rows.size))
        Ir, Sr = (I, S) if in_order else (I[rows], S[rows])
        present = g_of[starts]
        sizes = np.diff(np.r_[starts, rows.size])
        nq = I.shape[1]
        if sizes.size and bool((sizes == sizes[0]).all()):
            # groups of equal size (blocks, or all frames): one reshape, sums over the
            # middle axis, squares summed without a temporary (einsum)
            m = int(sizes[0])
            I3, S3 = Ir.reshape(-1, m, nq), Sr.reshape(-1, m, nq)
            with np.errstate(invalid="ignore", over="ignore"):
                # a (1, m) x (m, n_q) product per group (BLAS) sums the repeats fastest
                tot_p = np.matmul(np.ones((1, m)), I3)[:, 0, :]
                var_p = np.einsum("gmq,gmq->gq", S3, S3)
        else:
            with np.errstate(invalid="ignore", over="ignore"):
                tot_p = np.add.reduceat(Ir, starts, axis=0)
                var_p = np.add.reduceat(Sr * Sr, starts, axis=0)
        # a non-finite input makes its sum non-finite: checked on the sums, not on the input
        if bool(np.isfinite(tot_p).all() and np.isfinite(var_p).all()):
            if present.size == G:  # every group has frames (sorted: row g is group g): means in place
                tot_p /= sizes[:, None]
                np.sqrt(var_p, out=var_p)
                var_p /= sizes[:, None]
                return {"intensity": tot_p, "sigma": var_p, "n_averaged": np.bincount(lab[inc], minlength=G),
                        "members": members}
            else:
                k[present] = sizes[:, None]
                total[present] = tot_p
                var[present] = var_p
        else:
            ok = np.isfinite(Ir) & np.isfinite(Sr)
            k[present] = np.add.reduceat(ok.astype(float), starts, axis=0)
            total[present] = np.add.reduceat(np.where(ok, Ir, 0.0), starts, axis=0)
            var[present] = np.add.reduceat(np.where(ok, Sr**2, 0.0), starts, axis=0)
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(k > 0, total / k, np.nan)
        sig = np.where(k > 0, np.sqrt(var) / k, np.nan)
    n_avg = np.bincount(lab[inc], minlength=G) if nf else np.zeros(G, dtype=np.int64)
    return {"intensity": mean, "sigma": sig, "n_averaged": n_avg, "members": members}


def rebin(q, intensity, sigma, n: int, *, spacing: str = "log", q_range=None) -> dict[str, np.ndarray]:
    """Average neighbouring q points into ``n`` bins of equal linear or log width.

    Parameters
    ----------
    q : array (n_q,), > 0 for ``spacing="log"``
    intensity, sigma : arrays (n_frames, n_q)
    n : int
        Number of bins spanning ``q_range`` (default the whole grid); bins holding no
        grid point are dropped, so fewer than ``n`` may come back on a coarse grid.
    spacing : {"log", "linear"}
    q_range : (q_min, q_max), optional

    Returns
    -------
    dict with ``q`` (n_bins,) the mean q of the grid points of each bin, ``q_count``
    (n_bins,) grid points per bin, ``intensity`` and ``sigma`` (n_frames, n_bins): the
    mean of the finite points of each bin and ``sqrt(sum sigma^2) / k``.

    Notes
    -----
    Equal-weight means keep the bin value an estimate of the curve at the bin's mean q
    whatever the local sigma (common practice); the errors of neighbouring points are
    taken as independent.

    Examples
    --------
    >>> out = rebin([1.0, 2.0, 3.0, 4.0], [[1.0, 3.0, 5.0, 7.0]], [[0.2, 0.2, 0.2, 0.2]], 2,
    ...             spacing="linear")
    >>> out["q"].tolist(), out["intensity"].tolist(), out["sigma"].round(6).tolist()
    ([1.5, 3.5], [[2.0, 6.0]], [[0.141421, 0.141421]])
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    if S is None:
        raise SaxsInputError("sigma is needed to propagate the uncertainty", parameter="sigma")
    if int(n) != n or n < 1:
        raise SaxsInputError(f"n must be a positive integer, got {n!r}", parameter="n")
    if spacing not in ("log", "linear"):
        raise SaxsInputError(f"spacing must be 'log' or 'linear', got {spacing!r}", parameter="spacing")
    lo, hi = (q.min(), q.max()) if q_range is None else (float(q_range[0]), float(q_range[1]))
    if not lo < hi:
        raise SaxsInputError(f"q_range ({lo}, {hi}) must have q_min < q_max", parameter="q_range")
    if spacing == "log":
        if lo <= 0:
            raise SaxsInputError("log spacing needs q > 0; give q_range or spacing='linear'",
                                 parameter="spacing")
        edges = np.geomspace(lo, hi, int(n) + 1)
    else:
        edges = np.linspace(lo, hi, int(n) + 1)
    b = np.searchsorted(edges, q, side="right") - 1
    b[q == hi] = int(n) - 1
    inside = (b >= 0) & (b < n) & (q >= lo) & (q <= hi)
    M = np.zeros((q.size, int(n)))
    M[np.flatnonzero(inside), b[inside]] = 1.0
    keep = M.sum(axis=0) > 0
    M = M[:, keep]
    ok = np.isfinite(I) & np.isfinite(S)
    k = ok @ M
    with np.errstate(invalid="ignore", divide="ignore"):
        mean = np.where(k > 0, (np.where(ok, I, 0.0) @ M) / k, np.nan)
        sig = np.where(k > 0, np.sqrt(np.where(ok, S**2, 0.0) @ M) / k, np.nan)
    counts = M.sum(axis=0)
    return {"q": (q @ M) / counts, "q_count": counts.astype(np.int64), "intensity": mean, "sigma": sig}
