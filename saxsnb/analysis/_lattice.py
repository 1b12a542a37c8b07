"""Assigning mesophases to the Bragg peaks of every frame (the phase map built on the
result lives in :mod:`saxsnb.analysis._phasemap` and is re-exported here).

The observed peak positions of all frames (a padded ``(n_frames, n_peaks)`` array)
are explained by one phase or a pair of coexisting phases, chosen among lamellar,
2D hexagonal and the cubic Pn3m, Im3m, Ia3d, Fd3m, Pm3n and Fm3m, whose allowed
reflections come from :mod:`saxsnb.analysis._reflections` (the matching of peaks to
reflections, candidate by candidate, is in :mod:`saxsnb.analysis._latticematch`). The
scan (temperature, time, ...) is then used as a prior: a dynamic-programming pass
(Viterbi 1967) over the frames favours explanations that continue from one frame to
the next with a smoothly changing lattice parameter.
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._bragg import bragg_evidence, describe_rejections
from ._lattice_search import (
    _ANCHOR_PEAKS,
    _VITERBI_STATES,
    AMBIGUOUS_MARGIN,
    CLOSE_COST,
    _blocks,
    _hypotheses,
    _key,
    _relabel_subsets,
    _states,
    _viterbi,
)
from ._latticematch import (
    MISS_COST as MISS_COST,  # re-exported: documented here
)
from ._latticematch import (
    _refine,
    _Scratch,
    _table,
    miss_weight,
)
from ._phasemap import BONNET_RATIOS, phase_map
from ._reflections import PHASES
from ._status import STATUS_DTYPE

__all__ = [
    "PHASES",
    "BONNET_RATIOS",
    "lattice_from_metric",
    "index_peaks",
    "phase_map",
]



def lattice_from_metric(phase: str, metric):
    """Lattice parameter (nm) from the metric ``L`` with ``q = sqrt(s) / L``.

    Lamellar d = 2 pi L (s = l^2), cubic a = 2 pi L (s = h^2+k^2+l^2), 2D hexagonal
    a = 4 pi L / sqrt(3) (s = h^2+hk+k^2); see REFERENCES.md (common practice).

    >>> round(float(lattice_from_metric("Pn3m", np.sqrt(2) / 1.0)), 4)  # 110 at q = 1
    8.8858
    """
    m = np.asarray(metric, dtype=float)
    if phase == "hexagonal":
        return 4.0 * np.pi * m / np.sqrt(3.0)
    return 2.0 * np.pi * m


def index_peaks(
    position,
    position_sigma=None,
    strength=None,
    *,
    phases=PHASES,
    max_phases: int = 2,
    tolerance: float = 0.01,
    q_min=None,
    use_scan_prior: bool = True,
    prior_weight: float = 1.0,
    switch_cost: float = 0.8,
    jump_cost: float = 1.2,
    jump_scale: float = 0.03,
    block: int = 500,
    fwhm=None,
    q_step=None,
    resolution=None,
    max_relative_width: float | None = 0.1,
    snr=None,
):
    """Explain the peaks of every frame by one phase or a pair of coexisting phases.

    Parameters
    ----------
    position : array (n_frames, n_peaks), 1/nm, NaN padded; frames in scan order.
    position_sigma : array like position, optional; weights 1/sigma^2 of the lattice fit.
    strength : array like position, optional (e.g. prominence); strong peaks count
        more when unexplained. Default: all equal.
    phases : sequence of phase names out of :data:`PHASES`.
    max_phases : 1 or 2.
    tolerance : float
        Largest relative difference |q_obs / q_hkl - 1| for a peak to be assigned.
    q_min : float or array (n_frames,), optional
        Lowest q observed (1/nm): reflections below it are not expected.
    use_scan_prior : bool
        Choose the explanation of each frame jointly along the scan (see Notes).
    prior_weight, switch_cost, jump_cost, jump_scale : float
        Transition costs of the scan prior (see Notes).
    block : int, at most this many frames processed at once (memory); frames are
        worked on in blocks of equal peak count, and the result does not depend on
        the blocks.
    fwhm : array like position, 1/nm, optional
        Peak widths. With them every peak is first tested as a Bragg reflection
        (:func:`saxsnb.analysis._bragg.bragg_evidence`: spikes, broad form-factor maxima,
        split features, frames whose peaks are as wide as their spacing) and only the
        peaks that pass are indexed. Pass the peak table of
        :func:`saxsnb.analysis._peaks.find_peaks` whole: ``fwhm=table["fwhm"]``.
    q_step, resolution : float or array (n_frames,), 1/nm, optional
        The q grid step and the instrument resolution FWHM, for the spike test.
    max_relative_width : float or None
        FWHM / position above which a peak is not a reflection (None: no such test).
    snr : array like position, optional
        Signal-to-noise ratio of each peak (the prominence of
        :func:`~saxsnb.analysis._peaks.find_peaks`, in noise units). With it an absent
        reflection costs less where the phase's neighbouring peaks barely stand above
        the noise (:data:`~saxsnb.analysis._latticematch.SNR_FULL`); without it every
        absent reflection costs its full :data:`MISS_COST`.

    Returns
    -------
    dict of arrays:
    per (frame, slot), slot < max_phases: ``phase`` (str, "" empty), ``lattice`` and
    ``lattice_sigma`` (nm: d for lamellar, a otherwise), ``score`` (share of the
    frame's peak strength explained by that phase, 0..1);
    per (frame, peak): ``hkl`` (str, "" unassigned), ``peak_phase`` (str);
    per frame: ``alternative`` (str, up to three close other explanations, closest
    first, ", "-separated, pairs written "A+B"; "" when none), ``status`` ("ok",
    "unexplained_peaks", "ambiguous_phase" (the closest other explanation within
    ``AMBIGUOUS_MARGIN`` of the chosen one, or cheaper), "no_phase_found", "not_enough_peaks_to_index",
    "no_peaks", "no_bragg_peaks"), ``cost``, ``margin`` (cost of the closest other
    explanation minus the chosen one; NaN when none), ``n_unexplained``, ``caveat``
    (str), ``n_rejected`` (peaks set aside as not Bragg) and ``rejected`` (str, their
    positions and the test that set each aside, e.g. "1.137 spike, 0.194 broad"; the
    per-peak codes come from :func:`saxsnb.analysis._bragg.bragg_evidence`).

    Notes
    -----
    *Candidates.* For each phase, each of the six strongest peaks is taken in turn as
    each of the first three allowed reflections, giving a trial metric L
    (``q = sqrt(s) / L``, see :func:`lattice_from_metric`). Every peak is assigned the
    nearest allowed s within ``tolerance`` (one peak per reflection, the closest) and L
    is refined by weighted least squares of
    ``q_i = sqrt(s_i) / L`` (weights ``1 / sigma_i^2``; sigma of L from the normal
    equation, scaled by sqrt of the reduced chi-square when above one). A phase
    needs at least two peaks with distinct indices. Frames whose best explanation
    leaves a peak unexplained get a second pass anchored on the unexplained peaks
    (every peak an anchor), so a weak coexisting phase is found even when none of its
    peaks is among the strongest.

    *Cost* of an explanation (lower is better): each unexplained peak costs
    ``1 + strength / max strength``; each allowed reflection that should appear
    between the lowest observed q and the highest assigned peak but is not observed
    costs :data:`MISS_COST` by rank (missing low orders weigh most), times a noise
    weight when ``snr`` is given (the signal-to-noise ratio of the phase's next indexed
    peak above it, :data:`~saxsnb.analysis._latticematch.SNR_FULL`); in a pair each
    phase's absent reflections are recounted on the peaks the pair gives it (a peak is
    not counted for both; a reflection under the other phase's peak counts as
    absent, ``HIDDEN_FRACTION``); a second phase
    costs :data:`PHASE_COST` and must explain at least two peaks of its own (a cubic
    phase at least three peaks in all, :data:`~saxsnb.analysis._latticematch.MIN_MATCHED`); the
    misfit adds ``0.25 sum (err / tolerance)^2``. So the explanation with the fewest
    phases that accounts for all strong peaks without gaps in its low orders wins.
    A cubic phase whose indexed reflections are all allowed by a cubic phase with
    fewer reflections at the same cell (Im3m within Pn3m and Pm3n, Ia3d within Im3m,
    Fd3m within Fm3m) is also read as that phase, which predicts fewer absent ones.
    Explanations of other phases within :data:`CLOSE_COST` are reported in
    ``alternative`` (e.g. Im3m vs Pn3m when sqrt(3) is absent) and the caveat; within
    ``AMBIGUOUS_MARGIN`` (or cheaper, when the scan prior chose) the status is
    "ambiguous_phase".

    *Scan prior.* With ``use_scan_prior`` the lowest-cost states of each frame
    (frames with fewer than two peaks are skipped) are linked by a Viterbi pass
    (Viterbi 1967, IEEE Trans. Inf. Theory 13, 260) minimising the sum of frame costs
    plus transitions: ``switch_cost`` per phase appearing or vanishing and
    ``jump_cost * min(1, (|ln(L'/L)| / jump_scale)^2)`` per phase kept, all times
    ``prior_weight``. A phase that explains frames n and n+1 with a smoothly changing
    lattice is thus favoured over a jump to a near-equal explanation; evidence in a
    frame stronger than the transition costs still wins.

    A frame with one peak is never indexed (status "not_enough_peaks_to_index").

    Examples
    --------
    >>> from saxsnb.analysis._reflections import q_positions
    >>> q = q_positions("Pn3m", 10.0, 6)[None]  # 110, 111, 200, 211, 220, 221
    >>> r = index_peaks(q)
    >>> str(r["phase"][0, 0]), round(float(r["lattice"][0, 0]), 3), r["hkl"][0].tolist()
    ('Pn3m', 10.0, ['110', '111', '200', '211', '220', '221'])
    """
    phases = tuple(phases)
    for ph in phases:
        if ph not in PHASES:
            raise SaxsInputError(f"unknown phase {ph!r}; known: {PHASES}", parameter="phases")
    if max_phases not in (1, 2):
        raise SaxsInputError("max_phases must be 1 or 2", parameter="max_phases")
    if not 0 < tolerance < 0.1:
        raise SaxsInputError("tolerance must be between 0 and 0.1", parameter="tolerance")
    q = np.atleast_2d(np.asarray(position, dtype=float)).copy()
    F, P = q.shape
    if P == 0:  # no peak column at all
        q = np.full((F, 1), np.nan)
        P = 1
        position_sigma = strength = snr = None
    # evidence first: peaks that are not Bragg reflections are not indexed (issue 15)
    keep, why, _ = bragg_evidence(
        q,
        None if fwhm is None or P != np.shape(fwhm)[-1] else np.broadcast_to(np.asarray(fwhm, float), (F, P)),
        None if strength is None else np.broadcast_to(np.asarray(strength, float), (F, P)),
        q_step=q_step, resolution=resolution, max_relative_width=max_relative_width,
    )
    rejected_names = np.array(["", "spike", "broad", "overlapping", "form_factor_like"])[why]
    n_rejected = (why > 0).sum(-1)
    reject_words = describe_rejections(why)
    rejected_list = np.full(F, "", dtype=object)
    for i in np.nonzero(n_rejected)[0]:  # words only for frames with rejections
        j = np.nonzero(why[i])[0]
        rejected_list[i] = ", ".join(f"{q[i, k]:.4g} {rejected_names[i, k]}" for k in j)
    rejected_list = rejected_list.astype(str)
    with np.errstate(invalid="ignore"):
        q[(why > 0)] = np.nan
    # work on peaks sorted by q (NaN last); per-peak outputs are put back in input order
    with np.errstate(invalid="ignore"):
        q[~(np.isfinite(q) & (q > 0))] = np.nan  # unusable positions count as no peak
    order = np.argsort(np.where(np.isfinite(q), q, np.inf), axis=1, kind="stable")
    inverse = np.argsort(order, axis=1)
    q = np.take_along_axis(q, order, 1)
    if position_sigma is not None:
        position_sigma = np.broadcast_to(np.asarray(position_sigma, float), (F, P))
        position_sigma = np.take_along_axis(position_sigma, order, 1)
    if snr is not None:
        snr = np.take_along_axis(np.broadcast_to(np.asarray(snr, float), (F, P)), order, 1)
        # from here on the weight of an absent reflection below each peak (unknown ratio,
        # e.g. a shoulder without prominence: full weight, as without snr)
        snr = miss_weight(snr)
    if strength is not None:
        strength = np.take_along_axis(np.broadcast_to(np.asarray(strength, float), (F, P)), order, 1)
    present = np.isfinite(q)
    sig = np.full_like(q, np.nan) if position_sigma is None else np.asarray(position_sigma, dtype=float)
    fallback = tolerance * np.nan_to_num(q) / 3.0
    with np.errstate(invalid="ignore"):
        sig = np.where(np.isfinite(sig) & (sig > 0), sig, fallback)
        sig = np.maximum(sig, 1e-6 * np.nan_to_num(q))
        w = np.where(present, 1.0 / np.where(present, sig, 1.0) ** 2, 0.0)
    q0 = np.where(present, q, 0.0)
    wq = w * q0
    finite = bool(np.isfinite(w).all() and np.isfinite(wq).all())
    st = np.ones_like(q) if strength is None else np.asarray(strength, dtype=float)
    st = np.where(present & np.isfinite(st) & (st > 0), st, np.where(present, 1e-3, 0.0))
    qlo = np.zeros(F) if q_min is None else np.broadcast_to(np.asarray(q_min, dtype=float), (F,))
    n_obs = present.sum(-1)
    nph = len(phases)
    nkeys = (nph + 1) ** 2
    Kv = _VITERBI_STATES
    st_phase = np.full((F, Kv, 2), -1)
    st_L = np.full((F, Kv, 2), np.nan)
    st_sL = np.full((F, Kv, 2), np.nan)
    st_slot = np.full((F, Kv, P), -1)
    st_s = np.zeros((F, Kv, P), dtype=np.int64)
    st_cost = np.full((F, Kv), np.inf)
    best_key = np.full((F, nkeys), np.inf)
    rho = np.zeros((F, P))
    scratch = _Scratch()

    def explain(frames, n_anchor, focus=None):
        """Hypotheses for the frames ``frames`` (indices); fills the state arrays."""
        sl = frames
        pb = max(int(n_obs[sl].max()), 1)  # peaks are sorted, NaN last: drop empty columns
        H = _hypotheses(q[sl, :pb], w[sl, :pb], st[sl, :pb], qlo[sl], phases, max_phases, tolerance,
                        n_anchor, None if focus is None else focus[:, :pb], scratch,
                        snr=None if snr is None else snr[sl, :pb])
        cost = np.where((n_obs[sl] >= 2)[:, None], H["cost"], np.inf)
        cost[:, 0] = H["cost"][:, 0]  # the empty explanation always exists
        rho[sl, :pb] = H["rho"]
        rho[sl, pb:] = 0.0
        n_new = cost.shape[1]
        if focus is not None:  # a second pass: keep the states of the first pass in the running
            cost = np.concatenate([cost, st_cost[sl]], axis=1)
        kk = min(Kv, cost.shape[1])
        if kk < cost.shape[1]:
            top = np.argpartition(cost, kk - 1, axis=1)[:, :kk]
            inner = np.argsort(np.take_along_axis(cost, top, 1), axis=1, kind="stable")
            top = np.take_along_axis(top, inner, 1)
        else:
            top = np.argsort(cost, axis=1, kind="stable")
        new = _states(H, np.where(top < n_new, top, 0), P)
        if focus is not None:  # the states kept from the first pass
            old = top >= n_new
            prev = np.where(old, top - n_new, 0)
            for key, arr in (("phase", st_phase), ("L", st_L), ("sL", st_sL), ("slot", st_slot), ("s", st_s)):
                o = np.take_along_axis(arr[sl], prev.reshape(prev.shape + (1,) * (arr.ndim - 2)), 1)
                new[key] = np.where(old.reshape(old.shape + (1,) * (arr.ndim - 2)), o, new[key])
        st_phase[sl, :kk] = new["phase"]
        st_L[sl, :kk] = new["L"]
        st_sL[sl, :kk] = new["sL"]
        st_slot[sl, :kk] = new["slot"]
        st_s[sl, :kk] = new["s"]
        st_cost[sl, :kk] = np.take_along_axis(cost, top, 1)
        # lowest cost of each label set: the columns of the table have fixed label sets
        tab = H["tab"]
        bk = np.full((len(sl), nkeys), np.inf)
        bk[:, tab["ukeys"]] = np.minimum.reduceat(cost[:, tab["order"]], tab["starts"], axis=1)
        if focus is not None:  # the first pass's states are already in best_key
            bk = np.minimum(bk, best_key[sl])
        best_key[sl] = bk

    for rows_ in _blocks(np.arange(F), n_obs, _ANCHOR_PEAKS, nph, block):
        explain(rows_, _ANCHOR_PEAKS)
    # frames whose best explanation leaves two or more peaks unexplained and that have
    # more peaks than anchors: again with every peak as an anchor, so that a weak
    # coexisting phase (none of its peaks among the strongest) can still be found
    if max_phases >= 2:
        unexplained = present & (st_slot[:, 0] < 0)
        again = np.nonzero((unexplained.sum(-1) >= 1) & (n_obs > 2))[0]
        for rows_ in _blocks(again, n_obs, P, nph, block):
            explain(rows_, P, unexplained[rows_])
    # a cubic phase whose indexed reflections are all allowed by a cubic phase with fewer
    # reflections (Im3m within Pn3m or Pm3n, ...) is also read as that phase, which
    # predicts fewer absent reflections: added as a state of its own (the original stays,
    # for the scan prior and as the alternative), the Kv cheapest states kept
    # frame by frame independent: in blocks of frames, so the temporaries stay bounded
    # (about 10 kB a frame) however long the series (a 10^5-frame table: 1 GB at once)
    new_phase, new_cost = np.empty_like(st_phase), np.empty_like(st_cost)
    for a in range(0, F, _RELABEL_BLOCK):
        sl = slice(a, a + _RELABEL_BLOCK)
        new_phase[sl], new_cost[sl] = _relabel_subsets(
            st_phase[sl], st_L[sl], st_slot[sl], st_s[sl], st_cost[sl], q[sl], np.asarray(qlo)[sl], phases,
            tolerance, snr=None if snr is None else snr[sl])
    changed = (new_phase != st_phase).any(-1)
    if changed.any():
        f_, k_ = np.nonzero(changed)
        np.minimum.at(best_key, (f_, _key(new_phase[f_, k_], nph)), new_cost[f_, k_])
        both_cost = np.concatenate([st_cost, np.where(changed, new_cost, np.inf)], 1)
        top = np.argsort(both_cost, axis=1, kind="stable")[:, :Kv]
        st_cost = np.take_along_axis(both_cost, top, 1)
        src = np.where(top >= Kv, top - Kv, top)
        phase2 = np.concatenate([st_phase, new_phase], 1)
        st_phase = np.take_along_axis(phase2, top[..., None], 1)
        st_L, st_sL, st_slot, st_s = (np.take_along_axis(a, src[..., None], 1)
                                      for a in (st_L, st_sL, st_slot, st_s))
    # choose a state per frame
    choice = np.zeros(F, dtype=np.int64)  # states are sorted: 0 = frame's best
    informative = (n_obs >= 2) & np.isfinite(st_cost[:, 0]) & (st_phase[:, 0, 0] >= 0)
    if use_scan_prior and informative.sum() > 1:
        idx = np.nonzero(informative)[0]
        path = _viterbi(
            st_cost[idx], st_phase[idx], st_L[idx], prior_weight, switch_cost, jump_cost, jump_scale
        )
        choice[idx] = path
    rows = np.arange(F)
    ch_phase = st_phase[rows, choice]  # (F, 2)
    ch_slot = st_slot[rows, choice]  # (F, P)
    ch_s = st_s[rows, choice]
    ch_cost = st_cost[rows, choice]
    # refit each phase on the peaks assigned to it
    lat = np.full((F, 2), np.nan)
    lat_sig = np.full((F, 2), np.nan)
    score = np.zeros((F, 2))
    tot = rho.sum(-1)
    for j in range(2):
        sj = np.where(ch_slot == j, ch_s, 0)
        L, sL = _refine(sj, w, q0, wq, finite=finite)
        with np.errstate(invalid="ignore", divide="ignore"):
            score[:, j] = np.where(tot > 0, np.where(ch_slot == j, rho, 0).sum(-1) / tot, 0.0)
        for k, ph in enumerate(phases):
            m = ch_phase[:, j] == k
            lat[m, j] = lattice_from_metric(ph, L[m])
            lat_sig[m, j] = lattice_from_metric(ph, sL[m])
    # order slots by explained strength
    swap = score[:, 1] > score[:, 0]
    for a in (ch_phase, lat, lat_sig, score):
        a[swap] = a[swap][:, ::-1]
    ch_slot = np.where(swap[:, None] & (ch_slot >= 0), 1 - ch_slot, ch_slot)
    names = np.array(list(phases) + [""])
    phase_str = names[np.where(ch_phase >= 0, ch_phase, nph)]
    hkl = np.full((F, P), "", dtype="<U8")
    peak_phase = np.full((F, P), "", dtype="<U12")
    for j in range(2):
        for k, ph in enumerate(phases):
            m = (ch_slot == j) & (ch_phase[:, j : j + 1] == k)
            if not m.any():
                continue
            _, _, rank, labels = _table(ph)
            hkl[m] = labels[rank[ch_s[m]]]
            peak_phase[m] = ph
    # alternatives: other label sets within CLOSE_COST of the chosen explanation
    ch_key = _key(ch_phase, nph)
    margin = np.full(F, np.nan)
    key_names = {}
    for a_ in range(-1, nph):
        for b_ in range(a_, nph):
            pair = [phases[x] for x in (a_, b_) if x >= 0]
            key_names[(a_ + 1) * (nph + 1) + (b_ + 1)] = "+".join(pair)
    bk = best_key.copy()
    bk[rows, ch_key] = np.inf
    bk[:, 0] = np.inf  # "nothing" is not an alternative
    with np.errstate(invalid="ignore"):
        d = bk - ch_cost[:, None]
        margin = np.where(np.isfinite(d).any(1), np.min(np.where(np.isfinite(d), d, np.inf), 1), np.nan)
    margin[~np.isfinite(margin)] = np.nan
    # up to three, closest first (ties: in key order), chosen for all frames at once; the
    # words are joined on Python lists (faster than numpy string operations)
    close = (d < CLOSE_COST) & (ch_phase[:, 0] >= 0)[:, None]
    top3 = np.argsort(np.where(close, d, np.inf), axis=1, kind="stable")[:, :3]
    shown = np.take_along_axis(close, top3, 1)
    names_k = np.array([key_names.get(k, "") for k in range(nkeys)], dtype=object)
    alt = np.full(F, "", dtype=object)
    some = np.nonzero(shown[:, 0])[0]
    alt[some] = [", ".join(n for n, s in zip(nn, ss) if s)
                 for nn, ss in zip(names_k[top3[some]].tolist(), shown[some].tolist())]
    n_unexpl = (present & (ch_slot < 0)).sum(-1)
    found = ch_phase[:, 0] >= 0
    with np.errstate(invalid="ignore"):
        ambiguous = found & (margin < AMBIGUOUS_MARGIN)  # NaN (no other explanation): False
    status = np.select(
        [(n_obs == 0) & (n_rejected > 0), n_obs == 0, n_obs == 1, ~found, n_unexpl > 0, ambiguous],
        ["no_bragg_peaks", "no_peaks", "not_enough_peaks_to_index", "no_phase_found", "unexplained_peaks",
         "ambiguous_phase"],
        "ok",
    ).astype(STATUS_DTYPE)
    few = found & (n_obs <= 3)
    # a phase of a pair indexed on three peaks or fewer of its own says so too
    n_own = np.stack([(ch_slot == j).sum(-1) for j in range(2)], -1)
    pair = (ch_phase >= 0).all(-1)[:, None]
    few_own = found[:, None] & ~few[:, None] & (phase_str != "") & pair & (
        n_own <= np.where(np.isin(phase_str, ("lamellar", "hexagonal")), 2, 3))
    said = np.nonzero(few | few_own.any(-1) | (alt != "") | (found & (n_unexpl > 0)) | (n_rejected > 0))[0]
    caveat = np.full(F, "", dtype=object)
    caveat[said] = [
        _caveat(*row) for row in zip(*(a[said].tolist() for a in (
            few, n_obs, few_own, phase_str, n_own, alt, n_unexpl, n_rejected, reject_words)))
    ]
    if max_phases == 1:
        phase_str, lat, lat_sig, score = phase_str[:, :1], lat[:, :1], lat_sig[:, :1], score[:, :1]
    return {
        "phase": phase_str.astype("<U12"),
        "lattice": lat,
        "lattice_sigma": lat_sig,
        "score": score,
        "hkl": np.take_along_axis(hkl, inverse, 1),
        "peak_phase": np.take_along_axis(peak_phase, inverse, 1),
        "alternative": _tight(alt),
        "status": status,
        "cost": np.where(found, ch_cost, np.nan),
        "margin": np.where(found, margin, np.nan),
        "n_unexplained": n_unexpl.astype(np.int64),
        "caveat": _tight(caveat),
        "n_rejected": n_rejected.astype(np.int64),
        "rejected": rejected_list,
    }


#: Frames per call of the subset-cubic relabelling (its temporaries are about 10 kB a frame).
_RELABEL_BLOCK = 8192


def _caveat(few, n_obs, few_own, phase, n_own, alt, n_unexpl, n_rejected, rejected):
    """The caveat words of one frame (see :func:`index_peaks`), from Python values."""
    parts = []
    if few:
        parts.append(f"only {n_obs} peaks: assignment rests on few ratios")
    for j in (0, 1):
        if few_own[j]:
            parts.append(f"{phase[j]} on {n_own[j]} peaks of its own: assignment rests on few ratios")
    if alt:
        parts.append(f"close alternative: {alt}")
    if n_unexpl:
        parts.append(f"{n_unexpl} peak(s) unexplained")
    if n_rejected:
        parts.append(rejected)
    return "; ".join(parts)


def _tight(a):
    """A string array no wider than its longest entry (as ``object -> str`` gives)."""
    return np.asarray(a).astype(object).astype(str)
