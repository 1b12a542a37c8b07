"""Frame similarity: are repeated frames the same curve within their noise?

Two published tests, vectorised over frames (and over frame pairs for the matrix):

- the correlation-map test (Franke, Jeffries & Svergun 2015, Nature Methods 12, 419):
  the longest run ``C`` of consecutive q points where the difference of two curves has
  the same sign. Under the hypothesis that the two curves differ by noise alone, the
  signs are fair coin tosses and ``P(C >= k)`` follows from the distribution of the
  longest run in ``n`` tosses (Schilling 1990, College Math. J. 21, 196). It needs no
  sigma and is insensitive to a wrong error model; a smooth excess over a stretch of q
  (radiation damage, aggregation, drift) shows up as a long run.
- the reduced chi-square of the difference, ``chi2 = sum (I_a - I_b)^2 / (s_a^2 + s_b^2)
  / n``, with its p-value from the chi-square distribution with ``n`` degrees of freedom
  (common practice; it trusts sigma).

Multiple testing: comparing ``m`` frames against a reference is ``m`` tests, so the
p-values are adjusted with Holm's step-down method (Holm 1979, Scand. J. Statist. 6, 65)
by default (``correction="bonferroni"`` or ``"none"`` are the alternatives). A frame is an
outlier when its adjusted p-value is below ``alpha``; with Holm or Bonferroni the chance
that a series of pure-noise repeats gets one or more frames flagged is at most
``alpha`` (family-wise error rate; the correlation-map test is discrete, so the actual
rate is somewhat lower).
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames

__all__ = [
    "longest_run_pvalue",
    "longest_same_sign_run",
    "adjust_pvalues",
    "compare_frames",
    "pairwise_similarity",
]

_TESTS = ("cormap", "chi2")


def _longest_true_run(e: np.ndarray) -> np.ndarray:
    """Length of the longest run of True along the last axis of a 2-D bool array.

    Iterates on the run length (the rows with no run of length k + 1 drop out), so the
    cost is a few boolean passes for noise, where runs are short.
    """
    P, m = e.shape
    length = np.zeros(P, dtype=np.int64)
    if m == 0 or P == 0:
        return length
    alive = np.arange(P)
    base = e  # rows of e for the alive rows
    r = e  # r[:, j] is True when e[j : j + k + 1] are all True
    k = 0
    while alive.size and r.shape[1]:
        has = r.any(axis=1)
        length[alive[has]] = k + 1
        if not has.all():
            alive, base, r = alive[has], base[has], r[has]
        k += 1
        if r.shape[1] <= 1:
            break
        r = r[:, :-1] & base[:, k:]
    return length


def _longest_equal_run_columns(sT: np.ndarray) -> np.ndarray:
    """Longest run of equal consecutive values down each column of a 2-D bool array
    ``sT`` (n_points, n_curves), in points (0 for no point).

    One pass down the points, each step vectorised over all curves (the run length
    so far: ``L = (L + 1) * same``), so the memory touched per step is one row of
    ``sT``: every curve at once in a few small, cache-resident arrays.
    """
    n, P = sT.shape
    if n == 0 or P == 0:
        return np.zeros(P, dtype=np.int64)
    dt = np.uint16 if n < 65000 else np.int64
    L = np.zeros(P, dtype=dt)
    best = np.zeros(P, dtype=dt)
    same = np.empty(P, dtype=bool)
    for j in range(1, n):  # over q points, each step over every curve
        np.equal(sT[j], sT[j - 1], out=same)
        np.add(L, 1, out=L)
        np.multiply(L, same, out=L)
        np.maximum(best, L, out=best)
    return best.astype(np.int64) + 1


def longest_same_sign_run(difference) -> np.ndarray:
    """Longest run of consecutive points with the same sign of a difference.

    Parameters
    ----------
    difference : array (..., n)
        Differences of two curves on one q grid; non-finite points are skipped (the
        points on either side become neighbours), zeros count as positive.

    Returns
    -------
    int array (...): the longest run length ``C`` (0 for no finite point).

    Examples
    --------
    >>> longest_same_sign_run([[1.0, 2.0, -1.0, -3.0, -2.0, 4.0]]).tolist()
    [3]
    """
    d = np.asarray(difference, dtype=float)
    shape = d.shape[:-1]
    d = d.reshape(-1, d.shape[-1])
    fin = np.isfinite(d)
    if fin.all():
        s = d >= 0
        out = 1 + _longest_true_run(s[:, 1:] == s[:, :-1])
        out[d.shape[1] == 0] = 0
        return out.reshape(shape)
    out = np.zeros(d.shape[0], dtype=np.int64)
    # rows with the same finite pattern share one compaction
    patterns, inv = np.unique(fin, axis=0, return_inverse=True)
    for p, pat in enumerate(patterns):
        rows = np.flatnonzero(inv.ravel() == p)
        if pat.sum() == 0:
            continue
        s = d[np.ix_(rows, np.flatnonzero(pat))] >= 0
        out[rows] = 1 + _longest_true_run(s[:, 1:] == s[:, :-1])
    return out.reshape(shape)


def _no_long_run_probability(n: int, max_len: int) -> np.ndarray:
    """``P(longest run of heads <= x)`` in ``n`` fair tosses for x = 0..max_len.

    Schilling (1990): the number A_n(x) of sequences with no run longer than x obeys
    A_n = 2^n for n <= x and A_n = sum_{j=0..x} A_{n-1-j} otherwise; in probabilities
    p_n = sum_{j=0..x} p_{n-1-j} / 2^(j+1). Evaluated with a running window, all x at once.
    """
    x = np.arange(max_len + 1)
    p = np.ones((n + 1, x.size))  # p[m, x]
    window = np.zeros(x.size)  # sum_{j=0..x} p_{m-1-j} 2^-(j+1) for the next m
    for m in range(1, n + 1):
        # window for m: from the window for m - 1 (W_m = p_{m-1}/2 + W_{m-1}/2 - tail)
        drop_idx = m - 2 - x  # the index falling out of the window
        drop = np.where(drop_idx >= 0, p[np.clip(drop_idx, 0, None), x], 0.0)
        window = p[m - 1] / 2 + window / 2 - drop * 0.5 ** (x + 2)
        p[m] = np.where(m <= x, 1.0, window)
    return p[n]


def longest_run_pvalue(n_points, run) -> np.ndarray:
    """p-value of a longest same-sign run under the no-difference hypothesis.

    Parameters
    ----------
    n_points : int
        Number of points compared.
    run : int or int array
        Observed longest run ``C`` of equal signs.

    Returns
    -------
    float array like ``run``: ``P(C' >= run)`` for ``n_points`` fair signs.

    Notes
    -----
    A run of equal signs of length C among n signs is a run of "same as previous"
    outcomes of length C - 1 among the n - 1 neighbour comparisons, which are fair and
    independent; the distribution of the longest run of heads is Schilling's (1990,
    College Math. J. 21, 196), as used by Franke, Jeffries & Svergun (2015, Nature
    Methods 12, 419).

    Examples
    --------
    >>> float(longest_run_pvalue(2, 2))  # two signs agree with probability 1/2
    0.5
    >>> round(float(longest_run_pvalue(3, 3)), 6)
    0.25
    """
    n = int(n_points)
    C = np.asarray(run, dtype=np.int64)
    if n < 1:
        return np.full(C.shape, np.nan)
    max_len = int(min(max(C.max(initial=1), 1), n))
    cdf = _no_long_run_probability(n - 1, max_len)  # P(longest "same" run <= x)
    # P(C >= k) = P(longest "same" run >= k - 1) = 1 - P(<= k - 2)
    k = np.clip(C, 1, n)
    p = np.where(k - 2 >= 0, 1.0 - cdf[np.clip(k - 2, 0, max_len)], 1.0)
    p = np.where(C > n, 0.0, p)
    return np.clip(p, 0.0, 1.0)


def adjust_pvalues(p, correction: str = "holm") -> np.ndarray:
    """Adjust p-values of a family of tests (last axis) for multiple testing.

    ``"holm"``: Holm (1979, Scand. J. Statist. 6, 65) step-down; ``"bonferroni"``:
    ``min(1, m p)``; ``"none"``: unchanged. NaN p-values are not counted.

    Examples
    --------
    >>> adjust_pvalues([0.01, 0.04, 0.03]).round(4).tolist()
    [0.03, 0.06, 0.06]
    """
    if correction not in ("holm", "bonferroni", "none"):
        raise SaxsInputError(f"correction must be 'holm', 'bonferroni' or 'none', got {correction!r}",
                             parameter="correction")
    p = np.asarray(p, dtype=float)
    if correction == "none":
        return p.copy()
    fin = np.isfinite(p)
    m = fin.sum(axis=-1, keepdims=True)
    if correction == "bonferroni":
        return np.where(fin, np.minimum(1.0, p * m), np.nan)
    order = np.argsort(np.where(fin, p, np.inf), axis=-1, kind="stable")
    ps = np.take_along_axis(p, order, axis=-1)
    rank = np.arange(p.shape[-1])
    adj = np.maximum.accumulate(np.where(np.isfinite(ps), (m - rank) * ps, -np.inf), axis=-1)
    adj = np.minimum(1.0, adj)
    out = np.empty_like(p)
    np.put_along_axis(out, order, adj, axis=-1)
    return np.where(fin, out, np.nan)


def _chi2_pvalue(chi2_sum, dof):
    from scipy.stats import chi2

    return chi2.sf(chi2_sum, dof)


def _common_points(I, S, test):
    ok = np.isfinite(I)
    if test == "chi2":
        ok &= np.isfinite(S) & (S > 0)
    has = ok.any(axis=1)
    common = ok[has].all(axis=0) if has.any() else np.zeros(I.shape[1], bool)
    return has, common


def _pair_stats(A, SA, b, sb, test):
    """Score and p-value of each row of A (m, n) against curve b (n,)."""
    n = A.shape[1]
    if test == "cormap":
        sT = np.empty((n, A.shape[0]), dtype=bool)
        np.greater_equal(A.T, b[:, None], out=sT)  # points down, curves across
        C = _longest_equal_run_columns(sT)
        return C.astype(float), longest_run_pvalue(n, C)
    d = A - b  # ((A - b)^2 / (SA^2 + sb^2)) summed per row, with two temporaries of A's size
    d *= d
    v = SA * SA
    v += sb * sb
    d /= v
    chi = d.sum(axis=1)
    return chi / n, _chi2_pvalue(chi, n)


def _check(test, reference, alpha, n):
    if test not in _TESTS:
        raise SaxsInputError(f"test must be one of {_TESTS}, got {test!r}", parameter="test")
    if not (isinstance(alpha, (int, float)) and 0 < alpha < 1):
        raise SaxsInputError(f"alpha must be a probability in (0, 1), got {alpha!r}", parameter="alpha")
    try:
        ref = int(reference)
    except (TypeError, ValueError):
        raise SaxsInputError(f"reference must be a frame position, got {reference!r}",
                             parameter="reference") from None
    if not -n <= ref < n:
        raise SaxsInputError(f"reference {ref} outside 0..{n - 1}", parameter="reference")
    return ref % n


def pairwise_similarity(q, intensity, sigma=None, *, test: str = "cormap",
                        block_elements: int = 4_000_000) -> dict[str, np.ndarray]:
    """Every frame against every other: the (n_frames, n_frames) score and p-value.

    Parameters
    ----------
    q : array (n_q,)
    intensity, sigma : arrays (n_frames, n_q); sigma only for ``test="chi2"``.
    test : {"cormap", "chi2"}
        Longest same-sign run (Franke, Jeffries & Svergun 2015) or reduced chi-square.
    block_elements : int
        Size of the pair blocks held in memory at once (pairs x points).

    Returns
    -------
    dict with ``score`` (longest run ``C``, or reduced chi-square) and ``p_value``
    (unadjusted), both (n_frames, n_frames), symmetric, NaN on the diagonal and for
    frames without data. Only points finite in every frame with data are compared.

    Notes
    -----
    The pairs are processed in blocks of rows, each block vectorised over its pairs and
    points; 2,000 frames x 1,000 points (2 million pairs) take seconds.

    Examples
    --------
    >>> import numpy as np
    >>> q = np.linspace(0.1, 2.0, 50)
    >>> I = np.vstack([np.sin(7 * q), np.sin(7 * q) + 0.1, np.cos(5 * q)])
    >>> pairwise_similarity(q, I)["score"][0].tolist()
    [nan, 50.0, 14.0]
    """
    if test not in _TESTS:
        raise SaxsInputError(f"test must be one of {_TESTS}, got {test!r}", parameter="test")
    q, I, S, _ = as_frames(q, intensity, sigma)
    if test == "chi2" and S is None:
        raise SaxsInputError("the chi2 test needs sigma", parameter="sigma")
    nf = I.shape[0]
    has, common = _common_points(I, S, test)
    score = np.full((nf, nf), np.nan)
    pval = np.full((nf, nf), np.nan)
    rows = np.flatnonzero(has)
    A = I[np.ix_(rows, np.flatnonzero(common))]
    SA = S[np.ix_(rows, np.flatnonzero(common))] if S is not None else None
    m, n = A.shape
    if n == 0 or m < 2:
        return {"score": score, "p_value": pval}
    per_row = max(1, block_elements // max(n, 1))
    if test == "cormap":  # one byte per pair and point: blocks of 4x the elements, fewer steps
        per_row = max(1, 4 * block_elements // max(n, 1))
    AT = None
    sc = np.full((m, m), np.nan)
    pv = np.full((m, m), np.nan)
    i = 0
    while i < m - 1:
        # rows i..i+r compared with all later rows, so that each block holds ~per_row pairs
        j, count = i, 0
        while j < m - 1 and (count == 0 or count + (m - 1 - j) <= per_row):
            count += m - 1 - j
            j += 1
        ii = np.concatenate([np.full(m - 1 - a, a) for a in range(i, j)])
        jj = np.concatenate([np.arange(a + 1, m) for a in range(i, j)])
        if test == "cormap":
            if AT is None:
                AT = np.ascontiguousarray(A.T)
            sT = np.empty((n, count), dtype=bool)
            off = 0
            for a in range(i, j):  # one comparison per row of the block, all its pairs at once
                np.greater_equal(AT[:, a + 1 :], AT[:, a : a + 1], out=sT[:, off : off + m - 1 - a])
                off += m - 1 - a
            sc[ii, jj] = _longest_equal_run_columns(sT)
        else:
            sc[ii, jj] = ((A[ii] - A[jj]) ** 2 / (SA[ii] ** 2 + SA[jj] ** 2)).sum(axis=1) / n
        i = j
    iu = np.triu_indices(m, 1)
    if test == "cormap":
        pv[iu] = longest_run_pvalue(n, sc[iu].astype(np.int64))
    else:
        pv[iu] = _chi2_pvalue(sc[iu] * n, n)
    sc[(iu[1], iu[0])] = sc[iu]
    pv[(iu[1], iu[0])] = pv[iu]
    score[np.ix_(rows, rows)] = sc
    pval[np.ix_(rows, rows)] = pv
    return {"score": score, "p_value": pval}


def _common_index(ref_usable: bool, common, ref) -> np.ndarray:
    """The q columns usable in every frame; an error naming the input when the reference
    frame has no usable point or fewer than 3 columns are common."""
    if not ref_usable:
        raise SaxsInputError(f"the reference frame {ref} has no usable point", parameter="reference",
                             frame=ref)
    idx = np.flatnonzero(common)
    if idx.size < 3:
        raise SaxsInputError(f"only {idx.size} q points are finite in every frame; at least 3 are needed",
                             parameter="intensity")
    return idx


def compare_frames(q, intensity, sigma=None, *, test: str = "cormap", reference: int = 0,
                   alpha: float = 0.01, correction: str = "holm", pairwise: bool = False
                   ) -> dict[str, np.ndarray]:
    """Test every frame against a reference frame: same curve within the noise?

    Parameters
    ----------
    q : array (n_q,)
    intensity, sigma : arrays (n_frames, n_q); sigma is needed for ``test="chi2"``.
    test : {"cormap", "chi2"}
        The correlation-map test (Franke, Jeffries & Svergun 2015, Nature Methods 12,
        419): longest run of same-sign differences; or the reduced chi-square of the
        difference.
    reference : int
        Position of the reference frame (default the first, as for repeats where the
        first exposure is the least damaged).
    alpha : float
        Family-wise significance level: a frame is an ``outlier`` when its adjusted
        p-value is below ``alpha``.
    correction : {"holm", "bonferroni", "none"}
        Multiple-testing correction over the ``n_frames - 1`` comparisons (Holm 1979).
    pairwise : bool
        Also return the (n_frames, n_frames) matrix of every pair (see
        :func:`pairwise_similarity`).

    Returns
    -------
    dict of per-frame arrays: ``score`` (longest run ``C`` in points, or reduced
    chi-square), ``p_value`` (unadjusted), ``p_adjusted``, ``outlier`` (bool),
    ``n_points`` (points compared), ``status`` ("ok", "is_reference", "no_data");
    with ``pairwise``: ``pairwise_score`` and ``pairwise_p_value`` (n_frames, n_frames).

    Notes
    -----
    Only the q points finite in every frame with data are compared, so that all
    frames are tested on the same points. With Holm's correction the probability that
    a series of pure-noise repeats has one or more outliers is at most ``alpha``.
    The test says *whether* a frame differs, not how much: a long series of frames that
    all differ from the reference (drift) is flagged frame by frame.

    Examples
    --------
    >>> import numpy as np
    >>> q = np.linspace(0.1, 3.0, 300)
    >>> rng = np.random.default_rng(0)
    >>> I = np.exp(-q**2) + 0.01 * rng.normal(size=(4, 300))
    >>> I[3] += 0.05 * np.exp(-(q / 0.5) ** 2)  # a smooth low-q excess
    >>> compare_frames(q, I)["outlier"].tolist()
    [False, False, False, True]
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    nf = I.shape[0]
    ref = _check(test, reference, alpha, nf)
    if test == "chi2" and S is None:
        raise SaxsInputError("the chi2 test needs sigma", parameter="sigma")
    has, common = _common_points(I, S, test)
    idx = _common_index(bool(has[ref]), common, ref)
    whole = idx.size == I.shape[1]  # usually every point: no copies
    A = I if whole else I[:, idx]
    SA = (S if whole else S[:, idx]) if S is not None else None
    others = np.flatnonzero(has & (np.arange(nf) != ref))
    score = np.full(nf, np.nan)
    pval = np.full(nf, np.nan)
    if others.size:
        if others.size == nf - 1:  # all frames have data: every row at once, the reference dropped after
            sc, pv = _pair_stats(A, SA, A[ref], None if SA is None else SA[ref], test)
            sc, pv = sc[others], pv[others]
        else:
            sc, pv = _pair_stats(A[others], None if SA is None else SA[others], A[ref],
                                 None if SA is None else SA[ref], test)
        score[others], pval[others] = sc, pv
    padj = adjust_pvalues(pval, correction)
    status = np.where(has, "ok", "no_data").astype("<U32")
    status[ref] = "is_reference"
    out = {
        "score": score,
        "p_value": pval,
        "p_adjusted": padj,
        "outlier": np.isfinite(padj) & (padj < alpha),
        "n_points": np.where(has, idx.size, 0),
        "status": status,
    }
    if pairwise:
        pw = pairwise_similarity(q, I, S, test=test)
        out["pairwise_score"], out["pairwise_p_value"] = pw["score"], pw["p_value"]
    return out
