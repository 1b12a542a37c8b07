"""Candidate explanations of each frame's peaks and the joint choice along the scan
(Viterbi), the engine of saxsnb.analysis._lattice.index_peaks.
"""

from __future__ import annotations

from functools import cache

import numpy as np

from . import _latticematch
from ._latticematch import (
    _ANCHOR_REFLECTIONS,
    _KEEP,
    _gap_miss,
    _phase_set,
    _Scratch,
    _singles,
    _sum_peaks,
)
from ._latticematch import (
    MISS_COST as MISS_COST,  # re-exported: documented here
)

__all__ = ["PHASE_COST", "CLOSE_COST", "AMBIGUOUS_MARGIN"]

#: Cost of a second coexisting phase (fewest phases preferred).
PHASE_COST = 1.0
#: A different explanation within this cost of the chosen one is reported as close.
CLOSE_COST = 1.2
#: A frame whose chosen explanation is cheaper than the closest other one by less than
#: this (or dearer: chosen by the scan prior) gets status "ambiguous_phase": less than
#: half an absent low-order reflection tells the two apart.
AMBIGUOUS_MARGIN = 0.5
#: Share of the miss cost paid by a reflection of one phase of a pair that lies under a
#: peak given to the other phase (hidden, not absent).
HIDDEN_FRACTION = 1.0
_ANCHOR_PEAKS = 6
_VITERBI_STATES = 8


@cache
def _hypothesis_table(nph: int, max_phases: int):
    """The explanations tried in every frame, in a fixed order.

    Column 0 is "nothing", then each kept single-phase candidate (``nph * _KEEP``), then
    (``max_phases`` 2) each pair of candidates of different phases. Returns ``phase``
    (H, 2) phase numbers (-1 none), ``ia`` / ``ib`` (H,) the candidates combined (M =
    none), ``pair`` (H,) bool, the pair candidates ``a``, ``b``, and the best-key
    grouping (``order``, ``starts``, ``ukeys``) of the columns.
    """
    M = nph * _KEEP
    ph_id = np.repeat(np.arange(nph), _KEEP)
    phase = [np.array([[-1, -1]]), np.stack([ph_id, np.full(M, -1)], -1)]
    ia = [np.array([M]), np.arange(M)]
    ib = [np.array([M]), np.full(M, M)]
    a = b = np.zeros(0, dtype=np.intp)
    if max_phases >= 2:
        a, b = np.triu_indices(M, 1)
        diff = ph_id[a] != ph_id[b]
        a, b = a[diff], b[diff]
        phase.append(np.stack([ph_id[a], ph_id[b]], -1))
        ia.append(a)
        ib.append(b)
    phase = np.concatenate(phase)
    ia, ib = np.concatenate(ia), np.concatenate(ib)
    pair = np.arange(ia.size) > M
    keys = _key(phase, nph)
    order = np.argsort(keys, kind="stable")
    ukeys, starts = np.unique(keys[order], return_index=True)
    return {
        "phase": phase,
        "ia": ia,
        "ib": ib,
        "pair": pair,
        "a": a,
        "b": b,
        "M": M,
        "order": order,
        "starts": starts,
        "ukeys": ukeys,
    }


def _hypotheses(q, w, strength, q_lo, phases, max_phases, tol, n_anchor=_ANCHOR_PEAKS, focus=None, ws=None,
                snr=None):
    """Costs of all one- and two-phase explanations of each frame.

    ``focus`` (B, P) bool, optional: the candidates kept per phase are those that best
    explain these peaks (e.g. the ones a first pass left unexplained); their costs are
    then recomputed over all peaks. ``ws``: a :class:`_Scratch` shared by the blocks.
    ``snr`` (B, P) optional, the :func:`~saxsnb.analysis._latticematch.miss_weight` of
    each peak: absent reflections weighted by the noise (:func:`_gap_miss`).
    Returns ``cost`` (B, H) in the order of :func:`_hypothesis_table`, ``rho`` (B, P),
    and what :func:`_states` needs to build the explanations chosen.
    """
    B, P = q.shape
    present = np.isfinite(q)
    smax = np.where(present, strength, -np.inf).max(-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        rho = np.where(present, np.clip(strength / smax, 0, 1), 0.0)
    unexpl = np.where(present, 1.0 + np.nan_to_num(rho), 0.0)
    # anchors: the strongest few peaks of the frame, each taken as one of the first reflections
    strong = np.argsort(-np.where(present, strength, -np.inf), axis=1, kind="stable")[:, :n_anchor]
    qa = np.take_along_axis(q, strong, 1)
    rank_unexpl = unexpl if focus is None else np.where(focus, unexpl, 0.0)
    if focus is not None:  # anchor on the focus peaks first
        order = np.argsort(-np.where(present, strength + np.where(focus, 1e300, 0.0), -np.inf), axis=1)
        qa = np.take_along_axis(q, order[:, :n_anchor], 1)
    q0 = np.where(present, q, 0.0)
    wq = w * q0
    finite = bool(np.isfinite(w).all() and np.isfinite(wq).all())
    ws = _Scratch() if ws is None else ws
    cat = _singles(_phase_set(tuple(phases)), q, w, q0, wq, finite, rank_unexpl, qa, q_lo, tol, ws, snr=snr)
    if focus is not None:  # true costs: every unexplained peak counts
        extra = _sum_peaks(np.where((cat["s"] == 0) & ~focus[:, None, :], unexpl[:, None, :], 0.0))
        cat["cost"] = cat["cost"] + extra
    tab = _hypothesis_table(len(phases), max_phases)
    M = tab["M"]
    cost = [_sum_peaks(unexpl)[:, None], cat["cost"]]
    sub = np.zeros(B, dtype=bool)
    if max_phases >= 2:
        a, b = tab["a"], tab["b"]
        pair_cost = np.full((B, a.size), np.inf)
        # a pair can only help where the best single phase leaves a peak unexplained
        best = np.argmin(cat["cost"], axis=1)
        n_best = (np.take_along_axis(cat["s"], best[:, None, None], 1)[:, 0] > 0).sum(-1)
        n_best = np.where(np.isfinite(cat["cost"][np.arange(B), best]), n_best, 0)
        sub = present.sum(-1) - n_best >= 1
        rows = np.nonzero(sub)[0]
        if rows.size:
            pair_cost[rows] = _pair_costs(cat, rows, a, b, q, unexpl, q_lo, phases, tol, snr)
        cost.append(pair_cost)
    return {"cost": np.concatenate(cost, 1), "rho": rho, "cat": cat, "sub": sub, "M": M, "tab": tab}


def _pair_costs(cat, rows, a, b, q, unexpl, q_lo, phases, tol, snr):
    """Costs (len(rows), len(a)) of the pairs of kept candidates ``a[j]``, ``b[j]`` in the
    frames ``rows`` of a block (see :func:`_hypotheses`); inf where a pair is not allowed.

    Which pairs are allowed follows from peak counts alone (a batched product of the
    match masks gives the peaks two candidates share), so the peak-by-peak recount runs
    only on the allowed ones, flattened to (n_allowed, P).
    """
    m = cat["s"][rows] > 0  # (R, M, P)
    mf = m.astype(np.float32)
    shared = np.matmul(mf, mf.transpose(0, 2, 1))[:, a, b]  # exact small integers
    n_m = m.sum(-1)
    n_a, n_b = n_m[:, a], n_m[:, b]
    only_a, only_b = n_a - shared, n_b - shared
    cs = cat["cost"][rows]
    # each phase indexes two peaks or more, at least one of them its own; a peak both
    # phases predict (a lamellar 002 on a cubic reflection) counts for both
    ok = (
        (n_a >= 2)
        & (n_b >= 2)
        & (only_a >= 1)
        & (only_b >= 1)
        & (only_a + only_b >= 3)
        & np.isfinite(cs[:, a])
        & np.isfinite(cs[:, b])
    )
    out = np.full(ok.shape, np.inf)
    ri, pi = np.nonzero(ok)
    if ri.size == 0:
        return out
    rr = rows[ri]
    ca, cb = a[pi], b[pi]
    ma, mb = m[ri, ca], m[ri, cb]  # (n, P)
    # each peak goes to the phase of the two that fits it better, so a peak is explained
    # when either matches it
    explained = ma | mb
    mc, err = cat["mc"], cat["err"]
    # only a peak both match needs the comparison of _share: it is made there alone
    shortcuts = _latticematch.SHORTCUTS
    if shortcuts:
        pr, pp = np.nonzero(ma & mb)
        fa, fb, fr = ca[pr], cb[pr], rr[pr]
        to_a = ma.copy()
        to_a[pr, pp] = _a_wins(mc[fr, fa, pp], mc[fr, fb, pp], err[fr, fa, pp], err[fr, fb, pp])
        to_b = mb & ~to_a
    else:
        to_a, to_b = _share(ma, mb, mc[rr, ca], mc[rr, cb], err[rr, ca], err[rr, cb])
    tabs = _phase_set(tuple(phases))
    ph_id = np.repeat(np.arange(len(phases)), _KEEP)

    def recount(fr, idx, own, other_m):
        """Missing reflections and misfit of one phase of each pair, recomputed from the
        peaks the pair gives it (a peak is not counted for both phases); row by row, so a
        row depends only on its frame ``fr``, candidate ``idx`` and peaks ``own``."""
        L = cat["L"][fr, idx]
        mc_i = mc[fr, idx]
        off = tabs["c_off"][ph_id[idx]]
        top = tabs["c_top"][ph_id[idx]]
        with np.errstate(invalid="ignore"):
            x_lo = np.nan_to_num((q_lo[fr] * L) ** 2, nan=0.0, posinf=0.0)
        lo = np.clip(np.ceil(x_lo) - 1, 0, top).astype(np.intp)
        q_hi = None
        if snr is not None:  # noise-weighted, gap by gap between the phase's own peaks
            miss = _gap_miss(cat["s"][fr, idx], own, snr[fr], lo, tabs["cum"], off)
        else:
            with np.errstate(invalid="ignore"):
                q_hi = (np.nan_to_num(q[fr], nan=0.0) * own).max(-1) * (1 + tol)
                x_hi = np.nan_to_num((q_hi * L) ** 2, nan=0.0, posinf=0.0, neginf=0.0)
            hi = np.clip(np.floor(x_hi), 0, top).astype(np.intp)
            in_range = np.where(hi > lo, tabs["cum"][hi + off] - tabs["cum"][lo + off], 0.0)
            miss = np.maximum(in_range - _sum_peaks(np.where(own, mc_i, 0.0)), 0.0)
        # a reflection under the other phase's peak is hidden, not absent: it costs
        # HIDDEN_FRACTION of a missing one (the coincidence itself is improbable); at 1
        # (the default) nothing is taken off
        if HIDDEN_FRACTION != 1.0:  # pragma: no cover - a tuning switch
            qr = np.nan_to_num(q[fr], nan=0.0)
            if q_hi is None:
                q_hi = (qr * own).max(-1) * (1 + tol)
            hidden = other_m & ~own & (qr <= q_hi[..., None])
            miss = np.maximum(miss - (1.0 - HIDDEN_FRACTION) * _sum_peaks(np.where(hidden, mc_i, 0.0)), 0.0)
        e = np.nan_to_num(err[fr, idx], nan=0.0) / tol
        return miss + 0.25 * _sum_peaks(np.where(own, e * e, 0.0))

    n = rr.size
    fr2, idx2, own2 = np.concatenate([rr, rr]), np.concatenate([ca, cb]), np.concatenate([to_a, to_b])
    P = own2.shape[1]
    M = cat["L"].shape[1]
    if shortcuts and HIDDEN_FRACTION == 1.0 and (int(q.shape[0]) * M) << P < 2**62:
        # one phase of many pairs keeps the same peaks (the candidate's own matches, or
        # those less one shared peak the other phase takes): each distinct (frame,
        # candidate, own peaks) is recounted once; rows are independent, so this is exact
        bits = own2.astype(np.int64) @ (np.int64(1) << np.arange(P, dtype=np.int64))
        key = ((fr2.astype(np.int64) * M + idx2) << P) | bits
        _, first, inv = np.unique(key, return_index=True, return_inverse=True)
        R = recount(fr2[first], idx2[first], own2[first], None)[inv.reshape(-1)]
    else:  # the plain computation; also with more peak columns than a key holds
        R = recount(fr2, idx2, own2, np.concatenate([ma, mb]))
    out[ri, pi] = _sum_peaks(np.where(explained, 0.0, unexpl[rr])) + R[:n] + R[n:] + PHASE_COST
    return out


def _share(ma, mb, mca, mcb, ea, eb):
    """Which phase of a pair takes each peak: the one it matches; a peak both match goes
    to the phase for which it is the lower order (the larger miss cost), then to the
    closer fit. Returns ``to_a``, ``to_b`` (bool, disjoint)."""
    to_a = ma & (~mb | _a_wins(mca, mcb, ea, eb))
    return to_a, mb & ~to_a


def _a_wins(mca, mcb, ea, eb):
    """On a peak both phases of a pair match: does the first take it (see :func:`_share`)."""
    with np.errstate(invalid="ignore"):
        return (mca > mcb) | ((mca == mcb) & ~(eb < ea))


def _states(H, sel, P):
    """The explanations ``sel`` (B, k) (columns of ``H["cost"]``) of each frame.

    Returns ``phase``, ``L``, ``sL`` (B, k, 2) and ``slot``, ``s`` (B, k, P): the peaks
    of a pair go to the phase that fits them better; a pair is only built in frames
    where it was tried (else it holds nothing).
    """
    tab, cat, M = H["tab"], H["cat"], H["M"]
    B = sel.shape[0]
    ia, ib = tab["ia"][sel], tab["ib"][sel]
    none = tab["pair"][sel] & ~H["sub"][:, None]
    ia, ib = np.where(none, M, ia), np.where(none, M, ib)
    pb = cat["s"].shape[2]

    def ext(a, fill):
        return np.concatenate([a, np.full((B, 1) + a.shape[2:], fill, dtype=a.dtype)], axis=1)

    def pick(a, idx):
        return np.take_along_axis(a, idx if a.ndim == 2 else idx[..., None], 1)

    Lx, sLx, sx, ex = ext(cat["L"], np.nan), ext(cat["sL"], np.nan), ext(cat["s"], 0), ext(cat["err"], np.nan)
    sa, sb = pick(sx, ia), pick(sx, ib)
    ea = np.where(sa > 0, pick(ex, ia), np.inf)
    eb = np.where(sb > 0, pick(ex, ib), np.inf)
    to_a, to_b = _share(sa > 0, sb > 0, pick(ext(cat["mc"], 0.0), ia), pick(ext(cat["mc"], 0.0), ib), ea, eb)
    slot = np.full((B, sel.shape[1], P), -1)
    s = np.zeros((B, sel.shape[1], P), dtype=np.int64)
    slot[..., :pb] = np.where(to_a, 0, np.where(to_b, 1, -1))
    s[..., :pb] = np.where(to_a, sa, np.where(to_b, sb, 0))
    return {
        "phase": tab["phase"][sel],
        "L": np.stack([pick(Lx, ia), pick(Lx, ib)], -1),
        "sL": np.stack([pick(sLx, ia), pick(sLx, ib)], -1),
        "slot": slot,
        "s": s,
    }


def _viterbi(cost, phase, L, weight, switch_cost, jump_cost, jump_scale):
    """Least total cost path through per-frame states (Viterbi 1967).

    cost (F, K); phase, L (F, K, 2). Transition cost between consecutive frames:
    ``switch_cost`` for every phase present in one state and not the other, and
    ``jump_cost * min(1, (|ln(L'/L)| / jump_scale)^2)`` for a phase kept from one frame
    to the next. The recursion is a loop over frames on (K, K) arrays.
    """
    F, K = cost.shape
    if F == 0:
        return np.zeros(0, dtype=np.int64)
    ph = phase.astype(np.int8) if phase.size and phase.max() < 127 else phase
    # state a (frame t, ka) -> state b (frame t+1, kb); slot sa of a holds the phase of slot
    # sb of b: a phase kept, which costs a jump (the two slots of a state hold different
    # phases, so at most two of the four slot pairs match and their sum is exact)
    jump = np.zeros((F - 1, K, K))
    n_same = np.zeros((F - 1, K, K), dtype=np.int64)
    for sa in range(2):
        kept = np.zeros((F - 1, K, K), dtype=bool)
        for sb in range(2):
            pa, pb = ph[:-1, :, None, sa], ph[1:, None, :, sb]
            same = (pa == pb) & (pa >= 0)
            with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
                dl = np.abs(np.log(L[1:, None, :, sb] / L[:-1, :, None, sa]))
                step = jump_cost * np.minimum(1.0, (np.nan_to_num(dl, nan=1.0) / jump_scale) ** 2)
            jump += np.where(same, step, 0.0)  # + 0.0 where the phase is not kept: exact
            kept |= same
        n_same += kept
    n_a = (phase[:-1] >= 0).sum(-1)[:, :, None]
    n_b = (phase[1:] >= 0).sum(-1)[:, None, :]
    trans = weight * (jump + switch_cost * (n_a + n_b - 2 * n_same))
    back = np.zeros((F, K), dtype=np.int64)
    acc = np.empty((F, K))  # least cost of a path ending in each state
    acc[0] = cost[0]
    add, amin = np.add, np.minimum.reduce
    for t in range(1, F):
        tot = add(acc[t - 1, :, None], trans[t - 1])
        tot.argmin(0, out=back[t])
        add(amin(tot, 0), cost[t], out=acc[t])  # the minimum is the value at the argmin
    path = [int(np.argmin(acc[-1]))]
    bk = back.tolist()
    for t in range(F - 1, 0, -1):
        path.append(bk[t][path[-1]])
    return np.array(path[::-1], dtype=np.int64)


#: Work-array size (elements) aimed at per block of frames: about 1 MB, cache sized.
_BLOCK_ELEMENTS = 2**17


def _blocks(rows, n_obs, n_anchor, nph, block):
    """Split ``rows`` into blocks of frames with the same number of peaks.

    No padded peak columns are carried along, and the block size follows the size of
    the (frames, peaks, candidates) work arrays, at most ``block`` frames. Results do
    not depend on the blocks (sums over peaks run one peak after the other).
    """
    rows = rows[np.argsort(n_obs[rows], kind="stable")]
    n_sorted = n_obs[rows]
    edges = np.flatnonzero(np.diff(n_sorted)) + 1
    for grp in np.split(rows, edges):
        if grp.size == 0:
            continue
        n = max(int(n_obs[grp[0]]), 1)
        per_frame = n * nph * _ANCHOR_REFLECTIONS * min(n_anchor, n)
        size = int(min(max(_BLOCK_ELEMENTS // per_frame, 16), max(block, 1)))
        for b0 in range(0, grp.size, size):
            yield grp[b0 : b0 + size]


def _key(phase_pair, n):
    a = np.minimum(phase_pair[..., 0], phase_pair[..., 1])
    b = np.maximum(phase_pair[..., 0], phase_pair[..., 1])
    return (a + 1) * (n + 1) + (b + 1)


_NOT_CUBIC = ("lamellar", "hexagonal")


def _allows(phase_name, own, s):
    """Whether ``phase_name`` allows every reflection ``s`` of the peaks ``own`` (..., P)."""
    from ._latticematch import _table

    ok = _table(phase_name)[1]
    return np.where(own, ok[np.where(own, np.minimum(s, ok.size - 1), 0)], True).all(-1)


def _miss_as(phase_name, own, s, x_lo, x_hi, snr=None):
    """Miss cost of the peaks ``own`` (indexed ``s``) read as ``phase_name`` over the
    range x_lo..x_hi of (q L)^2 (noise-weighted with ``snr``, :func:`_gap_miss`), and
    whether that phase allows all of them."""
    from ._latticematch import _miss_tables, _table

    ok = _table(phase_name)[1]
    cum, by_s = _miss_tables(phase_name)
    top = cum.size - 1
    si = np.where(own, np.minimum(s, ok.size - 1), 0)
    allowed = np.where(own, ok[si], True).all(-1)  # ok[-1] is False: beyond the table
    hi = np.clip(np.floor(x_hi), 0, top).astype(np.intp)
    lo = np.clip(np.ceil(x_lo) - 1, 0, top).astype(np.intp)
    if snr is not None:
        return _gap_miss(si, own, snr, lo, cum, np.zeros(lo.shape, dtype=np.intp)), allowed
    in_range = np.where(hi > lo, cum[hi] - cum[lo], 0.0)
    return np.maximum(in_range - np.where(own, by_s[si], 0.0).sum(-1), 0.0), allowed


def _relabel_subsets(phase, L, slot, s, cost, q, q_lo, phases, tol, snr=None):
    """Give each cubic phase of each state the cubic phase that allows all its indexed
    reflections at the same lattice and predicts the fewest absent ones (issue 15).

    The reflections of some cubic phases are a subset of another's at the same cell
    (Im3m within Pn3m and within Pm3n, Ia3d within Im3m, Fd3m within Fm3m). A state
    built on the larger set pays for every predicted reflection no peak shows; the
    smaller set predicts fewer, so when all the peaks the state gives that phase are
    allowed by the smaller set, the smaller set is the better explanation of the same
    peaks (same lattice, same misfit, lower miss cost). The candidate search may not
    hold that state itself (it keeps a few lattices per phase, ranked as single phases),
    so it is built here. Reflections of the phase under a peak of the other phase of a
    pair count as missing (``HIDDEN_FRACTION`` is 1).

    phase (F, K, 2), L (F, K, 2), slot / s (F, K, P), cost (F, K); q (F, P) sorted, NaN
    padded; q_lo (F,); ``snr`` (F, P) optional, the miss weight of each peak
    (noise-weighted misses, :func:`~saxsnb.analysis._latticematch.miss_weight`). Returns new
    ``phase`` and ``cost`` (copies); unchanged where no
    subset phase is cheaper.
    """
    cubic = [k for k, ph in enumerate(phases) if ph not in _NOT_CUBIC]
    phase, cost = phase.copy(), cost.copy()
    if len(cubic) < 2:
        return phase, cost
    q0 = np.nan_to_num(q, nan=0.0)[:, None, :]
    finite = np.isfinite(cost)
    for j in range(2):
        own = (slot == j) & (s > 0)
        Lj = L[..., j]
        with np.errstate(invalid="ignore"):
            q_hi = np.where(own, q0, 0.0).max(-1) * (1 + tol)
            x_hi = np.nan_to_num((q_hi * Lj) ** 2, nan=0.0, posinf=0.0, neginf=0.0)
            x_lo = np.nan_to_num((np.asarray(q_lo, dtype=float)[:, None] * Lj) ** 2, nan=0.0, posinf=0.0)

        cur = phase[..., j]
        # only states with a cubic phase in this slot and peaks given to it can change
        # (with no own peak every reading costs nothing more), and a state of infinite
        # cost stays infinite and is never kept over the originals (index_peaks): those
        # rows alone are worked on, row by row, so the result is the same as on all states
        rows = (np.isin(cur, cubic) & own.any(-1) & finite if _latticematch.SHORTCUTS
                else np.ones(cur.shape, bool))
        fi, ki = np.nonzero(rows)
        if fi.size == 0:
            continue
        own_r, s_r, cur_r = own[fi, ki], s[fi, ki], cur[fi, ki]
        xlo_r, xhi_r = x_lo[fi, ki], x_hi[fi, ki]
        p = None if snr is None else snr[fi]
        other = phase[fi, ki, 1 - j]
        # a phase is a candidate where it allows all the peaks; its miss cost is needed
        # there and where it is the current phase (row by row: the same numbers)
        cand = {k: (cur_r != k) & (other != k) & _allows(phases[k], own_r, s_r) for k in cubic}
        miss = {}
        for k in cubic:
            w_ = np.nonzero((cur_r == k) | cand[k])[0] if _latticematch.SHORTCUTS else np.arange(cur_r.size)
            miss[k] = np.zeros(cur_r.shape)
            if w_.size:
                miss[k][w_] = _miss_as(phases[k], own_r[w_], s_r[w_], xlo_r[w_], xhi_r[w_],
                                       None if p is None else p[w_])[0]
        cur_miss = np.zeros(cur_r.shape)
        for k in cubic:
            cur_miss = np.where(cur_r == k, miss[k], cur_miss)
        delta_r = np.zeros(cur_r.shape)
        best_r = cur_r.copy()
        for k in cubic:
            d = miss[k] - cur_miss
            better = cand[k] & (d < delta_r - 1e-9)
            delta_r = np.where(better, d, delta_r)
            best_r = np.where(better, k, best_r)
        best_delta = np.zeros(cur.shape)
        best_delta[fi, ki] = delta_r
        phase[fi, ki, j] = best_r
        cost = cost + best_delta
    return phase, cost
