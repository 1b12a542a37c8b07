"""Operations across frames on a dask-chunked series, per chunk (issue 13).

Frame comparison, averaging and the concentration extrapolation need every frame, but
only through per-frame summaries (a score against the reference curve, a p-value) or
sums along frame (the points finite in every frame, group sums, the weighted-line
sums per q). Here each is a dask graph: per-chunk numpy work on the workers, reduced
along frame by dask, and a small step across frames (Holm's adjustment, the I0 line)
on per-frame values only; the client never holds a (frame, q) array. The numpy
functions of :mod:`saxsnb.analysis` do the work inside each task, so the results equal
the in-memory ones (sums along frame are added chunk by chunk: rounding within 1e-12
relative).
"""

from __future__ import annotations

import numpy as np

from ..analysis._averaging import average_frames
from ..analysis._similarity import _common_index, _pair_stats, adjust_pvalues, compare_frames

__all__ = ["compare_lazy", "group_include_lazy", "average_lazy", "concentration_lazy"]

#: at most this many groups are averaged with one sum per group over all chunks; more
#: groups, each no longer than a chunk, are regrouped into chunks of whole groups (each
#: chunk averaged in numpy)
FEW_GROUPS = 64


def _by_sums(labels: np.ndarray, chunks) -> bool:
    """True: one sum per group over all chunks (few groups, or a group longer than a chunk)."""
    G = int(labels.max()) + 1
    return G <= FEW_GROUPS or int(np.bincount(labels).max()) > max(chunks)


def _usable(I, S, test):
    ok = np.isfinite(I)
    if test == "chi2":
        ok &= np.isfinite(S) & (S > 0)
    return ok


def _compare_chunk(I, S, rI, rS, common, frames, *, test, ref):
    """Score, p-value, has-data and n_points of each frame of a chunk against the reference
    (the blocks as blockwise gives them, lists of one block along q: not joined into copies)."""
    from ._core import _one_block

    I, S, rI, rS, common, frames = (_one_block(x) for x in (I, S, rI, rS, common, frames))
    idx = _common_index(bool(_usable(rI, rS, test).any()), common, ref)
    has = _usable(I, S, test).any(axis=1)
    out = np.full((I.shape[0], 4), np.nan)
    out[:, 2] = has
    out[:, 3] = np.where(has, idx.size, 0)
    others = np.flatnonzero(has & (frames != ref))
    if others.size:
        whole = idx.size == I.shape[1]
        A = I if whole else I[:, idx]
        SA = S if whole else S[:, idx]
        # every row scored (no copy of the others' rows; each row's score is its own), the
        # reference and the frames without data dropped after
        with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
            sc, pv = _pair_stats(A, SA, rI[idx], rS[idx], test)
        out[others, 0] = sc[others]
        out[others, 1] = pv[others]
    return out


def compare_lazy(I, S, *, test: str, ref: int, correction: str, alpha: float) -> dict:
    """:func:`saxsnb.analysis.compare_frames` on dask arrays (frame, q), q in one chunk.

    The points compared (finite in every frame with data) are a reduction along frame;
    each chunk is scored against the reference row; Holm's adjustment runs once on the
    (frame,) p-values. Errors of the data (no usable reference point, fewer than 3
    common points) are raised when computed. Returns ``name -> dask array (frame,)``.
    """
    import dask.array as da

    from ._core import AccessorBase

    ok = da.isfinite(I)
    if test == "chi2":
        ok &= da.isfinite(S) & (S > 0)
    has = ok.any(axis=1)
    common = (ok | ~has[:, None]).all(axis=0)
    frames = da.arange(I.shape[0], chunks=I.chunks[0])
    stats = da.blockwise(_compare_chunk, "ik", I, "ij", S, "ij", I[ref], "j", S[ref], "j", common, "j",
                         frames, "i", new_axes={"k": 4}, dtype=float, concatenate=False, test=test, ref=ref)
    score, pval, has_f, n_pts = (stats[:, k] for k in range(4))
    padj = AccessorBase._across_frames(lambda p: {"p_adjusted": adjust_pvalues(p, correction)}, [pval],
                                       {"p_adjusted": ((I.shape[0],), float)}, frame_chunks=I.chunks[0])
    padj = padj["p_adjusted"]
    has_b = has_f > 0
    status = da.where(frames == ref, "is_reference", da.where(has_b, "ok", "no_data")).astype("<U32")
    return {
        "score": score,
        "p_value": pval,
        "p_adjusted": padj,
        "outlier": da.isfinite(padj) & (padj < alpha),
        "n_points": n_pts.astype(np.int64),
        "status": status,
    }


# ------------------------------------------------------------------ averaging
def _block_chunks(labels: np.ndarray, target: int) -> tuple[int, ...]:
    """Chunk sizes along frame (labels sorted) whose boundaries fall between groups,
    each about ``target`` frames (or one group, when a group is longer)."""
    starts = np.flatnonzero(np.r_[True, labels[1:] != labels[:-1]])
    bounds = [0]
    for s in starts[1:]:
        if s - bounds[-1] >= target:
            bounds.append(int(s))
    bounds.append(labels.size)
    return tuple(int(b - a) for a, b in zip(bounds[:-1], bounds[1:]))


def _sorted_by_group(I, S, labels, target):
    """I, S with frames in group order (no copy when already so), chunked at group bounds."""
    order = np.argsort(labels, kind="stable")
    if not np.array_equal(order, np.arange(order.size)):
        I, S = I[order], S[order]
    chunks = _block_chunks(labels[order], target)
    return I.rechunk({0: chunks}), S.rechunk({0: chunks}), order


def _groups_outliers_chunk(q, I, S, lab, *, test, alpha):
    inc = np.ones(I.shape[0], bool)
    for g in np.unique(lab):  # the groups of this chunk; each test is vectorised
        idx = np.flatnonzero(lab == g)
        if idx.size > 1:
            inc[idx] = ~compare_frames(q, I[idx], S[idx], test=test, alpha=alpha)["outlier"]
    return inc


def group_include_lazy(q, I, S, labels: np.ndarray, *, test: str, alpha: float):
    """Frames that are not outliers against the first frame of their group (dask bool
    array on frame, in the series' order), as :meth:`average` does in memory."""
    import dask.array as da

    G = int(labels.max()) + 1
    if _by_sums(labels, I.chunks[0]):
        parts = []
        for g in range(G):
            idx = np.flatnonzero(labels == g)
            if idx.size > 1:
                Ig, Sg = I[idx], S[idx]
                parts.append((idx, ~compare_lazy(Ig, Sg, test=test, ref=0, correction="holm",
                                                 alpha=alpha)["outlier"]))
            else:
                parts.append((idx, da.ones(idx.size, dtype=bool, chunks=-1)))
        order = np.concatenate([p[0] for p in parts])
        inc = da.concatenate([p[1] for p in parts])
        back = np.argsort(order, kind="stable")
        return inc if np.array_equal(order, np.arange(order.size)) else inc[back]
    Is, Ss, order = _sorted_by_group(I, S, labels, max(I.chunks[0]))
    lab = da.from_array(labels[order], chunks=(Is.chunks[0],))
    def flags(Ic, Sc, lc):
        return _groups_outliers_chunk(q, Ic, Sc, lc[:, 0], test=test, alpha=alpha)

    inc = da.map_blocks(flags, Is, Ss, lab[:, None], drop_axis=1, dtype=bool)
    back = np.argsort(order, kind="stable")
    return inc if np.array_equal(order, np.arange(order.size)) else inc[back]


def _average_chunk(q, I, S, lab, inc, which):
    """Group means of the whole groups of one chunk (labels sorted)."""
    local = np.unique(lab[:, 0], return_inverse=True)[1].ravel()
    res = average_frames(q, I, S, labels=local, include=inc[:, 0])
    return res[which]


def average_lazy(q, I, S, labels: np.ndarray, include: np.ndarray):
    """Group means and sigmas (dask (group, q)) as :func:`average_frames` gives them."""
    import dask.array as da

    G = int(labels.max()) + 1
    if _by_sums(labels, I.chunks[0]):
        ok = da.isfinite(I) & da.isfinite(S)
        # group membership (group, frame), made per frame chunk
        lab = da.from_array(labels, chunks=(I.chunks[0],))
        inc = da.from_array(include, chunks=(I.chunks[0],))
        Wd = ((lab[None, :] == da.arange(G, chunks=-1)[:, None]) & inc[None, :]).astype(float)
        with np.errstate(invalid="ignore", over="ignore"):
            k = Wd @ ok.astype(float)
            total = Wd @ da.where(ok, I, 0.0)
            var = Wd @ da.where(ok, S * S, 0.0)
            kk = da.where(k > 0, k, 1.0)
            mean = da.where(k > 0, total / kk, np.nan)
            sig = da.where(k > 0, da.sqrt(var) / kk, np.nan)
        return mean.rechunk({0: -1}), sig.rechunk({0: -1})
    Is, Ss, order = _sorted_by_group(I, S, labels, max(I.chunks[0]))
    lab_s = labels[order]
    lab = da.from_array(lab_s, chunks=(Is.chunks[0],))
    inc = da.from_array(include[order], chunks=(Is.chunks[0],))
    # groups per chunk: the output chunks along group
    out_chunks = tuple(int(np.unique(c).size) for c in np.split(lab_s, np.cumsum(Is.chunks[0])[:-1]))
    res = []
    for which in ("intensity", "sigma"):
        res.append(da.map_blocks(lambda Ic, Sc, lc, ic, w=which: _average_chunk(q, Ic, Sc, lc, ic, w),
                                 Is, Ss, lab[:, None], inc[:, None], chunks=(out_chunks, Is.chunks[1]),
                                 dtype=float))
    return tuple(res)


# -------------------------------------------------------- concentration series
def concentration_lazy(I, S, c: np.ndarray, i0=None, i0_sigma=None) -> dict:
    """:func:`saxsnb.analysis.extrapolate_concentration` on dask (frame, q) arrays:
    the weighted-line sums per q are reductions along frame; the I0 line is one small
    task on (frame,) values. Returns ``name -> dask array``, (q,) or 0-d."""
    import dask
    import dask.array as da

    from ..analysis._merging import i0_line

    C = da.from_array(c[:, None], chunks=(I.chunks[0], 1))
    y, sy = I / C, S / C
    ok = da.isfinite(y) & da.isfinite(sy) & (sy > 0)
    w = da.where(ok, 1 / da.where(ok, sy, 1.0) ** 2, 0.0)
    yz = da.where(ok, y, 0.0)
    sw, sc, scc = w.sum(0), (w * C).sum(0), (w * C * C).sum(0)
    sy_, scy = (w * yz).sum(0), (w * C * yz).sum(0)
    det = sw * scc - sc**2
    good = (ok.sum(0) >= 2) & (det > 0)
    d = da.where(good, det, 1.0)
    a = da.where(good, (scc * sy_ - sc * scy) / d, np.nan)
    b = da.where(good, (sw * scy - sc * sy_) / d, np.nan)
    sa = da.where(good, da.sqrt(scc / d), np.nan)
    sb = da.where(good, da.sqrt(sw / d), np.nan)
    if i0 is None:
        first = da.where(good.any(), da.argmax(good), 0)
        cols = da.arange(I.shape[1], chunks=I.chunks[1])
        pick = cols[None, :] == first
        i0v = da.where(pick, I, 0.0).sum(axis=1)
        i0s = da.where(pick, S, 0.0).sum(axis=1)
    else:
        i0v = i0
        i0s = da.ones_like(i0) if i0_sigma is None else i0_sigma
    line = dask.delayed(lambda v, s: np.array(i0_line(v, s, c)))(i0v, i0s)
    line = da.from_delayed(line, shape=(4,), dtype=float)
    names = ("i0_intercept", "i0_slope", "i0_slope_sigma", "relative_i0_slope")
    out = {"intensity": a, "sigma": sa, "slope": b, "slope_sigma": sb}
    out.update({n: line[k] for k, n in enumerate(names)})
    return out
