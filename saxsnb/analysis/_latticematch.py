"""Matching observed Bragg peaks to the allowed reflections of each phase.

The machinery behind :func:`saxsnb.analysis._lattice.index_peaks`: trial lattices from
anchor peaks, the nearest allowed reflection of every peak (a lookup table over
``(q L)^2``), the weighted refinement of the lattice and the cost of each candidate
(unexplained peaks, missing low orders, misfit). All phases and all candidates of a
block of frames are handled at once on ``(frames, peaks, candidates)`` arrays; pure
numpy.
"""

from __future__ import annotations

from functools import cache

import numpy as np

from ._reflections import allowed_reflections

#: Cost of an unobserved allowed reflection inside the observed range, by its rank in
#: the phase's sequence (first reflection first); later ones cost the last value.
MISS_COST = (1.5, 1.0, 0.6, 0.4, 0.3)
#: Noise weighting of absent reflections (with a per-peak signal-to-noise ratio, e.g. the
#: prominence of find_peaks in noise units): an absent reflection costs its MISS_COST
#: times clip(snr / SNR_FULL, SNR_FLOOR, 1), snr that of the phase's next indexed peak
#: above it (the local level of the phase's reflections against the noise; reflections
#: weaken with q, so the upper neighbour is the weaker one as a rule). Where the
#: phase's own peaks barely stand above the noise, a reflection a few times weaker is
#: lost in it, so its absence is weak evidence; where they stand SNR_FULL noise units
#: high, a missing reflection is a real absence. Our choice (issue 15), checked on the
#: mesophase ramps of tests/validation.
SNR_FULL = 12.0
SNR_FLOOR = 0.25
_N_REF = {"lamellar": 12, "hexagonal": 20}
_N_REF_CUBIC = 30
_ANCHOR_REFLECTIONS = 3
_KEEP = 4  # distinct lattices kept per phase per frame
#: Work-saving shortcuts of the candidate search (issue 14): each gives the same numbers
#: as the plain computation, bit for bit (rows are independent, sums run peak after
#: peak); False runs the plain computation, for the tests that check that.
SHORTCUTS = True
#: Fewest peaks a candidate must index: two orders identify a lamellar (1:2) or
#: hexagonal (1:sqrt 3) phase, but two numbers fit some cubic ratio by chance (any ratio
#: within 1 % of one of dozens), so a cubic phase needs three (issue 15).
MIN_MATCHED = {"lamellar": 2, "hexagonal": 2}
_MIN_MATCHED_CUBIC = 3

@cache
def _table(phase: str):
    n = _N_REF.get(phase, _N_REF_CUBIC)
    refl = allowed_reflections(phase, n)
    s = np.array([r[0] for r in refl], dtype=np.int64)
    smax = int(s.max())
    ok = np.zeros(smax + 2, dtype=bool)
    ok[s] = True
    rank = np.full(smax + 2, -1, dtype=np.int64)
    rank[s] = np.arange(s.size)
    labels = np.array(["".join(str(i) for i in hkl) for _, hkl in refl])
    return s, ok, rank, labels


@cache
def _miss_tables(phase: str):
    """Cumulative cost of the allowed reflections up to each s, and the cost by s."""
    s_list, ok, rank, _ = _table(phase)
    mc = np.array([MISS_COST[min(j, len(MISS_COST) - 1)] for j in range(s_list.size)])
    by_s = np.zeros(ok.size)
    by_s[s_list] = mc
    return np.cumsum(by_s), by_s


_GRID = 64  # points per unit of s in the nearest-reflection lookup


@cache
def _nearest_table(phase: str):
    """Nearest allowed s (in q, i.e. sqrt(s)) for x = (q L)^2 on a grid of 1/_GRID."""
    s_list = _table(phase)[0]
    root = np.sqrt(s_list.astype(float))
    g = np.sqrt((np.arange((int(s_list.max()) + 2) * _GRID) + 0.5) / _GRID)
    j = np.clip(np.searchsorted(root, g), 1, root.size - 1)
    lower_closer = (g / root[j - 1] - 1.0) < (1.0 - g / root[j])
    pick = np.where(lower_closer, j - 1, j)
    pick = np.where(g <= root[0], 0, np.where(g >= root[-1], root.size - 1, pick))
    nearest = s_list[pick]
    nearest[-_GRID // 2 :] = 0  # beyond the table: no reflection
    return nearest, np.sqrt(np.maximum(nearest, 1).astype(float))


@cache
def _phase_set(phases: tuple):
    """Lookup tables of several phases end to end, so all phases are matched at once.

    Returns a dict: ``s`` / ``root`` / ``mc``, for each entry of the
    :func:`_nearest_table` of each phase, the nearest allowed s (float, 0 = none), its
    square root and its :data:`MISS_COST`; ``n_off`` / ``n_top`` the first and last
    entry of each phase; ``cum`` the cumulative miss cost by s of each phase
    (:func:`_miss_tables`) end to end, ``c_off`` / ``c_top`` likewise; ``first``
    (n_phases, 3) sqrt of the first allowed s of each phase.
    """
    names = ("s", "root", "mc", "cum", "n_off", "n_top", "c_off", "c_top", "first", "min_match")
    parts = {k: [] for k in names}
    n_pos = c_pos = 0
    for ph in phases:
        nearest, root = _nearest_table(ph)
        cum, by_s = _miss_tables(ph)
        s_list = _table(ph)[0]
        if s_list.size < _ANCHOR_REFLECTIONS:  # pragma: no cover - every table is longer
            raise ValueError(f"{ph}: fewer than {_ANCHOR_REFLECTIONS} reflections")
        parts["s"].append(nearest.astype(float))
        parts["root"].append(root)
        parts["mc"].append(by_s[nearest])  # by_s[0] = 0: no reflection, no cost
        parts["cum"].append(cum)
        parts["n_off"].append(n_pos)
        parts["n_top"].append(nearest.size - 1)
        parts["c_off"].append(c_pos)
        parts["c_top"].append(cum.size - 1)
        parts["first"].append(np.sqrt(s_list[:_ANCHOR_REFLECTIONS]))
        parts["min_match"].append(MIN_MATCHED.get(ph, _MIN_MATCHED_CUBIC))
        n_pos += nearest.size
        c_pos += cum.size
    out = {k: np.concatenate(parts[k]) for k in ("s", "root", "mc", "cum")}
    out.update(
        n_off=np.array(parts["n_off"], dtype=np.intp),
        n_top=np.array(parts["n_top"], dtype=float),
        c_off=np.array(parts["c_off"], dtype=np.intp),
        c_top=np.array(parts["c_top"], dtype=float),
        first=np.stack(parts["first"]),
        min_match=np.array(parts["min_match"], dtype=np.int64),
    )
    return out


def miss_weight(snr):
    """Weight of an absent reflection from the signal-to-noise ratio of the indexed peak
    just above it: clip(snr / SNR_FULL, SNR_FLOOR, 1); unknown (NaN, inf) -> 1.

    >>> miss_weight(np.array([3.0, 6.0, 30.0, np.nan])).tolist()
    [0.25, 0.5, 1.0, 1.0]
    """
    snr = np.asarray(snr, dtype=float)
    with np.errstate(invalid="ignore"):
        w = np.clip(snr / SNR_FULL, SNR_FLOOR, 1.0)
    return np.where(np.isfinite(snr), w, 1.0)


def _gap_miss(s, own, weight, lo, cum, off):
    """Noise-weighted cost of the absent reflections of candidates (see :data:`SNR_FULL`).

    s (..., P) int, the allowed s given to each peak (sorted by q; 0 = none), ``own``
    the peaks the phase keeps (bool, like s), ``weight`` (..., P) broadcastable (from
    :func:`miss_weight`), or None for unweighted costs; ``lo`` (...) int: reflections
    with s > lo count; ``cum`` the flat cumulative cost table of :func:`_phase_set` and
    ``off`` (...) each candidate's offset in it. Counts the allowed reflections between
    consecutive own peaks (and from ``lo`` to the first), each gap weighted by the
    weight of the own peak that closes it.
    """
    s_own = np.where(own, s, 0).astype(np.int64, copy=False)
    prev = s_own.copy()  # running maximum along the peaks (a loop: faster than accumulate on short rows)
    for j in range(1, prev.shape[-1]):
        np.maximum(prev[..., j - 1], prev[..., j], out=prev[..., j])
    below = np.empty_like(prev)
    below[..., 0] = lo
    np.maximum(prev[..., :-1], lo[..., None], out=below[..., 1:])
    o = off[..., None]
    upper = np.subtract(s_own, 1, out=prev)
    np.maximum(upper, 0, out=upper)
    upper += o
    below += o
    # the two look-ups go into the memory of integer arrays no longer needed: fresh
    # arrays alive at the same time cost page faults, several times the look-ups
    # (indices are within the table, so mode "clip" changes nothing)
    gap = cum.take(upper, out=s_own.view(np.float64), mode="clip")
    gap -= cum.take(below, out=upper.view(np.float64), mode="clip")
    np.maximum(gap, 0.0, out=gap)
    gap *= own  # 0 where not own (there upper <= below anyway)
    if weight is not None:
        gap *= weight
    return _sum_peaks(gap)


def _sum_peaks(a):
    """Sum over the last (peak) axis, one peak after the other.

    Padding with zeros does not change the result, so it does not depend on how many
    peaks the other frames of a block have (``np.sum`` switches to pairwise summation
    from 8 terms on).
    """
    out = a[..., 0].copy()
    for j in range(1, a.shape[-1]):
        out += a[..., j]
    return out


class _Scratch:
    """Work arrays reused from one block of frames to the next.

    Touching freshly allocated memory costs page faults (several times the arithmetic
    done on it here), so the large (frames, peaks, candidates) arrays of one call of
    :func:`index_peaks` live in a few buffers that every block reuses. Only scratch
    space is kept, never a result.
    """

    def __init__(self):
        self._buf = {}

    def __call__(self, name, shape, dtype=float):
        n = int(np.prod(shape))
        b = self._buf.get(name)
        if b is None or b.size < n:
            b = self._buf[name] = np.empty(n, dtype=dtype)
        return b[:n].reshape(shape)


def _match(tabs, ph_of, q, L, tol, ws, err=True):
    """Nearest allowed s for each observed q under each candidate metric L.

    q (B, P) NaN padded, sorted; L (B, N), candidate n a metric of phase ``ph_of[n]``
    (tables from :func:`_phase_set`); ``ws`` a :class:`_Scratch`. Arrays are laid out
    (B, P, N), candidates last. Returns ``s`` (float, 0 = none), ``root`` = sqrt(s)
    (0 = none), ``ok`` (s > 0), ``nok`` (not ok), ``mc`` the miss cost of s (0 = none)
    and ``err`` the relative error |q L / sqrt(s) - 1| (meaningless where not ok);
    ``nok``, ``mc`` and ``err`` are None with ``err=False``. The arrays are views of
    ``ws`` buffers, valid until the next call.
    """
    shape = (q.shape[0], q.shape[1], L.shape[1])
    x = np.multiply(q[:, :, None], L[:, None, :], out=ws("x", shape))  # = sqrt of (q L)^2
    y = np.multiply(x, x, out=ws("y", shape))
    y *= _GRID
    # NaN / beyond the table -> the last entry, which holds no reflection
    np.fmin(y, tabs["n_top"][ph_of], out=y)
    i = ws("i", shape, np.intp)
    np.copyto(i, y, casting="unsafe")  # truncation, as astype
    i += tabs["n_off"][ph_of]
    s = tabs["s"].take(i, out=ws("s", shape), mode="clip")  # i is within the table
    root = tabs["root"].take(i, out=ws("root", shape), mode="clip")
    e = x
    with np.errstate(invalid="ignore"):
        np.divide(x, root, out=e)
    e -= 1.0
    np.abs(e, out=e)
    ok = np.less_equal(e, tol, out=ws("ok", shape, bool))
    s *= ok
    # one observed peak per reflection: q is sorted, so two peaks claiming the same s are
    # neighbours; keep the closer one
    sh = (shape[0], shape[1] - 1, shape[2])
    same = np.equal(s[:, 1:], s[:, :-1], out=ws("same", sh, bool))
    same &= np.greater(s[:, 1:], 0.0, out=ws("pos", sh, bool))
    if same.any():
        right_worse = same & (e[:, 1:] >= e[:, :-1])
        drop = np.zeros(s.shape, dtype=bool)
        drop[:, 1:] |= right_worse
        drop[:, :-1] |= same & ~right_worse
        ok &= ~drop
        s *= ok
    root *= ok
    if not err:
        return s, root, ok, None, None, None
    mc = tabs["mc"].take(i, out=ws("mc", shape), mode="clip")
    mc *= ok
    return s, root, ok, np.logical_not(ok, out=ws("nok", shape, bool)), mc, e


def _refine(s, w, q0, wq, root=None, sigma=True, finite=True):
    """Weighted least squares of q = k sqrt(s); returns L = 1/k and sigma_L.

    s (..., P) assigned s (0 = none), ``root`` its square root (default computed); w
    weights 1/sigma_q^2, q0 positions (NaN -> 0), wq = w q0, all broadcastable to s;
    ``finite``: w and wq are finite, so unassigned peaks drop out as 0 * finite. Sigma
    of k from (sum w s)^-1/2 scaled by sqrt(chi2_red) when chi2_red > 1 (more than one
    peak).
    """
    m = s > 0
    if root is None:
        root = np.sqrt(s.astype(float))
    if not finite:
        w, wq = np.where(m, w, 0.0), np.where(m, wq, 0.0)
    sw = np.sum(w * s, axis=-1)
    with np.errstate(all="ignore"):
        k = np.sum(wq * root, axis=-1) / sw
        if not sigma:
            return 1.0 / k, None
        n = m.sum(axis=-1)
        d = q0 - k[..., None] * root
        d *= d
        d *= np.where(m, w, 0.0)
        chi = np.sum(d, axis=-1)
        red = np.where(n > 1, chi / np.maximum(n - 1, 1), 1.0)
        sk = np.sqrt(np.maximum(red, 1.0) / sw)
        L = 1.0 / k
        sL = sk / k**2
    return L, sL


def _refine_candidates(s, root, ok, w, q0, wq, ws, sigma=True, finite=True):
    """:func:`_refine` for arrays laid out (B, P, N) (w, q0, wq (B, P, 1)), ``ok`` =
    s > 0; sums run over the peak axis one peak after the other. With ``sigma="later"``
    returns ``L`` and what :func:`_sigma_candidates` needs (``k``, ``sw``), so sigma_L
    is computed for a few candidates only, with the same numbers."""
    if not finite:
        w, wq = np.where(ok, w, 0.0), np.where(ok, wq, 0.0)
    t = np.multiply(w, s, out=ws("t", s.shape))
    sw = t.sum(axis=1)  # a middle axis: summed one peak after the other
    with np.errstate(all="ignore"):
        k = np.multiply(wq, root, out=t).sum(axis=1) / sw
        if not sigma:
            return 1.0 / k, None
        if sigma == "later":
            return 1.0 / k, (k, sw)
    return 1.0 / k, _sigma_candidates(k, sw, root, ok, w, q0, ws)


def _sigma_candidates(k, sw, root, ok, w, q0, ws):
    """sigma_L of :func:`_refine_candidates` from its ``k`` and ``sw`` (B, N), with
    root, ok (B, P, N) and w, q0 (B, P, 1) (w as given to it)."""
    with np.errstate(all="ignore"):
        n = ok.sum(axis=1)
        d = np.multiply(k[:, None, :], root, out=ws("t3", root.shape))
        np.subtract(q0, d, out=d)
        d *= d
        d *= np.multiply(w, ok, out=ws("t2", root.shape))  # w where assigned, else 0
        chi = d.sum(axis=1)
        red = np.where(n > 1, chi / np.maximum(n - 1, 1), 1.0)
        sk = np.sqrt(np.maximum(red, 1.0) / sw)
        sL = sk / k**2
    return sL


def _singles(tabs, q, w, q0, wq, finite, unexpl, qa, q_lo, tol, ws, snr=None):
    """Best ``_KEEP`` distinct lattices of every phase for each frame.

    q, w, q0, wq, unexpl (B, P); qa (B, A) the anchor peaks; q_lo (B,); ``ws`` a
    :class:`_Scratch`; ``snr`` (B, P) optional, the :func:`miss_weight` of each peak:
    the kept candidates' absent reflections are then weighted by the noise
    (:func:`_gap_miss`; the ranking that keeps them is unweighted). Returns dict of
    arrays (B, n_phases * _KEEP[, P]), phase by phase.
    """
    B, P = q.shape
    nph, na = tabs["first"].shape
    C = qa.shape[1] * na  # candidates per phase: each anchor as each first reflection
    ph_of = np.repeat(np.arange(nph), C)
    L0 = (tabs["first"][None, :, None, :] / qa[:, None, :, None]).reshape(B, nph * C)
    w3, q03, wq3 = w[:, :, None], q0[:, :, None], wq[:, :, None]
    s, root, ok, _, _, _ = _match(tabs, ph_of, q, np.nan_to_num(L0, nan=0.0), tol, ws, err=False)
    L, _ = _refine_candidates(s, root, ok, w3, q03, wq3, ws, sigma=False, finite=finite)
    L = np.where(np.isfinite(L) & np.isfinite(L0), L, 0.0)
    s, root, matched, unmatched, mc, err = _match(tabs, ph_of, q, L, tol, ws)
    # sigma_L only for the candidates kept (below): the same numbers, a quarter of the work
    L, (k_all, sw_all) = _refine_candidates(s, root, matched, w3, q03, wq3, ws, sigma="later",
                                            finite=finite)
    n_match = matched.sum(1)  # one peak per reflection (see _match)
    # missing reflections: allowed ones predicted inside [q_lo, highest matched q] that no
    # peak matches. Their cost is the cumulative cost of all allowed reflections in that
    # range (a table over s) minus the cost of the matched ones.
    cum_cost = tabs["cum"]
    top = tabs["c_top"][ph_of]
    off = tabs["c_off"][ph_of]
    t = ws("t", s.shape)
    with np.errstate(invalid="ignore"):
        # q > 0, so 0 (no match) stands in for -inf: both give x_hi = 0 below
        q_hi = np.multiply(q0[:, :, None], matched, out=t).max(1) * (1 + tol)
        x_hi = np.nan_to_num((q_hi * L) ** 2, copy=False, nan=0.0, posinf=0.0, neginf=0.0)
        x_lo = np.nan_to_num((q_lo[:, None] * L) ** 2, copy=False, nan=0.0, posinf=0.0)
    hi = np.clip(np.floor(x_hi), 0, top).astype(np.intp)
    lo = np.clip(np.ceil(x_lo) - 1, 0, top).astype(np.intp)
    in_range = np.where(hi > lo, cum_cost[hi + off] - cum_cost[lo + off], 0.0)
    miss = np.maximum(in_range - mc.sum(1), 0.0)
    # (err / tol)^2 where matched (err <= tol there), 0 elsewhere (fmin also maps NaN)
    e2 = np.fmin(err, tol, out=t)
    e2 /= tol
    e2 *= e2
    e2 *= matched
    fitc = 0.25 * e2.sum(1)
    valid = (n_match >= tabs["min_match"][ph_of][None, :]) & np.isfinite(L) & (L > 0)
    # two peaks are a lattice only as its first orders: with a predicted reflection
    # missing between them (e.g. hexagonal 11 and 20 without 10) they are a guess
    valid &= (n_match >= 3) | (miss <= 0.0)
    cost = np.multiply(unexpl[:, :, None], unmatched, out=t).sum(1) + miss + fitc
    cost = np.where(valid, cost, np.inf)
    # keep the best _KEEP candidates of each phase with distinct lattices
    c = cost.reshape(B, nph, C)
    L3 = L.reshape(B, nph, C)
    keep, kept_cost = [], []
    for _ in range(_KEEP):
        j = np.argmin(c, axis=2)[..., None]  # (B, nph, 1)
        keep.append(j)
        kept_cost.append(np.take_along_axis(c, j, 2))  # inf when nothing distinct is left
        Lj = np.take_along_axis(L3, j, 2)
        with np.errstate(invalid="ignore", divide="ignore"):
            same = np.abs(L3 / Lj - 1.0) <= tol
        c = np.where(same, np.inf, c)
    J = (np.concatenate(keep, axis=2) + (np.arange(nph) * C)[None, :, None]).reshape(B, nph * _KEEP)

    # flat positions of the kept candidates: (B, M) in (B, N) arrays, (B, P, M) in (B, P, N)
    N = nph * C
    at2 = np.arange(B)[:, None] * N + J
    at3 = (np.arange(B)[:, None, None] * (P * N) + (np.arange(P) * N)[None, :, None]) + J[:, None, :]

    def take(a):
        if a.ndim == 2:
            return a.reshape(-1).take(at2)
        return a.reshape(-1).take(at3.transpose(0, 2, 1))  # (B, M, P)

    s_kept = take(s).astype(np.int64)
    if SHORTCUTS:
        ok_k = matched.reshape(-1).take(at3)
        sL_kept = _sigma_candidates(take(k_all), take(sw_all), root.reshape(-1).take(at3), ok_k,
                                    w3 if finite else np.where(ok_k, w3, 0.0), q03, ws)
    else:
        w_a = w3 if finite else np.where(matched, w3, 0.0)
        sL_kept = take(_sigma_candidates(k_all, sw_all, root, matched, w_a, q03, ws))
    cost_kept = np.concatenate(kept_cost, axis=2).reshape(B, nph * _KEEP)
    miss_kept = take(miss)
    if snr is not None:
        lo_k = take(lo)
        off_k = off[J]
        miss_w = _gap_miss(s_kept, s_kept > 0, snr[:, None, :], lo_k, cum_cost, off_k)
        cost_kept = np.where(np.isfinite(cost_kept), cost_kept - miss_kept + miss_w, cost_kept)
        miss_kept = miss_w
    return {
        "L": take(L),
        "sL": sL_kept,
        "s": s_kept,
        "err": np.where(s_kept > 0, take(err), np.nan),
        "mc": take(mc),
        "miss": miss_kept,
        "fit": take(fitc),
        "cost": cost_kept,
    }
