"""The pair-distance distribution p(r) of every frame: the indirect Fourier transform.

Model (Glatter 1977, J. Appl. Cryst. 10, 415; Glatter & Kratky 1982)::

    I(q) = 4 pi int_0^Dmax p(r) sin(q r) / (q r) dr   (+ b, an optional flat background)

    I0 = 4 pi int p dr,      Rg^2 = int p r^2 dr / (2 int p dr)

**Basis.** p(r) is piecewise linear on the uniform grid r_j = j Dmax / (n_r - 1),
j = 0 .. n_r - 1, with p(0) = p(Dmax) = 0; the n_r - 2 inner values are the unknowns
(linear B-splines, "hat" functions). The integral of each hat against the kernel is
exact: with G(q, r) = r Si(q r) / q - 2 sin^2(q r / 2) / q^2 (so that d^2G/dr^2 =
sin(q r)/(q r)), a hat centred on r_j with spacing h transforms to
4 pi (G(r_j+1) - 2 G(r_j) + G(r_j-1)) / h. I0 and the moment int p r^2 dr are exact
linear functions of the values (int hat_j r^2 dr = h (r_j^2 + h^2 / 6)).

**Regularisation** (Tikhonov & Arsenin 1977; Glatter 1977). Per frame the estimate
minimises ``chi2(p) + alpha * |D2 p|^2`` with chi2 weighted by 1/sigma^2 and D2 the
second differences of the values (zeros at both ends included), a discrete
int p''(r)^2 dr. The dimensionless ``weight`` is alpha divided by
trace(A^T W A) / trace(D2^T D2), so that it means the same for every frame whatever the
intensity units, the noise level or Dmax (weight = 1 balances the two terms on
average; useful weights are usually 1e-6 .. 1e-1).

**Choice of the weight and of Dmax** by the Bayesian evidence (Hansen 2000, J. Appl.
Cryst. 33, 1415; MacKay 1992, Neural Comput. 4, 415): with a Gaussian prior of
precision alpha D2^T D2 on p and Gaussian noise of known sigma, the log evidence is::

    log E = -1/2 [chi2(p_hat) + alpha |D2 p_hat|^2] + 1/2 sum_k log(w / (s_k + w))  (+ const)

where s_k are the eigenvalues of the data term in the prior's metric (the generalised
eigenvalue problem of (A^T W A, D2^T D2), scaled as the weight is) and w the weight.
The weight maximising log E is used: a log grid 1e-12 .. 1e2 of one value per decade,
then eight per decade within a decade of the best, then a parabola through the best
three. The same log E, maximised over the weight, scores
each candidate Dmax: the prior has the same shape for every Dmax (the grid is
stretched), so the scores are comparable, and too short a Dmax loses by misfit while
too long a one loses by its Occam factor. Without ``sigma`` the weights are equal and
the noise variance is integrated out (conjugate prior): log E = -n/2 log(chi2 + alpha
|D2 p|^2) + 1/2 sum log(w / (s_k + w)); then uncertainties are scaled by the residual
scatter and ``chi2_reduced`` is NaN.

**Uncertainties.** ``p_sigma``, ``i0_sigma`` and ``rg_sigma`` are posterior standard
deviations: the posterior covariance (A^T W A + alpha D2^T D2)^-1 propagated to first
order (Hansen 2000). They include what the smoothness prior leaves undetermined, so
they are wider than a pure noise propagation; they do not include the choice of Dmax.

**Non-negativity** (``nonnegative=True``): the weight and Dmax are chosen unconstrained,
then p >= 0 is imposed by the primal-dual active-set method (Hintermueller, Ito &
Kunisch 2002, SIAM J. Optim. 13, 865), all frames at once, with scipy's NNLS (Lawson &
Hanson 1974) for any frame where it has not converged; uncertainties are then those of
the free values, zero on the values held at zero.

**Series speed.** For each Dmax the matrix is built once for the shared q grid (and
cached). Frames whose weights are the same up to a factor (no sigma, or sigma in
proportion, same usable points) share one data term A^T W A and one
eigendecomposition; other frames (their own sigma, NaN or masked points) get their own
small (n_r - 2)^2 product and eigendecomposition, batched. The weight search is then
elementwise over (frame, weight, eigenvalue). Every number of a frame is computed
from that frame's data alone, by the same operations whatever else is in the batch:
a frame solved alone, in a series or in any dask chunk gives the same result to the
last digit.

**Automatic Dmax.** All candidates (default :func:`default_dmax_candidates`, 24 values
depending on the q grid only) are scored for every frame; around each frame's best
candidate the grid eight times finer in log Dmax is scored up to the neighbouring
candidates, and the best value of all is the Dmax. The evidence over log Dmax (flat
prior in log Dmax) gives a posterior; its spread about the chosen value is
``dmax_sigma``. I0 and Rg (and their variances) are averaged over that posterior, as
Hansen (2000) averages over the hyperparameters: ``i0`` and ``rg`` are posterior means
(close to, not equal to, the values of the returned p(r) at the chosen Dmax), and
``i0_sigma``, ``rg_sigma`` the posterior standard deviations including the spread over
Dmax, so an ill-defined Dmax widens them. With a fixed Dmax nothing is averaged.
Over 100 noise draws (tests/test_distance.py) the spread of Rg matches the median
``rg_sigma`` within 20 % for a sphere, a two-sphere mixture and a Gaussian chain, fixed
or automatic Dmax. It does not for a compact particle with a small unfolded fraction
(the mixed frames of the unfolding demo): the evidence picks the compact particle's
Dmax, the weak long tail is cut off, the fit is good (chi2 ~ 1) and Rg is about 1 %
low, up to ~15 ``rg_sigma``; a generous fixed Dmax (here 8 nm for 2R = 5 nm) takes the
bias down to ~2 ``rg_sigma`` with a calibrated spread. A Dmax found this way
tends to fall a few per cent short of the true maximum dimension: the last pairs are
few (a sphere's p(r) ends as (2R - r)^2) and sink into the noise. A particle with no
sharp maximum dimension (a Gaussian chain, a polydisperse sample) gets the Dmax where
p(r) disappears in the noise, and Rg from p(r) comes out a little low (a Gaussian chain
at 1 % noise: about 4 Rg, Rg 1-2 % low); fix Dmax generously (>= 6 Rg) for such samples.

**Resolution.** p(r) is resolved on n_r points; for very precise data (relative
errors well below 1 % near the minima of I(q)) the piecewise-linear p(r) can limit the
fit: raise ``n_r`` when the status is "poor_fit" on such data.

**Shannon channels** N = q_max Dmax / pi (Moore 1980, J. Appl. Cryst. 13, 168; the
number of independent parameters the data carry about p(r)). Below ``min_channels``
(default 3) the frame gets status ``"too_few_shannon_channels"``: the numbers are kept
but p(r) is little more than I0 and Rg.

Statuses (``status``): see :data:`saxsnb.analysis.STATUS`. Frames failing on input (no data,
empty range, zero sigma, too few points) get NaN everywhere; the other non-ok statuses
keep the numbers (they are warnings about meaning, not failures).
"""

from __future__ import annotations

import numpy as np

from ..errors import SaxsInputError
from ._arrays import as_frames
from ._distance_basis import (
    _range_bounds,
    _shared,
    default_dmax_candidates,
    forward_transform,
    sphere_distance_distribution,
    transform_matrix,
)
from ._distance_solve import _evaluate, _evaluate_many, _Frames
from ._status import STATUS_DTYPE

__all__ = [
    "distance_distribution",
    "forward_transform",
    "transform_matrix",
    "default_dmax_candidates",
    "sphere_distance_distribution",
]

_STATUS_DTYPE = STATUS_DTYPE
_FAILED = ("no_data", "range_outside_data", "zero_sigma", "too_few_points")
_N_SUB = 8  # refinement grid: each candidate interval split in this many (log) steps
_DECISIVE = 5.0  # log Bayes factor (Kass & Raftery 1995, J. Am. Stat. Assoc. 90, 773)


# --------------------------------------------------------------------- public function
def distance_distribution(
    q,
    intensity,
    sigma=None,
    *,
    dmax=None,
    weight=None,
    q_range=None,
    n_r: int = 51,
    nonnegative: bool = False,
    background: bool = False,
    dmax_candidates=None,
    min_points: int = 10,
    min_channels: float = 3.0,
) -> dict:
    """p(r) of every frame by the regularised indirect Fourier transform (module notes).

    Parameters
    ----------
    q : array (n_q,), 1/nm, non-negative
    intensity : array (n_frames, n_q) or (n_q,)
        Non-finite points (masked points arrive as NaN) are ignored.
    sigma : array like ``intensity``, optional
        One-sigma errors: weights 1/sigma^2. Without it the points are weighted
        equally and the noise level is estimated (not advisable for curves spanning
        decades).
    dmax : None, float or array (n_frames,), nm
        Maximum dimension; None chooses it per frame by the evidence over
        ``dmax_candidates``.
    weight : None or float
        Dimensionless regularisation weight (module notes); None chooses it per frame
        by the evidence (Hansen 2000).
    q_range : None or (q_min, q_max), 1/nm
        Points outside are ignored (either bound may be None).
    n_r : int
        Points of each frame's r grid 0 .. Dmax (p = 0 at both ends); at least 5.
    nonnegative : bool
        Impose p >= 0 (weight and Dmax are chosen without the constraint).
    background : bool
        Fit a flat background b as well (I = A p + b; reported as ``background``).
    dmax_candidates : array, optional
        Increasing candidate Dmax for the automatic choice (default
        :func:`default_dmax_candidates`, 24 values); the choice is refined between them.
    min_points, min_channels :
        Thresholds of the statuses "too_few_points" and "too_few_shannon_channels".

    Returns
    -------
    dict of arrays, first axis frame (length 1 for a single curve):

    - ``r`` (n_frames, n_r) nm; ``p``, ``p_sigma`` (n_frames, n_r) intensity units/nm;
    - ``fit`` (n_frames, n_q) the back-calculated intensity at every q (NaN for a failed frame);
    - ``chi2_reduced``, ``n_effective`` (effective number of parameters), ``rg``,
      ``rg_sigma`` (nm), ``i0``, ``i0_sigma`` (intensity units), ``dmax`` (nm),
      ``dmax_sigma`` (nm; the spread of the Dmax posterior, 0 for a fixed Dmax),
      ``weight`` (dimensionless), ``log_evidence``, ``shannon_channels``,
      ``background``, ``n_points``, ``q_min``, ``q_max`` (1/nm), ``status`` (str);
    - ``dmax_candidates``, ``dmax_score`` (n_frames, n_candidates): the candidates
      and log evidence minus that of the chosen Dmax (<= 0; all NaN when ``dmax`` is
      given).

    Examples
    --------
    >>> q = np.linspace(0.05, 3.0, 300)
    >>> r = np.linspace(0, 10.0, 201)
    >>> I = forward_transform(q, r, sphere_distance_distribution(r, 5.0, i0=100.0))
    >>> res = distance_distribution(q, I, 0.01 * I, dmax=10.0)
    >>> res["status"].tolist(), round(float(res["rg"][0] / (np.sqrt(0.6) * 5.0)), 2)
    (['ok'], 1.0)
    >>> round(float(res["i0"][0]), 0)
    100.0
    """
    q, I, S, _ = as_frames(q, intensity, sigma)
    if np.any(~np.isfinite(q)) or np.any(q < 0):
        raise SaxsInputError("q must be finite and non-negative", parameter="q")
    n_r = int(n_r)
    if n_r < 5:
        raise SaxsInputError(f"n_r must be at least 5, got {n_r}", parameter="n_r")
    if weight is not None:
        weight = float(weight)
        if not np.isfinite(weight) or weight <= 0:
            raise SaxsInputError(f"weight must be a positive number, got {weight}", parameter="weight")
    F = I.shape[0]
    lo, hi = _range_bounds(q_range)
    inside = (q >= lo) & (q <= hi)
    finite = np.isfinite(I) & inside[None, :]
    if S is not None:
        finite &= np.isfinite(S)
    zero = finite & (S <= 0) if S is not None else np.zeros_like(finite)
    usable = finite & ~zero
    n_pts = np.count_nonzero(usable, axis=1)
    status = np.full(F, "ok", dtype=_STATUS_DTYPE)
    status[n_pts < int(min_points)] = "too_few_points"
    status[zero.any(axis=1)] = "zero_sigma"
    any_finite = np.isfinite(I).any(axis=1)
    status[any_finite & ~(np.isfinite(I) & inside[None, :]).any(axis=1)] = "range_outside_data"
    status[~any_finite] = "no_data"
    good = np.flatnonzero(status == "ok")

    qcol = np.where(usable, q[None, :], np.nan)
    with np.errstate(invalid="ignore"):
        q_min = np.where(n_pts > 0, np.nanmin(np.where(usable, qcol, np.inf), axis=1), np.nan)
        q_max = np.where(n_pts > 0, np.nanmax(np.where(usable, qcol, -np.inf), axis=1), np.nan)

    auto = dmax is None
    if auto:
        cand = (
            default_dmax_candidates(q, q_range)
            if dmax_candidates is None
            else _check_candidates(dmax_candidates)
        )
    else:
        d = np.asarray(dmax, dtype=float)
        if d.ndim == 0:
            d = np.full(F, float(d))
        if d.shape != (F,):
            raise SaxsInputError(f"dmax must be a number or an array of {F} values", parameter="dmax")
        if np.any(~np.isfinite(d) | (d <= 0)):
            bad = int(np.flatnonzero(~np.isfinite(d) | (d <= 0))[0])
            raise SaxsInputError(f"dmax must be positive, got {d[bad]}", parameter="dmax", frame=bad)
        cand = np.array([np.nan])

    out = {
        "r": np.full((F, n_r), np.nan),
        "p": np.full((F, n_r), np.nan),
        "p_sigma": np.full((F, n_r), np.nan),
        "fit": np.full((F, q.size), np.nan),
    }
    for key in (
        "chi2_reduced",
        "n_effective",
        "rg",
        "rg_sigma",
        "i0",
        "i0_sigma",
        "dmax",
        "dmax_sigma",
        "weight",
        "log_evidence",
        "shannon_channels",
        "background",
    ):
        out[key] = np.full(F, np.nan)
    out["dmax_candidates"] = np.broadcast_to(cand, (F, cand.size)).copy()
    out["dmax_score"] = np.full((F, cand.size), np.nan)

    if good.size:
        fr = _Frames(q, I[good], None if S is None else S[good], usable[good], background)
        idx = np.arange(good.size)
        if auto:
            d_sel, score, edge, spread = _scan_dmax(q, fr, cand, n_r, weight)
            out["dmax_score"][good] = score
            status[good[edge]] = "dmax_at_scan_edge"
        else:
            d_sel = d[good]
        res = _solve_grouped(q, fr, idx, d_sel, n_r, weight, nonnegative)
        _store(out, res, good, n_r)
        if fr.known_sigma:
            dof = np.maximum(fr.n - res["n_eff"], 1.0)
            red = res["chi2"] / dof
            poor = (red > 1.5) & (red > 1.0 + 5.0 * np.sqrt(2.0 / dof))
            status[good[poor & (status[good] == "ok")]] = "poor_fit"
        if not auto:
            small = _dmax_check(q, fr, res, d_sel, n_r, weight)
            status[good[small]] = "dmax_too_small"
        if auto:
            out["dmax_score"][good] -= res["evidence"][:, None]
            out["dmax_sigma"][good] = spread["dmax"]
            for key in ("i0", "rg"):
                s_key = key + "_sigma"
                out[key][good] = out[key][good] + spread[key + "_shift"]
                var = out[s_key][good] ** 2 + spread[key + "_var_shift"]
                out[s_key][good] = np.sqrt(np.maximum(var, 0.0))
        else:
            out["dmax_sigma"][good] = 0.0
    out["n_points"] = n_pts
    out["q_min"], out["q_max"] = q_min, q_max
    out["shannon_channels"] = q_max * out["dmax"] / np.pi
    ok_like = ~np.isin(status, _FAILED)
    few = ok_like & (out["shannon_channels"] < float(min_channels))
    status[few & (status == "ok")] = "too_few_shannon_channels"
    neg = ok_like & ~(out["i0"] > 0)
    status[neg] = "negative_i0"
    out["rg"][neg] = np.nan
    out["rg_sigma"][neg] = np.nan
    out["status"] = status
    return out


def _check_candidates(values):
    c = np.asarray(values, dtype=float).ravel()
    if c.size < 3 or np.any(~np.isfinite(c)) or np.any(c <= 0) or np.any(np.diff(c) <= 0):
        raise SaxsInputError(
            "dmax_candidates must be at least 3 increasing positive values", parameter="dmax_candidates"
        )
    return c


def _solve_grouped(q, fr, idx, d_sel, n_r, weight, nonnegative):
    """Full solution of frames ``idx`` with Dmax ``d_sel`` (frames sharing a value together)."""
    res: dict = {}
    values, inverse = np.unique(d_sel, return_inverse=True)
    for k, value in enumerate(values):  # one shared matrix per distinct Dmax
        rows = idx[inverse.ravel() == k]
        part = _evaluate(_shared(q, value, n_r), fr, rows, weight, full=True, nonnegative=nonnegative)
        for key, v in part.items():
            if key not in res:
                res[key] = np.empty((idx.size, *v.shape[1:]))
            res[key][rows] = v
    res["dmax"] = np.asarray(d_sel, dtype=float)
    return res


def _store(out, res, good, n_r):
    F = good.size
    d = res["dmax"]
    out["r"][good] = d[:, None] * np.linspace(0.0, 1.0, n_r)[None, :]
    p = np.zeros((F, n_r))
    p[:, 1:-1] = res["p_inner"]
    ps = np.zeros((F, n_r))
    ps[:, 1:-1] = np.sqrt(np.maximum(res["p_var"], 0.0))
    out["p"][good], out["p_sigma"][good] = p, ps
    out["fit"][good] = res["fit"]
    for key in ("chi2_reduced", "rg", "rg_sigma", "i0", "i0_sigma", "weight", "background"):
        out[key][good] = res[key]
    out["n_effective"][good] = res["n_eff"]
    out["dmax"][good] = d
    out["log_evidence"][good] = res["evidence"]


def _evaluate_at(q, fr, rows, dvals, n_r, weight, full):
    """Evidence (and I0, Rg when ``full`` is "stats") of frames ``rows`` at Dmax
    ``dvals`` (one per frame), all pairs in as few batched calls as the block size allows."""
    values, inverse = np.unique(dvals, return_inverse=True)
    inverse = inverse.ravel()
    order = np.argsort(inverse, kind="stable")
    bounds = np.searchsorted(inverse[order], np.arange(values.size + 1))
    items = [(_shared(q, v, n_r), rows[order[bounds[k] : bounds[k + 1]]]) for k, v in enumerate(values)]
    part = _evaluate_many(items, fr, weight, full)
    res = {}
    for key, v in part.items():
        res[key] = np.empty((rows.size, *v.shape[1:]))
        res[key][order] = v
    return res


def _scan_dmax(q, fr, cand, n_r, weight):
    """The automatic Dmax (module notes).

    1. every candidate for every frame (log evidence, I0, Rg);
    2. around each frame's best candidate c, the grid ``_N_SUB`` times finer (in log
       Dmax) from c - 1 to c + 1; the best of all evaluated values is the Dmax;
    3. the posterior over log Dmax (flat prior in log Dmax, the evidence as likelihood,
       a Riemann sum over the evaluated values) gives the spread of Dmax, I0 and Rg
       about their values at the chosen Dmax.

    Returns Dmax, the coarse score (F, n_c), the edge flags and the spreads
    (dmax, i0, rg)."""
    F = fr.w.shape[0]
    rows = np.arange(F)
    nc = cand.size
    coarse = {key: np.empty((F, nc)) for key in ("evidence", "i0", "rg", "i0_sigma", "rg_sigma")}
    part = _evaluate_many([(_shared(q, value, n_r), rows) for value in cand], fr, weight, "stats")
    for key in coarse:
        coarse[key][:] = part[key].reshape(nc, F).T
    score = np.where(np.isfinite(coarse["evidence"]), coarse["evidence"], -np.inf)
    best_c = np.argmax(score, axis=1)
    edge = (best_c == 0) | (best_c == nc - 1)
    lc = np.log(cand)
    steps = np.arange(-_N_SUB, _N_SUB + 1)
    j = best_c[:, None] * _N_SUB + steps[None, :]  # fine indices, (F, 2 _N_SUB + 1)
    inside = (j >= 0) & (j <= (nc - 1) * _N_SUB)
    c0 = np.clip(j // _N_SUB, 0, nc - 2)
    t = (j - c0 * _N_SUB) / _N_SUB
    d_fine = np.exp(lc[c0] + t * (lc[c0 + 1] - lc[c0]))
    fine = {key: np.full(j.shape, np.nan) for key in coarse}
    on_coarse = inside & (j % _N_SUB == 0)
    cidx = np.clip(j // _N_SUB, 0, nc - 1)
    for key in coarse:
        fine[key][on_coarse] = coarse[key][np.nonzero(on_coarse)[0], cidx[on_coarse]]
    todo = inside & ~on_coarse
    f_idx, s_idx = np.nonzero(todo)
    part = _evaluate_at(q, fr, f_idx, d_fine[todo], n_r, weight, "stats")
    for key in coarse:
        fine[key][f_idx, s_idx] = part[key]
    ev_fine = np.where(np.isfinite(fine["evidence"]), fine["evidence"], -np.inf)
    pick = np.argmax(ev_fine, axis=1)
    d_best = d_fine[rows, pick]
    # posterior weights over log Dmax: fine window (trapezoid, step 1/_N_SUB of an
    # interval) and the coarse candidates outside it (step 1)
    w_fine = np.where(inside, 1.0 / _N_SUB, 0.0)
    w_fine[:, [0, -1]] = 0.5 / _N_SUB + 0.5
    dist = np.abs(np.arange(nc)[None, :] - best_c[:, None])
    w_coarse = np.where(dist >= 2, 1.0, 0.0)
    e_all = np.concatenate([ev_fine, score], axis=1)
    w_all = np.concatenate([w_fine, w_coarse], axis=1)
    vals = {key: np.concatenate([fine[key], coarse[key]], axis=1) for key in ("i0", "rg")}
    sig = {key: np.concatenate([fine[key + "_sigma"], coarse[key + "_sigma"]], axis=1)
           for key in ("i0", "rg")}
    vals["dmax"] = np.concatenate([d_fine, np.broadcast_to(cand, (F, nc))], axis=1)
    ok = np.isfinite(e_all) & (w_all > 0) & np.isfinite(vals["rg"]) & np.isfinite(vals["i0"])
    e_max = np.max(np.where(ok, e_all, -np.inf), axis=1, keepdims=True)
    e_max = np.where(np.isfinite(e_max), e_max, 0.0)  # no usable value: no spread
    prob = np.where(ok, w_all * np.exp(np.where(ok, e_all - e_max, -np.inf)), 0.0)
    prob /= np.maximum(prob.sum(axis=1, keepdims=True), 1e-300)
    centre = {"dmax": d_best, "i0": fine["i0"][rows, pick], "rg": fine["rg"][rows, pick]}
    spread = {}
    for key, v in vals.items():
        dev = np.where(ok, v - centre[key][:, None], 0.0)
        spread[key] = np.sqrt(np.sum(prob * dev * dev, axis=1))
        if key in sig:  # the average over the Dmax posterior and its variance, as shifts
            any_ok = ok.any(axis=1)
            mean = np.sum(prob * np.where(ok, v, 0.0), axis=1)
            dm = np.where(ok, v - mean[:, None], 0.0)
            var = np.sum(prob * (np.where(ok, sig[key], 0.0) ** 2 + dm * dm), axis=1)
            s_c = fine[key + "_sigma"][rows, pick]
            spread[key + "_shift"] = np.where(any_ok, mean - centre[key], 0.0)
            spread[key + "_var_shift"] = np.where(any_ok & np.isfinite(s_c), var - s_c**2, 0.0)
    return d_best, score, edge, spread


def _dmax_check(q, fr, res, d_sel, n_r, weight):
    """Frames for which 1.5 Dmax is decisively more probable (log Bayes factor above
    ``_DECISIVE``), among the suspect ones: the fit misses the data (chi2 significantly
    above its expectation; every frame without sigma), or p(r) is still significantly
    above zero at the last inner point (p > 3 p_sigma: the particle goes on beyond
    Dmax, and a short Dmax biases Rg even when the fit is good)."""
    F = d_sel.size
    rows = np.arange(F)
    if fr.known_sigma:
        dof = np.maximum(fr.n - res["n_eff"], 1.0)
        suspect = res["chi2"] / dof > 1.0 + 3.0 * np.sqrt(2.0 / dof)
    else:
        suspect = np.ones(F, dtype=bool)
    with np.errstate(invalid="ignore", divide="ignore"):
        suspect |= res["p_inner"][:, -1] > 3.0 * np.sqrt(res["p_var"][:, -1])
    flag = np.zeros(F, dtype=bool)
    r_s = rows[suspect]
    if r_s.size:
        e_long = _evaluate_at(q, fr, r_s, 1.5 * d_sel[r_s], n_r, weight, False)["evidence"]
        flag[r_s] = e_long - res["evidence"][r_s] > _DECISIVE
    return flag
